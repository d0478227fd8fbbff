"""An expert's coding of behaviour, read from CSV or Parquet and checked against the sessions.

Two layouts are read (the columns decide which; other columns are ignored):

- **per frame**: ``session, frame, behaviour`` (optional ``animal``, ``time_s``, ``fps``);
  frames are 0-based as in the pose files; or ``session, time_s, behaviour`` (frame times).
  With an ``fps`` column other than the session's (a video coded at another rate) each of the
  session's frames takes the behaviour coded at the time it starts.
- **bouts**: ``session, behaviour, start_s, stop_s`` (optional ``animal``, ``fps``); a bout
  covers the frames ``round(start_s * fps)`` up to, not including, ``round(stop_s * fps)``.
- **bouts in frames**: ``session, behaviour, start_frame, stop_frame`` (optional ``animal``),
  the frames ``start_frame`` up to, not including, ``stop_frame`` (as in ``bouts.csv``).

Rows of sessions the workspace does not hold are left out with a warning naming them (a file
of none of its sessions, a blank session or a name that differs from a workspace session's only
in case or leading zeros is refused). ``behavior`` is read as ``behaviour``. Behaviour names
that differ only in case or spacing (``Grooming``, ``grooming ``) are one behaviour, named by
its most used spelling; a warning lists them.

Time the file does not cover, and rows whose behaviour is blank, are *not coded*: they are left
out of every comparison and never become a behaviour of their own. Problems name the file and
the row (the line of a CSV file, counting the header as line 1; the row number of a Parquet
file, counting from 1) and say how to fix them.
"""

from __future__ import annotations

import os
import re
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ethoscribe.checks import name_key
from ethoscribe.errors import InputError, InputWarning, listed
from ethoscribe.io._tables import rename_hints, similar_columns

FRAME_COLUMNS = ("session", "frame", "behaviour")
TIME_COLUMNS = ("session", "time_s", "behaviour")
BOUT_COLUMNS = ("session", "behaviour", "start_s", "stop_s")
FRAME_BOUT_COLUMNS = ("session", "behaviour", "start_frame", "stop_frame")
CODED_COLUMNS = ["session", "animal", "frame", "behaviour"]


@dataclass(frozen=True)
class CodedSession:
    """What the coding is checked against: a session's frame rate, length and animals."""

    fps: float
    n_frames: int
    animals: tuple[str, ...] = ()


def read_expert_coding(
    path: str | os.PathLike[str], sessions: Mapping[str, CodedSession]
) -> pd.DataFrame:
    """Read an expert's coding and return one row per coded frame.

    Parameters
    ----------
    path : CSV or Parquet file, per frame or as bouts (see the module docstring)
    sessions : ``session name -> CodedSession``; every session of the file must be one of them

    Returns
    -------
    DataFrame ``session, animal, frame, behaviour``, sorted, one row per coded frame. ``animal``
    comes from the file, or is the session's only animal when the file has no such column.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> f = pathlib.Path(tempfile.mkdtemp()) / "coding.csv"
    >>> _ = f.write_text("session,behaviour,start_s,stop_s\\ns1,rest,0,0.1\\n")
    >>> read_expert_coding(f, {"s1": CodedSession(30.0, 300, ("animal0",))})["frame"].tolist()
    [0, 1, 2]
    """
    path = Path(path)
    table = _read(path)
    if "behaviour" not in table.columns and "behavior" in table.columns:
        table = table.rename(columns={"behavior": "behaviour"})
    line0 = 2 if path.suffix.lower() != ".parquet" else 1
    table = _workspace_sessions(path, table, sessions)
    if "behaviour" in table.columns:
        table["behaviour"] = _one_spelling(path, _text(table, "behaviour"))
    if set(FRAME_COLUMNS) <= set(table.columns) or set(TIME_COLUMNS) <= set(table.columns):
        return _per_frame(path, table, sessions, line0)
    if set(BOUT_COLUMNS) <= set(table.columns):
        return _bouts(path, table, sessions, line0, "s")
    if set(FRAME_BOUT_COLUMNS) <= set(table.columns):
        return _bouts(path, table, sessions, line0, "frame")
    msg = (
        f"{path}: an expert coding needs the columns {', '.join(FRAME_COLUMNS)} (one row per "
        f"frame) or {', '.join(BOUT_COLUMNS)} (one row per bout; or start_frame and "
        f"stop_frame for bouts in frames); found {list(table.columns)}."
    )
    wanted = dict.fromkeys([*FRAME_COLUMNS, *BOUT_COLUMNS, *FRAME_BOUT_COLUMNS, "animal"])
    hints = rename_hints(similar_columns(table.columns, list(wanted)))
    raise InputError(msg + hints + _layout_hint(table.columns))


