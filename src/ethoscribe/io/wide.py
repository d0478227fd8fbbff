"""Wide pose tables: one row per frame, one column per keypoint and axis (CSV or Parquet).

The user says how columns are named with a pattern such as ``"{keypoint}_{axis}"`` (``nose_x``,
``nose_y``, ``nose_confidence``) or ``"{animal}.{keypoint}.{axis}"``; nothing about any
particular tracker's layout is guessed.
"""

from __future__ import annotations

import os
import re
import warnings
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from ethoscribe.errors import InputError, InputWarning, listed
from ethoscribe.io._tables import (
    LOOKS_LIKE_CONFIDENCE,
    TableInfo,
    check_file,
    check_fps,
    check_role_mapping,
    confidence_lookalikes,
    confidence_on_unit_scale,
    exact_repeats,
    integer_frames,
    keypoint_renames,
    make_tracks,
    name_list,
    read_columns,
    renamed_keypoints,
    require_columns,
    table_info,
    warn_unmapped_confidence,
)
from ethoscribe.io._timing import (
    check_frame_span,
    check_time_unit,
    frames_from_times,
    require_two_frames,
    seconds,
)
from ethoscribe.pose import PoseTracks

_FIELD = re.compile(r"\{(\w*)\}")


def pattern_regex(
    pattern: str, axes: Sequence[str], confidence_axis: str | None
) -> re.Pattern[str]:
    """The regular expression a column-name pattern stands for.

    ``{keypoint}`` and ``{animal}`` match any text (shortest first), ``{axis}`` one of ``axes``
    or ``confidence_axis``.

    Examples
    --------
    >>> bool(pattern_regex("{keypoint}_{axis}", ("x", "y"), "confidence").fullmatch("left_ear_x"))
    True
    """
    fields = _FIELD.findall(pattern)
    unknown = sorted(set(fields) - {"keypoint", "axis", "animal"})
    if unknown or fields.count("keypoint") != 1 or fields.count("axis") != 1:
        raise InputError(
            f"pattern {pattern!r} must contain {{keypoint}} and {{axis}} once each and may contain "
            f"{{animal}}; unknown or repeated placeholders: {unknown or fields}. "
            "Example: '{keypoint}_{axis}' for columns like 'nose_x'."
        )
    if fields.count("animal") > 1:
        raise InputError(f"pattern {pattern!r} may contain {{animal}} only once")
    names = sorted({*axes, *([confidence_axis] if confidence_axis else [])}, key=len, reverse=True)
    groups = {
        "keypoint": "(?P<keypoint>.+?)",
        "animal": "(?P<animal>.+?)",
        "axis": "(?P<axis>" + "|".join(re.escape(a) for a in names) + ")",
    }
    parts = _FIELD.split(pattern)
    # split() alternates literal text and placeholder names.
    regex = "".join(re.escape(p) if i % 2 == 0 else groups[p] for i, p in enumerate(parts))
    return re.compile(regex)


