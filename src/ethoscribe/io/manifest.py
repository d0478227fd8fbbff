"""The session manifest: one CSV row per recording, and reading a whole study from it.

Required columns ``session, path``; optional ``fps, group, subject, condition, px_per_unit,
units, video``, and for reading ``format`` (the row's reader) and ``columns`` (the row's column
mapping, ROLE=COLUMN pairs as ``--columns`` takes them); any other column is kept as session
metadata. Paths are relative to the manifest's own folder. Rows are counted from 1 below the
header.
"""

from __future__ import annotations

import os
import warnings
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from tqdm.auto import tqdm

from ethoscribe.errors import InputError, InputWarning, listed
from ethoscribe.io._tables import check_file, rename_hints, separator_hint, similar_columns
from ethoscribe.io.registry import format_for, read_pose, takes_option
from ethoscribe.pose import (
    UNITS,
    PoseTracks,
    check_file_name,
    check_same_body_plan,
    match_keypoint_order,
)

REQUIRED = ("session", "path")
OPTIONAL = ("fps", "group", "subject", "condition", "px_per_unit", "units", "video")
READING = ("format", "columns")
"""Columns that tell how a row's file is read: its reader, and its column mapping (the one
reading option two readers of one study may need differently: a tidy table's column names, a
wide table's axis words)."""
_LABELS = ("group", "subject", "condition")
# Reading options that apply to a whole run: a manifest column so named is kept as a column of
# one's own, so it is said (a user may expect it to set the row's option).
_RUN_OPTIONS = (
    "pattern", "frame_column", "time_column", "time_unit", "keypoints", "rename_keypoints",
    "confidence_axis", "axes", "pose_estimation", "containers", "join_tracks", "reader_option",
    "reader_options",
)  # fmt: skip


def read_manifest(path: str | os.PathLike[str], require_paths: bool = True) -> pd.DataFrame:
    """Read and check a manifest CSV.

    With ``require_paths=False`` the ``path`` column may be absent (a manifest that only gives
    groups for sessions already read, as ``compare`` needs), and with an ``animal`` column a
    session may have one row per animal (animals of one session in different groups).

    Returns
    -------
    pandas.DataFrame
        One row per session: ``session``, ``path`` (absolute), ``fps`` and ``px_per_unit``
        (float, NaN when empty), text columns ("" when empty), extra columns (numbers when every
        filled cell is one).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (d / "m1.csv").write_text("frame,keypoint,x,y\\n0,nose,1,2\\n")
    >>> _ = (d / "study.csv").write_text("session,path,fps,group\\nm1,m1.csv,30,control\\n")
    >>> read_manifest(d / "study.csv")[["session", "fps", "group"]].to_dict("records")
    [{'session': 'm1', 'fps': 30.0, 'group': 'control'}]
    """
    path = check_file(path, fix="write one row per session below the header")
    if path.suffix.lower() != ".csv":
        raise InputError(f"{path}: a manifest is a .csv file; got suffix '{path.suffix}'")
    try:
        table = pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8-sig")
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: not a readable CSV manifest ({exc})") from None
    return validate_manifest(table, path.parent, str(path), require_paths=require_paths)


