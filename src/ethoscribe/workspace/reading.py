"""Reading a study: pose files or a manifest, with per-session fps, calibration and metadata."""

from __future__ import annotations

import json
import os
import warnings
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from tqdm.auto import tqdm

from ethoscribe.clean import CleanParams, calibrate
from ethoscribe.errors import InputError, InputWarning, listed
from ethoscribe.io import pose_files, read_manifest, read_pose, validate_manifest
from ethoscribe.io.manifest import row_columns, warn_run_options
from ethoscribe.io.registry import (
    check_reader_options,
    format_for,
    reader_reference,
    takes_any_option,
    takes_option,
    use_reader,
)
from ethoscribe.io.registry import (
    reader_options as options_of,
)
from ethoscribe.pose import PoseTracks, check_same_body_plan, match_keypoint_order
from ethoscribe.track_pieces import join_track_pieces


def as_path(value: Any, argument: str) -> Path:
    """``value`` as a path; a clear ``TypeError`` naming ``argument`` for anything else."""
    if isinstance(value, (str, os.PathLike)) and str(value) != "":
        return Path(value).expanduser()
    what = "an empty string" if isinstance(value, str) else type(value).__name__
    raise TypeError(f"{argument} must be a path (str or pathlib.Path); got {what}")


def as_paths(values: Any, argument: str) -> list[Path]:
    """One path or a sequence of paths as a list; a plain string is one path, not its letters."""
    if values is None:
        return []
    if isinstance(values, (str, os.PathLike)):
        return [as_path(values, argument)]
    if isinstance(values, pd.DataFrame) or not isinstance(values, Sequence):
        raise TypeError(
            f"{argument} must be a path or a list of paths (files or folders); "
            f"got {type(values).__name__}"
        )
    return [as_path(v, f"{argument}[{i}]") for i, v in enumerate(values)]


def _manifest_table(manifest: Any, require_paths: bool) -> pd.DataFrame:
    if isinstance(manifest, pd.DataFrame):
        base = manifest.attrs.get("base_folder", Path.cwd())
        source = manifest.attrs.get("manifest", "manifest table")
        return validate_manifest(manifest, base, source, require_paths=require_paths)
    return read_manifest(as_path(manifest, "manifest"), require_paths=require_paths)


