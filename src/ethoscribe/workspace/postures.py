"""Egocentric postures of a workspace's sessions, computed once and cached in ``postures/``.

A workspace keeps labels and features but not keypoints. To draw motifs, each session's source
file (``sessions.csv``, column ``source``) is read again as discovery read it (fps and the
``px_per_unit`` calibration of its row), cleaned with the model's cleaning parameters
(``BehaviourModel.cleaning_``) and turned into body-frame keypoints with the fitted feature
pipeline (:func:`ethoscribe.postures.egocentric_postures`). The result is saved as
``postures/<session>.npz`` (float32, written atomically) with a provenance key; a cache whose key
no longer matches the source file or the model is recomputed.

Skeletons to draw: :func:`skeleton_for` takes the user's edges, else the edges of a declared
body plan (:mod:`ethoscribe.body_plans`) whose keypoints match exactly, else the minimum
spanning tree of the mean keypoint distances
(:func:`ethoscribe.postures.minimum_spanning_skeleton`).
"""

from __future__ import annotations

import dataclasses
import json
import os
from collections import OrderedDict
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ethoscribe.body_plans import body_plan_for
from ethoscribe.clean import calibrate, clean
from ethoscribe.errors import EthoscribeError, InputError, WorkspaceError, listed
from ethoscribe.io import atomic_write, loads_json, safe_child
from ethoscribe.pose import PoseTracks, match_keypoint_order
from ethoscribe.postures import (
    egocentric_postures,
    mean_postures,
    minimum_spanning_skeleton,
    posture_sums,
)
from ethoscribe.segment.model import BehaviourModel
from ethoscribe.workspace.folder import Workspace
from ethoscribe.workspace.reading import LABELLED_FPS, LABELLED_FRAMES, read_sessions

POSTURE_FOLDER = "postures"
CACHE_FORMAT = 2  # 2: 3-D postures as forward, sideways, up, drawn upright


@dataclass(frozen=True)
class SessionPostures:
    """Body-frame keypoints of one session: ``coords`` (frames, animals, keypoints, dims)."""

    session: str
    coords: np.ndarray
    animals: tuple[str, ...]
    keypoints: tuple[str, ...]
    fps: float
    units: str


def source_file(
    ws: Workspace, session: str, column: str = "source", table: pd.DataFrame | None = None
) -> Path:
    """The file named in ``sessions.csv`` for ``session`` (``source`` or e.g. ``video``).

    A relative path is tried from the current folder, the workspace's parent and the workspace.
    ``table``: ``sessions.csv`` already read (it is read otherwise).
    """
    row = _row(ws, session, table)
    value = row.get(column)
    if value is None or (isinstance(value, float) and np.isnan(value)) or not str(value).strip():
        raise InputError(f"{ws.path / 'sessions.csv'}: session '{session}' has no {column!r}")
    path = Path(str(value)).expanduser()
    tries = [path] if path.is_absolute() else [path, ws.path.parent / path, ws.path / path]
    for p in tries:
        if p.is_file():
            return p.resolve()
    msg = (
        f"session '{session}': file {str(value)!r} (sessions.csv, column {column!r}) was not "
        f"found (tried {[str(p) for p in tries]}); put it back or correct sessions.csv"
    )
    raise InputError(msg)


def _row(ws: Workspace, session: str, table: pd.DataFrame | None = None) -> dict[str, Any]:
    table = ws.sessions if table is None else table
    rows = table[table["session"].astype(str) == str(session)]
    if rows.empty:
        known = table["session"].astype(str).tolist()
        raise InputError(f"no session {session!r} in {ws.path / 'sessions.csv'}; known: {known}")
    return rows.iloc[0].to_dict()


def _first_frames(sessions: pd.DataFrame) -> dict[str, int]:
    """Each session's first input frame number (0 for workspaces made before it was kept)."""
    if "first_frame" not in sessions:
        return {}
    values = pd.to_numeric(sessions["first_frame"], errors="coerce").fillna(0).astype(np.int64)
    return dict(zip(sessions["session"].astype(str), values.tolist(), strict=True))


def _key(source: Path, model: BehaviourModel) -> str:
    stat = source.stat()
    pipe = model.features_
    key = {
        "format": CACHE_FORMAT,
        "source": str(source),
        "size": stat.st_size,
        "mtime_ns": stat.st_mtime_ns,
        "cleaning": model.cleaning_.to_dict(),
        "origin": pipe.origin_,
        "axis": list(pipe.axis_),
        "up_axis": pipe.up_axis,
    }
    return json.dumps(key, sort_keys=True, default=str)


