"""Group statistics over per-session ethogram metrics.

``session_metrics`` turns labels and bouts into one long table (one value per recording, metric
and motif); ``compare_groups`` tests every metric x motif between every pair of groups with a
permutation or rank test, effect sizes with bootstrap intervals, and Benjamini-Hochberg q-values
over all its tests together.

Permutation tests are exact (every distinct relabelling enumerated) when there are at most
``EXACT_THRESHOLD`` = 50 000 of them -- e.g. 8 vs 8 sessions (12 870) or 15 paired subjects
(32 768) -- and Monte Carlo otherwise, with ``p = (count + 1) / (n_resamples + 1)``. Two-sided
p-values are twice the smaller one-sided p, capped at 1, as ``scipy.stats.permutation_test``
defines them.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from functools import lru_cache
from itertools import combinations
from math import comb
from typing import NamedTuple

import numpy as np
import pandas as pd
from scipy import special
from scipy import stats as sps

from ethoscribe.errors import InputError
from ethoscribe.ethogram import (
    FpsSpec,
    bout_rate,
    check_columns,
    duration_summary,
    time_budget,
    transition_table,
)

EXACT_THRESHOLD = 50_000
METRIC_COLUMNS = ("session", "animal", "group", "subject", "metric", "motif", "value")
COMPARISON_COLUMNS = (
    "metric", "motif", "group_a", "group_b", "n_a", "n_b", "mean_a", "mean_b", "effect_size",
    "cliffs_delta", "ci_low", "ci_high", "p_value", "q_value", "test", "significant",
)  # fmt: skip


class PermutationResult(NamedTuple):
    """Outcome of :func:`permutation_test`."""

    statistic: float
    p_value: float
    method: str  # "exact" or "monte_carlo"
    n_arrangements: int  # distinct relabellings of the data
    n_resamples: int  # null statistics computed
    min_p_value: float  # smallest two-sided p the test can give


def _sample(x, what: str) -> np.ndarray:
    values = np.asarray(x, dtype=np.float64).ravel()
    if not np.isfinite(values).all():
        raise InputError(f"{what} contains NaN or infinite values; drop them first")
    return values


@lru_cache(maxsize=16)
def _combinations(n: int, k: int) -> np.ndarray:
    flat = np.fromiter((i for c in combinations(range(n), k) for i in c), dtype=np.int64)
    out = flat.reshape(-1, k)
    out.flags.writeable = False
    return out


def _statistic(name: str) -> Callable[[np.ndarray], np.ndarray]:
    if name == "mean_difference":
        return lambda v: v.mean(axis=-1)
    if name == "median_difference":
        return lambda v: np.median(v, axis=-1)
    raise InputError(f"statistic must be 'mean_difference' or 'median_difference'; got {name!r}")


def permutation_test(
    a: Sequence[float],
    b: Sequence[float],
    statistic: str = "mean_difference",
    n_resamples: int = 10_000,
    exact_threshold: int = EXACT_THRESHOLD,
    paired: bool = False,
    random_state: int | np.random.Generator = 0,
) -> PermutationResult:
    """Two-sided permutation test of ``statistic(a) - statistic(b)``.

    Independent samples are relabelled (``comb(n_a + n_b, n_a)`` arrangements); paired samples
    (``paired=True``, equal lengths) have the signs of their differences flipped (``2 ** n``), as
    ``scipy.stats.permutation_test(permutation_type="samples")``; the paired statistic is the mean
    or median of ``a - b``.

    Examples
    --------
    >>> r = permutation_test([1.0, 2.0, 3.0], [4.0, 5.0, 6.0])
    >>> r.method, r.n_arrangements, r.p_value
    ('exact', 20, 0.1)
    """
    a, b = _sample(a, "sample a"), _sample(b, "sample b")
    stat = _statistic(statistic)
    rng = np.random.default_rng(random_state)
    if paired:
        if len(a) != len(b) or len(a) < 1:
            raise InputError(f"paired samples need equal, non-zero lengths; got {len(a)}, {len(b)}")
        d = a - b
        total, observed = 2 ** len(d), float(stat(d))
        if total <= exact_threshold:
            signs = 1 - 2 * ((np.arange(total)[:, None] >> np.arange(len(d))) & 1)
        else:
            signs = rng.choice(np.array([-1, 1]), size=(n_resamples, len(d)))
        null = stat(signs * d)
        scale = np.abs(d).max()
    else:
        if len(a) < 1 or len(b) < 1:
            raise InputError(f"each sample needs a value; got sizes {len(a)} and {len(b)}")
        x, k = np.r_[a, b], len(a)
        total, observed = comb(len(x), k), float(stat(a) - stat(b))
        if total <= exact_threshold:
            chosen = _combinations(len(x), k)
            mask = np.ones((len(chosen), len(x)), bool)
            np.put_along_axis(mask, chosen, False, axis=1)
            rest = np.nonzero(mask)[1].reshape(len(chosen), -1)
        else:
            order = rng.permuted(np.tile(np.arange(len(x)), (n_resamples, 1)), axis=1)
            chosen, rest = order[:, :k], order[:, k:]
        null = stat(x[chosen]) - stat(x[rest])
        scale = np.abs(x).max()
    exact = total <= exact_threshold
    extra = 0 if exact else 1
    gamma = 100 * np.finfo(float).eps * max(abs(observed), scale)  # ties despite rounding
    less = (np.count_nonzero(null <= observed + gamma) + extra) / (len(null) + extra)
    more = (np.count_nonzero(null >= observed - gamma) + extra) / (len(null) + extra)
    p = float(min(1.0, 2 * min(less, more)))
    floor = min(1.0, 2 / total) if exact else min(1.0, max(2 / total, 2 / (n_resamples + 1)))
    return PermutationResult(
        observed, p, "exact" if exact else "monte_carlo", int(total), len(null), floor
    )


def _bias_correction(df: np.ndarray | float) -> np.ndarray:
    """Hedges' J(df) = Gamma(df/2) / (sqrt(df/2) Gamma((df-1)/2)) (~ 1 - 3 / (4 df - 1))."""
    df = np.asarray(df, dtype=np.float64)
    return np.exp(special.gammaln(df / 2) - 0.5 * np.log(df / 2) - special.gammaln((df - 1) / 2))


