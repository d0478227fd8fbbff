"""Small studies and workspaces for the reliability tests (crash, concurrency, hostile files).

Data: sessions of the package's own simulated animals (invented), a few seconds each, so that a
whole discover run takes a couple of seconds.
"""

from __future__ import annotations

import json
import multiprocessing as mp
import os
from pathlib import Path

import numpy as np
import pandas as pd

from ethoscribe.io import write_tidy
from ethoscribe.io._safe import load_npz
from ethoscribe.simulate import simulate_session
from ethoscribe.workspace import Workspace, discover

N_STATES = 3


def write_study(folder: Path, n_sessions: int = 2, duration_s: float = 12.0, seed: int = 0) -> Path:
    """``n_sessions`` simulated sessions as Parquet tidy tables in ``folder`` (created)."""
    folder.mkdir(parents=True, exist_ok=True)
    for i in range(n_sessions):
        tracks, _ = simulate_session(
            duration_s=duration_s, seed=seed + i, session=f"session_{i + 1:02d}"
        )
        write_tidy(tracks, folder / f"{tracks.session}.parquet")
    return folder


def run_discover(study: Path, out: Path) -> Workspace:
    """The discover run every reliability test uses (fixed states and seed, no stability)."""
    return discover([study], out, states=N_STATES, stability=False, progress=False)


OUTPUT_TABLES = (
    "labels.csv",
    "bouts.csv",
    "transitions.csv",
    "time_budget.csv",
    "sessions.csv",
    "quality.csv",
)


def workspace_contents(path: Path) -> dict[str, object]:
    """Everything a discover run decides, comparable across runs (no timestamps, no zip dates)."""
    out: dict[str, object] = {name: (path / name).read_bytes() for name in OUTPUT_TABLES}
    out["labels.parquet"] = pd.read_parquet(path / "labels.parquet")
    summary = json.loads((path / "summary.json").read_text())
    summary.pop("created")
    out["summary.json"] = summary
    meta = json.loads((path / "model" / "model.json").read_text())
    meta.pop("arrays_sha256")
    out["model.json"] = meta
    out["model arrays"] = load_npz(path / "model" / "arrays.npz")
    for p in sorted((path / "features").glob("*.npz")):
        out[f"features/{p.name}"] = load_npz(p)
    return out


def assert_same_contents(a: dict[str, object], b: dict[str, object]) -> None:
    assert sorted(a) == sorted(b)
    for key, value in a.items():
        other = b[key]
        if isinstance(value, pd.DataFrame):
            pd.testing.assert_frame_equal(value, other)
        elif isinstance(value, dict) and key.endswith(("arrays", ".npz")):
            assert sorted(value) == sorted(other), key
            for name in value:
                np.testing.assert_array_equal(value[name], other[name], err_msg=f"{key}:{name}")
        else:
            assert value == other, key


def fork_server() -> mp.context.ForkServerContext:
    """A multiprocessing fork server that has imported ethoscribe and ``_crash_worker`` once,
    so that each child starts in milliseconds instead of the seconds an import takes."""
    context = mp.get_context("forkserver")
    context.set_forkserver_preload(["_crash_worker"])
    keys = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "PYTHONPATH")
    saved = {k: os.environ.get(k) for k in keys}
    # The server of Python 3.11 ignores the parent's sys.path: pass tests/ on PYTHONPATH.
    path = os.pathsep.join([str(Path(__file__).parent), *filter(None, [saved["PYTHONPATH"]])])
    os.environ.update(OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1", PYTHONPATH=path)
    try:
        from multiprocessing import forkserver

        forkserver.ensure_running()
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v
    return context