def _layout_hint(columns: Sequence[object]) -> str:
    """What a coding's columns look like when they match no layout, and the fix."""
    found = {str(c).strip().lower() for c in columns}
    if {"keypoint", "x", "y"} <= found:
        return " This looks like a pose table, not an expert's coding."
    if "end_frame" in found:
        return (
            " If 'end_frame' is the first frame after each bout, rename it 'stop_frame'; if it "
            "is the bout's last frame, add 1 to it first."
        )
    if found & {"start", "stop", "end", "onset", "offset", "time", "t"}:
        return (
            " Name times in seconds start_s and stop_s (bouts), frame numbers frame (one row "
            "per frame) or start_frame and stop_frame (bouts)."
        )
    return ""


def _one_spelling(path: Path, behaviour: pd.Series) -> pd.Series:
    """Behaviour names that differ only in case or spacing, written one way (the spelling
    used on most rows; ties: the first in sorted order); a warning lists what was joined."""
    named = behaviour[behaviour != ""]
    if named.empty:
        return behaviour
    counts = named.value_counts()
    keys = pd.Series([name_key(v) for v in counts.index], index=counts.index)
    chosen, notes = {}, []
    for _, spellings in keys.groupby(keys, sort=True):
        if len(spellings) < 2:
            continue
        order = sorted(spellings.index, key=lambda v: (-int(counts[v]), v))
        chosen.update(dict.fromkeys(order[1:], order[0]))
        notes.append(" ".join(f"{v!r}" for v in order) + f" -> {order[0]!r}")
    if not chosen:
        return behaviour
    msg = (
        f"{path}: behaviour names that differ only in case or spaces are read as one behaviour "
        f"({'; '.join(notes)}); write each behaviour one way in the file to silence this"
    )
    warnings.warn(msg, InputWarning, stacklevel=3)
    return behaviour.replace(chosen)


def _read(path: Path) -> pd.DataFrame:
    if not path.is_file():
        raise InputError(f"{path}: no such expert coding file")
    suffix = path.suffix.lower()
    try:
        if suffix == ".parquet":
            table = pd.read_parquet(path)
        elif suffix in (".csv", ".txt", ".tsv"):
            table = pd.read_csv(path, sep="\t" if suffix == ".tsv" else ",", dtype=str)
        else:
            raise InputError(f"{path}: an expert coding is read from .csv or .parquet files")
    except InputError:
        raise
    except (OSError, ValueError) as exc:
        raise InputError(f"{path}: cannot be read as a table ({exc})") from None
    table.columns = [str(c).strip() for c in table.columns]
    return table.reset_index(drop=True)


def _text(table: pd.DataFrame, column: str) -> pd.Series:
    values = table[column]
    blank = values.isna()
    return values.astype(str).str.strip().where(~blank, "")


def _at(path: Path, table: pd.DataFrame, i: int, line0: int) -> str:
    """``FILE: row N`` for the table's ``i``-th row (rows left out keep their numbers)."""
    return f"{path}: row {int(table.index[i]) + line0}"


def _session_key(name: str) -> str:
    """A session name as a typo would leave it: case, outer spaces and leading zeros ignored."""
    return re.sub(r"\d+", lambda m: str(int(m.group())), name.strip().casefold())