def _cache_path(ws: Workspace, session: str) -> Path:
    # Session names come from files and manifests: keep them from leaving the folder.
    return safe_child(ws.path / POSTURE_FOLDER, f"{session}.npz", "session")


def _load(path: Path, key: str | None) -> SessionPostures | None:
    try:
        with np.load(path, allow_pickle=False) as z:
            if key is not None and str(z["key"]) != key:
                return None
            return SessionPostures(
                session=str(z["session"]),
                coords=z["coords"],
                animals=tuple(str(a) for a in z["animals"]),
                keypoints=tuple(str(k) for k in z["keypoints"]),
                fps=float(z["fps"]),
                units=str(z["units"]),
            )
    except (OSError, KeyError, ValueError):
        return None  # damaged or foreign file: recompute


def _save(path: Path, p: SessionPostures, key: str) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    with atomic_write(path, "wb") as fh:
        np.savez(
            fh,
            coords=p.coords.astype(np.float32),
            session=np.array(p.session),
            animals=np.array(p.animals),
            keypoints=np.array(p.keypoints),
            fps=np.array(p.fps),
            units=np.array(p.units),
            key=np.array(key),
        )


def compute_session_postures(
    ws: Workspace,
    session: str,
    model: BehaviourModel | None = None,
    table: pd.DataFrame | None = None,
    cleaned: Callable[[], PoseTracks] | None = None,
) -> SessionPostures:
    """Read, clean and turn one session into body-frame keypoints (no cache involved).

    ``cleaned``: gives the session already cleaned with the model's cleaning (discovery's
    own cleaned copy), instead of reading and cleaning its source file again.
    """
    model = ws.model() if model is None else model
    if cleaned is not None:
        return _postures_of(str(session), cleaned(), model)
    table = ws.sessions if table is None else table
    row = _row(ws, session, table)
    source = source_file(ws, session, table=table)
    fps = row.get("fps")
    fps = float(fps) if fps is not None and np.isfinite(fps) else None
    fmt = row.get("format")
    fmt = fmt if isinstance(fmt, str) and fmt else None
    options = row.get("reader_options")
    options = loads_json(options, "sessions.csv") if isinstance(options, str) and options else {}
    (tracks,), _ = read_sessions(
        [source], fps=fps, progress=False, format=fmt, reader_options=options
    )
    px = _number(row.get("px_per_unit"))
    if px is not None:
        tracks = calibrate(tracks, px, str(row.get("units") or "mm"))
    cleaning = model.cleaning_
    labelled_fps = _number(row.get(LABELLED_FPS))
    if labelled_fps and not cleaning.target_fps and abs(labelled_fps - tracks.fps) > 1e-9:
        # a cohort filmed faster than the model: resampled to its rate, as labelling did
        cleaning = dataclasses.replace(cleaning, target_fps=labelled_fps)
    cleaned, _ = clean(tracks, cleaning)
    # warn=False: the workspace's fit or labelling said it for this session already
    (cleaned,) = match_keypoint_order([cleaned], model.keypoints_, warn=False)
    ego = body_frame(cleaned, model)
    # the frames the labels count (older sessions.csv: those read, unless resampled)
    expected = _number(row.get(LABELLED_FRAMES))
    if expected is None and not cleaning.target_fps:
        expected = _number(row.get("n_frames"))
    if expected is not None and len(ego) != int(expected):
        msg = (
            f"session '{session}': {source} now gives {len(ego)} frames to label but the "
            f"workspace's labels have {int(expected)}; the file changed since the workspace "
            "was made"
        )
        raise WorkspaceError(msg)
    return _postures_of(str(session), cleaned, model, ego)


def body_frame(cleaned: PoseTracks, model: BehaviourModel) -> np.ndarray:
    """Body-frame keypoints of cleaned tracks under ``model`` (frames, animals, keypoints,
    dims). 2-D tracks filmed from the side (``model.view_``): forward and height, the plane
    the camera saw, as the model featurises them (lifted to 3-D without depth)."""
    (seen,) = model.as_featurised([cleaned])
    ego = egocentric_postures(seen, model.features_)
    # a side view is featurised in 3-D without depth: drawn in forward and height
    return np.ascontiguousarray(ego[..., [0, 2]]) if seen.n_dims != cleaned.n_dims else ego


def _number(value: Any) -> float | None:
    """A finite number from a sessions-table cell, else None (column absent or empty)."""
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if np.isfinite(number) else None


