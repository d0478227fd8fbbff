"""The workspace cache of cleaned sessions, so that a rerun skips what is up to date.

Each session's cleaned tracks and quality table are stored under ``cache/cleaned/`` with a key
made from the input file's bytes, how it was read (fps, calibration) and the cleaning parameters
(plus the ethoscribe version). A rerun with the same inputs and parameters reuses them; a run
interrupted halfway resumes without redoing finished sessions, because every cache file is
written atomically. Cleaned coordinates are stored as float32 and every run — fresh or cached —
reads them back from the cache, so a cached rerun gives exactly the files of the first run.
"""

from __future__ import annotations

import hashlib
import json
import re
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ethoscribe import __version__
from ethoscribe.clean import CleanParams, clean
from ethoscribe.io._atomic import atomic_write, atomic_write_json, write_table
from ethoscribe.pose import PoseTracks
from ethoscribe.workspace.folder import jsonable
from ethoscribe.workspace.reading import read_planned, session_row

CACHE_FOLDER = Path("cache") / "cleaned"


def file_digest(path: str | Path) -> str:
    """SHA-256 of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def cache_key(entry: dict[str, Any], cleaning: dict[str, Any]) -> str:
    """Key of one session's cleaned tracks: input bytes + reading + cleaning + version."""
    recipe = {
        "file": file_digest(entry["path"]),
        "fps": entry["fps"],
        "px_per_unit": entry["px_per_unit"],
        "units": entry["units"],
        "cleaning": cleaning,
        "ethoscribe": __version__,
    }
    text = json.dumps(jsonable(recipe), sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()[:24]


def _stem(session: str) -> str:
    # Session names come from file names; keep cache file names plain and inside the folder.
    return re.sub(r"[^A-Za-z0-9_.-]", "_", session)[:80] or "session"


def prepare_session(job: dict[str, Any]) -> dict[str, Any]:
    """Read and clean one session, or find it in the cache; returns where the results are.

    ``job`` holds ``entry`` (from :func:`~ethoscribe.workspace.reading.plan_sessions`),
    ``cleaning`` (a :class:`~ethoscribe.clean.CleanParams` dict), ``cache`` (folder) and
    ``force`` (recompute even when cached). Runs in worker processes: arguments and result are
    small; the arrays go through the cache folder.
    """
    entry, cleaning = job["entry"], job["cleaning"]
    folder = Path(job["cache"])
    folder.mkdir(parents=True, exist_ok=True)
    base = folder / f"{_stem(entry['session'])}-{cache_key(entry, cleaning)}"
    info = {"tracks": f"{base}.npz", "quality": f"{base}.quality.parquet", "row": f"{base}.json"}
    if not job.get("force") and all(Path(p).is_file() for p in info.values()):
        return {**info, "reused": True}
    tracks = read_planned(entry)
    cleaned, report = clean(tracks, CleanParams.from_dict(cleaning))
    write_table(report.to_frame(), info["quality"])
    with atomic_write(info["tracks"], "wb") as fh:
        np.savez(
            fh,
            coords=cleaned.coords.astype(np.float32),
            confidence=cleaned.confidence.astype(np.float32),
            keypoints=np.array(cleaned.keypoints),
            animals=np.array(cleaned.animals),
            fps=np.array(cleaned.fps),
            units=np.array(cleaned.units),
            session=np.array(cleaned.session),
            meta=np.array(json.dumps(jsonable(dict(cleaned.meta)), default=str)),
        )
    # Written last: its presence says the session's cache entry is complete.
    atomic_write_json(info["row"], jsonable(session_row(entry, tracks)))
    return {**info, "reused": False}


def load_prepared(info: dict[str, Any]) -> tuple[PoseTracks, pd.DataFrame, dict[str, Any]]:
    """Cleaned tracks, quality table and sessions-table row made by :func:`prepare_session`."""
    with np.load(info["tracks"], allow_pickle=False) as z:
        tracks = PoseTracks(
            coords=z["coords"].astype(np.float64),
            confidence=z["confidence"].astype(np.float64),
            keypoints=[str(k) for k in z["keypoints"]],
            animals=[str(a) for a in z["animals"]],
            fps=float(z["fps"]),
            units=str(z["units"]),
            session=str(z["session"]),
            meta=json.loads(str(z["meta"])),
        )
    row = json.loads(Path(info["row"]).read_text())
    return tracks, pd.read_parquet(info["quality"]), row