def _workspace_sessions(
    path: Path, table: pd.DataFrame, sessions: Mapping[str, CodedSession]
) -> pd.DataFrame:
    """The rows of the workspace's sessions; rows of other sessions are left out, with a
    warning naming them, when the file also codes sessions of the workspace and no left-out
    name looks like a workspace session's (a typo: then the row is refused, naming both)."""
    if "session" not in table.columns:
        return table
    names = _text(table, "session")
    known = names.isin(list(sessions)).to_numpy()
    if known.all() or not known.any():
        return table  # all known, or none: refused row by row below
    others = sorted(set(names[~known]))
    keys = {_session_key(k) for k in sessions}
    if "" in others or any(_session_key(o) in keys for o in others):
        return table  # a blank or mistyped name: refused with its row
    msg = (
        f"{path}: sessions not in the workspace are left out ({listed([repr(o) for o in others])}"
        f"; {int((~known).sum())} rows); {len(set(names[known]))} coded sessions are used"
    )
    warnings.warn(msg, InputWarning, stacklevel=3)
    return table[known]


def _numbers(path: Path, table: pd.DataFrame, column: str, line0: int) -> np.ndarray:
    values = pd.to_numeric(table[column], errors="coerce").to_numpy(float)
    given = table[column].notna().to_numpy() & (_text(table, column) != "").to_numpy()
    bad = np.flatnonzero(given & ~np.isfinite(values)) if len(values) else []
    if len(bad):
        i = int(bad[0])
        found = table[column].iloc[i]
        msg = f"{_at(path, table, i, line0)}: column '{column}' must be a number, found {found!r}"
        raise InputError(msg)
    return values


def _sessions_and_animals(
    path: Path, table: pd.DataFrame, sessions: Mapping[str, CodedSession], line0: int
) -> tuple[pd.Series, pd.Series]:
    names = _text(table, "session")
    unknown = ~names.isin(list(sessions))
    if unknown.any():
        i = int(np.flatnonzero(unknown.to_numpy())[0])
        name = names.iloc[i]
        alike = [k for k in sorted(sessions) if _session_key(k) == _session_key(name)]
        fix = (
            f"did you mean {alike[0]!r}? Write the workspace's name"
            if alike
            else "fill in the session"
            if name == ""
            else "fix the name or code only the workspace's sessions"
        )
        msg = (
            f"{_at(path, table, i, line0)}: session {name!r} is not in the workspace "
            f"(its sessions: {listed(sorted(sessions), 8)}); {fix}"
        )
        raise InputError(msg)
    if "animal" in table.columns:
        animals = _text(table, "animal")
        for i, (s, a) in enumerate(zip(names, animals, strict=True)):
            known_animals = sessions[s].animals
            if known_animals and a not in known_animals:
                fix = (
                    "; a session of one animal needs no 'animal' column: leave it out"
                    if len(known_animals) == 1
                    else "; use these names (as in labels.csv)"
                )
                msg = (
                    f"{_at(path, table, i, line0)}: animal {a!r} is not in session {s!r} (its "
                    f"animals: {', '.join(known_animals)}){fix}"
                )
                raise InputError(msg)
        return names, animals
    animals = []
    for i, s in enumerate(names):
        known_animals = sessions[s].animals
        if len(known_animals) > 1:
            msg = (
                f"{_at(path, table, i, line0)}: session {s!r} has several animals "
                f"({', '.join(known_animals)}); add an 'animal' column saying whose behaviour "
                "each row codes"
            )
            raise InputError(msg)
        animals.append(known_animals[0] if known_animals else "")
    return names, pd.Series(animals, index=table.index, dtype=object)


