"""Fitted models (and their stability reports) cached by what they were fitted on.

Rerunning ``discover`` with the same inputs and parameters would fit the same model again --
minutes on a large study. The fit is deterministic given the training sample, the parameters,
the seed and the library versions, so its result is kept under
``cache/fits/<digest>/`` (the model bundle, no pickle, plus the stability table and summary)
and reused when the digest of all of these matches. ``--force`` fits again.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
import threading
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager, suppress
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from tqdm.auto import tqdm

from ethoscribe.errors import EthoscribeError
from ethoscribe.io import atomic_write_json, read_json, write_table
from ethoscribe.io.bundle import write_bundle
from ethoscribe.pose import PoseTracks
from ethoscribe.segment.model import BehaviourModel
from ethoscribe.workspace.files import jsonable, load_model

FITS_FOLDER = Path("cache") / "fits"


@dataclass
class CachedReport:
    """A stability report read back from the cache (the two parts a workspace records); a
    check that could not be made has no table and its reason in ``summary["skipped"]``."""

    table: pd.DataFrame | None
    summary: dict[str, Any]


def fit_digest(
    sample: Sequence[PoseTracks], quality: Sequence[pd.DataFrame], settings: dict[str, Any]
) -> str:
    """sha256 of the training sample (every array, name and rate), its quality tables and the
    fit's settings (parameters, seed, stability, library versions)."""
    h = hashlib.sha256(json.dumps(jsonable(settings), sort_keys=True, default=str).encode())
    for tracks in sample:
        head = [tracks.session, tracks.fps, tracks.units, list(tracks.keypoints)]
        h.update(json.dumps([*head, list(tracks.animals)], default=str).encode())
        for array in (tracks.coords, tracks.confidence):
            h.update(str(array.shape).encode())
            h.update(np.ascontiguousarray(array).tobytes())
    for table in quality:
        frame = table if isinstance(table, pd.DataFrame) else table.to_frame()
        h.update(pd.util.hash_pandas_object(frame, index=True).to_numpy().tobytes())
    return h.hexdigest()[:32]


def fit_or_reuse(
    root: Path,
    digest: str,
    fit: Callable[[], tuple[BehaviourModel, Any]],
    force: bool = False,
) -> tuple[BehaviourModel, Any, bool]:
    """The model and stability report cached under ``digest``, or ``fit()``'s (then cached).

    Returns ``(model, report, reused)``. A damaged cache entry is fitted again.
    """
    folder = root / FITS_FOLDER / digest
    if not force and (folder / "done.json").is_file():
        with suppress(EthoscribeError, OSError, ValueError, KeyError):
            return (*_load(folder), True)
    model, report = fit()
    _save(folder, model, report)
    return model, report, False


def _load(folder: Path) -> tuple[BehaviourModel, CachedReport | None]:
    model = load_model(folder / "model")
    done = read_json(folder / "done.json")
    report = None
    summary = done.get("stability")
    if summary is not None:
        table = None if "skipped" in summary else pd.read_csv(folder / "stability.csv")
        report = CachedReport(table=table, summary=summary)
    return model, report


def _save(folder: Path, model: BehaviourModel, report: Any) -> None:
    folder.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=".incoming-", dir=folder.parent))
    try:
        meta, arrays = model.to_state()
        write_bundle(tmp / "model", meta, arrays)
        if report is not None and report.table is not None:
            write_table(report.table, tmp / "stability.csv")
        summary = None if report is None else jsonable(report.summary)
        atomic_write_json(tmp / "done.json", {"stability": summary})
        shutil.rmtree(folder, ignore_errors=True)  # a damaged entry, or a forced refit
        os.replace(tmp, folder)
    except BaseException as exc:
        shutil.rmtree(tmp, ignore_errors=True)
        if not isinstance(exc, OSError):
            raise
        # a full or read-only disk: the cache is a convenience, the run goes on without it


@contextmanager
def ticking(desc: str, enabled: bool = True) -> Iterator[None]:
    """A progress line whose elapsed time ticks each second while a step without sub-steps
    runs (the final fit, the stability refits), so a long step is never silent."""
    if not enabled:
        yield
        return
    bar = tqdm(total=None, desc=desc, bar_format="{desc}: {elapsed} elapsed")
    done = threading.Event()

    def tick() -> None:
        while not done.wait(1.0):
            bar.refresh()

    thread = threading.Thread(target=tick, daemon=True)
    thread.start()
    try:
        yield
    finally:
        done.set()
        thread.join()
        bar.close()
