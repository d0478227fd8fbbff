"""The workspace cache of per-session work, so that a rerun skips what is up to date.

Each session's cleaned tracks and quality table are stored under ``cache/cleaned/`` with a key
made from the input file's bytes, how it was read (fps, calibration) and the cleaning parameters
(plus the ethoscribe version). Its features and labels under a fitted model are stored under
``cache/labelled/`` with a key made from the cleaned session's key and the model file's digest;
the fitted model itself lies in ``cache/models/<digest>/``, where worker processes load it.
A rerun with the same inputs and parameters reuses them; a run
interrupted halfway resumes without redoing finished sessions, because every cache file is
written atomically. Cleaned coordinates are stored as float32 (from the session's middle
position, so that tracks far from their origin keep their precision) and every run — fresh or
cached — reads them back from the cache, so a cached rerun gives exactly the files of the
first run.
"""

from __future__ import annotations

import dataclasses
import functools
import hashlib
import json
import os
import re
import shutil
import tempfile
import warnings
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ethoscribe import __version__
from ethoscribe.clean import CleanParams, clean
from ethoscribe.errors import WorkspaceError
from ethoscribe.io import (
    atomic_write,
    atomic_write_json,
    load_npz,
    loads_json,
    read_json,
    write_table,
)
from ethoscribe.io.bundle import write_bundle
from ethoscribe.pose import PoseTracks
from ethoscribe.segment.model import BehaviourModel
from ethoscribe.system import file_digest
from ethoscribe.workspace.files import load_model, save_features
from ethoscribe.workspace.folder import jsonable
from ethoscribe.workspace.reading import (
    LABELLED_FPS,
    LABELLED_FRAMES,
    read_planned,
    session_row,
)

CACHE_FOLDER = Path("cache") / "cleaned"
MODELS_FOLDER = Path("cache") / "models"
LABELLED_FOLDER = Path("cache") / "labelled"
CLEANING_USED = "cleaning_used"  # key of the resolved cleaning values in a cache row file


