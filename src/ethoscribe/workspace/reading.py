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
    rows = {}
    if table is not None:
        rows = {str(r["session"]): r for _, r in table.iterrows()}
    sessions, records = [], []
    for path in tqdm(files, desc="reading", unit="session", disable=not progress):
        name = Path(path).stem
        row = rows.get(name)
        if table is not None and row is None and inputs:
            raise InputError(
                f"{path}: session '{name}' is not in the manifest {manifest}; add a row for it "
                "(the session column must equal the file name without its suffix)"
            )
        session_fps = _row_value(row, "fps", fps)
        tracks = read_pose(path, fps=session_fps, session=name)
        px = _row_value(row, "px_per_unit", None)
        if px is not None:
            tracks = calibrate(tracks, float(px), str(_row_value(row, "units", "mm")))
        extra = (
            {} if row is None else {k: v for k, v in row.items() if k not in ("session", "path")}
        )
        tracks = tracks.replace(meta={k: v for k, v in extra.items() if pd.notna(v)})
        sessions.append(tracks)
        records.append(
            {
                **{k: v for k, v in extra.items()},
                "session": tracks.session,
                "source": str(path),
                "fps": tracks.fps,
                "n_frames": tracks.n_frames,
                "duration_s": tracks.duration_s,
                "n_animals": tracks.n_animals,
                "units": tracks.units,
            }
        )
    check_same_body_plan(sessions)
    names = [s.session for s in sessions]
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise InputError(f"several files give the same session name {dup}; rename the files")
    front = ["session", "source", "fps", "n_frames", "duration_s", "n_animals", "units"]
    frame = pd.DataFrame.from_records(records)
    return sessions, frame[front + [c for c in frame.columns if c not in front]]


def _filled(value: Any) -> bool:
    return not (value is None or value == "" or (isinstance(value, float) and np.isnan(value)))


def _row_value(row: Any, column: str, default: Any) -> Any:
    if row is None or column not in row.index or not _filled(row[column]):
        return default
    return row[column]