def _postures_of(
    session: str, cleaned: PoseTracks, model: BehaviourModel, ego: np.ndarray | None = None
) -> SessionPostures:
    (cleaned,) = match_keypoint_order([cleaned], model.keypoints_, warn=False)
    if ego is None:
        ego = body_frame(cleaned, model)
    return SessionPostures(
        session, ego.astype(np.float32), tuple(cleaned.animals), tuple(cleaned.keypoints),
        float(cleaned.fps), str(cleaned.units),
    )  # fmt: skip


def session_postures(
    ws: Workspace,
    session: str,
    model: BehaviourModel | None = None,
    table: pd.DataFrame | None = None,
    cleaned: Callable[[], PoseTracks] | None = None,
) -> SessionPostures:
    """Body-frame keypoints of ``session``, from ``postures/`` or computed and cached there.

    ``table``: ``sessions.csv`` already read (it is read otherwise). ``cleaned``: see
    :func:`compute_session_postures`.

    Examples
    --------
    >>> p = session_postures(Workspace("study_ws"), "session_01")  # doctest: +SKIP
    >>> p.coords.shape  # (frames, animals, keypoints, dims)  # doctest: +SKIP
    (9000, 1, 10, 2)
    """
    path = _cache_path(ws, session)
    model = ws.model() if model is None else model
    table = ws.sessions if table is None else table
    key = _key(source_file(ws, session, table=table), model)
    if path.is_file():
        cached = _load(path, key)
        if cached is not None:
            return cached
    fresh = compute_session_postures(ws, session, model, table, cleaned)
    _save(path, fresh, key)
    return fresh


def cache_postures(
    ws: Workspace,
    model: BehaviourModel | None = None,
    cleaned: Mapping[str, Callable[[], PoseTracks]] | None = None,
) -> dict[str, str]:
    """Compute and cache every session's postures (``discover`` and ``label`` call it).

    The workbench then opens on cached postures instead of reading every source file again.
    ``cleaned``: per session, a function giving it already cleaned with the model's cleaning
    (the run's own cleaned copies: no second reading and cleaning). Returns
    ``{session: problem}`` for sessions whose postures could not be made (their source file
    gone, say); the workbench names them when it opens.
    """
    model = ws.model() if model is None else model
    table = ws.sessions
    cleaned = cleaned or {}
    problems = {}
    for session in table["session"].astype(str):
        try:
            session_postures(ws, session, model, table, cleaned.get(session))
        except EthoscribeError as exc:
            problems[session] = str(exc)
    return problems


def cached_postures(ws: Workspace, session: str) -> SessionPostures | None:
    """The cached postures of ``session`` without checking them against the source (fast)."""
    path = _cache_path(ws, session)
    return _load(path, None) if path.is_file() else None


def skeleton_for(
    keypoints: Sequence[str],
    skeleton: Sequence[tuple[str, str]] | None = None,
    postures: np.ndarray | None = None,
) -> tuple[tuple[tuple[str, str], ...], str]:
    """Edges to draw between keypoints, and a sentence saying where they came from.

    ``skeleton`` (the user's) wins; then a declared body plan with exactly these keypoints
    (:mod:`ethoscribe.body_plans`, the bundled example animals among them); then
    the minimum spanning tree of the mean keypoint distances of ``postures`` (N, K, D).
    """
    names = tuple(str(k) for k in keypoints)
    if skeleton is not None:
        edges = tuple((str(a), str(b)) for a, b in skeleton)
        unknown = sorted({k for e in edges for k in e} - set(names))
        if unknown:
            raise InputError(
                f"skeleton names unknown keypoints {unknown}; keypoints: {list(names)}"
            )
        return edges, "skeleton given by the user"
    plan = body_plan_for(names)  # declared by the user, or a bundled example animal
    if plan is not None:
        return plan.skeleton, f"skeleton of the '{plan.name}' body plan"
    if postures is None:
        raise InputError("no skeleton given and no postures to derive one from")
    edges = minimum_spanning_skeleton(postures, names)
    return edges, "skeleton: nearest-neighbour tree of the mean keypoint distances"


def posture_files(ws: Workspace) -> list[Path]:
    """The cached posture files of a workspace (may be empty)."""
    folder = ws.path / POSTURE_FOLDER
    return sorted(folder.glob("*.npz")) if folder.is_dir() else []


def clear_postures(ws: Workspace) -> None:
    """Remove the posture cache (it is rebuilt on next use)."""
    for path in posture_files(ws):
        os.remove(path)


