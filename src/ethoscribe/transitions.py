"""Transitions between bouts: counts, probabilities, the transition matrix and its entropy.

A transition links a bout to the next bout of the same recording only when the next one starts
where the first stops (no invalid or missing frames between them). Re-exported by
:mod:`ethoscribe.ethogram`.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import NamedTuple

import numpy as np
import pandas as pd

from ethoscribe.errors import InputError
from ethoscribe.label_table import GroupSpec, check_columns, grouping_keys, with_groups


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
        As from :func:`ethoscribe.ethogram.bout_table`.
    by : sequence of str
        Grouping columns (see :func:`ethoscribe.ethogram.time_budget`); ``()`` pools all bouts.
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
    keys = grouping_keys(table, by, "the bout table")
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


def transitions_above_chance(
    data: pd.DataFrame, alpha: float = 0.05, max_iter: int = 1000
) -> pd.DataFrame:
    """Which transitions happen more often than chance, with a test per transition.

    Chance is the quasi-independence model of the pooled count matrix: the next motif does not
    depend on the current one, except that a motif never follows itself (the diagonal is a
    structural zero). Its expected counts keep every motif's outgoing and incoming totals and are
    fitted by iterative proportional fitting (Bishop, Fienberg & Holland 1975, Discrete
    Multivariate Analysis, ch. 5; from memory) -- the maximum-likelihood fit of a Poisson model
    with row and column effects on the off-diagonal cells. Each observed count is tested against
    its expected share of the row's transitions with a one-sided binomial test, and the p-values
    are Benjamini-Hochberg-corrected over all off-diagonal cells.

    Parameters
    ----------
    data : DataFrame
        A bout table or a transition table (see :func:`transition_matrix`).
    alpha : float
        Level for ``above_chance`` (``q_value < alpha`` and more transitions than expected).

    Returns
    -------
    DataFrame
        ``from_motif, to_motif, count, n_from, probability, expected_probability, ratio,
        p_value, q_value, above_chance``, one row per off-diagonal pair of motifs with outgoing
        transitions (``ratio`` = observed / expected count).

    Examples
    --------
    >>> t = pd.DataFrame({"from_motif": ["a", "a", "b", "b", "c", "c"],
    ...                   "to_motif": ["b", "c", "a", "c", "a", "b"],
    ...                   "count": [40, 2, 30, 30, 20, 20]})
    >>> r = transitions_above_chance(t)
    >>> r.loc[r["above_chance"], ["from_motif", "to_motif"]].values.tolist()
    [['a', 'b'], ['c', 'a']]
    """
    from scipy import stats as sps  # here: importing scipy.stats takes ~0.3 s (workbench)

    counts = transition_matrix(data, counts=True)
    n = counts.to_numpy(np.float64)
    off = ~np.eye(len(n), dtype=bool)
    rows, cols = n.sum(axis=1), n.sum(axis=0)
    expected = off.astype(np.float64)
    for _ in range(max_iter):  # iterative proportional fitting with a zero diagonal
        for axis, total in ((1, rows), (0, cols)):
            have = expected.sum(axis=axis)
            factor = np.divide(total, have, out=np.zeros_like(total), where=have > 0)
            expected *= factor[:, None] if axis == 1 else factor[None, :]
        if np.allclose(expected.sum(axis=1), rows, rtol=1e-10, atol=1e-9):
            break
    out = []
    motifs = [str(m) for m in counts.index]
    for i, j in zip(*np.nonzero(off & (rows[:, None] > 0)), strict=True):
        p0 = min(expected[i, j] / rows[i], 1.0)  # IPF can overshoot 1 by rounding: sf is NaN
        # a transition chance cannot produce (p0 = 0) is not above chance when never seen
        p = float(sps.binom.sf(n[i, j] - 1, rows[i], p0)) if p0 > 0 else float(n[i, j] == 0)
        out.append(
            (motifs[i], motifs[j], int(n[i, j]), int(rows[i]), n[i, j] / rows[i], p0,
             n[i, j] / expected[i, j] if expected[i, j] > 0 else np.nan, min(p, 1.0))
        )  # fmt: skip
    columns = [
        "from_motif", "to_motif", "count", "n_from", "probability", "expected_probability",
        "ratio", "p_value",
    ]  # fmt: skip
    table = pd.DataFrame(out, columns=columns)
    p = table["p_value"].to_numpy(np.float64)
    table["q_value"] = sps.false_discovery_control(p) if len(p) else p
    table["above_chance"] = (table["q_value"] < alpha) & (table["ratio"] > 1)
    return table
