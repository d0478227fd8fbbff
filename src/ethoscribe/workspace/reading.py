"""Reading a study: pose files or a manifest, with per-session fps, calibration and metadata."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from tqdm.auto import tqdm

from ethoscribe.clean import calibrate
from ethoscribe.errors import InputError
from ethoscribe.io import pose_files, read_manifest, read_pose
from ethoscribe.pose import PoseTracks, check_same_body_plan


def plan_sessions(
    inputs: Sequence[str | Path],
    manifest: str | Path | None = None,
    fps: float | None = None,
) -> list[dict[str, Any]]:
    """What to read for each session, without reading it: path, name, fps, calibration, metadata.

    Sessions come from ``inputs`` (files or folders) or, when there are none, from the manifest's
    paths; the manifest gives per-session fps, calibration and columns such as group or subject.
    """
    table = read_manifest(manifest, require_paths=not inputs) if manifest is not None else None
    if inputs:
        # A manifest kept beside the pose files is not a session.
        skip = {Path(manifest).resolve()} if manifest is not None else set()
        files = [f for f in pose_files(list(inputs)) if Path(f).resolve() not in skip]
    elif table is not None:
        files = [Path(p) for p in table["path"]]
    else:
        raise InputError(
            "no pose files given: name files or folders, or a manifest with a path column"
        )
    rows = {} if table is None else {str(r["session"]): r for _, r in table.iterrows()}
    plan = []
    for path in files:
        name = Path(path).stem
        row = rows.get(name)
        if table is not None and row is None and inputs:
            raise InputError(
                f"{path}: session '{name}' is not in the manifest {manifest}; add a row for it "
                "(the session column must equal the file name without its suffix)"
            )
        extra = (
            {}
            if row is None
            else {k: v for k, v in row.items() if k not in ("session", "path") and _filled(v)}
        )
        px = _row_value(row, "px_per_unit", None)
        plan.append(
            {
                "path": str(Path(path).resolve()),
                "session": name,
                "fps": _row_value(row, "fps", fps),
                "px_per_unit": None if px is None else float(px),
                "units": str(_row_value(row, "units", "mm")),
                "meta": extra,
            }
        )
    names = [e["session"] for e in plan]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise InputError(f"several files give the same session name {dup}; rename the files")
    return plan


def read_planned(entry: dict[str, Any]) -> PoseTracks:
    """Read one session of :func:`plan_sessions`, calibrated, with its manifest metadata."""
    tracks = read_pose(entry["path"], fps=entry["fps"], session=entry["session"])
    if entry["px_per_unit"] is not None:
        tracks = calibrate(tracks, entry["px_per_unit"], entry["units"])
    return tracks.replace(meta=entry["meta"])


def session_row(entry: dict[str, Any], tracks: PoseTracks) -> dict[str, Any]:
    """The sessions-table row of one session."""
    return {
        **entry["meta"],
        "session": tracks.session,
        "source": entry["path"],
        "fps": tracks.fps,
        "n_frames": tracks.n_frames,
        "duration_s": tracks.duration_s,
        "n_animals": tracks.n_animals,
        "units": tracks.units,
    }


def sessions_table(rows: Sequence[dict[str, Any]]) -> pd.DataFrame:
    """Rows of :func:`session_row` as a table, the fixed columns first."""
    front = ["session", "source", "fps", "n_frames", "duration_s", "n_animals", "units"]
    frame = pd.DataFrame.from_records(list(rows))
    return frame[front + [c for c in frame.columns if c not in front]]


def read_sessions(
    inputs: Sequence[str | Path],
    manifest: str | Path | None = None,
    fps: float | None = None,
    progress: bool = True,
) -> tuple[list[PoseTracks], pd.DataFrame]:
    """Read pose files (or the manifest's paths) with per-session fps and calibration.

    Returns the tracks and a sessions table (one row per session: ``session, source, fps,
    n_frames, duration_s, n_animals, units`` and every manifest column).
    """
    plan = plan_sessions(inputs, manifest, fps)
    sessions = [
        read_planned(e) for e in tqdm(plan, desc="reading", unit="session", disable=not progress)
    ]
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
