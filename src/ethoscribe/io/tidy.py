"""Tidy (long) pose tables: one row per frame x keypoint (x animal), as CSV or Parquet.

Columns: ``frame`` (whole numbers) or ``time`` (seconds), ``keypoint``, ``x``, ``y``, optional
``z``, ``confidence`` and ``animal``. Row order does not matter. A point the tracker missed is a
row with empty ``x``/``y``, or no row (with a warning); frames absent for every keypoint become
all-missing frames.
"""

from __future__ import annotations

import json
import os
import re
import warnings
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pyarrow as pa

from ethoscribe.errors import InputError, InputWarning, listed
from ethoscribe.io._atomic import write_table
from ethoscribe.io._tables import (
    METADATA_KEY,
    UNNAMED,
    TableInfo,
    check_file,
    check_fps,
    confidence_lookalikes,
    confidence_on_unit_scale,
    exact_repeats,
    integer_frames,
    keypoint_renames,
    make_tracks,
    map_columns,
    name_list,
    read_columns,
    renamed_keypoints,
    require_columns,
    table_info,
    text_codes,
    warn_unmapped_confidence,
)
from ethoscribe.io._timing import (
    SLOWEST_UNSAID_FPS,
    check_frame_span,
    check_time_unit,
    frames_from_times,
    require_two_frames,
    seconds,
    snap_rate,
)
from ethoscribe.pose import PoseTracks

_OPTIONAL = ("z", "confidence")
_ROLES = ("frame", "time", "keypoint", "animal", "x", "y", "z", "confidence")