def validate_manifest(
    table: pd.DataFrame,
    base_folder: str | os.PathLike[str],
    source: str = "manifest",
    require_paths: bool = True,
) -> pd.DataFrame:
    """Check a manifest table and resolve its paths against ``base_folder``."""
    base = Path(base_folder).expanduser().resolve()
    table = table.rename(columns=lambda c: str(c).strip()).reset_index(drop=True)
    if not require_paths and "path" not in table.columns:
        table = table.assign(path="")
    missing = [c for c in REQUIRED if c not in table.columns]
    alike = similar_columns(table.columns, (*REQUIRED, *OPTIONAL, *READING))
    hints = rename_hints(alike)
    if missing:
        raise InputError(
            f"{source}: missing column(s) {missing}; found {list(table.columns)}. A manifest "
            f"needs {list(REQUIRED)} and may have {list(OPTIONAL)} and columns of your own."
            f"{hints}{separator_hint(table.columns)}"
        )
    if alike:
        msg = f"{source}: read as columns of your own, not as the manifest's:{hints}"
        warnings.warn(msg, InputWarning, stacklevel=3)
    if table.empty:
        raise InputError(f"{source}: has column names but no sessions; add one row per session")
    text = {c: table[c].map(_cell) for c in table.columns}
    out = pd.DataFrame({"session": text["session"], "path": text["path"]})
    per_animal = not require_paths and "animal" in table.columns
    _check_names(source, out["session"], text["animal"] if per_animal else None)
    if per_animal:
        out["animal"] = text["animal"]
    out["path"] = [_resolve(base, p) if p else "" for p in out["path"]]
    if require_paths:
        _check_files(source, out, base)
    for c in ("fps", "px_per_unit"):
        if c in table.columns:
            out[c] = _positive(source, text[c], c)
    for c in (*_LABELS, "units", "video"):
        if c in table.columns:
            out[c] = text[c]
    if "video" in out:
        out["video"] = [_resolve(base, v) if v else "" for v in out["video"]]
    _check_units(source, out)
    for c in table.columns:
        if c not in out:
            out[c] = _maybe_numbers(text[c])
    out.attrs.update(manifest=source, base_folder=str(base))
    return out


def _cell(value: Any) -> str:
    if value is None or (not isinstance(value, str) and pd.isna(value)):
        return ""
    return str(value).strip()


def _resolve(base: Path, value: str) -> str:
    p = Path(value).expanduser()
    return str(p if p.is_absolute() else (base / p).resolve())


def _check_names(source: str, sessions: pd.Series, animals: pd.Series | None = None) -> None:
    """Every row names its session (and ``animals``: its animal), each once."""
    empty = [i + 1 for i, s in enumerate(sessions) if not s]
    if empty:
        raise InputError(f"{source}: row(s) {empty} have no session name; name every session")
    for i, s in enumerate(sessions):
        try:
            check_file_name(s, "session")
        except InputError as exc:
            raise InputError(f"{source}: row {i + 1}: {exc}") from None
    if animals is not None:
        unnamed = [i + 1 for i, a in enumerate(animals) if not a]
        if unnamed:
            msg = f"{source}: row(s) {unnamed} have no animal; name the animal on every row"
            raise InputError(msg + " (as in the workspace's labels.csv)")
        rows = sessions + "\0" + animals
        dup = rows[rows.duplicated(keep=False)]
        if not dup.empty:
            at = [i + 1 for i, r in enumerate(rows) if r == dup.iloc[0]]
            session, animal = dup.iloc[0].split("\0")
            raise InputError(
                f"{source}: session '{session}', animal '{animal}' is in rows {at}; give each "
                "animal of a session one row"
            )
        return
    dup = sessions[sessions.duplicated(keep=False)]
    if not dup.empty:
        name = dup.iloc[0]
        rows = [i + 1 for i, s in enumerate(sessions) if s == name]
        raise InputError(
            f"{source}: session name '{name}' is used in rows {rows} ({dup.nunique()} repeated "
            "name(s) in all); session names must be unique (one row per animal, with an "
            "'animal' column, is read by compare's manifest: groups of the animals of a session)"
        )


def _check_files(source: str, table: pd.DataFrame, base: Path) -> None:
    bad = [
        f"row {i + 1} (session '{s}'): {p or '(empty path)'}"
        for i, (s, p) in enumerate(zip(table["session"], table["path"], strict=True))
        if not p or not Path(p).is_file()
    ]
    if bad:
        raise InputError(
            f"{source}: {len(bad)} listed file(s) do not exist: "
            + listed(bad, sep="; ")
            + f". Relative paths are read from the manifest's folder {base}."
            + (" Write paths with '/' (not '\\')." if any("\\" in b for b in bad) else "")
        )