def plan_sessions(
    inputs: Sequence[str | Path] | str | Path | None,
    manifest: str | Path | pd.DataFrame | None = None,
    fps: float | None = None,
    format: str | None = None,
    reader_options: Mapping[str, Any] | None = None,
    join_tracks: bool = False,
) -> list[dict[str, Any]]:
    """What to read for each session, without reading it: path, name, reader, fps, calibration.

    Sessions come from ``inputs`` (files or folders) or, when there are none, from the manifest's
    paths; the manifest (a CSV or a table) gives per-session fps, calibration and columns such
    as group or subject. A file's manifest row is the one whose ``path`` is that file (rows
    without a path are matched by file name without suffix); the row's ``session`` names it.
    ``format`` picks the reader (default: by suffix) and ``reader_options`` go to it.
    ``join_tracks`` chains a tracker's track pieces into animals by continuity
    (:func:`~ethoscribe.track_pieces.join_track_pieces`; the joins are reported per session).
    """
    paths = as_paths(inputs, "inputs")
    options = dict(reader_options or {})
    for reserved in ("fps", "session"):
        if reserved in options:
            raise InputError(
                f"reader option {reserved!r} is set per session; give it as --{reserved} "
                f"({reserved}=...) or in the manifest instead"
            )
    table = _manifest_table(manifest, require_paths=not paths) if manifest is not None else None
    source = "" if table is None else table.attrs.get("manifest", "manifest")
    if paths:
        # A manifest kept beside the pose files is not a session.
        skip = {Path(manifest).resolve()} if isinstance(manifest, (str, os.PathLike)) else set()
        files = [f for f in pose_files(paths, format) if Path(f).resolve() not in skip]
    elif table is not None:
        files = [Path(p) for p in table["path"]]
    else:
        raise InputError(
            "no pose files given: name files or folders, or a manifest with a path column"
        )
    rows = [] if table is None else [r for _, r in table.iterrows()]
    if table is not None:
        warn_run_options(table, source)
    matched = _manifest_rows(files, rows)
    if paths:
        _warn_paths_not_read(files, rows, matched, source)
    _warn_absent_files(rows, matched, source)
    # Files of several formats (tables beside NWB files): an option goes to the readers that
    # take it (``--columns`` to the tables), and is refused only when no reader takes it.
    # A manifest's ``format`` column names the reader of its row (a study of tidy and wide
    # tables); otherwise ``format``, or the file's suffix.
    chosen = [
        format_for(f, _row_value(r, "format", format)) for f, r in zip(files, matched, strict=True)
    ]
    formats = set(chosen)
    taken = set().union(*(_accepted(f) for f in formats)) if len(formats) > 1 else set()
    plan = []
    for path, row, fmt in zip(files, matched, chosen, strict=True):
        resolved = str(Path(path).resolve())
        if table is not None and row is None and paths:
            raise InputError(
                f"{path}: this file is not in the manifest {source}; add a row whose path is "
                "this file (its session column then names the session), move the file out of "
                "the folder if it holds no tracks (another manifest, notes), or give the "
                "manifest alone, with no files or folders: its path column lists the sessions"
            )
        name = Path(path).stem if row is None else str(row["session"])
        extra = (
            {}
            if row is None
            else {
                k: v
                for k, v in row.items()
                if k not in ("session", "path", "columns") and _filled(v)
            }
        )
        px = _row_value(row, "px_per_unit", None)
        accepted = _accepted(fmt)
        file_options = {k: v for k, v in options.items() if k not in taken or {k, "*"} & accepted}
        # The row's own column mapping, in place of the run's (tidy and wide tables of one
        # study name their columns differently: column names, axis words).
        if row is not None:
            where = f"{source}: row {row.name + 1} (session '{row['session']}')"
            own_columns = row_columns(row, where)
            if own_columns is not None:
                file_options["columns"] = own_columns
        units = _row_value(row, "units", None)
        takes_units = takes_option(fmt, "units")
        if units is not None and px is None and units != "px" and takes_units:
            file_options["units"] = str(units)  # the file is already in these units
        check_reader_options(fmt, file_options, path)
        plan.append(
            {
                "path": resolved,
                "session": name,
                "fps": _row_value(row, "fps", fps),
                "px_per_unit": None if px is None else float(px),
                "units": str(units or "mm"),
                "meta": extra,
                "format": fmt,
                "options": file_options,
                "reader": reader_reference(fmt),
                "join_tracks": bool(join_tracks),
            }
        )
    names = [e["session"] for e in plan]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise InputError(
            f"several files give the same session name {dup}; rename the files or name them "
            "apart in a manifest (its session column)"
        )
    return plan


def _warn_absent_files(rows: list[Any], matched: list[Any], source: str) -> None:
    """Say which manifest rows name a file that does not exist (left out of a run that was
    given files or folders; a run from the manifest alone refuses them)."""
    used = {r.name for r in matched if r is not None}
    absent = [
        f"session '{r['session']}' ({r['path']})"
        for r in rows
        if r.name not in used and _filled(r.get("path")) and not Path(r["path"]).exists()
    ]
    if absent:
        warnings.warn(
            f"{source}: {len(absent)} row(s) name a file that does not exist and are left out: "
            f"{listed(absent)}; correct the path or remove the row",
            InputWarning,
            stacklevel=3,
        )


def _warn_paths_not_read(
    files: Sequence[Path], rows: list[Any], matched: list[Any], source: str
) -> None:
    """Say which manifest rows name a file that does not exist, or the file of another row,
    in a run given files or folders: the file named like the row's session is read for such a
    row (the warning names the row, its path and that file), or none (a row naming another's
    file; a missing one is said by :func:`_warn_absent_files`). A run from the manifest alone
    refuses a missing file."""
    sharing: dict[str, list[Any]] = {}
    for r in rows:
        if _filled(r.get("path")):
            sharing.setdefault(str(Path(r["path"]).resolve()), []).append(r)
    read_for = {r.name: Path(f) for f, r in zip(files, matched, strict=True) if r is not None}
    said = []
    for r in rows:
        if not _filled(r.get("path")):
            continue
        path = Path(r["path"])
        others = [o for o in sharing[str(path.resolve())] if o.name != r.name]
        read = read_for.get(r.name)
        if (path.exists() and not others) or (
            read is not None and read.resolve() == path.resolve()
        ):
            continue  # the row's own file, read or not given
        why = (
            "does not exist"
            if not path.exists()
            else f"is also the path of row {others[0].name + 1} (session '{others[0]['session']}')"
        )
        where = f"row {r.name + 1} (session '{r['session']}'): {path} {why}"
        if read is not None:
            said.append(f"{where}; {read}, named like the session, is read for it instead")
        elif path.exists():
            said.append(f"{where}; the row is left out")
    if said:
        warnings.warn(
            f"{source}: {len(said)} row(s) do not name a file of their own: "
            f"{listed(said, sep='; ')}. Correct the path of each such row if that is not the "
            "session's file",
            InputWarning,
            stacklevel=3,
        )