def read_tidy(
    path: str | os.PathLike[str],
    fps: float | None = None,
    session: str | None = None,
    units: str | None = None,
    keypoints: list[str] | str | None = None,
    columns: Mapping[str, str] | None = None,
    time_unit: str | None = None,
    rename_keypoints: Mapping[str, str] | str | None = None,
) -> PoseTracks:
    """Read a tidy table (``.csv``, ``.parquet``, ``.pq``) into ``PoseTracks``.

    Parameters
    ----------
    path : str or Path
        The table.
    fps : float, optional
        Frames per second. Without it, the rate comes from a file written by ``write_tidy``
        (Parquet) or from the ``time`` column (the regular time step).
    session : str, optional
        Session name; defaults to the file stem.
    units : str, optional
        Coordinate units; defaults to the file's record (Parquet from ``write_tidy``) or "px".
    keypoints : list of str, optional
        Keep only these keypoints, in this order (a text: names separated by commas).
    columns : mapping, optional
        Which column holds what when the names differ: ``{"confidence": "likelihood",
        "x": "pos_x", "keypoint": "bodypart"}`` (roles: frame, time, keypoint, animal, x, y, z,
        confidence). Without a confidence column, numeric columns that would read as a confidence
        (on [0, 1], a little above 1 or in percent) are named in an ``InputWarning``.
    time_unit : "s" or "ms", optional
        Unit of the ``time`` column (default seconds). Time steps that cannot be seconds at the
        given ``fps`` (or rates below 1 frame per second without ``time_unit``) are refused.
    rename_keypoints : mapping or str, optional
        New names for the file's keypoints, ``{"nose": "snout"}`` or ``"nose=snout,..."``
        (OLD=NEW; command line: ``--reader-option rename_keypoints=nose=snout``), for a session
        whose tracker named a keypoint otherwise. ``keypoints`` then takes the new names.

    Returns
    -------
    PoseTracks
        coords (frames, animals, keypoints, dims). Frames count from the first frame in the file;
        ``meta["first_frame"]`` keeps its original number (batch runs number their tables from
        it) and ``meta["source"]`` the path. Frames missing inside the file are all-missing
        frames, never renumbered.

    Examples
    --------
    >>> import tempfile, pathlib, pandas as pd
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "mouse1.csv"
    >>> pd.DataFrame({"frame": [10, 10, 11, 11], "keypoint": ["nose", "tail"] * 2,
    ...               "x": [1.0, 2, 3, 4], "y": [5.0, 6, 7, 8]}).to_csv(p, index=False)
    >>> t = read_tidy(p, fps=30)
    >>> t.coords.shape, t.keypoints, t.meta["first_frame"]
    ((2, 1, 2, 2), ('nose', 'tail'), 10)
    """
    path = check_file(path)
    fps = check_fps(fps, path)
    keypoints = name_list(keypoints)
    info = map_columns(table_info(path), columns, _ROLES)
    lower = {str(c).strip().lower() for c in info.columns}
    time_col = "frame" if "frame" in info.columns or "time" not in lower else "time"
    wide = _looks_wide(info.columns) if "keypoint" not in info.columns else None
    if wide is not None:
        python, cli = _wide_options(info, *wide)
        raise InputError(
            f"{info.path}: no 'keypoint' column, but columns such as {wide[1][:3]} look like a "
            f"wide table (one row per frame); pass {python} (command line: {cli}); the tables "
            "of one run must all be tidy or all wide"
        )
    needed = [time_col, "keypoint", "x", "y"]
    require_columns(info, needed, "a tidy pose table", _suggest_columns(info.columns, needed))
    if fps is None:
        fps = check_fps(info.metadata.get("fps"), path)
    # With frame numbers and a known rate the time column is not needed: skip reading it.
    skip = ("time",) if time_col == "frame" and fps is not None else ()
    numbers = [c for c in ("frame", "time", "x", "y", *_OPTIONAL) if c in info.columns]
    numbers = [c for c in numbers if c not in skip]
    texts = [c for c in ("keypoint", "animal") if c in info.columns]
    values, text_cols = read_columns(info, numbers, texts, whole=("frame",))
    if "time" in values:
        values["time"] = seconds(values["time"], time_unit, info.path)
    if "confidence" not in values:
        fix = "pass columns={'confidence': NAME} (command line: --columns confidence=NAME)"
        warn_unmapped_confidence(info, confidence_lookalikes(info, _ROLES), fix)

    kp_codes, kp_names = _fold_variants(
        info, "keypoint", *text_codes(text_cols["keypoint"], "keypoint", info)
    )
    kp_names = renamed_keypoints(kp_names, keypoint_renames(rename_keypoints, path), path)
    if "animal" in text_cols:
        an_codes, an_names = _fold_variants(
            info, "animal", *text_codes(text_cols["animal"], "animal", info)
        )
    else:
        an_codes, an_names = np.zeros((), dtype=np.int32), ["animal0"]
    if keypoints is not None:
        keep, kp_codes, kp_names = _select_keypoints(info, kp_codes, kp_names, keypoints)
        an_codes = an_codes[keep] if an_codes.ndim else an_codes
        values = {c: v[keep] for c, v in values.items()}

    frames, fps, extra = _frames(info, values, fps, time_unit)
    n_frames = int(frames.max()) + 1
    per_frame = max(len(kp_names) * len(an_names), 1)  # rows of one frame: count frames
    check_frame_span(n_frames, frames.size // per_frame, extra["first_frame"], info.path, time_col)
    step = int(np.gcd.reduce(frames))  # 0-based frame numbers: 1 unless all share a factor
    if step > 1:  # every frame between two numbered ones is empty: a subsampled export?
        warnings.warn(
            f"{info.path}: frame numbers go up by {step} (only one frame in {step} has rows), "
            f"so the frames between are read as lost; if the tracks were subsampled, number "
            f"their frames 0, 1, 2 ... and give their own rate (fps=...)",
            InputWarning,
            stacklevel=2,
        )
    shape = (n_frames, len(an_names), len(kp_names))
    flat = (frames * shape[1] + an_codes) * shape[2] + kp_codes
    flat, values = _drop_exact_repeats(info, flat, values, shape, kp_names, an_names, extra)
    _check_complete(info, flat, shape, kp_names, an_names, extra["first_frame"])
    del frames, kp_codes, an_codes, text_cols  # large tables: free what is no longer needed
    values = {c: v for c, v in values.items() if c not in ("frame", "time")}
    coords, conf = _scatter(info, values, flat, shape)
    return make_tracks(
        path,
        coords=coords,
        confidence=conf,
        keypoints=kp_names,
        animals=an_names,
        fps=fps,
        units=units or info.metadata.get("units", "px"),
        session=session if session is not None else path.stem,
        meta={"source": str(path), "source_format": "tidy", **extra},
    )


def _fold_variants(
    info: TableInfo, column: str, codes: np.ndarray, names: list[str]
) -> tuple[np.ndarray, list[str]]:
    """Names that differ only in case or surrounding spaces (``'Nose '``, ``'nose'``) are one
    name written two ways: read as the one on most rows among those without surrounding
    spaces, with an ``InputWarning``. Kept apart, each would be missing wherever the other is
    written, and the study's keypoint sets would differ.
    """
    groups: dict[str, list[int]] = {}
    for j, n in enumerate(names):
        groups.setdefault(n.strip().casefold(), []).append(j)
    if all(len(g) == 1 for g in groups.values()):
        return codes, names
    rows = np.bincount(codes, minlength=len(names))
    target = np.arange(len(names))
    for g in groups.values():
        target[g] = max(g, key=lambda j: (names[j] == names[j].strip(), rows[j], -j))
    pairs = [f"'{names[j]}' as '{names[t]}'" for j, t in enumerate(target) if t != j]
    warnings.warn(
        f"{info.path}: {column} names that differ only in case or spaces are read as one: "
        f"{listed(pairs)}. If they are different {column}s, name them apart in the file.",
        InputWarning,
        stacklevel=3,
    )
    kept = sorted(set(target.tolist()), key=lambda t: int(np.flatnonzero(target == t)[0]))
    renumber = np.empty(len(names), dtype=np.int64)
    for new, t in enumerate(kept):
        renumber[target == t] = new
    return renumber[codes].astype(codes.dtype), [names[t] for t in kept]


# A keypoint's axis column: the keypoint, a separator of signs other than letters and digits
# (quotes left out, to keep the suggested option quotable) and x or y.
_AXIS_COLUMN = re.compile(r"(?P<keypoint>.+?)(?P<sep>[^A-Za-z0-9'\"]+)(?P<axis>[xy])", re.I)


# Other names of a tidy table's roles, for the mapping suggested when the role's own column is
# missing: a column is taken for a role when its name, in lower case without signs, holds the
# role's word (frame_idx, keypoint_name, conf), is one of the role's common other names, or for
# an axis is the axis letter with a position or unit word (px, pos_x, x_mm). Only a column that
# one role alone takes, and the only one it takes, is suggested.
_ROLE_WORDS = {
    "frame": ("frame",),
    "time": ("time",),
    "keypoint": ("keypoint",),
    "animal": ("animal",),
    "confidence": ("conf",),
}
_ROLE_NAMES = {
    "frame": {"idx", "index", "fr"},
    "time": {"t", "s", "sec", "secs", "seconds"},
    "keypoint": {"bodypart", "bodyparts", "part", "joint", "landmark", "marker", "node", "point",
                 "kp", "label"},
    "animal": {"individual", "individuals", "id", "track", "trackid", "identity", "subject",
               "instance"},
    "confidence": {"likelihood", "score", "p", "prob", "probability", "certainty"},
}  # fmt: skip
_AXIS_WORDS = {"", "p", "pos", "position", "coord", "coordinate", "loc", "location", "px",
               "pixel", "pixels", "mm", "cm", "m"}  # fmt: skip


def _takes(role: str, column: str) -> bool:
    """Whether ``column`` is named like ``role`` by the rule above."""
    name = re.sub(r"[^a-z0-9]", "", column.lower())
    if role in ("x", "y", "z"):
        return (name.startswith(role) and name[1:] in _AXIS_WORDS) or (
            name.endswith(role) and name[:-1] in _AXIS_WORDS
        )
    return any(w in name for w in _ROLE_WORDS[role]) or name in _ROLE_NAMES[role]


def _suggest_columns(columns: tuple[str, ...], needed: list[str]) -> dict[str, str]:
    """The column mapping to suggest for a tidy table lacking columns of ``needed``: the
    missing roles and the optional ones (animal, z, confidence) whose column its names make
    evident, ``UNNAMED`` for a missing role none does. Empty when nothing is missing.

    Examples
    --------
    >>> _suggest_columns(("frame_idx", "bodypart", "px", "py", "likelihood"),
    ...                  ["frame", "keypoint", "x", "y"])  # doctest: +NORMALIZE_WHITESPACE
    {'frame': 'frame_idx', 'keypoint': 'bodypart', 'x': 'px', 'y': 'py',
     'confidence': 'likelihood'}
    """
    missing = [r for r in needed if r not in columns]
    if not missing:
        return {}
    # A table with times and no frame numbers is read by its times.
    wanted = [*missing, *(["time"] if "frame" in missing else []),
              *(r for r in ("animal", "z", "confidence") if r not in columns)]  # fmt: skip
    free = [str(c) for c in columns if c not in _ROLES]
    takers = {c: [r for r in wanted if _takes(r, c)] for c in free}
    found = {}
    for role in wanted:
        own = [c for c in free if takers[c] == [role]]
        if len(own) == 1:
            found[role] = own[0]
    if "frame" in found or "time" not in found:
        found.pop("time", None)
    else:
        missing = [r for r in missing if r != "frame"]
    order = [r for r in _ROLES if r in found or r in missing]
    return {r: found.get(r, UNNAMED) for r in order}


def _looks_wide(columns: tuple[str, ...]) -> tuple[str, list[str]] | None:
    """The separator between keypoint and axis and the columns named so (``nose_x``,
    ``ear_L.y``, ``Nose-X``), when at least two keypoints have both an x and a y column written
    with that separator (the separator of most such keypoints); None otherwise.

    Examples
    --------
    >>> _looks_wide(("frame", "ear_L.x", "ear_L.y", "tail.x", "tail.y"))
    ('.', ['ear_L.x', 'ear_L.y', 'tail.x', 'tail.y'])
    """
    by_sep: dict[str, dict[str, list[str]]] = {}
    for c in columns:
        m = _AXIS_COLUMN.fullmatch(str(c))
        if m:
            by_sep.setdefault(m["sep"], {}).setdefault(m["keypoint"], []).append(str(c))
    best: tuple[str, list[list[str]]] | None = None
    for sep, keypoints in by_sep.items():
        both = [cols for cols in keypoints.values() if {c[-1].lower() for c in cols} == {"x", "y"}]
        if len(both) >= 2 and (best is None or len(both) > len(best[1])):
            best = sep, both
    return None if best is None else (best[0], [c for cols in best[1] for c in cols])


_FRAME_WORDS = ("frame", "idx", "index")


def _wide_options(info: TableInfo, sep: str, columns: list[str]) -> tuple[str, str]:
    """The options that read a table refused as tidy as the wide table it looks like, as
    Python and command-line text: the format and pattern (with the separator its columns
    use), the axis names when written in capitals, the word after the keypoint whose columns
    hold a confidence (``nose.p``), and a column named like frame numbers."""
    pattern = f"{{keypoint}}{sep}{{axis}}"
    mapping = {"x": "X", "y": "Y"} if all(c[-1].isupper() for c in columns) else {}
    stems = {c[: -len(sep) - 1] for c in columns}
    words: dict[str, list[str]] = {}
    for c in map(str, info.columns):
        stem = next((k for k in stems if c.startswith(k + sep)), None)
        word = c[len(stem) + len(sep) :] if stem is not None else ""
        if word and word.lower() not in ("x", "y", "z", "confidence"):
            words.setdefault(word, []).append(c)
    for word, cols in words.items():
        if len(cols) == len(stems) and confidence_lookalikes(
            info, [c for c in info.columns if c != cols[0]]
        ):
            mapping["confidence"] = word
            break
    python = f"format='wide', pattern='{pattern}'"
    cli = f"--format wide --pattern '{pattern}'"
    if mapping:
        python += f", columns={mapping}"
        cli += " --columns " + ",".join(f"{role}={name}" for role, name in mapping.items())
    frame = [c for c in info.columns if any(w in str(c).lower() for w in _FRAME_WORDS)]
    if len(frame) == 1:
        python += f", frame_column='{frame[0]}'"
        cli += f" --frame-column {frame[0]}"
    return python, cli


def _scatter(
    info: TableInfo, values: dict[str, np.ndarray], flat: np.ndarray, shape: tuple[int, int, int]
) -> tuple[np.ndarray, np.ndarray | None]:
    """Place each row's values at its (frame, animal, keypoint) cell; cells without rows are NaN."""
    dims = ["x", "y", "z"] if "z" in values else ["x", "y"]
    coords = np.full((shape[0] * shape[1] * shape[2], len(dims)), np.nan)
    for d, axis in enumerate(dims):
        coords[flat, d] = values.pop(axis)  # pop: free each column once placed
    conf = None
    if "confidence" in values:
        values.update(confidence_on_unit_scale({"confidence": values["confidence"]}, info))
        conf = np.full(coords.shape[0], np.nan)
        conf[flat] = values.pop("confidence")
        conf = conf.reshape(shape)
    return coords.reshape((*shape, len(dims))), conf


def _select_keypoints(
    info: TableInfo, codes: np.ndarray, names: list[str], wanted: list[str]
) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """Rows to keep, their new keypoint codes and the kept names, in the order asked for."""
    missing = [k for k in wanted if k not in names]
    if missing or not wanted:
        raise InputError(
            f"{info.path}: keypoint(s) {missing} asked for but not in the table; "
            f"its keypoints are {names}"
        )
    remap = np.full(len(names), -1, dtype=np.int64)
    remap[[names.index(k) for k in wanted]] = np.arange(len(wanted))
    new = remap[codes]
    keep = new >= 0
    return keep, new[keep], list(wanted)


def _frames(
    info: TableInfo, values: dict[str, np.ndarray], fps: float | None, time_unit: str | None
) -> tuple[np.ndarray, float, dict[str, float | int]]:
    """0-based frame of every row, the frame rate and timing metadata."""
    if "frame" not in values:
        times = values["time"]
        _no_empty_times(info, times)
        unique, inverse = np.unique(times, return_inverse=True)
        check_time_unit(np.diff(unique), fps, time_unit, info.path, info.source("time"))
        frames, fps, t0 = frames_from_times(unique, fps, info.path)
        first = round(t0 * fps)
        return frames[inverse], fps, {"first_frame": first, "start_time_s": t0}
    frames = integer_frames(values["frame"], "frame", info)
    first = int(frames.min())
    frames = frames - first
    n_frames = int(frames.max()) + 1
    require_two_frames(n_frames, info.path)
    if fps is None and "time" in values:
        fps = _fps_from_frame_times(info, frames, values["time"], first)
        if time_unit is None and fps < SLOWEST_UNSAID_FPS:
            step = 1.0 / fps
            check_time_unit(np.array([step]), None, None, info.path, info.source("time"))
    if fps is None:
        raise InputError(
            f"{info.path}: the frame rate is unknown: the table has a 'frame' column but no "
            "'time' column. Pass fps=... (frames per second) or give it in the manifest."
        )
    return frames, fps, {"first_frame": first}


def _no_empty_times(info: TableInfo, times: np.ndarray) -> None:
    if np.isnan(times).any():
        i = int(np.flatnonzero(np.isnan(times))[0])
        raise InputError(f"{info.path}: column 'time' is empty at {info.row(i)}; fill it in")


def _fps_from_frame_times(
    info: TableInfo, frames: np.ndarray, times: np.ndarray, first: int
) -> float:
    """Frame rate from a table with both ``frame`` and ``time`` columns."""
    _no_empty_times(info, times)
    per_frame = np.full(int(frames.max()) + 1, np.nan)
    per_frame[frames] = times
    present = np.flatnonzero(np.isfinite(per_frame))
    rel = per_frame[present] - per_frame[0]
    fps = present[-1] / rel[-1] if rel[-1] > 0 else np.nan
    off = np.abs((times - per_frame[0]) * fps - frames)
    if not np.isfinite(fps) or off.max() > 0.25:
        i = int(np.argmax(off)) if np.isfinite(fps) else 0
        raise InputError(
            f"{info.path}: columns 'frame' and 'time' disagree at {info.row(i)} (frame "
            f"{frames[i] + first} at {times[i]:g} s does not fit one steady frame rate). "
            "Pass fps=... to use the frame numbers alone."
        )
    return snap_rate(present, rel, float(fps), float(np.abs(times).max()))


def _drop_exact_repeats(
    info: TableInfo,
    flat: np.ndarray,
    values: dict[str, np.ndarray],
    shape: tuple[int, int, int],
    kp_names: list[str],
    an_names: list[str],
    extra: dict[str, float | int],
) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Rows repeating a (frame, animal, keypoint) with the very same values are one row said
    twice (exports concatenated with an overlap): keep the first, with an ``InputWarning``.
    Repeats with other values are left for ``_check_complete`` to refuse."""
    counts = np.bincount(flat, minlength=shape[0] * shape[1] * shape[2])
    if not (counts > 1).any():
        return flat, values
    found = exact_repeats(flat, values)
    if found is None:
        return flat, values  # different values: refused with the cells named
    repeat = found[0]
    cell = int(flat[repeat[0]])
    f, rest = divmod(cell, shape[1] * shape[2])
    a, k = divmod(rest, shape[2])
    who = f", animal '{an_names[a]}'" if len(an_names) > 1 else ""
    warnings.warn(
        f"{info.path}: {repeat.size} row(s) repeat a frame and keypoint with the same values "
        f"(e.g. frame {f + int(extra['first_frame'])}, keypoint '{kp_names[k]}'{who}); each "
        "is read once. If the file joins overlapping exports, this is expected.",
        InputWarning,
        stacklevel=3,
    )
    keep = np.ones(flat.size, bool)
    keep[repeat] = False
    return flat[keep], {c: v[keep] for c, v in values.items()}


def _check_complete(
    info: TableInfo,
    flat: np.ndarray,
    shape: tuple[int, int, int],
    kp_names: list[str],
    an_names: list[str],
    first: int,
) -> None:
    """Each (frame, animal, keypoint) at most once; a keypoint without a row in a frame that
    has rows for others is read as not tracked there, with an ``InputWarning`` (trackers that
    leave out the points they missed write such tables)."""
    counts = np.bincount(flat, minlength=shape[0] * shape[1] * shape[2]).reshape(shape)
    many = counts > 1
    if many.any():
        f, a, k = (int(v[0]) for v in np.nonzero(many))
        who = f", animal '{an_names[a]}'" if len(an_names) > 1 else ""
        raise InputError(
            f"{info.path}: {int((counts[many] - 1).sum())} row(s) repeat a frame and keypoint "
            f"already present, e.g. frame {f + first}, keypoint '{kp_names[k]}'{who} appears "
            f"{counts[f, a, k]} times, with different values. Each frame needs exactly one row "
            "per keypoint; remove the repeats (a file joining several recordings must be split, "
            "one file per session)."
        )
    present = counts > 0
    missing = present.any(axis=2, keepdims=True) & ~present
    if not missing.any():
        return
    per_kp = missing.sum(axis=(0, 1))
    k = int(np.argmax(per_kp))
    a = int(np.argmax(missing[:, :, k].any(axis=0)))
    frames = np.flatnonzero(missing[:, a, k])[:5] + first
    who = f" for animal '{an_names[a]}'" if len(an_names) > 1 else ""
    others = [kp_names[j] for j in np.flatnonzero(per_kp) if j != k]
    also = f" (also missing rows: {others})" if others else ""
    warnings.warn(
        f"{info.path}: keypoint '{kp_names[k]}' has no row in {int(per_kp[k])} frame(s) that "
        f"have rows for other keypoints{who}, e.g. frames {frames.tolist()}{also}; read as not "
        "tracked in those frames (as a row with empty x/y would be). If rows were lost or "
        "keypoint names vary within the file, check the export.",
        InputWarning,
        stacklevel=3,
    )


def write_tidy(tracks: PoseTracks, path: str | os.PathLike[str]) -> Path:
    """Save tracks as a tidy table (CSV or Parquet by suffix), atomically.

    Columns ``frame, time, animal, keypoint, x, y, [z], confidence``; every frame x animal x
    keypoint gets a row (missing points have empty x/y), so ``read_tidy`` gives the tracks back.
    Parquet files also record fps and units.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> t = PoseTracks(np.zeros((3, 1, 2, 2)), keypoints=["nose", "tail"], fps=25)
    >>> p = write_tidy(t, pathlib.Path(tempfile.mkdtemp()) / "s.parquet")
    >>> read_tidy(p).fps
    25.0
    """
    n_frames, n_animals, n_kp, n_dims = tracks.coords.shape
    first = int(tracks.meta.get("first_frame", 0))
    per_frame = n_animals * n_kp
    rel = np.repeat(np.arange(n_frames, dtype=np.int64), per_frame)
    cols: dict[str, pa.Array] = {
        "frame": pa.array(rel + first),
        "time": pa.array(rel / tracks.fps),
        "animal": _labels(np.tile(np.repeat(np.arange(n_animals), n_kp), n_frames), tracks.animals),
        "keypoint": _labels(np.tile(np.arange(n_kp), n_frames * n_animals), tracks.keypoints),
    }
    for d, axis in enumerate("xyz"[:n_dims]):
        cols[axis] = pa.array(tracks.coords[..., d].ravel(), from_pandas=True)
    cols["confidence"] = pa.array(tracks.confidence.ravel(), from_pandas=True)
    record = {"fps": tracks.fps, "units": tracks.units, "first_frame": first, "format": "tidy"}
    table = pa.table(cols).replace_schema_metadata({METADATA_KEY: json.dumps(record)})
    return write_table(table, path)


def _labels(codes: np.ndarray, names: tuple[str, ...]) -> pa.DictionaryArray:
    return pa.DictionaryArray.from_arrays(pa.array(codes.astype(np.int32)), pa.array(list(names)))