def _check_fps(
    path: Path, table: pd.DataFrame, names: pd.Series, sessions: Mapping, line0: int
) -> None:
    if "fps" not in table.columns:
        return
    fps = _numbers(path, table, "fps", line0)
    expected = np.array([sessions[s].fps for s in names], dtype=float)
    bad = np.flatnonzero(np.isfinite(fps) & (np.abs(fps - expected) > 1e-6 * expected))
    if len(bad):
        i = int(bad[0])
        msg = (
            f"{_at(path, table, i, line0)}: coded at {fps[i]:g} fps but session {names.iloc[i]!r} "
            f"runs at {expected[i]:g} fps; convert the coding to the session's frame rate"
        )
        raise InputError(msg)


def _per_frame(
    path: Path, table: pd.DataFrame, sessions: Mapping[str, CodedSession], line0: int
) -> pd.DataFrame:
    names, animals = _sessions_and_animals(path, table, sessions, line0)
    fps = np.array([sessions[s].fps for s in names], dtype=float)
    n_frames = np.array([sessions[s].n_frames for s in names], dtype=np.int64)
    rate = fps.copy()  # the rate the coding's frames count at: its fps column, else the session's
    if "fps" in table.columns:
        given = _numbers(path, table, "fps", line0)
        bad = np.flatnonzero(np.isfinite(given) & (given <= 0))
        if len(bad):
            i = int(bad[0])
            raise InputError(
                f"{_at(path, table, i, line0)}: fps must be above 0, found {given[i]:g}"
            )
        rate = np.where(np.isfinite(given), given, fps)
        rate = np.where(np.abs(rate - fps) <= 1e-6 * fps, fps, rate)  # "30" for 30.0 fps
    t = _numbers(path, table, "time_s", line0) if "time_s" in table.columns else None
    if "frame" in table.columns:
        frame = _numbers(path, table, "frame", line0)
        bad = np.flatnonzero(~np.isfinite(frame) | (frame != np.round(frame)))
        what = "'frame' must be a whole frame number"
    else:  # times only: each must fall on a frame of the coding's rate
        frame = np.round(t * rate)
        bad = np.flatnonzero(~np.isfinite(t) | (np.abs(t * rate - frame) > 0.25))
        what = "'time_s' must fall on a frame (frame / fps seconds; add an fps column)"
    if len(bad):
        i = int(bad[0])
        found = table["frame" if "frame" in table.columns else "time_s"].iloc[i]
        msg = f"{_at(path, table, i, line0)}: {what}, found {found!r}"
        raise InputError(msg)
    frame = frame.astype(np.int64)
    inside = np.floor(n_frames * rate / fps + 1e-9).astype(np.int64)  # frames at the coded rate
    bad = np.flatnonzero((frame < 0) | (frame >= inside))
    if len(bad):
        i = int(bad[0])
        msg = (
            f"{_at(path, table, i, line0)}: frame {frame[i]} is outside session {names.iloc[i]!r} "
            f"(frames 0 to {inside[i] - 1} at {rate[i]:g} fps); was it coded at another frame "
            "rate (say which in an fps column), or from frame 1?"
        )
        raise InputError(msg)
    if t is not None and "frame" in table.columns:
        bad = np.flatnonzero(np.isfinite(t) & (np.abs(t - frame / rate) > 0.5 / rate))
        if len(bad):
            i = int(bad[0])
            msg = (
                f"{_at(path, table, i, line0)}: time_s {t[i]:g} does not match frame {frame[i]} at "
                f"{rate[i]:g} fps ({frame[i] / rate[i]:g} s); the coding was made at another "
                "frame rate: give it in an fps column"
            )
            raise InputError(msg)
    coded = pd.DataFrame(
        {
            "session": names,
            "animal": animals,
            "frame": frame,
            "behaviour": _text(table, "behaviour"),
            "rate": rate,
        }
    )
    coded["row"] = table.index.to_numpy() + line0
    dup = coded.duplicated(["session", "animal", "frame"], keep=False)
    if dup.any():
        rows = coded.loc[dup].sort_values(["session", "animal", "frame", "row"])
        first = rows.iloc[0]
        other = rows.iloc[1]
        msg = (
            f"{path}: rows {first['row']} and {other['row']}: frame {first['frame']} of session "
            f"{first['session']!r} is coded twice; keep one row per frame"
        )
        raise InputError(msg)
    coded = coded[coded["behaviour"] != ""]
    if (coded["rate"] == np.array([sessions[s].fps for s in coded["session"]])).all():
        return _finish(coded)
    parts = []
    for (session, animal, r), g in coded.groupby(["session", "animal", "rate"], sort=False):
        frames, behaviour = frames_at_rate(
            g["frame"].to_numpy(np.int64), g["behaviour"].to_numpy(object), r,
            sessions[session].fps,
        )  # fmt: skip
        keep = frames < sessions[session].n_frames
        parts.append(
            pd.DataFrame(
                {
                    "session": session,
                    "animal": animal,
                    "frame": frames[keep],
                    "behaviour": behaviour[keep],
                }
            )
        )
    return _finish(pd.concat(parts, ignore_index=True))


