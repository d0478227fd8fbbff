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

The transition functions live in :mod:`ethoscribe.transitions` and the shared checks and
run-length encoding in :mod:`ethoscribe.label_table`; both are re-exported here.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from ethoscribe.errors import InputError
from ethoscribe.label_table import (
    LABEL_COLUMNS,
    FpsSpec,
    GroupSpec,
    check_columns,
    grouped_sum,
    grouping_keys,
    prepare_runs,
    with_groups,
)
from ethoscribe.transitions import (
    TransitionEntropy,
    transition_entropy,
    transition_matrix,
    transition_table,
    transitions_above_chance,
)

__all__ = [
    "BOUT_COLUMNS",
    "LABEL_COLUMNS",
    "FpsSpec",
    "GroupSpec",
    "TransitionEntropy",
    "bout_rate",
    "bout_table",
    "check_columns",
    "duration_summary",
    "labels_from_bouts",
    "pool_time_budgets",
    "survival_curve",
    "time_budget",
    "time_budgets_joined",
    "transition_entropy",
    "transition_matrix",
    "transition_table",
    "transitions_above_chance",
    "with_groups",
]

BOUT_COLUMNS = (
    "session", "animal", "motif", "state", "start_frame", "stop_frame", "start_s",
    "duration_s", "n_frames", "mean_probability", "cut_before", "cut_after",
)  # fmt: skip


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
    r = prepare_runs(labels, fps)
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
    r = prepare_runs(labels, fps)
    n_motifs, n_blocks = len(r.motifs), len(r.keys)
    ok = r.code >= 0
    cell = r.block[ok] * n_motifs + r.code[ok]
    counts = np.bincount(cell, weights=(r.stop - r.start)[ok], minlength=n_blocks * n_motifs)
    rows = np.repeat(np.arange(n_blocks), n_motifs)
    table = r.keys.iloc[rows].reset_index(drop=True)
    table["motif"] = np.tile(r.motifs, n_blocks)
    table["n_frames"] = counts.astype(np.int64)
    table["seconds"] = counts / r.fps[rows]
    return _pooled(table, by, groups, "the label table")


def pool_time_budgets(
    budgets: pd.DataFrame, by: Sequence[str] = (), groups: GroupSpec = None
) -> pd.DataFrame:
    """Time budgets pooled over recordings, from a per-recording :func:`time_budget` table.

    Equal to :func:`time_budget` of the label table with the same ``by`` (pooled fractions
    weigh recordings by their valid seconds), without the per-frame labels: reports of large
    studies are drawn from the per-session table.

    Examples
    --------
    >>> lab = pd.DataFrame({"session": ["s1"] * 3 + ["s2"], "animal": "a",
    ...     "frame": [0, 1, 2, 0], "time_s": [0, .1, .2, 0], "state": [0, 0, 1, 1],
    ...     "motif": ["m1", "m1", "m2", "m2"], "probability": 1.0})
    >>> pool_time_budgets(time_budget(lab, fps=10.0))["fraction"].tolist()
    [0.5, 0.5]
    """
    check_columns(budgets, ("session", "animal", "motif", "n_frames", "seconds"), "time budgets")
    table = budgets[["session", "animal", "motif", "n_frames", "seconds"]]
    return _pooled(table, by, groups, "the time budgets")


def _pooled(table: pd.DataFrame, by: Sequence[str], groups: GroupSpec, what: str) -> pd.DataFrame:
    table = with_groups(table, groups)
    keys = grouping_keys(table, by, what)
    out = grouped_sum(table, [*keys, "motif"], ["n_frames", "seconds"])
    total = out.groupby(keys)["seconds"].transform("sum") if keys else out["seconds"].sum()
    with np.errstate(invalid="ignore", divide="ignore"):
        out["fraction"] = out["seconds"] / total
    return out


def time_budgets_joined(parts: Sequence[pd.DataFrame], recordings: pd.DataFrame) -> pd.DataFrame:
    """Per-recording time budgets computed piece by piece, joined into one table.

    Equal to :func:`time_budget` of the whole label table (``by=("session", "animal")``): every
    motif seen anywhere appears for every recording, with zeros, so a study can be summarised one
    session at a time.

    Parameters
    ----------
    parts : sequence of DataFrame
        :func:`time_budget` outputs, each for some of the recordings.
    recordings : DataFrame
        ``session, animal`` of every recording, including those without a valid frame.

    Examples
    --------
    >>> a = pd.DataFrame({"session": "s1", "animal": "a", "frame": range(2), "time_s": [0, .1],
    ...     "state": 0, "motif": "m1", "probability": 1.0})
    >>> b = a.assign(session="s2", state=1, motif="m2")
    >>> keys = pd.DataFrame({"session": ["s1", "s2"], "animal": "a"})
    >>> time_budgets_joined([time_budget(a), time_budget(b)], keys)["fraction"].tolist()
    [1.0, 0.0, 0.0, 1.0]
    """
    keys = ["session", "animal"]
    table = pd.concat(list(parts), ignore_index=True)
    motifs = sorted(table["motif"].astype(str).unique())
    blocks = recordings[keys].drop_duplicates()
    full = pd.MultiIndex.from_arrays(
        [np.repeat(blocks[k].to_numpy(), len(motifs)) for k in keys]
        + [np.tile(np.array(motifs, dtype=object), len(blocks))],
        names=[*keys, "motif"],
    )
    out = table.set_index([*keys, "motif"])[["n_frames", "seconds"]].reindex(full, fill_value=0)
    out = out.sort_index().reset_index()
    out["n_frames"] = out["n_frames"].astype(np.int64)
    out["seconds"] = out["seconds"].astype(np.float64)
    total = out.groupby(keys, sort=False)["seconds"].transform("sum")
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
    keys = [*grouping_keys(table, by, "the bout table"), "motif"]
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