def _accepted(fmt: str) -> set[str]:
    """Option names the reader of ``fmt`` takes (every name when it takes ``**options``)."""
    return {"*"} if takes_any_option(fmt) else set(options_of(fmt))


def _manifest_rows(files: Sequence[Path], rows: list[Any]) -> list[Any]:
    """The manifest row of each file: the row whose path is the file, else (for rows no file
    claims by path) the row whose session is the file name without its suffix."""
    by_path = {str(Path(r["path"]).resolve()): i for i, r in enumerate(rows) if r["path"]}
    found = [by_path.get(str(Path(f).resolve())) for f in files]
    claimed = {i for i in found if i is not None}
    by_name = {str(r["session"]): i for i, r in enumerate(rows) if i not in claimed}
    found = [
        by_name.get(Path(f).stem) if i is None else i for f, i in zip(files, found, strict=True)
    ]
    return [None if i is None else rows[i] for i in found]


def read_planned(entry: dict[str, Any]) -> PoseTracks:
    """Read one session of :func:`plan_sessions`, calibrated, with its manifest metadata."""
    if "reader" in entry:
        use_reader(entry["reader"])
    fmt = entry.get("format")
    options = dict(entry.get("options", {}))
    for key in ("fps", "session"):
        if fmt is None or takes_option(fmt, key):  # every reader by suffix takes both
            options[key] = entry[key]
    tracks = read_pose(entry["path"], format=fmt, **options)
    if tracks.session != entry["session"]:
        tracks = tracks.replace(session=entry["session"])
    if entry.get("join_tracks") and tracks.n_animals > 1:
        tracks, _ = join_track_pieces(tracks)
    if entry["px_per_unit"] is not None:
        tracks = calibrate(tracks, entry["px_per_unit"], entry["units"])
    return tracks.replace(meta=entry["meta"])


# Frames as labelled (after any resampling to a common frame rate): the rows of labels.csv per
# session and animal. ``fps`` and ``n_frames`` stay as read from the file.
LABELLED_FPS = "labelled_fps"
LABELLED_FRAMES = "n_labelled_frames"
RECORDED_COLUMNS = (
    "session", "source", "fps", "n_frames", LABELLED_FPS, LABELLED_FRAMES, "duration_s",
    "n_animals", "units", "first_frame", "track_joins", "format", "reader_options",
)  # fmt: skip
"""Columns of ``sessions.csv`` that a run records about every session (beside the manifest's
own columns): facts of reading, never a grouping of the study."""


def session_row(entry: dict[str, Any], tracks: PoseTracks) -> dict[str, Any]:
    """The sessions-table row of one session (``fps`` and ``n_frames`` as read from its file)."""
    return {
        **entry["meta"],
        "session": tracks.session,
        "source": entry["path"],
        "fps": tracks.fps,
        "n_frames": tracks.n_frames,
        "duration_s": tracks.duration_s,
        "n_animals": tracks.n_animals,
        "units": tracks.units,
        "first_frame": int(tracks.meta.get("first_frame", 0) or 0),
        "track_joins": json.dumps(list(tracks.meta.get("track_joins", []))),
        "format": entry.get("format") or "",
        "reader_options": json.dumps(entry.get("options") or {}, sort_keys=True),
    }


def sessions_table(rows: Sequence[dict[str, Any]]) -> pd.DataFrame:
    """Rows of :func:`session_row` as a table, the fixed columns first (the labelled frame
    rate and count, when the rows have them, beside the ones read)."""
    frame = pd.DataFrame.from_records(list(rows))
    labelled = [c for c in (LABELLED_FPS, LABELLED_FRAMES) if c in frame.columns]
    front = ["session", "source", "fps", "n_frames", *labelled, "duration_s", "n_animals", "units"]
    return frame[front + [c for c in frame.columns if c not in front]]