def read_wide(
    path: str | os.PathLike[str],
    pattern: str = "{keypoint}_{axis}",
    fps: float | None = None,
    frame_column: str | None = None,
    time_column: str | None = None,
    axes: Sequence[str] = ("x", "y", "z"),
    confidence_axis: str | None = "confidence",
    animal: str | None = None,
    session: str | None = None,
    units: str = "px",
    keypoints: list[str] | str | None = None,
    columns: Mapping[str, str] | None = None,
    time_unit: str | None = None,
    rename_keypoints: Mapping[str, str] | str | None = None,
) -> PoseTracks:
    """Read a wide table (one row per frame) whose columns follow ``pattern``.

    Parameters
    ----------
    path : str or Path
        ``.csv``, ``.parquet`` or ``.pq`` file.
    pattern : str
        Column names with placeholders ``{keypoint}``, ``{axis}`` and optionally ``{animal}``.
        Columns that do not match are ignored (listed in ``meta["ignored_columns"]``).
    fps : float, optional
        Frames per second; needed unless ``time_column`` is given.
    frame_column, time_column : str, optional
        Column of whole frame numbers, or of times in seconds. Either must increase from row to
        row; missing frames become all-missing frames. Without both, row ``i`` is frame ``i``.
    axes : sequence of str
        Names standing for x, y and (optionally) z in the column names, in that order.
    confidence_axis : str or None
        Name standing for confidence in the column names; ``None`` to ignore confidence.
    animal : str, optional
        Without ``{animal}`` in the pattern: the animal's id. With it: read only this animal.
    session, units, keypoints
        Session name (default: file stem), coordinate units, keypoints to keep (in order;
        a text: names separated by commas).
    columns : mapping, optional
        The command line's column mapping in wide terms: ``{"confidence": "likelihood"}`` sets
        ``confidence_axis``, ``{"x": "X", "y": "Y"}`` the axes, ``{"frame": ...}`` /
        ``{"time": ...}`` the timing columns. Without confidence columns, an ``InputWarning``
        names axis words whose columns hold numbers the readers would read as a confidence (on
        [0, 1], a little above 1 or in percent).
    time_unit : "s" or "ms", optional
        Unit of ``time_column`` (default seconds); checked against ``fps`` as ``read_tidy`` does.
    rename_keypoints : mapping or str, optional
        New names for the keypoints the column names give, ``{"nose": "snout"}`` or
        ``"nose=snout,..."`` (OLD=NEW), as ``read_tidy`` takes them; ``keypoints`` then takes
        the new names.

    Returns
    -------
    PoseTracks
        coords (frames, animals, keypoints, dims).

    Examples
    --------
    >>> import tempfile, pathlib, pandas as pd
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "m.csv"
    >>> pd.DataFrame({"nose_x": [1.0, 2], "nose_y": [3.0, 4], "tail_x": [5.0, 6],
    ...               "tail_y": [7.0, 8]}).to_csv(p, index=False)
    >>> t = read_wide(p, fps=30)
    >>> t.keypoints, t.coords[1, 0, 1].tolist()
    (('nose', 'tail'), [6.0, 8.0])
    """
    path = check_file(path)
    fps = check_fps(fps, path)
    own_confidence = confidence_axis
    axes, confidence_axis, frame_column, time_column = _mapped(
        path, columns, axes, confidence_axis, frame_column, time_column
    )
    if len(axes) not in (2, 3):
        raise InputError(f"axes must name 2 or 3 axes (x, y[, z]); got {list(axes)}")
    info = table_info(path)
    timing = [c for c in (frame_column, time_column) if c is not None]
    require_columns(info, timing, "frame timing")
    found, ignored = _match_columns(info, pattern, axes, confidence_axis, timing, animal)
    if confidence_axis != own_confidence and not any(k[2] == confidence_axis for k in found):
        # A study's files may differ: this one names its confidence by the usual word.
        again = _match_columns(info, pattern, axes, own_confidence, timing, animal)
        if any(k[2] == own_confidence for k in again[0]):
            (found, ignored), confidence_axis = again, own_confidence
    in_file = list(dict.fromkeys(k for _, k, _ in found))  # the file's keypoint names
    renames = keypoint_renames(rename_keypoints, path)
    new = dict(zip(in_file, renamed_keypoints(in_file, renames, path), strict=True))
    found = {(a, new[k], axis): c for (a, k, axis), c in found.items()}
    per_animal, keypoints = "{animal}" in pattern, name_list(keypoints)
    animals, kp_names, n_dims = _layout(info, found, axes, animal, per_animal, keypoints)
    whole = (frame_column,) if frame_column is not None else ()
    values, _ = read_columns(info, [*timing, *found.values()], [], whole=whole)
    if time_column is not None:
        values[time_column] = seconds(values[time_column], time_unit, info.path)
    if timing:
        values = _drop_exact_repeats(info, values, timing[0])
    frames, fps, extra = _frames(info, values, fps, frame_column, time_column, time_unit)
    if not timing:
        _warn_frame_lookalike(info, ignored)
    n_frames = int(frames[-1]) + 1
    timing_column = frame_column or time_column or "row order"
    check_frame_span(n_frames, len(frames), extra["first_frame"], info.path, timing_column)
    coords = np.full((n_frames, len(animals), len(kp_names), n_dims), np.nan)
    conf = np.full(coords.shape[:3], np.nan)
    used = {key: c for key, c in found.items() if key[0] in animals and key[1] in kp_names}
    values.update(
        confidence_on_unit_scale(
            {c: values[c] for (_, _, axis), c in used.items() if axis == confidence_axis}, info
        )
    )
    for (a, k, axis), column in used.items():
        i, j = animals.index(a), kp_names.index(k)
        if axis == confidence_axis:
            conf[frames, i, j] = values[column]
        elif axes.index(axis) < n_dims:
            coords[frames, i, j, axes.index(axis)] = values[column]
    has_conf = any(axis == confidence_axis for _, _, axis in found)
    if not has_conf:
        mapped = columns.get("confidence") if columns else None
        _warn_lookalike(info, pattern, ignored, [k for k in in_file if new[k] in kp_names], mapped)
    return make_tracks(
        path,
        coords=coords,
        confidence=conf if has_conf else None,
        keypoints=kp_names,
        animals=animals,
        fps=fps,
        units=units,
        session=session if session is not None else path.stem,
        meta={"source": str(path), "source_format": "wide", "ignored_columns": ignored, **extra},
    )


