"""The per-frame label table: its columns, shared checks, grouping, and run-length encoding.

Shared by :mod:`ethoscribe.ethogram` (which re-exports the public names) and
:mod:`ethoscribe.transitions`; see the ethogram module for the table layout and the meaning of
``fps`` and ``groups``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import NamedTuple

import numpy as np
import pandas as pd

from ethoscribe.errors import InputError

LABEL_COLUMNS = ("session", "animal", "frame", "time_s", "state", "motif", "probability")
FpsSpec = float | Mapping[str, float] | pd.DataFrame | None
GroupSpec = Mapping[str, str] | pd.DataFrame | None


def check_columns(table: pd.DataFrame, required: Sequence[str], what: str) -> None:
    """Raise InputError naming the missing columns of ``table`` (``what`` names the table)."""
    missing = [c for c in required if c not in table.columns]
    if missing:
        msg = (
            f"{what} is missing column(s) {missing}; it has {list(table.columns)}. "
            f"Expected at least {list(required)}."
        )
        raise InputError(msg)


def with_groups(table: pd.DataFrame, groups: GroupSpec) -> pd.DataFrame:
    """Return ``table`` with a ``group`` column looked up from its ``session`` column (and its
    ``animal`` column, when ``groups`` is a table with one: animals of a session in different
    groups)."""
    if groups is None:
        return table
    if isinstance(groups, pd.DataFrame) and "animal" in groups and "animal" in table:
        keys = groups[["session", "animal", "group"]].astype(str)
        keys = keys.rename(columns={"session": "_s", "animal": "_a"})
        out = table.drop(columns="group", errors="ignore")
        out = out.assign(_s=out["session"].astype(str), _a=out["animal"].astype(str))
        out = out.merge(keys, on=["_s", "_a"], how="left").drop(columns=["_s", "_a"])
        lost = out.loc[out["group"].isna(), ["session", "animal"]].drop_duplicates()
        if len(lost):
            pairs = [f"{s}/{a}" for s, a in lost.astype(str).itertuples(index=False)]
            raise InputError(f"no group given for animal(s) {pairs}; add them to groups")
        return out
    if isinstance(groups, pd.DataFrame):
        check_columns(groups, ("session", "group"), "the groups table")
        groups = dict(zip(groups["session"].astype(str), groups["group"].astype(str), strict=True))
    missing = sorted(set(table["session"].astype(str)) - set(groups))
    if missing:
        raise InputError(f"no group given for session(s) {missing}; add them to groups")
    out = table.copy()
    out["group"] = out["session"].astype(str).map(dict(groups)).astype(str)
    return out


def grouping_keys(table: pd.DataFrame, by: Sequence[str], what: str) -> list[str]:
    """``by`` as a list of columns of ``table``; InputError (naming ``what``) if one is absent."""
    by = [by] if isinstance(by, str) else list(by)
    if "group" in by and "group" not in table.columns:
        raise InputError("grouping by 'group' needs groups={session: group, ...}")
    check_columns(table, by, f"{what} (grouping by {by})")
    return by


def grouped_sum(table: pd.DataFrame, keys: list[str], columns: list[str]) -> pd.DataFrame:
    """Sums of ``columns`` per ``keys`` (one row of totals when ``keys`` is empty)."""
    if not keys:
        return table[columns].sum().to_frame().T
    return table.groupby(keys, sort=True, observed=True)[columns].sum().reset_index()


class Runs(NamedTuple):
    """Run-length view of a label table sorted by recording then frame.

    A run is a maximal stretch of contiguous rows of one recording (block) with one motif string
    and one validity; bouts are the valid runs.
    """

    start: np.ndarray  # (n_runs,) first row of each run
    stop: np.ndarray  # (n_runs,) one past the last row
    block: np.ndarray  # (n_runs,) recording index into ``keys``
    code: np.ndarray  # (n_runs,) index into ``motifs``; -1 for invalid runs
    linked_before: np.ndarray  # (n_runs,) previous row is contiguous, valid, same recording
    linked_after: np.ndarray  # (n_runs,)
    keys: pd.DataFrame  # (n_blocks, 2) session, animal
    motifs: np.ndarray  # (n_motifs,) sorted names
    fps: np.ndarray  # (n_blocks,)
    frame: np.ndarray  # (n,) the sorted per-row columns
    time: np.ndarray
    state: np.ndarray
    prob: np.ndarray


def _changes(column: pd.Series) -> np.ndarray:
    """(n - 1,) True where a row differs from the one before (fast on Arrow strings)."""
    if isinstance(column.dtype, pd.CategoricalDtype):
        codes = column.cat.codes.to_numpy()
        return codes[1:] != codes[:-1]
    values = column.array
    diff = values[1:] != values[:-1]
    if hasattr(diff, "to_numpy"):
        return diff.to_numpy(dtype=bool, na_value=True)
    return np.asarray(diff, dtype=bool)


def _frame_rates(fps: FpsSpec, fr_first, fr_last, t_first, t_last, keys) -> np.ndarray:
    sessions = keys["session"].to_numpy(dtype=object)
    if fps is None:
        with np.errstate(divide="ignore", invalid="ignore"):
            rate = (fr_last - fr_first) / (t_last - t_first)
        bad = ~(np.isfinite(rate) & (rate > 0))
        if bad.any():
            msg = (
                f"cannot infer the frame rate of session '{sessions[bad][0]}' from time_s and "
                "frame (a single frame, or time_s not increasing); pass fps=... explicitly"
            )
            raise InputError(msg)
        return rate
    if isinstance(fps, pd.DataFrame):
        check_columns(fps, ("session", "fps"), "the sessions table")
        fps = dict(zip(fps["session"].astype(str), fps["fps"], strict=True))
    if isinstance(fps, Mapping):
        missing = sorted({s for s in sessions if s not in fps})
        if missing:
            msg = f"no frame rate given for session(s) {missing}; add them to fps"
            raise InputError(msg)
        rate = np.array([float(fps[s]) for s in sessions])
    else:
        rate = np.full(len(sessions), float(fps))
    if not (np.isfinite(rate) & (rate > 0)).all():
        raise InputError(f"fps must be positive and finite; got {sorted(set(rate.tolist()))}")
    return rate


def _numbers(labels: pd.DataFrame, name: str, dtype: type) -> np.ndarray:
    try:
        return labels[name].to_numpy(dtype=dtype)
    except (TypeError, ValueError):
        kind = "integers without gaps (NaN)" if dtype is np.int64 else "numbers"
        raise InputError(f"column {name!r} of the label table must hold {kind}") from None


def _sort_order(key: np.ndarray, size: int) -> np.ndarray:
    """Stable order of int keys in ``[0, size)``: a scatter when the range is dense and keys are
    unique (O(n)), else a stable argsort."""
    if size <= 4 * len(key):
        slot = np.full(size, -1, dtype=np.int64)
        slot[key] = np.arange(len(key))
        order = slot[slot >= 0]
        if len(order) == len(key):
            return order
    return np.argsort(key, kind="stable")


def _unsorted(labels: pd.DataFrame) -> tuple:
    """Sort rows by (session, animal, frame) working on integer codes (strings never move)."""
    cs, us = pd.factorize(labels["session"], sort=True)
    ca, ua = pd.factorize(labels["animal"], sort=True)
    frame = labels["frame"].to_numpy(np.int64)
    low, span = frame.min(), frame.max() - frame.min() + 1
    pair = cs * len(ua) + ca
    order = _sort_order(pair * span + (frame - low), len(us) * len(ua) * int(span))
    pair, frame = pair[order], frame[order]
    new_block = pair[1:] != pair[:-1]
    heads = np.flatnonzero(np.r_[True, new_block])
    head = pair[heads]
    keys = pd.DataFrame({"session": us[head // len(ua)], "animal": ua[head % len(ua)]})
    cm, um = pd.factorize(labels["motif"])
    cm = cm[order]
    names = np.asarray(um, dtype=object)

    def names_at(rows: np.ndarray) -> pd.Series:
        return pd.Series(np.where(cm[rows] >= 0, names[cm[rows]], None))

    state = _numbers(labels, "state", np.int64)[order]
    motif_change = cm[1:] != cm[:-1]
    return frame, new_block, heads, keys.astype(str), state, motif_change, names_at, order


def prepare_runs(labels: pd.DataFrame, fps: FpsSpec) -> Runs:
    """Validate a label table and run-length encode it; only unsorted input pays for a sort."""
    check_columns(labels, LABEL_COLUMNS, "the label table")
    if len(labels) == 0:
        raise InputError("the label table has no rows; expected one row per frame and animal")
    if labels["session"].isna().any() or labels["animal"].isna().any():
        raise InputError("the label table has missing session or animal names; fill them in")
    frame = _numbers(labels, "frame", np.int64)
    new_block = _changes(labels["session"]) | _changes(labels["animal"])
    heads = np.flatnonzero(np.r_[True, new_block])
    ordered = len(heads) <= len(frame) // 50 + 1000 and not (np.diff(frame)[~new_block] <= 0).any()
    if ordered:
        keys = labels[["session", "animal"]].take(heads).astype(str).reset_index(drop=True)
        ordered = not keys.duplicated().any()
    if ordered:
        state, order = _numbers(labels, "state", np.int64), None
        motif_change = _changes(labels["motif"])
        names_at = labels["motif"].take
    else:
        frame, new_block, heads, keys, state, motif_change, names_at, order = _unsorted(labels)
    step = np.diff(frame)
    dup = ~new_block & (step == 0)
    if dup.any():
        where = np.flatnonzero(dup)[0] + 1
        block = keys.iloc[np.searchsorted(heads, where, side="right") - 1]
        msg = (
            f"frame {frame[where]} appears twice for session '{block['session']}', animal "
            f"'{block['animal']}'; expected one row per frame and animal"
        )
        raise InputError(msg)
    valid = state >= 0
    contiguous = ~new_block & (step == 1)
    new_run = ~contiguous | motif_change | (valid[1:] != valid[:-1])
    start = np.flatnonzero(np.r_[True, new_run])
    stop = np.r_[start[1:], len(frame)]
    block = np.cumsum(np.r_[False, new_block])[start]
    ok = valid[start]
    names = names_at(start[ok])
    if names.isna().any() or (names.astype(str) == "").any():
        msg = "frames with state >= 0 have an empty motif name; fill 'motif' (e.g. motif_01)"
        raise InputError(msg)
    raw, uniques = pd.factorize(names.astype(str), sort=True)
    code = np.full(len(start), -1, dtype=np.int64)
    code[ok] = raw
    link = np.r_[contiguous & valid[1:] & valid[:-1], False]  # row i linked to row i + 1
    linked_before = np.zeros(len(start), bool)
    linked_before[1:] = link[start[1:] - 1]
    time = _numbers(labels, "time_s", np.float64)
    prob = _numbers(labels, "probability", np.float64)
    if order is not None:
        time, prob = time[order], prob[order]
    last = np.r_[heads[1:], len(frame)] - 1
    rate = _frame_rates(fps, frame[heads], frame[last], time[heads], time[last], keys)
    motifs = np.asarray(uniques, dtype=object).astype(str)
    return Runs(
        start,
        stop,
        block,
        code,
        linked_before,
        link[stop - 1],
        keys,
        motifs,
        rate,
        frame,
        time,
        state,
        prob,
    )


SECONDS_DECIMALS = 4  # 0.1 ms: finer than the frame interval of any video (10 kHz)
SIGNIFICANT_DIGITS = 6  # shares, probabilities, statistics: beyond any measurement's precision


def csv_rounded(table: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``table`` with floats rounded to what the measurements support, for CSV files.

    Columns in seconds (names ending ``_s``, or ``seconds``) keep 4 decimals (0.1 ms); every
    other float column keeps 6 significant digits (0.9333333333333332 -> 0.933333). Integers,
    text and missing values are unchanged. Parquet files keep full precision.

    Examples
    --------
    >>> t = pd.DataFrame({"duration_s": [0.9333333333333332], "fraction": [0.123456789], "n": [3]})
    >>> csv_rounded(t).values.tolist()
    [[0.9333, 0.123457, 3.0]]
    """
    out = table.copy()
    for name in out.columns:
        column = out[name]
        if not pd.api.types.is_float_dtype(column.dtype):
            continue
        values = column.to_numpy(np.float64)
        if str(name).endswith("_s") or name == "seconds":
            out[name] = np.round(values, SECONDS_DECIMALS)
            continue
        with np.errstate(all="ignore"):  # zeros, NaN and subnormals fall back to the value
            magnitude = np.floor(np.log10(np.abs(values)))
            digits = np.where(np.isfinite(magnitude), SIGNIFICANT_DIGITS - 1 - magnitude, 0)
            scale = 10.0**digits
            rounded = np.round(values * scale) / scale
        out[name] = np.where(np.isfinite(rounded), rounded, values)
    return out