def frames_at_rate(
    frames: np.ndarray, behaviour: np.ndarray, from_fps: float, to_fps: float
) -> tuple[np.ndarray, np.ndarray]:
    """A per-frame coding at ``from_fps`` on the frames of ``to_fps``.

    Frame ``g`` at ``to_fps`` starts at ``g / to_fps`` s, inside the coded frame
    ``floor(g * from_fps / to_fps)``, and takes its behaviour; frames whose covering frame is
    not coded are left out.

    Examples
    --------
    >>> f, b = frames_at_rate(np.array([0, 1, 2]), np.array(list("aab"), object), 15.0, 30.0)
    >>> f.tolist(), b.tolist()
    ([0, 1, 2, 3, 4, 5], ['a', 'a', 'a', 'a', 'b', 'b'])
    """
    ratio = from_fps / to_fps
    if abs(ratio - 1) < 1e-9 or not len(frames):
        return np.asarray(frames, dtype=np.int64), np.asarray(behaviour, dtype=object)
    src = np.asarray(frames, dtype=np.int64)
    first = int(np.ceil(src.min() / ratio - 1e-9))
    out = np.arange(first, int(np.floor((src.max() + 1) / ratio - 1e-9)) + 1, dtype=np.int64)
    covering = np.floor(out * ratio + 1e-9).astype(np.int64)
    found = pd.Series(np.asarray(behaviour, dtype=object), index=src).reindex(covering)
    keep = found.notna().to_numpy()
    return out[keep], found.to_numpy(object)[keep]