def _positive(source: str, cells: pd.Series, column: str) -> np.ndarray:
    values = pd.to_numeric(cells.replace("", np.nan), errors="coerce").to_numpy(np.float64)
    for i, (cell, v) in enumerate(zip(cells, values, strict=True)):
        if cell and not np.isfinite(v):
            raise InputError(f"{source}: row {i + 1}, column '{column}': {cell!r} is not a number")
        if cell and v <= 0:
            raise InputError(
                f"{source}: row {i + 1}, column '{column}' must be positive; got {cell}"
            )
    return values


def _check_units(source: str, table: pd.DataFrame) -> None:
    units = table["units"] if "units" in table else pd.Series([""] * len(table))
    scale = table["px_per_unit"] if "px_per_unit" in table else np.full(len(table), np.nan)
    for i, (u, s) in enumerate(zip(units, scale, strict=True)):
        if u and u not in UNITS:
            raise InputError(f"{source}: row {i + 1}: units must be one of {UNITS}; got {u!r}")
        if np.isfinite(s) and u in ("", "px"):
            raise InputError(
                f"{source}: row {i + 1}: px_per_unit is given but not the unit it measures; "
                "set units to mm, cm or m (pixels per that unit)"
            )


def _maybe_numbers(cells: pd.Series) -> pd.Series:
    filled = cells[cells != ""]
    numbers = pd.to_numeric(filled, errors="coerce")
    if filled.empty or numbers.isna().any():
        return cells
    return pd.to_numeric(cells.replace("", np.nan))


def _session_meta(row: dict[str, Any], extras: list[str], source: str, i: int) -> dict[str, Any]:
    meta: dict[str, Any] = {"manifest": source, "manifest_row": i + 1}
    for c in (*_LABELS, "video"):
        if row.get(c):
            meta[c] = row[c]
    if np.isfinite(row.get("px_per_unit", np.nan)):
        meta["px_per_unit"] = float(row["px_per_unit"])
        meta["calibration_units"] = row["units"]
    for c in extras:
        v = row[c]
        if not (v == "" or (isinstance(v, float) and np.isnan(v))):
            meta[c] = v.item() if isinstance(v, np.generic) else v
    return meta


def row_columns(row: Any, where: str) -> dict[str, str] | None:
    """A manifest row's column mapping (its ``columns`` cell, ROLE=COLUMN pairs separated by
    commas, as ``--columns`` takes them), or None when the cell is empty or absent.

    Examples
    --------
    >>> row_columns({"columns": "confidence=p, frame=frame_no"}, "row 1")
    {'confidence': 'p', 'frame': 'frame_no'}
    """
    text = _cell(row.get("columns")) if hasattr(row, "get") else ""
    if not text:
        return None
    pairs = [[t.strip() for t in item.partition("=")] for item in text.split(",")]
    if not all(role and sep and name for role, sep, name in pairs):
        raise InputError(
            f"{where}: the columns cell takes ROLE=COLUMN pairs separated by commas, as "
            f"--columns does (e.g. confidence=likelihood,x=pos_x); got {text!r}"
        )
    return {role: name for role, _, name in pairs}


def warn_run_options(table: pd.DataFrame, source: str) -> None:
    """Say which manifest columns are named like reading options that apply to a whole run:
    they are kept as session metadata, not read as the row's option."""
    named = [c for c in table.columns if c in _RUN_OPTIONS]
    if named:
        warnings.warn(
            f"{source}: column(s) {named} are kept as columns of your own (session "
            "metadata), not read as reading options: those apply to the whole run (on the "
            "command line, or reader_options=), each to the readers that take it; only the "
            "column mapping may differ by row (a 'columns' column, ROLE=COLUMN pairs)",
            InputWarning,
            stacklevel=3,
        )