def _match_columns(
    info: TableInfo,
    pattern: str,
    axes: Sequence[str],
    confidence_axis: str | None,
    timing: list[str],
    animal: str | None,
) -> tuple[dict[tuple[str, str, str], str], list[str]]:
    """Map (animal, keypoint, axis) -> column name, and list the columns left over."""
    single = animal or "animal0"  # the id when the pattern names no animal
    regex = pattern_regex(pattern, axes, confidence_axis)
    found: dict[tuple[str, str, str], str] = {}
    ignored = []
    for column in info.columns:
        m = regex.fullmatch(column) if column not in timing else None
        if m is None:
            ignored.append(column)
            continue
        groups = m.groupdict()
        found[(groups.get("animal") or single, groups["keypoint"], groups["axis"])] = column
    if not found:
        shown = listed(map(repr, info.columns), 30)
        raise InputError(
            f"{info.path}: no column matches the pattern {pattern!r} (regular expression "
            f"{regex.pattern!r}, axes {list(axes)}). Columns found: {shown}. Give pattern= (and "
            "axes=) naming your columns, e.g. pattern='{keypoint}_{axis}' for 'nose_x', "
            "pattern='{animal}.{keypoint}.{axis}' for 'mouse1.nose.x'."
        )
    return found, ignored


def _layout(
    info: TableInfo,
    found: dict[tuple[str, str, str], str],
    axes: Sequence[str],
    animal: str | None,
    per_animal: bool,
    keypoints: list[str] | None,
) -> tuple[list[str], list[str], int]:
    """Animals, keypoints (first-seen order) and dims; each needs x and y, z all or none."""
    animals = list(dict.fromkeys(a for a, _, _ in found))
    kp_names = list(dict.fromkeys(k for _, k, _ in found))
    if per_animal and animal is not None:
        if animal not in animals:
            raise InputError(f"{info.path}: no columns for animal '{animal}'; found {animals}")
        animals = [animal]
    if keypoints is not None:
        missing = [k for k in keypoints if k not in kp_names]
        if missing or not keypoints:
            raise InputError(
                f"{info.path}: keypoint(s) {missing} asked for but no columns name them; "
                f"keypoints found: {kp_names}"
            )
        kp_names = list(keypoints)
    with_z = {(a, k) for a, k, axis in found if len(axes) == 3 and axis == axes[2]}
    n_dims = 3 if with_z else 2
    for a in animals:
        for k in kp_names:
            for axis in axes[:n_dims]:
                if (a, k, axis) not in found:
                    who = f" of animal '{a}'" if per_animal else ""
                    raise InputError(
                        f"{info.path}: keypoint '{k}'{who} has no '{axis}' column (other "
                        f"keypoints have one); add it, or leave '{k}' out with keypoints=[...]"
                        + (". A study is 2-D or 3-D throughout." if axis == axes[2] else "")
                    )
    return animals, kp_names, n_dims


def _frames(
    info: TableInfo,
    values: dict[str, np.ndarray],
    fps: float | None,
    frame_column: str | None,
    time_column: str | None,
    time_unit: str | None = None,
) -> tuple[np.ndarray, float, dict[str, float | int]]:
    """0-based frame of each row, frame rate and timing metadata."""
    n_rows = len(next(iter(values.values())))
    if frame_column is not None:
        raw = integer_frames(values[frame_column], frame_column, info)
        _increasing(info, raw, frame_column)
        frames, first = raw - raw[0], int(raw[0])
    elif time_column is not None:
        times = values[time_column]
        if np.isnan(times).any():
            i = int(np.flatnonzero(np.isnan(times))[0])
            raise InputError(f"{info.path}: column '{time_column}' is empty at {info.row(i)}")
        _increasing(info, times, time_column)
        check_time_unit(np.diff(times), fps, time_unit, info.path, time_column)
        frames, fps, t0 = frames_from_times(times, fps, info.path, time_column)
        return frames, fps, {"first_frame": round(t0 * fps), "start_time_s": t0}
    else:
        frames, first = np.arange(n_rows), 0
    require_two_frames(int(frames[-1]) + 1, info.path)
    if fps is None:
        raise InputError(
            f"{info.path}: the frame rate is unknown; pass fps=... (frames per second), or "
            "time_column=... if the table has times in seconds"
        )
    return frames, fps, {"first_frame": first}


_ROLES = ("frame", "time", "x", "y", "z", "confidence")


def _mapped(
    path: Any,
    columns: Mapping[str, str] | None,
    axes: Sequence[str],
    confidence_axis: str | None,
    frame_column: str | None,
    time_column: str | None,
) -> tuple[tuple[str, ...], str | None, str | None, str | None]:
    """Axes, confidence axis and timing columns after a ``columns`` mapping."""
    axes = tuple(axes)
    if not columns:
        return axes, confidence_axis, frame_column, time_column
    check_role_mapping(
        path, columns, _ROLES, "names",
        " (wide tables: x/y/z/confidence name the axis word in the column names; a study "
        "mixing tidy and wide tables gives each manifest row its own mapping in a 'columns' "
        "column)",
    )  # fmt: skip
    axes = tuple(columns.get(a, axes[i]) if i < len(axes) else a for i, a in
                 enumerate(("x", "y", "z")[: len(axes)]))  # fmt: skip
    return (
        axes,
        columns.get("confidence", confidence_axis),
        columns.get("frame", frame_column),
        columns.get("time", time_column),
    )