def labelled_frames(table: pd.DataFrame) -> np.ndarray:
    """Frames labelled per session (rows of the labels per animal), in ``table``'s order.

    ``table``: a sessions table. Tables written before the labelled count was recorded give
    ``n_frames`` (the count read, the same unless the sessions were resampled).
    """
    column = LABELLED_FRAMES if LABELLED_FRAMES in table.columns else "n_frames"
    return pd.to_numeric(table[column]).to_numpy(np.int64)


def read_sessions(
    inputs: Sequence[str | Path] | str | Path | None,
    manifest: str | Path | pd.DataFrame | None = None,
    fps: float | None = None,
    progress: bool = True,
    format: str | None = None,
    reader_options: Mapping[str, Any] | None = None,
) -> tuple[list[PoseTracks], pd.DataFrame]:
    """Read pose files (or the manifest's paths) with per-session fps and calibration.

    Returns the tracks and a sessions table (one row per session: ``session, source, fps,
    n_frames, duration_s, n_animals, units`` and every manifest column).
    """
    plan = plan_sessions(inputs, manifest, fps, format, reader_options)
    sessions = [
        read_planned(e) for e in tqdm(plan, desc="reading", unit="session", disable=not progress)
    ]
    sessions = match_keypoint_order(sessions)
    check_same_body_plan(sessions)
    return sessions, sessions_table(
        [session_row(e, t) for e, t in zip(plan, sessions, strict=True)]
    )


def _filled(value: Any) -> bool:
    return not (value is None or value == "" or (isinstance(value, float) and np.isnan(value)))


def _row_value(row: Any, column: str, default: Any) -> Any:
    if row is None or column not in row.index or not _filled(row[column]):
        return default
    return row[column]


def check_readers_portable(plan: Sequence[dict[str, Any]]) -> None:
    """Refuse, before any work, a reader that worker processes could not find."""
    for entry in plan:
        ref = entry.get("reader") or {}
        if ref and not ref.get("importable", True):
            raise InputError(
                f"the reader {ref['format']!r} was registered at run time from code that worker "
                f"processes cannot import ({ref.get('target')}); run with jobs=1, "
                "move the reader into an importable module, or declare it in the "
                "'ethoscribe.readers' entry-point group of a package"
            )


def discovery_cleaning(
    cleaning: CleanParams | Mapping[str, Any] | None, min_confidence: float | None = None
) -> CleanParams:
    """The cleaning settings of a batch run: ``cleaning`` over the defaults, swap pairs "auto"
    unless given, ``min_confidence`` (when not None) over both."""
    if isinstance(cleaning, CleanParams):
        params = cleaning.to_dict()
    elif cleaning is None or isinstance(cleaning, Mapping):
        params = {"swap_pairs": "auto", **dict(cleaning or {})}
    else:
        raise TypeError(
            f"cleaning must be a CleanParams, a dict of its fields or None; got "
            f"{type(cleaning).__name__}"
        )
    if min_confidence is not None:
        params["min_confidence"] = min_confidence
    return CleanParams.from_dict(params)


def cleaning_summary(
    settings: Mapping[str, Any], used: Sequence[Any], table: pd.DataFrame
) -> dict[str, Any]:
    """The cleaning settings asked for and the values used (one value when every session used
    the same, else one per session), for ``summary.json``."""
    per_session = [u for u in used if isinstance(u, dict)]
    sessions = [str(s) for s in table["session"]]
    values: dict[str, Any] = {}
    for key in dict.fromkeys(k for u in per_session for k in u):
        seen = [u.get(key) for u in per_session]
        if all(v == seen[0] for v in seen):
            values[key] = seen[0]
        else:
            values[key] = dict(zip(sessions, seen, strict=False))
    pairs = values.get("swap_pairs_used")
    return {
        "settings": dict(settings),
        "used": values,
        "swap_pairs_used": pairs,
        "swap_pairs_source": "automatic (from keypoint names)"
        if settings.get("swap_pairs") == "auto"
        else "given",
    }


def reading_summary(plan: Sequence[dict[str, Any]]) -> dict[str, Any]:
    """Reader and reader options of a run, for ``summary.json``."""
    formats = sorted({str(e.get("format")) for e in plan})
    options = [e.get("options", {}) for e in plan]
    return {
        "formats": formats,
        "options": options[0] if all(o == options[0] for o in options) else options,
    }