def _row_format(row: dict[str, Any], format: str | None, source: str, i: int) -> str:
    """The reader of a manifest row: its ``format`` cell, else ``format``, else its suffix."""
    own = row.get("format")
    try:
        return format_for(row["path"], own if isinstance(own, str) and own.strip() else format)
    except InputError as exc:
        raise InputError(f"{source}: row {i + 1} (session '{row['session']}'): {exc}") from None


def load_study(
    manifest: str | os.PathLike[str] | pd.DataFrame,
    fps: float | None = None,
    progress: bool = True,
    format: str | None = None,
    **reader_options: Any,
) -> list[PoseTracks]:
    """Read every session listed in a manifest (file or table) as one study.

    Parameters
    ----------
    manifest : str, Path or pandas.DataFrame
        Manifest CSV, or a table with its columns (relative paths then resolve against
        ``table.attrs["base_folder"]`` or the working folder).
    fps : float, optional
        Frame rate for rows whose ``fps`` cell is empty.
    progress : bool
        Show a progress bar over sessions.
    format : str, optional
        Reader name for every file ("tidy", "wide", "nwb"); default by suffix.
    **reader_options
        Passed to the readers that take them (e.g. ``pattern=`` to the wide reader only, where
        a ``format`` column mixes tidy and wide tables); an option no reader of the study
        takes is refused.

    Returns
    -------
    list of PoseTracks
        In manifest order; ``meta`` holds group, subject, condition, video, px_per_unit with
        ``calibration_units``, and the extra columns. All share one body plan.

    Examples
    --------
    >>> sessions = load_study("study.csv", fps=30)  # doctest: +SKIP
    """
    if isinstance(manifest, pd.DataFrame):
        base = manifest.attrs.get("base_folder", Path.cwd())
        table = validate_manifest(manifest, base, manifest.attrs.get("manifest", "manifest"))
    else:
        table = read_manifest(manifest)
    source = table.attrs["manifest"]
    if "session" in reader_options:
        raise InputError("load_study names sessions from the manifest; do not pass session=")
    warn_run_options(table, source)
    extras = [c for c in table.columns if c not in (*REQUIRED, *OPTIONAL, "columns")]
    sessions = []
    rows = table.to_dict("records")
    formats = [_row_format(row, format, source, i) for i, row in enumerate(rows)]
    unused = sorted(k for k in reader_options if not any(takes_option(f, k) for f in formats))
    if unused:
        raise InputError(
            f"{source}: no reader of this study ({', '.join(sorted(set(formats)))}) takes the "
            f"option(s) {unused}; leave them out, or check their spelling"
        )
    for i, row in enumerate(
        tqdm(rows, desc="reading sessions", unit="session", disable=not progress)
    ):
        fmt = formats[i]  # each option goes to the readers that take it, as discover does
        options = {k: v for k, v in reader_options.items() if takes_option(fmt, k)}
        own_columns = row_columns(row, f"{source}: row {i + 1} (session '{row['session']}')")
        if own_columns is not None:
            options["columns"] = own_columns  # in place of the run's mapping
        row_fps = row.get("fps", np.nan)
        if np.isfinite(row_fps) or fps is not None:
            options["fps"] = float(row_fps) if np.isfinite(row_fps) else fps
        if row.get("units") and not np.isfinite(row.get("px_per_unit", np.nan)):
            options["units"] = row["units"]  # the file is already in these units
        try:
            tracks = read_pose(row["path"], format=fmt, session=row["session"], **options)
        except InputError as exc:
            msg = f"{source}: row {i + 1} (session '{row['session']}'): {exc}"
            raise InputError(msg) from None
        sessions.append(tracks.replace(meta=_session_meta(row, extras, source, i)))
    sessions = match_keypoint_order(sessions)
    try:
        check_same_body_plan(sessions)
    except InputError as exc:
        raise InputError(f"{source}: {exc}") from None
    return sessions