class PostureLibrary:
    """Postures of a workspace for browsing: mean posture per state, frames of any bout.

    On :meth:`set_states` every session's postures are loaded (computed and cached the first
    time) and summed per state, so the mean posture of any motif -- any set of states -- is a
    small sum. Sessions are then kept in memory a few at a time. A session whose source file is
    missing is left out and named in :attr:`problem`; nothing else stops working.
    """

    def __init__(
        self,
        ws: Workspace,
        skeleton: Sequence[tuple[str, str]] | None = None,
        max_sessions: int = 16,
    ) -> None:
        self.ws, self._skeleton, self._max = ws, skeleton, int(max_sessions)
        self._cache: OrderedDict[str, SessionPostures] = OrderedDict()
        self._model: BehaviourModel | None = None
        self.problem: str | None = None
        self.keypoints: tuple[str, ...] = ()
        self.units = ""
        self.edges: tuple[tuple[str, str], ...] = ()
        self.edges_note = ""
        self.second_axis = "sideways"  # of 2-D postures; "height" for a side view
        self._sums = self._counts = None
        self._table: pd.DataFrame | None = None  # sessions.csv, read once
        self._first: dict[str, int] = {}  # each session's first input frame number

    @property
    def available(self) -> bool:
        return self._sums is not None

    def session(self, session: str) -> SessionPostures:
        """Postures of one session (from memory, the cache file, or computed)."""
        if session in self._cache:
            self._cache.move_to_end(session)
            return self._cache[session]
        if self._model is None:
            self._model, self._table = self.ws.model(), self.ws.sessions
            side = getattr(self._model, "view_", "above") == "side"
            self.second_axis = "height" if side else "sideways"
        p = session_postures(self.ws, session, self._model, self._table)
        self._cache[session] = p
        while len(self._cache) > self._max:
            self._cache.popitem(last=False)
        return p

    def set_states(self, frame_states: pd.DataFrame, n_states: int) -> None:
        """Sum postures per state; ``frame_states`` has ``session, animal, frame, state``."""
        groups = frame_states.groupby(["session", "animal"], sort=False).indices
        self._first = first = _first_frames(self.ws.sessions)
        frames = frame_states["frame"].to_numpy(np.int64)
        states = frame_states["state"].to_numpy(np.int64)
        sums = counts = None
        missing = []
        for (session, animal), rows in groups.items():
            try:
                p = self.session(str(session))
            except EthoscribeError as exc:
                missing.append((str(session), str(exc)))
                continue
            a = p.animals.index(str(animal)) if str(animal) in p.animals else 0
            f = frames[rows] - first.get(str(session), 0)  # input frame numbers -> rows
            ok = (f >= 0) & (f < len(p.coords))
            s, c = posture_sums(p.coords[f[ok], a], states[rows][ok], n_states)
            sums, counts = (s, c) if sums is None else (sums + s, counts + c)
            if not self.keypoints:
                self.keypoints, self.units = p.keypoints, p.units
                sample = p.coords[:: max(1, len(p.coords) // 2000), a]
                self.edges, self.edges_note = skeleton_for(p.keypoints, self._skeleton, sample)
        self._sums, self._counts = sums, counts
        self.problem = None
        if missing:
            reasons = {reason for _, reason in missing}
            if len(reasons) == 1:  # one cause (e.g. the model cannot be read): said once
                shown = reasons.pop()
            else:
                shown = listed((f"{session}: {reason}" for session, reason in missing), 3, "; ")
            self.problem = f"postures of {len(missing)} recording(s) are unavailable: {shown}"

    def mean_posture(self, states: Sequence[int]) -> np.ndarray:
        """Mean body-frame posture (K, D) over the frames of ``states``."""
        if self._sums is None:
            raise InputError(self.problem or "no postures are available for this workspace")
        ids = [s for s in states if s < len(self._sums)]
        return mean_postures(self._sums, self._counts, [ids])[0]

    def frames(self, session: str, animal: str, frames: np.ndarray) -> np.ndarray:
        """Body-frame postures (n, K, D) of ``frames`` (input frame numbers) of one recording."""
        p = self.session(str(session))
        a = p.animals.index(str(animal)) if str(animal) in p.animals else 0
        f = np.asarray(frames, dtype=np.int64) - self._first.get(str(session), 0)  # -> rows
        f = np.clip(f, 0, len(p.coords) - 1)
        return p.coords[f, a].astype(np.float64)