def cache_key(entry: dict[str, Any], cleaning: dict[str, Any]) -> str:
    """Key of one session's cleaned tracks: input bytes + reading + cleaning + version.

    Reading covers the session name (two names that make one cache file name, ``x y`` and
    ``x_y``, get two keys), the reader, its options, fps and calibration.
    """
    reader = entry.get("reader") or {}
    recipe = {
        "file": file_digest(entry["path"]),
        "session": entry["session"],
        "format": entry.get("format"),
        "reader": reader.get("target"),
        "options": entry.get("options", {}),
        "join_tracks": entry.get("join_tracks", False),
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
    ``force`` (recompute even when cached), optionally ``causal`` (clean from past frames
    only, for a model meant for streaming). Runs in worker processes: arguments and result are
    small; the arrays go through the cache folder.
    """
    entry, cleaning = job["entry"], job["cleaning"]
    causal = bool(job.get("causal", False))  # past frames only (a model for streaming)
    folder = Path(job["cache"])
    folder.mkdir(parents=True, exist_ok=True)
    recipe = {**cleaning, "causal": True} if causal else cleaning
    base = folder / f"{_stem(entry['session'])}-{cache_key(entry, recipe)}"
    info = {"tracks": f"{base}.npz", "quality": f"{base}.quality.parquet", "row": f"{base}.json"}
    if not job.get("force") and _complete(info):
        return {**info, "reused": True}
    # Warnings (a confidence column left unread ...) travel back with the result, so that a
    # worker's say reaches the user once, through the parent process.
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        tracks = read_planned(entry)
        cleaned, report = clean(tracks, CleanParams.from_dict(cleaning), causal=causal)
    write_table(report.to_frame(), info["quality"])
    # float32 keeps 7 digits: positions far from the origin (a world or map frame, 1e6 units
    # away) would lose the movement itself, so they are stored from the session's own middle.
    origin = _middle(cleaned.coords)
    with atomic_write(info["tracks"], "wb") as fh:
        np.savez(
            fh,
            coords=(cleaned.coords - origin).astype(np.float32),
            origin=origin,
            confidence=cleaned.confidence.astype(np.float32),
            keypoints=np.array(cleaned.keypoints),
            animals=np.array(cleaned.animals),
            fps=np.array(cleaned.fps),
            units=np.array(cleaned.units),
            session=np.array(cleaned.session),
            meta=np.array(json.dumps(jsonable(dict(cleaned.meta)), default=str)),
        )
    # Written last: its presence says the session's cache entry is complete. It carries the
    # cleaning values resolved for this session (automatic swap pairs, speed bound ...).
    row = {**session_row(entry, tracks), CLEANING_USED: report.params}
    row["first_frame"] = first_frame(cleaned)  # at the cleaned rate, as the labels count
    # What the labels count (resampling changes both): sessions.csv shows them beside the
    # frame rate and count read from the file.
    row[LABELLED_FPS], row[LABELLED_FRAMES] = cleaned.fps, cleaned.n_frames
    atomic_write_json(info["row"], jsonable(row))
    return {**info, "reused": False, "warnings": _said(caught)}


def _said(caught: list[warnings.WarningMessage]) -> list[list[str]]:
    """Recorded warnings as [category name, text] pairs (small, and plain to send back)."""
    return [[type(w.message).__name__, str(w.message)] for w in caught]


def _middle(coords: np.ndarray) -> np.ndarray:
    """Per axis, the middle of the tracked positions (0 where none), shape (D,)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # an axis with no position at all
        middle = np.nanmedian(coords.reshape(-1, coords.shape[-1]), axis=0)
    return np.where(np.isfinite(middle), middle, 0.0)


def _complete(info: dict[str, str]) -> bool:
    """A cache entry with all its files, whose row has the labelled frame count (entries
    written before it was recorded are made again)."""
    if not all(Path(p).is_file() for p in info.values()):
        return False
    try:
        row = read_json(info["row"])
    except ValueError:  # damaged (InputError): made again
        return False
    return isinstance(row, dict) and LABELLED_FRAMES in row


def load_prepared(info: dict[str, Any]) -> tuple[PoseTracks, pd.DataFrame, dict[str, Any]]:
    """Cleaned tracks, quality table and sessions-table row made by :func:`prepare_session`."""
    # The cache is read like any file a colleague could have put there: no pickle, strict JSON.
    z = load_npz(info["tracks"])
    try:
        origin = z["origin"].astype(np.float64) if "origin" in z else 0.0
        tracks = PoseTracks(
            coords=z["coords"].astype(np.float64) + origin,
            confidence=z["confidence"].astype(np.float64),
            keypoints=[str(k) for k in z["keypoints"]],
            animals=[str(a) for a in z["animals"]],
            fps=float(z["fps"]),
            units=str(z["units"]),
            session=str(z["session"]),
            meta=loads_json(str(z["meta"]), info["tracks"]),
        )
    except (KeyError, TypeError, ValueError) as exc:
        msg = f"{info['tracks']}: a damaged cache entry ({exc}); rerun with --force"
        raise WorkspaceError(msg) from None
    row = read_json(info["row"])
    if isinstance(row, dict):
        row.pop(CLEANING_USED, None)
    return tracks, pd.read_parquet(info["quality"]), row


def cache_model(model: BehaviourModel, root: str | Path) -> tuple[str, str]:
    """Save a fitted model under ``root/cache/models/<digest>/``; returns (folder, digest).

    The digest is that of ``model.json``, which names the digest of the arrays: two fits that
    give the same model share one folder, so a resumed run finds its decoded sessions again.
    """
    models = Path(root) / MODELS_FOLDER
    models.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=".incoming-", dir=models))
    try:
        meta, arrays = model.to_state()
        write_bundle(tmp, meta, arrays)
        key = file_digest(tmp / "model.json")[:24]
        final = models / key
        try:
            os.replace(tmp, final)
        except OSError:  # already there (a rerun, or a parallel run of the same fit)
            if not (final / "model.json").is_file():
                raise
            shutil.rmtree(tmp, ignore_errors=True)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return str(final), key


@functools.lru_cache(maxsize=2)
def _cached_model(folder: str, key: str) -> BehaviourModel:
    # One load per worker process and model, not one per session (``key`` makes a refitted
    # model in the same folder a different entry).
    return load_model(Path(folder))


