"""The ethogram: per-frame labels -> bouts, time budgets, bout durations and transitions.

Tables in, tables out. The per-frame label table has columns ``session, animal, frame, time_s,
state, motif, probability`` (``state == -1`` marks an invalid frame). A *bout* is a maximal run of
consecutive frames of one (session, animal) with the same motif name, so states merged under one
name form one bout. Bouts never bridge an invalid frame or a missing frame number: such a bout
ends there and is marked ``cut_after`` (the next one ``cut_before``), as are bouts touching the
first or last frame of a recording.

Frame rate (``fps``) may be a number for every session, a mapping ``session -> fps``, a sessions
table with columns ``session, fps``, or ``None`` to infer it per recording from ``time_s`` and
``frame`` at its first and last rows. Grouping (``by``) accepts ``session``, ``animal`` and
``group`` (from ``groups``, a mapping ``session -> group`` or a table with those columns).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import NamedTuple

import numpy as np
import pandas as pd

from ethoscribe.errors import InputError

LABEL_COLUMNS = ("session", "animal", "frame", "time_s", "state", "motif", "probability")
BOUT_COLUMNS = (
    "session", "animal", "motif", "state", "start_frame", "stop_frame", "start_s",
    "duration_s", "n_frames", "mean_probability", "cut_before", "cut_after",
)  # fmt: skip
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


class _Runs(NamedTuple):
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


def _prepare(labels: pd.DataFrame, fps: FpsSpec) -> _Runs:
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
    return _Runs(
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


def with_groups(table: pd.DataFrame, groups: GroupSpec) -> pd.DataFrame:
    """Return ``table`` with a ``group`` column looked up from its ``session`` column."""
    if groups is None:
        return table
    if isinstance(groups, pd.DataFrame):
        check_columns(groups, ("session", "group"), "the groups table")
        groups = dict(zip(groups["session"].astype(str), groups["group"].astype(str), strict=True))
    missing = sorted(set(table["session"].astype(str)) - set(groups))
    if missing:
        raise InputError(f"no group given for session(s) {missing}; add them to groups")
    out = table.copy()
    out["group"] = out["session"].astype(str).map(dict(groups)).astype(str)
    return out


def _keys(table: pd.DataFrame, by: Sequence[str], what: str) -> list[str]:
    by = [by] if isinstance(by, str) else list(by)
    if "group" in by and "group" not in table.columns:
        raise InputError("grouping by 'group' needs groups={session: group, ...}")
    check_columns(table, by, f"{what} (grouping by {by})")
    return by


def _grouped_sum(table: pd.DataFrame, keys: list[str], columns: list[str]) -> pd.DataFrame:
    if not keys:
        return table[columns].sum().to_frame().T
    return table.groupby(keys, sort=True, observed=True)[columns].sum().reset_index()


def bout_table(labels: pd.DataFrame, fps: FpsSpec = None) -> pd.DataFrame:
    """Run-length encode per-frame labels into bouts.

    Parameters
    ----------
    labels : DataFrame, shape (n_frames_total, 7)
        Per-frame label table (see module docstring); any row order.
    fps : float, mapping or DataFrame, optional
        Frame rate; ``None`` infers it from ``time_s`` and ``frame``.

    Returns
    -------
    DataFrame, shape (n_bouts, 12)
        Columns ``BOUT_COLUMNS`` sorted by session, animal, start_frame. ``stop_frame`` is
        exclusive; ``state`` is the state of the bout's first frame; ``cut_before``/``cut_after``
        mark bouts touching an invalid or missing frame or the recording edge.

    Examples
    --------
    >>> lab = pd.DataFrame({"session": "s1", "animal": "a", "frame": range(4),
    ...     "time_s": [0, .1, .2, .3], "state": [0, 0, -1, 1],
    ...     "motif": ["m1", "m1", "", "m2"], "probability": [1, 1, np.nan, 1]})
    >>> bout_table(lab)[["motif", "n_frames", "cut_after"]].values.tolist()
    [['m1', 2, True], ['m2', 1, True]]
    """
    r = _prepare(labels, fps)
    keep = r.code >= 0
    s, e, blk = r.start[keep], r.stop[keep], r.block[keep]
    finite = np.isfinite(r.prob)
    sums = np.add.reduceat(np.where(finite, r.prob, 0.0), r.start)[keep]
    counts = np.add.reduceat(finite.astype(np.int64), r.start)[keep]
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_p = sums / counts
    n_frames = e - s
    table = pd.DataFrame(
        {
            "session": r.keys["session"].to_numpy(dtype=object)[blk],
            "animal": r.keys["animal"].to_numpy(dtype=object)[blk],
            "motif": r.motifs[r.code[keep]],
            "state": r.state[s],
            "start_frame": r.frame[s],
            "stop_frame": r.frame[e - 1] + 1,
            "start_s": r.time[s],
            "duration_s": n_frames / r.fps[blk],
            "n_frames": n_frames,
            "mean_probability": mean_p,
            # cut unless the neighbouring row is contiguous and valid (then it is another motif)
            "cut_before": ~r.linked_before[keep],
            "cut_after": ~r.linked_after[keep],
        }
    )
    rank = np.argsort(np.lexsort((r.keys["animal"], r.keys["session"])))
    if (np.diff(rank) < 0).any():  # recordings not in name order: reorder whole recordings
        table = table.iloc[np.argsort(rank[blk], kind="stable")].reset_index(drop=True)
    return table


def labels_from_bouts(
    bouts: pd.DataFrame, n_frames_per_session: Mapping[str | tuple[str, str], int]
) -> pd.DataFrame:
    """Rebuild a per-frame label table from bouts (the inverse of :func:`bout_table`).

    Parameters
    ----------
    bouts : DataFrame, shape (n_bouts, 12)
        As from :func:`bout_table`.
    n_frames_per_session : mapping
        Frames per recording, keyed by session (all its animals) or by ``(session, animal)``;
        frames are numbered ``0 .. n - 1``, those outside every bout become invalid.

    Returns
    -------
    DataFrame, shape (sum of n, 7)
        Label table. ``time_s = frame / fps`` with fps from ``n_frames / duration_s``;
        ``probability`` is each bout's mean (the per-frame values are not kept in bouts).

    Examples
    --------
    >>> b = pd.DataFrame({"session": ["s"], "animal": ["a"], "motif": ["m1"], "state": [0],
    ...     "start_frame": [1], "stop_frame": [3], "duration_s": [0.2], "n_frames": [2],
    ...     "mean_probability": [0.9]})
    >>> labels_from_bouts(b, {"s": 4})["state"].tolist()
    [-1, 0, 0, -1]
    """
    need = [c for c in BOUT_COLUMNS if c not in ("start_s", "cut_before", "cut_after")]
    check_columns(bouts, need, "the bout table")
    recs = bouts[["session", "animal"]].drop_duplicates().itertuples(index=False)
    pairs = {(str(s), str(a)) for s, a in recs}
    pairs |= {k for k in n_frames_per_session if isinstance(k, tuple)}
    sizes = {}
    for s, a in sorted(pairs):
        size = n_frames_per_session.get((s, a), n_frames_per_session.get(s))
        if size is None:
            raise InputError(f"n_frames_per_session has no entry for session '{s}'")
        sizes[(s, a)] = int(size)
    if not sizes:
        return pd.DataFrame({c: [] for c in LABEL_COLUMNS})
    keys = pd.DataFrame(list(sizes), columns=["session", "animal"])
    length = np.array(list(sizes.values()), dtype=np.int64)
    offset = np.r_[0, np.cumsum(length)[:-1]]
    where = dict(zip(sizes, range(len(sizes)), strict=True))
    pairs_of_bouts = zip(bouts["session"].astype(str), bouts["animal"].astype(str), strict=True)
    bidx = np.array([where[p] for p in pairs_of_bouts], dtype=np.int64)
    start = bouts["start_frame"].to_numpy(np.int64)
    span = bouts["stop_frame"].to_numpy(np.int64) - start
    if len(bidx) and ((start < 0) | (start + span > length[bidx])).any():
        raise InputError("bouts extend beyond n_frames_per_session; give the full frame counts")
    total = int(length.sum())
    rows = np.repeat(offset[bidx] + start, span) + (
        np.arange(int(span.sum())) - np.repeat(np.cumsum(span) - span, span)
    )
    state = np.full(total, -1, dtype=np.int64)
    state[rows] = np.repeat(bouts["state"].to_numpy(np.int64), span)
    motif = np.full(total, "", dtype=object)
    motif[rows] = np.repeat(bouts["motif"].to_numpy(dtype=object), span)
    prob = np.full(total, np.nan)
    prob[rows] = np.repeat(bouts["mean_probability"].to_numpy(np.float64), span)
    rate = (bouts["n_frames"] / bouts["duration_s"]).groupby(bidx).first()
    rate = rate.reindex(range(len(sizes))).fillna(1.0).to_numpy()  # no bouts: any rate works
    block = np.repeat(np.arange(len(sizes)), length)
    frame = np.arange(total) - np.repeat(offset, length)
    out = keys.iloc[block].reset_index(drop=True)
    out["frame"], out["time_s"], out["state"] = frame, frame / rate[block], state
    out["motif"], out["probability"] = motif, prob
    return out


def time_budget(
    labels: pd.DataFrame,
    by: Sequence[str] = ("session", "animal"),
    fps: FpsSpec = None,
    groups: GroupSpec = None,
) -> pd.DataFrame:
    """Fraction of valid time spent in each motif.

    Parameters
    ----------
    labels : DataFrame
        Per-frame label table.
    by : sequence of str
        Grouping columns among ``session``, ``animal``, ``group``; ``()`` pools everything.
        Pooled fractions weigh recordings by their valid seconds.
    fps, groups : see module docstring.

    Returns
    -------
    DataFrame, shape (n_by_groups * n_motifs, len(by) + 4)
        ``*by, motif, n_frames, seconds, fraction``; every motif appears in every group (zeros
        included) and ``fraction`` sums to 1 within a group (NaN if it has no valid frame).

    Examples
    --------
    >>> lab = pd.DataFrame({"session": "s1", "animal": "a", "frame": range(4),
    ...     "time_s": [0, .1, .2, .3], "state": [0, 0, -1, 1],
    ...     "motif": ["m1", "m1", "", "m2"], "probability": 1.0})
    >>> time_budget(lab)["fraction"].round(3).tolist()
    [0.667, 0.333]
    """
    r = _prepare(labels, fps)
    n_motifs, n_blocks = len(r.motifs), len(r.keys)
    ok = r.code >= 0
    cell = r.block[ok] * n_motifs + r.code[ok]
    counts = np.bincount(cell, weights=(r.stop - r.start)[ok], minlength=n_blocks * n_motifs)
    rows = np.repeat(np.arange(n_blocks), n_motifs)
    table = r.keys.iloc[rows].reset_index(drop=True)
    table["motif"] = np.tile(r.motifs, n_blocks)
    table["n_frames"] = counts.astype(np.int64)
    table["seconds"] = counts / r.fps[rows]
    table = with_groups(table, groups)
    keys = _keys(table, by, "the label table")
    out = _grouped_sum(table, [*keys, "motif"], ["n_frames", "seconds"])
    total = out.groupby(keys)["seconds"].transform("sum") if keys else out["seconds"].sum()
    with np.errstate(invalid="ignore", divide="ignore"):
        out["fraction"] = out["seconds"] / total
    return out


def duration_summary(
    bouts: pd.DataFrame,
    by: Sequence[str] = ("session", "animal"),
    groups: GroupSpec = None,
    exclude_cut: bool = False,
) -> pd.DataFrame:
    """Bout-duration statistics per motif (and per ``by`` group).

    Parameters
    ----------
    bouts : DataFrame
        As from :func:`bout_table`.
    by : sequence of str
        Grouping columns (see :func:`time_budget`).
    groups : mapping or DataFrame, optional
        ``session -> group``.
    exclude_cut : bool
        Drop bouts cut by a gap or recording edge (their true length is unknown).

    Returns
    -------
    DataFrame
        ``*by, motif, count, mean_s, median_s, q25_s, q75_s, total_s``; motifs without bouts in
        a group are absent.

    Examples
    --------
    >>> b = pd.DataFrame({"session": "s", "animal": "a", "motif": ["m", "m"],
    ...     "duration_s": [1.0, 3.0], "cut_before": False, "cut_after": False})
    >>> duration_summary(b)["median_s"].tolist()
    [2.0]
    """
    table = with_groups(bouts, groups)
    keys = [*_keys(table, by, "the bout table"), "motif"]
    check_columns(table, ("motif", "duration_s", "cut_before", "cut_after"), "the bout table")
    if exclude_cut:
        table = table[~(table["cut_before"] | table["cut_after"])]
    grouped = table.groupby(keys, sort=True, observed=True)["duration_s"]
    out = grouped.agg(count="count", mean_s="mean", median_s="median", total_s="sum")
    out.insert(3, "q25_s", grouped.quantile(0.25))
    out.insert(4, "q75_s", grouped.quantile(0.75))
    return out.reset_index()


def bout_rate(
    bouts: pd.DataFrame,
    labels: pd.DataFrame,
    by: Sequence[str] = ("session", "animal"),
    fps: FpsSpec = None,
    groups: GroupSpec = None,
) -> pd.DataFrame:
    """Bouts per minute of valid time, per motif.

    Returns
    -------
    DataFrame
        ``*by, motif, n_bouts, valid_minutes, bouts_per_min`` (every motif in every group).

    Examples
    --------
    >>> lab = pd.DataFrame({"session": "s", "animal": "a", "frame": range(3),
    ...     "time_s": [0, 30, 60], "state": [0, 1, 0], "motif": ["m1", "m2", "m1"],
    ...     "probability": 1.0})
    >>> bout_rate(bout_table(lab), lab)["bouts_per_min"].tolist()  # 3 frames = 1.5 min
    [1.3333333333333333, 0.6666666666666666]
    """
    budget = time_budget(labels, by, fps, groups)
    keys = [c for c in budget.columns if c not in ("motif", "n_frames", "seconds", "fraction")]
    table = with_groups(bouts, groups)
    check_columns(table, [*keys, "motif"], "the bout table")
    counts = table.groupby([*keys, "motif"], observed=True).size().rename("n_bouts")
    out = budget.merge(counts.reset_index(), on=[*keys, "motif"], how="left")
    out["n_bouts"] = out["n_bouts"].fillna(0).astype(np.int64)
    valid = out.groupby(keys)["seconds"].transform("sum") if keys else out["seconds"].sum()
    out["valid_minutes"] = valid / 60.0
    with np.errstate(invalid="ignore", divide="ignore"):
        out["bouts_per_min"] = out["n_bouts"] / out["valid_minutes"]
    return out[[*keys, "motif", "n_bouts", "valid_minutes", "bouts_per_min"]]


def survival_curve(bouts: pd.DataFrame, motif: str, censor_cut: bool = True) -> pd.DataFrame:
    """Kaplan-Meier survival of the bout durations of one motif.

    A bout cut by an invalid gap or a recording edge lasted *at least* its observed duration, so
    with ``censor_cut`` it is treated as right-censored there (an approximation for bouts cut at
    their start, whose onset is unseen). Without it every bout counts as ended (the plain
    empirical survival function).

    Returns
    -------
    DataFrame, one row per distinct duration
        ``time_s, at_risk, events, censored, survival, std_error`` (Greenwood's formula).

    Examples
    --------
    >>> b = pd.DataFrame({"motif": "m", "duration_s": [1.0, 2.0, 2.0],
    ...     "cut_before": [False, False, True], "cut_after": False})
    >>> survival_curve(b, "m")["survival"].tolist()
    [0.6666666666666667, 0.33333333333333337]
    """
    check_columns(bouts, ("motif", "duration_s", "cut_before", "cut_after"), "the bout table")
    rows = bouts[bouts["motif"] == motif]
    if rows.empty:
        known = sorted(bouts["motif"].unique().tolist())
        raise InputError(f"motif '{motif}' has no bouts; known motifs: {known}")
    times, inverse = np.unique(rows["duration_s"].to_numpy(np.float64), return_inverse=True)
    cut = (rows["cut_before"] | rows["cut_after"]).to_numpy(bool) & censor_cut
    events = np.bincount(inverse, weights=~cut, minlength=len(times))
    censored = np.bincount(inverse, weights=cut, minlength=len(times))
    at_risk = len(rows) - np.r_[0, np.cumsum(events + censored)[:-1]]
    survival = np.cumprod(1.0 - events / at_risk)
    with np.errstate(divide="ignore", invalid="ignore"):  # undefined once survival reaches 0
        greenwood = np.cumsum(events / (at_risk * (at_risk - events)))
        std_error = survival * np.sqrt(greenwood)
    return pd.DataFrame(
        {
            "time_s": times,
            "at_risk": at_risk.astype(np.int64),
            "events": events.astype(np.int64),
            "censored": censored.astype(np.int64),
            "survival": survival,
            "std_error": std_error,
        }
    )


def transition_table(
    bouts: pd.DataFrame,
    by: Sequence[str] = ("session", "animal"),
    groups: GroupSpec = None,
    include_zeros: bool = False,
) -> pd.DataFrame:
    """Bout-to-bout transition counts and row-normalised probabilities.

    A transition is counted from a bout to the next bout of the same (session, animal) only when
    the next one starts at the frame where the first stops: bouts separated by an invalid gap or
    missing frames are not linked (what happened in the gap is unknown). Self-transitions cannot
    occur between bouts and are excluded.

    Parameters
    ----------
    bouts : DataFrame
        As from :func:`bout_table`.
    by : sequence of str
        Grouping columns (see :func:`time_budget`); ``()`` pools all bouts.
    groups : mapping or DataFrame, optional
        ``session -> group``.
    include_zeros : bool
        Also list unobserved pairs (count 0) for every motif that has outgoing transitions.

    Returns
    -------
    DataFrame
        ``*by, from_motif, to_motif, count, probability``; probabilities sum to 1 over
        ``to_motif`` within each (``by``, ``from_motif``).

    Examples
    --------
    >>> b = pd.DataFrame({"session": "s", "animal": "a", "motif": ["x", "y", "x", "y"],
    ...     "start_frame": [0, 2, 4, 7], "stop_frame": [2, 4, 6, 9]})
    >>> transition_table(b)[["from_motif", "to_motif", "count"]].values.tolist()
    [['x', 'y', 1], ['y', 'x', 1]]
    """
    table = with_groups(bouts, groups)
    check_columns(table, ("session", "animal", "motif", "start_frame", "stop_frame"), "bouts")
    keys = _keys(table, by, "the bout table")
    table = table.sort_values(["session", "animal", "start_frame"], kind="stable")
    table = table.reset_index(drop=True)
    nxt = table.shift(-1)
    linked = (
        (
            (nxt["session"] == table["session"])
            & (nxt["animal"] == table["animal"])
            & (nxt["start_frame"] == table["stop_frame"])
            & (nxt["motif"] != table["motif"])
        )
        .fillna(False)
        .astype(bool)
    )
    pairs = table.loc[linked, keys].copy()
    pairs["from_motif"] = table.loc[linked, "motif"].astype(str)
    pairs["to_motif"] = nxt.loc[linked, "motif"].astype(str)
    cols = [*keys, "from_motif", "to_motif"]
    counts = pairs.groupby(cols, sort=True, observed=True).size().rename("count")
    if include_zeros and len(counts):
        motifs = sorted(table["motif"].astype(str).unique())
        levels = [sorted(pairs[k].unique()) for k in keys] + [motifs, motifs]
        full = pd.MultiIndex.from_product(levels, names=cols)
        counts = counts.reindex(full, fill_value=0)
        counts = counts[full.get_level_values("from_motif") != full.get_level_values("to_motif")]
    out = counts.reset_index()
    row = [*keys, "from_motif"]
    total = out.groupby(row)["count"].transform("sum")
    out = out[total > 0].reset_index(drop=True)
    out["count"] = out["count"].astype(np.int64)
    out["probability"] = out["count"] / total[total > 0].to_numpy()
    return out


def transition_matrix(
    data: pd.DataFrame, motifs: Sequence[str] | None = None, counts: bool = False
) -> pd.DataFrame:
    """Square from-motif x to-motif matrix pooled over all rows of ``data``.

    Parameters
    ----------
    data : DataFrame
        A bout table, or a transition table (columns ``from_motif, to_motif, count``).
    motifs : sequence of str, optional
        Row/column order; default all motifs seen, sorted.
    counts : bool
        Return counts instead of row-normalised probabilities.

    Returns
    -------
    DataFrame, shape (n_motifs, n_motifs)
        Index ``from_motif``, columns ``to_motif``; zero diagonal. Probability rows of motifs
        with no outgoing transition are NaN.

    Examples
    --------
    >>> t = pd.DataFrame({"from_motif": ["x", "y"], "to_motif": ["y", "x"], "count": [3, 1]})
    >>> transition_matrix(t).values.tolist()
    [[0.0, 1.0], [1.0, 0.0]]
    """
    if "from_motif" in data.columns:
        check_columns(data, ("from_motif", "to_motif", "count"), "the transition table")
        table, seen = data, set(data["from_motif"]) | set(data["to_motif"])
    else:
        table, seen = transition_table(data, by=()), set(data["motif"].astype(str))
    order = sorted(seen) if motifs is None else [str(m) for m in motifs]
    unknown = sorted((set(table["from_motif"]) | set(table["to_motif"])) - set(order))
    if unknown:
        raise InputError(f"motifs {unknown} occur in the transitions but not in motifs=")
    grid = table.pivot_table(
        index="from_motif", columns="to_motif", values="count", aggfunc="sum", fill_value=0
    ).reindex(index=order, columns=order, fill_value=0)
    values = grid.to_numpy(np.int64).copy()
    np.fill_diagonal(values, 0)  # self-transitions do not exist between bouts
    if not counts:
        with np.errstate(invalid="ignore", divide="ignore"):
            values = values / values.sum(axis=1, keepdims=True)
    index = pd.Index(order, name="from_motif")
    return pd.DataFrame(values, index=index, columns=pd.Index(order, name="to_motif"))


class TransitionEntropy(NamedTuple):
    """Per-row entropy (bits), stationary weights of the bout chain and its entropy rate."""

    row_bits: pd.Series
    stationary: pd.Series
    rate_bits: float


def transition_entropy(matrix: pd.DataFrame) -> TransitionEntropy:
    """Entropy of each row of a transition probability matrix, and the chain's entropy rate.

    The entropy rate of a stationary Markov chain is ``H = -sum_i pi_i sum_j P_ij log2 P_ij``
    with ``pi`` the stationary distribution (Cover & Thomas, Elements of Information Theory,
    Theorem 4.2.4; from memory). Rows that are all NaN (motifs never left) are dropped and the
    remaining rows renormalised over the remaining motifs before solving for ``pi``; for a
    reducible chain the least-squares stationary vector is one of many.

    Examples
    --------
    >>> m = pd.DataFrame([[0, 1], [1, 0]], index=["x", "y"], columns=["x", "y"], dtype=float)
    >>> transition_entropy(m).rate_bits
    0.0
    """
    values = matrix.to_numpy(np.float64)
    if values.ndim != 2 or values.shape[0] != values.shape[1]:
        raise InputError(f"the transition matrix must be square; got shape {values.shape}")
    defined = ~np.isnan(values).all(axis=1)
    p = np.nan_to_num(values)
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = np.where(p > 0, -p * np.log2(p), 0.0)
    rows = pd.Series(np.where(defined, terms.sum(axis=1), np.nan), index=matrix.index)
    sub = p[np.ix_(defined, defined)]
    with np.errstate(divide="ignore", invalid="ignore"):
        sub = sub / sub.sum(axis=1, keepdims=True)
    sub = np.nan_to_num(sub)
    k = len(sub)
    pi = np.zeros(len(values))
    if k:
        system = np.vstack([sub.T - np.eye(k), np.ones((1, k))])
        solution = np.linalg.lstsq(system, np.r_[np.zeros(k), 1.0], rcond=None)[0]
        solution = np.clip(solution, 0.0, None)
        pi[defined] = solution / solution.sum() if solution.sum() > 0 else 1.0 / k
    stationary = pd.Series(pi, index=matrix.index)
    rate = float(np.nansum(pi * rows.to_numpy())) if k else float("nan")
    return TransitionEntropy(rows, stationary, rate)