def _warn_lookalike(
    info: TableInfo, pattern: str, ignored: list[str], keypoints: list[str], mapped: str | None
) -> None:
    """Name axis words of ignored columns that look like a confidence (one per keypoint).

    When the caller mapped the confidence to an axis word (``mapped``) that no column has,
    while another word's columns look like a confidence, the mapping is likely misspelt:
    raise rather than read the file without its confidence.
    """
    regex = re.compile(pattern_regex(pattern, ("AXISWORD",), None).pattern.replace(
        "AXISWORD", "[A-Za-z0-9]+"))  # fmt: skip
    words: dict[str, list[str]] = {}
    for column in ignored:
        m = regex.fullmatch(column)
        if m and m.group("keypoint") in keypoints:
            words.setdefault(m.group("axis"), []).append(column)
    candidates = [cols[0] for cols in words.values()]
    looks = confidence_lookalikes(info, [c for c in info.columns if c not in candidates])
    if looks:
        word = next(w for w, cols in words.items() if cols[0] == looks[0])
        fix = (
            f"pass confidence_axis={word!r} (command line: --columns confidence={word}) so "
            f"that columns like {looks[0]!r} are read as confidence"
        )
        if mapped is not None:
            msg = (
                f"{info.path}: the confidence is mapped to the axis word {mapped!r}, but no "
                f"column of the pattern {pattern!r} ends in it, while column(s) {looks} "
                f"{LOOKS_LIKE_CONFIDENCE}. Check the spelling: {fix}"
            )
            raise InputError(msg)
        warn_unmapped_confidence(info, looks, fix)


_FRAME_WORDS = re.compile(r"frame|idx|index", re.IGNORECASE)


def _warn_frame_lookalike(info: TableInfo, ignored: list[str]) -> None:
    """Rows are read as consecutive frames; say so when an ignored column named like a frame
    number holds increasing whole numbers that do not start at 0 or skip frames (a tracker's
    own numbering, whose gaps would otherwise close up and shift every later frame)."""
    for column in [c for c in ignored if _FRAME_WORDS.search(str(c))][:3]:
        try:
            values, _ = read_columns(info, [column], [])
        except InputError:  # text, or unreadable: not frame numbers
            continue
        v = values[column]
        if v.size < 2 or not np.isfinite(v).all() or (v != np.round(v)).any():
            continue
        steps = np.diff(v)
        if (steps <= 0).any() or (v[0] == 0 and (steps == 1).all()):
            continue  # not frame numbers, or the same as the row order
        skipped = int((steps - 1).sum())
        msg = (
            f"{info.path}: column '{column}' looks like frame numbers ({v[0]:.0f} to "
            f"{v[-1]:.0f}, {skipped} skipped) but rows are read as consecutive frames from "
            f"0; to keep its numbering and gaps pass frame_column='{column}' "
            f"(command line: --frame-column {column})"
        )
        warnings.warn(msg, InputWarning, stacklevel=3)
        return


def _drop_exact_repeats(
    info: TableInfo, values: dict[str, np.ndarray], column: str
) -> dict[str, np.ndarray]:
    """Rows repeating a frame (or time) of ``column`` with the very same values in every
    column are one row said twice (exports joined with an overlap): the first is kept, with an
    ``InputWarning``, and rows stay in the file's order. Repeats with other values are left
    for the order check to refuse."""
    found = exact_repeats(values[column], values)
    if found is None or not found[0].size:
        return values
    repeat, first_row = found
    warnings.warn(
        f"{info.path}: {repeat.size} row(s) repeat a '{column}' value with the same values in "
        f"every column (e.g. {info.row(int(repeat[0]))}, as {info.row(int(first_row[0]))}"
        "); each is read once. If the file joins overlapping exports, this is expected.",
        InputWarning,
        stacklevel=3,
    )
    keep = np.ones(len(values[column]), bool)
    keep[repeat] = False
    return {c: v[keep] for c, v in values.items()}


def _increasing(info: TableInfo, values: np.ndarray, column: str) -> None:
    back = np.flatnonzero(np.diff(values) <= 0)
    if back.size:
        i = int(back[0]) + 1
        raise InputError(
            f"{info.path}: column '{column}' must increase from row to row (one row per frame); "
            f"{info.row(i)} has {values[i]:g} after {values[i - 1]:g} ({back.size} such step(s)). "
            "Sort the table, remove repeated frames, or split joined recordings."
        )