def decode_session(job: dict[str, Any]) -> dict[str, Any]:
    """Features and labels of one cleaned session under a cached model, or the cached result.

    ``job`` holds ``prepared`` (what :func:`prepare_session` returned), ``model`` and
    ``model_key`` (from :func:`cache_model`), ``cache`` (the workspace folder) and ``force``,
    optionally ``features`` (the session's feature sets under that model, when the caller has
    them: not computed again) and ``fit_check`` (also ``"fit"``,
    :meth:`~ethoscribe.segment.model.BehaviourModel.fit_shares`).
    Writes the session's label table (state ids, default names) as Parquet and one feature
    file per animal; returns their paths. Runs in worker processes, like
    :func:`prepare_session`.
    """
    prepared = job["prepared"]
    folder = Path(job["cache"]) / LABELLED_FOLDER
    folder.mkdir(parents=True, exist_ok=True)
    stem = Path(prepared["tracks"]).stem
    key = hashlib.sha256(f"{stem}|{job['model_key']}".encode()).hexdigest()[:24]
    base = folder / f"{stem[:80]}-{key}"
    done = Path(f"{base}.json")
    if not job.get("force") and done.is_file():
        info = read_json(done)
        ok = isinstance(info, dict) and isinstance(info.get("features"), list)
        paths = [info.get("labels"), *info["features"]] if ok else []
        # Entries name files beside them, nothing else (a hand-edited entry is recomputed).
        plain = paths and all(isinstance(p, str) and p == Path(p).name for p in paths)
        # an entry made without the fit check (discover, or before it) lacks "fit"
        wanted = not job.get("fit_check") or "fit" in info
        if plain and all((folder / p).is_file() for p in paths) and wanted:
            return _absolute(info, folder)
    tracks, _, _ = load_prepared(prepared)
    model = _cached_model(job["model"], job["model_key"])
    first = first_frame(tracks)
    # ``features``: this session's features under this model, already computed by the fit
    # from the same cleaned tracks (a run in one process); otherwise computed here.
    given = job.get("features")
    # Warnings travel back with the result (said once, by the parent); sessions the model
    # was fitted on said them at the fit already, so only new sessions' are kept.
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        feats = [
            dataclasses.replace(f, meta={**f.meta, "first_frame": first})
            for f in (given if given is not None else model.featurise_cleaned([tracks]))
        ]
        offsets = model.offsets(feats)  # once, for the labels and the fit check
        labels = input_frame_numbers(model.label_features(feats, offsets), first, tracks.fps)
    said = _said(caught) if job.get("fit_check") else []
    write_table(labels, f"{base}.labels.parquet")
    names = []
    for i, f in enumerate(feats):
        names.append(f"{base.name}.features-{i}.npz")
        save_features(folder / names[-1], f)
    info = {"session": tracks.session, "labels": f"{base.name}.labels.parquet", "features": names}
    if job.get("fit_check"):  # how well the model explains the session's frames (label)
        info["fit"] = model.fit_shares(feats, offsets)
    atomic_write_json(done, info)  # last: its presence says the entry is complete
    return {**_absolute(info, folder), "warnings": said}


def first_frame(tracks: PoseTracks) -> int:
    """The input's number of the first frame of (cleaned) tracks, at their frame rate.

    Readers keep it in ``meta["first_frame"]`` (frames numbered from 1 or 1000, or a dropped
    first frame); resampled tracks count it at the new rate.
    """
    first = tracks.meta.get("first_frame", 0)
    first = int(first) if isinstance(first, (int, float, np.integer, np.floating)) else 0
    cleaning = tracks.meta.get("cleaning") or {}
    fps_in, fps_out = cleaning.get("fps_in"), cleaning.get("fps_out")
    if fps_in and fps_out and fps_in != fps_out:
        first = round(first * float(fps_out) / float(fps_in))
    return first


def input_frame_numbers(labels: pd.DataFrame, first: int, fps: float) -> pd.DataFrame:
    """Label rows numbered as the input numbers its frames (and timed from that frame)."""
    if first:
        labels["frame"] = labels["frame"].to_numpy(np.int64) + first
        labels["time_s"] = labels["frame"].to_numpy(np.float64) / fps
    return labels


def _absolute(info: dict[str, Any], folder: Path) -> dict[str, Any]:
    return {
        **info,
        "labels": str(folder / info["labels"]),
        "features": [str(folder / p) for p in info["features"]],
    }