def _g_rows(x: np.ndarray, y: np.ndarray, paired: bool) -> np.ndarray:
    """Hedges' g of each row pair of ``x`` (R, n_a) and ``y`` (R, n_b)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        if paired:
            d = x - y
            sd, df, diff = d.std(axis=1, ddof=1), d.shape[1] - 1, d.mean(axis=1)
        else:
            na, nb = x.shape[1], y.shape[1]
            df = na + nb - 2
            pooled = ((na - 1) * x.var(axis=1, ddof=1) + (nb - 1) * y.var(axis=1, ddof=1)) / df
            sd, diff = np.sqrt(pooled), x.mean(axis=1) - y.mean(axis=1)
        return np.where(sd > 0, _bias_correction(df) * diff / sd, np.nan)


def hedges_g(a: Sequence[float], b: Sequence[float], paired: bool = False) -> float:
    """Bias-corrected standardised mean difference of ``a`` minus ``b``.

    ``g = J(df) (mean_a - mean_b) / s_pooled`` with the pooled SD on ``df = n_a + n_b - 2`` and the
    exact small-sample factor ``J`` (Hedges & Olkin 1985, Statistical Methods for Meta-Analysis,
    ch. 5; from memory). ``paired=True`` standardises the mean difference by the SD of the
    differences (``df = n - 1``). NaN when the SD is 0.

    Examples
    --------
    >>> round(hedges_g([2.0, 3.0, 4.0], [1.0, 2.0, 3.0]), 4)  # d = 1, J(4) = 0.7979
    0.7979
    """
    a, b = _sample(a, "sample a"), _sample(b, "sample b")
    if min(len(a), len(b)) < 2 or (paired and len(a) != len(b)):
        raise InputError(f"Hedges' g needs >= 2 values per sample; got {len(a)} and {len(b)}")
    return float(_g_rows(a[None], b[None], paired)[0])


def _delta_rows(x: np.ndarray, y: np.ndarray, paired: bool) -> np.ndarray:
    if paired:
        return np.sign(x - y).mean(axis=1)
    return np.sign(x[:, :, None] - y[:, None, :]).mean(axis=(1, 2))


def cliffs_delta(a: Sequence[float], b: Sequence[float], paired: bool = False) -> float:
    """Cliff's delta: P(a > b) - P(a < b) over all pairs (Cliff 1993), in [-1, 1].

    ``paired=True`` gives its matched-pairs form: the share of subjects with ``a > b`` minus the
    share with ``a < b``.

    Examples
    --------
    >>> cliffs_delta([3.0, 4.0], [1.0, 3.0])  # pairs: +, 0, +, + -> 3/4
    0.75
    """
    a, b = _sample(a, "sample a"), _sample(b, "sample b")
    if not len(a) or not len(b) or (paired and len(a) != len(b)):
        raise InputError(f"Cliff's delta needs non-empty samples; got {len(a)} and {len(b)}")
    if paired:
        return float(np.sign(a - b).mean())
    bs = np.sort(b)
    below = np.searchsorted(bs, a, side="left")  # b values under each a
    above = len(bs) - np.searchsorted(bs, a, side="right")
    return float((below.sum() - above.sum()) / (len(a) * len(b)))


def bootstrap_ci(
    a: Sequence[float],
    b: Sequence[float] | None = None,
    statistic: str = "hedges_g",
    n_resamples: int = 2000,
    confidence: float = 0.95,
    paired: bool = False,
    random_state: int | np.random.Generator = 0,
) -> tuple[float, float]:
    """Percentile bootstrap interval (Efron & Tibshirani 1993, ch. 13) of a statistic.

    ``statistic`` is ``"mean"`` (of ``a`` alone), or for two samples ``"mean_difference"``,
    ``"hedges_g"``, ``"cliffs_delta"``. Independent samples are resampled separately; paired ones
    by subject. Resamples where the statistic is undefined (zero SD) are left out; the interval is
    NaN if more than half are.

    Examples
    --------
    >>> lo, hi = bootstrap_ci([1.0, 2.0, 3.0, 4.0], statistic="mean", random_state=1)
    >>> 1.0 <= lo <= hi <= 4.0
    True
    """
    if not 0 < confidence < 1:
        raise InputError(f"confidence must be in (0, 1); got {confidence}")
    rng = np.random.default_rng(random_state)
    a = _sample(a, "sample a")
    if statistic == "mean":
        values = a[rng.integers(len(a), size=(n_resamples, len(a)))].mean(axis=1)
    else:
        if b is None:
            raise InputError(f"statistic {statistic!r} needs two samples (a and b)")
        b = _sample(b, "sample b")
        if paired:
            if len(a) != len(b):
                raise InputError(f"paired samples need equal lengths; got {len(a)}, {len(b)}")
            idx = rng.integers(len(a), size=(n_resamples, len(a)))
            x, y = a[idx], b[idx]
        else:
            x = a[rng.integers(len(a), size=(n_resamples, len(a)))]
            y = b[rng.integers(len(b), size=(n_resamples, len(b)))]
        funcs = {
            "mean_difference": lambda x, y, p: (x - y).mean(1) if p else x.mean(1) - y.mean(1),
            "hedges_g": _g_rows,
            "cliffs_delta": _delta_rows,
        }
        if statistic not in funcs:
            raise InputError(f"unknown statistic {statistic!r}; expected mean or one of {[*funcs]}")
        values = funcs[statistic](x, y, paired)
    values = values[np.isfinite(values)]
    if len(values) < n_resamples / 2:
        return (float("nan"), float("nan"))
    tail = 50 * (1 - confidence)
    low, high = np.percentile(values, [tail, 100 - tail])
    return float(low), float(high)


def benjamini_hochberg(p: Sequence[float]) -> np.ndarray:
    """Benjamini-Hochberg (1995) adjusted p-values (q-values); NaN entries are left out.

    ``q_(i) = min_{j >= i} m p_(j) / j`` over the sorted p-values, capped at 1.

    Examples
    --------
    >>> benjamini_hochberg([0.01, 0.04, 0.03]).round(3).tolist()
    [0.03, 0.04, 0.04]
    """
    p = np.asarray(p, dtype=np.float64)
    q = np.full(p.shape, np.nan)
    ok = ~np.isnan(p)
    if ((p[ok] < 0) | (p[ok] > 1)).any():
        raise InputError("p-values must lie in [0, 1]")
    order = np.argsort(p[ok], kind="stable")
    m = len(order)
    scaled = p[ok][order] * m / np.arange(1, m + 1)
    adjusted = np.minimum.accumulate(scaled[::-1])[::-1].clip(max=1.0)
    values = np.empty(m)
    values[order] = adjusted
    q[ok] = values
    return q


def _design(sessions: pd.DataFrame) -> tuple[pd.DataFrame, list[str]]:
    check_columns(sessions, ("session", "group"), "the sessions table")
    keys = ["session", "animal"] if "animal" in sessions.columns else ["session"]
    design = sessions.copy()
    design["session"] = design["session"].astype(str)
    if "subject" not in design.columns:
        design["subject"] = design["session"]
    if design.duplicated(keys).any():
        raise InputError(f"the sessions table lists a {'/'.join(keys)} more than once")
    return design[[*keys, "group", "subject"]].astype(str), keys


def session_metrics(
    labels: pd.DataFrame, bouts: pd.DataFrame, sessions: pd.DataFrame, fps: FpsSpec = None
) -> pd.DataFrame:
    """Per-recording metrics in long form, ready for :func:`compare_groups`.

    Parameters
    ----------
    labels, bouts : DataFrame
        Per-frame label table and its bout table.
    sessions : DataFrame
        Columns ``session, group`` and optionally ``subject`` (default: the session), ``animal``
        (then group/subject are per animal) and ``fps`` (used when ``fps`` is None).

    Returns
    -------
    DataFrame
        ``session, animal, group, subject, metric, motif, value`` with metrics ``time_budget``
        (fraction of valid time), ``bout_rate_per_min``, ``mean_bout_s`` and ``median_bout_s``
        (NaN without bouts) and ``transition`` (motif ``"a->b"``, probability of ``b`` after
        ``a``; present where ``a`` has outgoing transitions).
    """
    design, keys = _design(sessions)
    if fps is None and "fps" in sessions.columns:
        fps = sessions[["session", "fps"]].drop_duplicates("session")
    units = ["session", "animal"]
    budget = time_budget(labels, units, fps)
    parts = [budget.assign(metric="time_budget", value=budget["fraction"])]
    rate = bout_rate(bouts, labels, units, fps)
    parts.append(rate.assign(metric="bout_rate_per_min", value=rate["bouts_per_min"]))
    lengths = budget[[*units, "motif"]].merge(duration_summary(bouts), how="left")
    parts.append(lengths.assign(metric="mean_bout_s", value=lengths["mean_s"]))
    parts.append(lengths.assign(metric="median_bout_s", value=lengths["median_s"]))
    moves = transition_table(bouts, units, include_zeros=True)
    moves["motif"] = moves["from_motif"] + "->" + moves["to_motif"]
    parts.append(moves.assign(metric="transition", value=moves["probability"]))
    cols = [*units, "metric", "motif", "value"]
    table = pd.concat([p[cols] for p in parts], ignore_index=True)
    table[units] = table[units].astype(str)
    out = table.merge(design, on=keys, how="left")
    missing = sorted(set(out.loc[out["group"].isna(), "session"]))
    if missing:
        raise InputError(f"session(s) {missing} are not in the sessions table; add their group")
    return out[list(METRIC_COLUMNS)]


def _pair(x, y, paired, test, n_resamples, n_bootstrap, exact_threshold, seed) -> dict:
    """Statistics of one comparison; ``x``, ``y`` finite (matched when paired)."""
    row = {
        "n_a": len(x),
        "n_b": len(y),
        "mean_a": x.mean() if len(x) else np.nan,
        "mean_b": y.mean() if len(y) else np.nan,
    }
    if min(len(x), len(y)) < 2:
        return {**row, "test": test, "floor": np.nan, "note": "fewer than 2 values in a group"}
    total = 2 ** len(x) if paired else comb(len(x) + len(y), len(x))
    row["floor"] = min(1.0, 2 / total)
    g, delta = _g_rows(x[None], y[None], paired)[0], _delta_rows(x[None], y[None], paired)[0]
    low, high = bootstrap_ci(x, y, "hedges_g", n_bootstrap, paired=paired, random_state=seed)
    row.update(effect_size=g, cliffs_delta=delta, ci_low=low, ci_high=high, note="")
    if np.ptp(np.r_[x, y]) == 0 or (paired and not np.any(x - y)):
        return {**row, "p_value": 1.0, "test": test, "note": "no variation"}
    if test == "rank":
        res = sps.wilcoxon(x, y) if paired else sps.mannwhitneyu(x, y, alternative="two-sided")
        name = "wilcoxon signed-rank" if paired else "mann-whitney u"
        return {**row, "p_value": float(res.pvalue), "test": name}
    res = permutation_test(x, y, "mean_difference", n_resamples, exact_threshold, paired, seed)
    kind = "exact" if res.method == "exact" else f"monte-carlo {res.n_resamples}"
    row["floor"] = res.min_p_value
    return {**row, "p_value": res.p_value, "test": f"{'paired ' * paired}permutation {kind}"}


def _omnibus(samples: list[np.ndarray], paired: bool, test: str, n_resamples: int, seed) -> float:
    """p of any difference among > 2 groups (Kruskal-Wallis / Friedman, or permutation F)."""
    if min(len(s) for s in samples) < 2 or np.ptp(np.concatenate(samples)) == 0:
        return float("nan")
    if test == "rank":
        res = sps.friedmanchisquare(*samples) if paired else sps.kruskal(*samples)
        return float(res.pvalue)
    rng = np.random.default_rng(seed)
    if paired:  # permute conditions within subjects; SS between condition means
        w = np.column_stack(samples)
        null = rng.permuted(np.broadcast_to(w, (n_resamples, *w.shape)), axis=2).mean(axis=1)
        obs = w.mean(axis=0)[None]
    else:  # SS between group means, monotone in F when the total SS is fixed
        x = np.concatenate(samples)
        sizes = np.array([len(s) for s in samples])
        perm = rng.permuted(np.tile(x, (n_resamples, 1)), axis=1)
        cuts = np.r_[0, np.cumsum(sizes)[:-1]]
        null = np.add.reduceat(perm, cuts, axis=1) / sizes
        obs = (np.add.reduceat(x, cuts) / sizes)[None]
    weight = 1.0 if paired else sizes[None]
    grand = np.concatenate(samples).mean()  # unchanged by any relabelling
    observed = (weight * (obs - grand) ** 2).sum()
    hits = np.count_nonzero((weight * (null - grand) ** 2).sum(axis=1) >= observed * (1 - 1e-12))
    return (hits + 1) / (n_resamples + 1)


def _pairs(groups: list[str], reference: str | None) -> list[tuple[str, str]]:
    if reference is None:
        return list(combinations(groups, 2))
    if reference not in groups:
        raise InputError(f"reference group {reference!r} is not among the groups {groups}")
    return [(g, reference) for g in groups if g != reference] + list(
        combinations([g for g in groups if g != reference], 2)
    )


def compare_groups(
    metrics: pd.DataFrame,
    by: str = "group",
    test: str = "permutation",
    paired: bool = False,
    subject_column: str = "subject",
    alpha: float = 0.05,
    n_resamples: int = 10_000,
    n_bootstrap: int = 2000,
    exact_threshold: int = EXACT_THRESHOLD,
    reference: str | None = None,
    random_state: int = 0,
) -> pd.DataFrame:
    """Compare every metric x motif between every pair of groups.

    Parameters
    ----------
    metrics : DataFrame
        Long table as from :func:`session_metrics` (``metric, motif, value``, ``by``; one row per
        recording; NaN values are left out test by test).
    by : str
        Column naming the group (or, when paired, the condition).
    test : {"permutation", "rank"}
        Permutation of the mean difference (:func:`permutation_test`), or Mann-Whitney U /
        Wilcoxon signed-rank (paired); with > 2 groups also a permutation-F / Kruskal-Wallis /
        Friedman omnibus p (``omnibus_p``, Monte Carlo for the permutation F).
    paired : bool
        Subjects measured under several conditions: values are matched on ``subject_column``;
        subjects missing a condition are left out of that comparison.
    alpha : float
        Level for ``significant`` (``q_value < alpha``).
    reference : str, optional
        A control group placed as ``group_b`` in every pair it is in.

    Returns
    -------
    DataFrame
        ``metric, motif, group_a, group_b, n_a, n_b, mean_a, mean_b, effect_size, cliffs_delta,
        ci_low, ci_high, p_value, q_value, test, significant`` (+ ``omnibus_p, omnibus_test`` for
        > 2 groups) and ``note``. Effects are ``a`` minus ``b``: Hedges' g (paired: of the
        differences) with its percentile bootstrap interval, and Cliff's delta. q-values are
        Benjamini-Hochberg over every row. ``attrs["warnings"]`` lists design problems, such as
        groups too small for any test to reach ``alpha``.
    """
    need = ["metric", "motif", "value", by] + ([subject_column] if paired else [])
    check_columns(metrics, need, "the metrics table")
    if test not in ("permutation", "rank"):
        raise InputError(f"test must be 'permutation' or 'rank'; got {test!r}")
    table = metrics.dropna(subset=[by]).astype({by: str})
    groups = sorted(table[by].unique())
    if len(groups) < 2:
        raise InputError(f"column {by!r} holds {len(groups)} group(s) {groups}; need >= 2")
    unit = subject_column if paired else "session"
    if unit in table.columns:
        sizes = table.groupby(by)[unit].nunique()
    else:  # no session column: the largest number of values any test has per group
        sizes = table.groupby([by, "metric", "motif"]).size().groupby(level=0).max()
    small = sizes[sizes < 2]
    if len(small):
        what = "subject" if paired else "session"
        msg = f"group(s) {small.index.tolist()} have a single {what}; each group needs >= 2 "
        raise InputError(msg + f"(sizes: {sizes.to_dict()})")
    pairs = _pairs(groups, reference)
    rows = []
    for t, ((metric, motif), block) in enumerate(table.groupby(["metric", "motif"], sort=True)):
        if paired:
            if block.duplicated([subject_column, by]).any():
                msg = f"{metric}/{motif}: a subject has several rows in one condition"
                raise InputError(msg + f" ({by!r}); a paired design expects one per condition")
            wide = block.pivot(index=subject_column, columns=by, values="value")
            wide = wide.reindex(columns=groups)
        values = {
            g: block.loc[block[by] == g, "value"].dropna().to_numpy(np.float64) for g in groups
        }
        extra = {}
        if len(groups) > 2:
            full = wide.dropna() if paired else None
            samples = [full[g].to_numpy() for g in groups] if paired else list(values.values())
            extra["omnibus_p"] = _omnibus(samples, paired, test, n_resamples, [random_state, t])
            kind = ("friedman" if paired else "kruskal-wallis") if test == "rank" else None
            extra["omnibus_test"] = kind or f"{'paired ' * paired}permutation F"
        for j, (ga, gb) in enumerate(pairs):
            if paired:
                both = wide[[ga, gb]].dropna()
                x, y = both[ga].to_numpy(np.float64), both[gb].to_numpy(np.float64)
            else:
                x, y = values[ga], values[gb]
            stats = _pair(
                x, y, paired, test, n_resamples, n_bootstrap, exact_threshold, [random_state, t, j]
            )
            rows.append(
                {"metric": metric, "motif": motif, "group_a": ga, "group_b": gb, **stats, **extra}
            )
    out = pd.DataFrame(rows)
    out["q_value"] = benjamini_hochberg(out["p_value"].to_numpy(np.float64))
    out["significant"] = out["q_value"] < alpha
    warnings = []
    blocked = out["floor"] > alpha
    if blocked.any():
        note = "too few values: the smallest reachable p exceeds alpha"
        out.loc[blocked, "note"] = [f"{note} ({f:.3g} > {alpha})" for f in out["floor"][blocked]]
        warnings.append(
            f"{int(blocked.sum())} of {len(out)} comparisons cannot reach p < {alpha} with their "
            f"group sizes (smallest reachable p {out['floor'][blocked].min():.3g}); add sessions"
        )
    if (out["note"] == "fewer than 2 values in a group").any():
        warnings.append("some comparisons have fewer than 2 values in a group (p is NaN)")
    omnibus = ["omnibus_p", "omnibus_test"] if len(groups) > 2 else []
    out = out.reindex(columns=[*COMPARISON_COLUMNS, *omnibus, "note"])
    out.attrs["warnings"] = warnings
    return out
