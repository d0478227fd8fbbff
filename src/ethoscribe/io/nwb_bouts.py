"""An ethogram's bouts in NWB files, as a time-intervals table.

NWB keeps labelled stretches of time as ``TimeIntervals`` tables (``start_time``, ``stop_time``
in seconds and columns of one's own). :func:`write_bouts_nwb` puts one session's bouts (the
rows of ``bouts.csv``) into such a table, named ``behaviour_bouts`` by default: into the
session's own NWB file beside its pose tracks (``into=``), or into a new file.
:func:`read_bouts_nwb` reads them back as a bout table. Times are the bouts' ``start_s`` and
``start_s + duration_s``, seconds from the session's first frame, as in ``bouts.csv``.
pynwb is optional: it is imported only when these functions are called.
"""

from __future__ import annotations

import os
import shutil
import uuid
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from ethoscribe.errors import InputError
from ethoscribe.io._atomic import atomic_path
from ethoscribe.io.nwb import _import_nwb, _unreadable

TABLE_NAME = "behaviour_bouts"
_COLUMNS = {
    "motif": ("behaviour (curated motif name) of the bout", str),
    "animal": ("the animal whose bout it is", str),
    "state": ("the model's state id of the bout", np.int64),
    "start_frame": ("first frame of the bout", np.int64),
    "stop_frame": ("first frame after the bout", np.int64),
    "mean_probability": ("mean posterior probability of the label over the bout", np.float64),
    "cut_before": ("the bout starts at an unscored frame or the recording's start", bool),
    "cut_after": ("the bout ends at an unscored frame or the recording's end", bool),
}
_NEEDED = ("session", "animal", "motif", "start_s", "duration_s")


def write_bouts_nwb(
    bouts: pd.DataFrame,
    path: str | os.PathLike[str],
    into: str | os.PathLike[str] | None = None,
    name: str = TABLE_NAME,
) -> Path:
    """Save one session's bouts as a ``TimeIntervals`` table of an NWB file, atomically.

    Parameters
    ----------
    bouts : DataFrame
        Rows of ``bouts.csv`` (``session, animal, motif, start_s, duration_s`` and, when
        present, ``state, start_frame, stop_frame, mean_probability, cut_before, cut_after``)
        of a single session.
    path : the NWB file to write
    into : an existing NWB file (the session's pose tracks) to copy and add the table to;
        ``path`` may be the same file. None: a new file holding only the bouts.
    name : the table's name; a file that already holds a table of that name is refused.

    Examples
    --------
    >>> write_bouts_nwb(bouts[bouts["session"] == "s1"], "s1_bouts.nwb")  # doctest: +SKIP
    """
    pynwb, _ = _import_nwb()
    path = Path(path)
    missing = [c for c in _NEEDED if c not in bouts.columns]
    if missing:
        msg = f"{path}: the bout table lacks the column(s) {missing}; pass rows of bouts.csv"
        raise InputError(msg)
    sessions = sorted(set(bouts["session"].astype(str)))
    if len(sessions) > 1:
        msg = (
            f"{path}: one NWB file holds one session, but the bouts come from {sessions}; "
            "pass bouts[bouts['session'] == NAME] for each"
        )
        raise InputError(msg)
    session = sessions[0] if sessions else ""
    with atomic_path(path) as tmp:
        if into is not None:
            source = Path(into)
            if not source.is_file():
                raise InputError(f"{source}: no such NWB file to add the bouts to")
            shutil.copyfile(source, tmp)
            with pynwb.NWBHDF5IO(str(tmp), "a") as io:
                nwbfile = _read(io, source)
                _check_session(nwbfile, source, session)
                nwbfile.add_time_intervals(_table(pynwb, bouts, name, source, nwbfile))
                io.write(nwbfile)
        else:
            nwbfile = pynwb.NWBFile(
                session_description=f"ethogram bouts of session {session}",
                identifier=str(uuid.uuid4()),
                session_start_time=datetime.now(timezone.utc),
                session_id=session or None,
            )
            nwbfile.add_time_intervals(_table(pynwb, bouts, name, path, nwbfile))
            with pynwb.NWBHDF5IO(str(tmp), "w") as io:
                io.write(nwbfile)
    return path


def read_bouts_nwb(path: str | os.PathLike[str], name: str = TABLE_NAME) -> pd.DataFrame:
    """The bouts that :func:`write_bouts_nwb` saved, as a bout table.

    Returns ``session, animal, motif, start_s, duration_s`` and the optional columns saved,
    one row per bout, in start order (``session`` is the file's ``session_id``).
    """
    pynwb, _ = _import_nwb()
    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: no such NWB file")
    with pynwb.NWBHDF5IO(str(path), "r") as io:
        nwbfile = _read(io, path)
        intervals = nwbfile.intervals or {}
        if name not in intervals:
            found = sorted(intervals)
            msg = f"{path}: no intervals table {name!r} (found {found or 'none'})"
            raise InputError(msg + "; was it written with write_bouts_nwb?")
        table = intervals[name].to_dataframe().reset_index(drop=True)
        session = nwbfile.session_id or ""
    out = pd.DataFrame(
        {
            "session": session,
            "animal": table["animal"].astype(str),
            "motif": table["motif"].astype(str),
            "start_s": table["start_time"].astype(np.float64),
            "duration_s": (table["stop_time"] - table["start_time"]).astype(np.float64),
        }
    )
    for column, (_, dtype) in _COLUMNS.items():
        if column in table.columns and column not in out.columns:
            out[column] = table[column].astype(dtype)
    return out


def _read(io, path: Path):
    try:
        return io.read()
    except (OSError, ValueError, KeyError) as exc:
        raise _unreadable(path, exc) from None


def _check_session(nwbfile, path: Path, session: str) -> None:
    own = nwbfile.session_id
    if own and session and own != session:
        msg = (
            f"{path}: this NWB file is session {own!r} but the bouts are of session "
            f"{session!r}; pass the bouts of {own!r}, or the right file"
        )
        raise InputError(msg)


def _table(pynwb, bouts: pd.DataFrame, name: str, path: Path, nwbfile):
    if nwbfile.intervals is not None and name in nwbfile.intervals:
        msg = f"{path}: already holds an intervals table {name!r}; write to a new file"
        raise InputError(msg + " or give another name")
    table = pynwb.epoch.TimeIntervals(
        name=name, description="behaviour bouts of the ethogram (ethoscribe)"
    )
    columns = [c for c in _COLUMNS if c in bouts.columns]
    for column in columns:
        description, dtype = _COLUMNS[column]
        # typed empty data, so that a session without bouts still gets a readable table
        empty = {"data": np.array([], dtype=dtype)} if bouts.empty else {}
        table.add_column(name=column, description=description, **empty)
    rows = bouts.sort_values("start_s", kind="stable")
    start = rows["start_s"].to_numpy(np.float64)
    stop = start + rows["duration_s"].to_numpy(np.float64)
    values = {c: rows[c].astype(_COLUMNS[c][1]).tolist() for c in columns}
    for i in range(len(rows)):
        table.add_row(
            start_time=float(start[i]),
            stop_time=float(stop[i]),
            **{c: values[c][i] for c in columns},
        )
    return table