def _bouts(
    path: Path,
    table: pd.DataFrame,
    sessions: Mapping[str, CodedSession],
    line0: int,
    unit: str,
) -> pd.DataFrame:
    """Bouts with start and stop in seconds (``unit="s"``) or frame numbers (``"frame"``)."""
    names, animals = _sessions_and_animals(path, table, sessions, line0)
    columns = ("start_s", "stop_s") if unit == "s" else ("start_frame", "stop_frame")
    if unit == "s":
        _check_fps(path, table, names, sessions, line0)
    start, stop = (_numbers(path, table, c, line0) for c in columns)
    fps = np.array([sessions[s].fps for s in names], dtype=float)
    n_frames = np.array([sessions[s].n_frames for s in names], dtype=np.int64)
    behaviour = _text(table, "behaviour")
    first, last = columns
    for i in range(len(table)):
        where = f"{_at(path, table, i, line0)}"
        if not (np.isfinite(start[i]) and np.isfinite(stop[i])):
            raise InputError(f"{where}: a bout needs both {first} and {last}")
        if stop[i] <= start[i]:
            raise InputError(f"{where}: {last} {stop[i]:g} is not after {first} {start[i]:g}")
        if unit == "frame":
            _whole_frames(where, start[i], stop[i], names.iloc[i], n_frames[i], fps[i])
            continue
        duration = n_frames[i] / fps[i]
        if start[i] < -0.5 / fps[i] or stop[i] > duration + 0.5 / fps[i]:
            msg = (
                f"{where}: bout {start[i]:g}-{stop[i]:g} s is outside session "
                f"{names.iloc[i]!r} (0-{duration:g} s at {fps[i]:g} fps); was it coded at "
                "another frame rate, or on another recording?"
            )
            raise InputError(msg)
    if unit == "s":
        start, stop = start * fps, stop * fps
    bouts = pd.DataFrame(
        {
            "session": names,
            "animal": animals,
            "behaviour": behaviour,
            "start": np.clip(np.round(start), 0, n_frames).astype(np.int64),
            "stop": np.clip(np.round(stop), 0, n_frames).astype(np.int64),
            "row": table.index.to_numpy() + line0,
        }
    )
    bouts = bouts.sort_values(["session", "animal", "start", "row"], kind="stable")
    same = (bouts["session"] == bouts["session"].shift()) & (
        bouts["animal"] == bouts["animal"].shift()
    )
    overlap = same & (bouts["start"] < bouts["stop"].shift())
    if overlap.any():
        j = int(np.flatnonzero(overlap.to_numpy())[0])
        a, b = bouts.iloc[j - 1], bouts.iloc[j]
        msg = (
            f"{path}: rows {a['row']} and {b['row']} overlap in session {a['session']!r} "
            f"({a['behaviour']} until frame {a['stop']}, {b['behaviour']} from frame "
            f"{b['start']}); one frame has one behaviour: shorten one of the bouts"
        )
        raise InputError(msg)
    none = (bouts["behaviour"] != "") & (bouts["stop"] <= bouts["start"])
    if none.any():  # a bout shorter than a frame starts and stops on the same frame
        rows = listed(map(str, bouts.loc[none, "row"].sort_values()), 10)
        warnings.warn(
            f"{path}: {int(none.sum())} coded bout(s) cover no frame once their start and stop "
            f"are rounded to the nearest frame (shorter than a frame), and are left out: rows "
            f"{rows}",
            InputWarning,
            stacklevel=3,
        )
    bouts = bouts[(bouts["behaviour"] != "") & (bouts["stop"] > bouts["start"])]
    lengths = (bouts["stop"] - bouts["start"]).to_numpy()
    coded = pd.DataFrame(
        {
            "session": np.repeat(bouts["session"].to_numpy(object), lengths),
            "animal": np.repeat(bouts["animal"].to_numpy(object), lengths),
            "frame": _ranges(bouts["start"].to_numpy(), lengths),
            "behaviour": np.repeat(bouts["behaviour"].to_numpy(object), lengths),
        }
    )
    return _finish(coded)


def _whole_frames(
    where: str, start: float, stop: float, session: str, n_frames: int, fps: float
) -> None:
    if start != round(start) or stop != round(stop):
        msg = f"{where}: start_frame and stop_frame must be whole numbers ({start:g}, {stop:g})"
        raise InputError(msg)
    if start < 0 or stop > n_frames:
        msg = (
            f"{where}: bout of frames {start:g}-{stop:g} is outside session {session!r} (frames 0 "
            f"to {n_frames - 1} at {fps:g} fps; stop_frame is the first frame after the bout, up "
            f"to {n_frames}); was it coded at another frame rate, or from frame 1?"
        )
        raise InputError(msg)


def _ranges(starts: np.ndarray, lengths: np.ndarray) -> np.ndarray:
    """Concatenated ``arange(start, start + length)`` for every bout."""
    if not len(lengths):
        return np.zeros(0, dtype=np.int64)
    offsets = np.repeat(starts - np.cumsum(lengths) + lengths, lengths)
    return (np.arange(int(lengths.sum())) + offsets).astype(np.int64)


def _finish(coded: pd.DataFrame) -> pd.DataFrame:
    out = coded[CODED_COLUMNS].sort_values(["session", "animal", "frame"], kind="stable")
    return out.reset_index(drop=True).astype(
        {"session": str, "animal": str, "behaviour": str, "frame": np.int64}
    )
