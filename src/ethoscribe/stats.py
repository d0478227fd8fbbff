"""Group statistics over per-session ethogram metrics.

``session_metrics`` turns labels and bouts into one long table (one value per recording, metric
and motif); ``compare_groups`` tests every metric x motif between every pair of groups with a
permutation or rank test, with effect sizes and their intervals, on one value per subject (the
session where no subject is given: the animals of one session are not independent). Planned
comparisons are Holm-corrected together; every other test is exploratory and
Benjamini-Hochberg-corrected within its family of measurements (:mod:`ethoscribe.multiplicity`).
The tests and effect sizes themselves live in :mod:`ethoscribe.effects` (re-exported here), which
also explains when permutation tests are exact.
"""

from __future__ import annotations

from collections.abc import Sequence
from itertools import combinations
from math import comb

import numpy as np
import pandas as pd
from scipy import stats as sps

from ethoscribe.effects import (
    EXACT_THRESHOLD,
    PermutationResult,
    benjamini_hochberg,
    bootstrap_ci,
    cliffs_delta,
    cliffs_delta_rows,
    hedges_g,
    hedges_g_interval,
    hedges_g_rows,
    holm,
    permutation_omnibus,
    permutation_test,
)
from ethoscribe.errors import InputError
from ethoscribe.ethogram import (
    FpsSpec,
    bout_rate,
    check_columns,
    duration_summary,
    time_budget,
    transition_table,
)
from ethoscribe.multiplicity import FAMILY_ORDER, adjust, parse_planned

__all__ = [
    "COMPARISON_COLUMNS",
    "EXACT_THRESHOLD",
    "METRIC_COLUMNS",
    "PermutationResult",
    "benjamini_hochberg",
    "bootstrap_ci",
    "cliffs_delta",
    "compare_groups",
    "hedges_g",
    "hedges_g_interval",
    "holm",
    "parse_planned",
    "permutation_omnibus",
    "permutation_test",
    "session_metrics",
]

METRIC_COLUMNS = ("session", "animal", "group", "subject", "metric", "motif", "value")
COMPARISON_COLUMNS = (
    "analysis", "family", "metric", "motif", "group_a", "group_b", "n_a", "n_b", "mean_a",
    "mean_b", "effect_size", "cliffs_delta", "ci_low", "ci_high", "p_value", "q_value",
    "correction", "significant", "testable", "test",
)  # fmt: skip
NOT_TESTABLE = "not testable: "


def _design(sessions: pd.DataFrame) -> tuple[pd.DataFrame, list[str]]:
    check_columns(sessions, ("session", "group"), "the sessions table")
    keys = ["session", "animal"] if "animal" in sessions.columns else ["session"]
    design = sessions.copy()
    design["session"] = design["session"].astype(str)
    if "subject" not in design.columns:
        design["subject"] = design["session"]
    # an empty subject is the session's own, not one shared with the other empty ones
    empty = design["subject"].isna() | (design["subject"].astype(str).str.strip() == "")
    design["subject"] = design["subject"].where(~empty, design["session"])
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


def _pair(x, y, paired, test, n_resamples, exact_threshold, seed) -> dict:
    """Statistics of one comparison; ``x``, ``y`` finite (matched when paired)."""
    row = {
        "n_a": len(x),
        "n_b": len(y),
        "mean_a": x.mean() if len(x) else np.nan,
        "mean_b": y.mean() if len(y) else np.nan,
    }
    if min(len(x), len(y)) < 2:
        note = NOT_TESTABLE + "fewer than 2 values in a group"
        return {**row, "p_value": np.nan, "test": test, "floor": np.nan, "note": note}
    total = 2 ** len(x) if paired else comb(len(x) + len(y), len(x))
    row["floor"] = min(1.0, 2 / total)
    g, delta = (
        hedges_g_rows(x[None], y[None], paired)[0],
        cliffs_delta_rows(x[None], y[None], paired)[0],
    )
    low, high = hedges_g_interval(x, y, paired)
    row.update(effect_size=g, cliffs_delta=delta, ci_low=low, ci_high=high, note="")
    if np.ptp(np.r_[x, y]) == 0 or (paired and not np.any(x - y)):
        return {**row, "p_value": np.nan, "test": test, "note": NOT_TESTABLE + "no variation"}
    if test == "rank":
        res = sps.wilcoxon(x, y) if paired else sps.mannwhitneyu(x, y, alternative="two-sided")
        name = "wilcoxon signed-rank" if paired else "mann-whitney u"
        return {**row, "p_value": float(res.pvalue), "test": name}
    res = permutation_test(x, y, "mean_difference", n_resamples, exact_threshold, paired, seed)
    kind = "exact" if res.method == "exact" else f"monte-carlo {res.n_resamples}"
    row["floor"] = res.min_p_value
    return {**row, "p_value": res.p_value, "test": f"{'paired ' * paired}permutation {kind}"}


def _per_unit(table: pd.DataFrame, unit: str, by: str) -> tuple[pd.DataFrame, str]:
    """One value per unit, group, metric and motif (the mean of the unit's recordings), and
    what was averaged ("" where every unit has one recording)."""
    if unit not in table.columns:
        return table, ""
    keys = [unit, by, "metric", "motif"]
    if not table.duplicated(keys).any():
        return table, ""
    recordings = [c for c in ("session", "animal") if c in table.columns]
    n_rec = len(table.drop_duplicates(recordings)) if recordings else len(table)
    n_units = table[[unit, by]].drop_duplicates().shape[0]
    same = "session" in table.columns and table[unit].equals(table["session"])
    noun = "session" if same else unit  # no subjects given: the session is the unit
    # NaN (no bout of the motif) is left out of a unit's mean, as of a test
    table = table.groupby(keys, sort=False, as_index=False)["value"].mean()
    what = "recordings (sessions x animals)" if len(recordings) == 2 else "recordings"
    note = (
        f"The {n_rec} {what} are {n_units} {noun}s: each {noun}'s values are averaged and "
        "tested once, as the animals of one session (or the sessions of one subject) are not "
        "independent"
    )
    return table, note


def unit_values(
    metrics: pd.DataFrame, by: str = "group", subject_column: str = "subject"
) -> tuple[pd.DataFrame, str]:
    """The values :func:`compare_groups` tests: one per unit of analysis (the subject, or the
    session where there is no ``subject_column``), group, metric and motif, the mean of the
    unit's recordings; and the unit's column."""
    table, unit, _ = _unit_table(metrics, by, subject_column)
    return table, unit


def _unit_table(
    metrics: pd.DataFrame, by: str, subject_column: str
) -> tuple[pd.DataFrame, str, str]:
    """Rows with a group, one per unit (:func:`_per_unit`); the unit's column; what was
    averaged."""
    table = metrics.dropna(subset=[by]).astype({by: str})
    unit = subject_column if subject_column in table.columns else "session"
    table, averaged = _per_unit(table, unit, by)
    return table, unit, averaged


def _design_notes(table: pd.DataFrame, unit: str, by: str, paired: bool) -> list[str]:
    """Subjects measured in several groups of an unpaired comparison (a within-subject
    design tested as independent animals), or missing a condition of a paired one."""
    if unit == "session" or unit not in table.columns:
        return []
    seen = table[[unit, by]].drop_duplicates().groupby(unit, sort=True)[by].agg(sorted)
    groups = sorted(table[by].unique())
    if not paired:
        shared = seen[seen.map(len) > 1]
        if shared.empty:
            return []
        first = shared.index[0]
        return [
            f"{len(shared)} of {len(seen)} subjects are in more than one group (e.g. "
            f"{first!r} in {' and '.join(map(repr, shared.iloc[0]))}): an unpaired test counts "
            "them as independent animals. If each subject was measured under every "
            "condition, compare paired (--paired; paired=True)"
        ]
    partial = seen[seen.map(len) < len(groups)]
    if partial.empty:
        return []
    named = ", ".join(f"{s!r} (only {' and '.join(map(repr, g))})" for s, g in partial.items())
    return [
        f"Paired tests read only the subjects measured in both conditions compared; "
        f"{len(partial)} of {len(seen)} subjects lack one: {named}"
    ]


def _omnibus(samples: list[np.ndarray], paired: bool, test: str, n_resamples: int, seed) -> float:
    """p of any difference among > 2 groups (Kruskal-Wallis / Friedman, or permutation F)."""
    if min(len(s) for s in samples) < 2 or np.ptp(np.concatenate(samples)) == 0:
        return float("nan")
    if test == "rank":
        res = sps.friedmanchisquare(*samples) if paired else sps.kruskal(*samples)
        return float(res.pvalue)
    return permutation_omnibus(samples, paired, n_resamples, seed)


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
    exact_threshold: int = EXACT_THRESHOLD,
    reference: str | None = None,
    random_state: int = 0,
    planned: str | Sequence[str | tuple[str, str]] | None = None,
) -> pd.DataFrame:
    """Compare every metric x motif between every pair of groups.

    Parameters
    ----------
    metrics : DataFrame
        Long table as from :func:`session_metrics` (``metric, motif, value``, ``by``; one row per
        recording; NaN values are left out test by test). The unit of analysis is the
        subject (``subject_column``; without it, the session): rows of one subject in one
        group, the animals of a session or the sessions of one animal, are averaged before
        testing, since they are not independent (a test on the animals of two-animal sessions
        would count each session twice); ``attrs["warnings"]`` says so where it happens.
    by : str
        Column naming the group (or, when paired, the condition).
    test : {"permutation", "rank"}
        Permutation of the mean difference (:func:`permutation_test`), or Mann-Whitney U /
        Wilcoxon signed-rank (paired); with > 2 groups also a permutation-F / Kruskal-Wallis /
        Friedman omnibus p (``omnibus_p``, Monte Carlo for the permutation F).
    paired : bool
        Subjects measured under several conditions: values are matched on ``subject_column``;
        subjects missing a condition are left out of that comparison.
    subject_column : str
        Column naming the subject, the unit of analysis (see ``metrics``).
    alpha : float
        Level for ``significant`` (``q_value < alpha``).
    reference : str, optional
        A control group placed as ``group_b`` in every pair it is in.
    planned : str or list, optional
        The comparisons the study planned, ``"time_budget:digging,bout_rate:digging"`` or a list
        of ``(metric, motif)`` (see :func:`ethoscribe.multiplicity.parse_planned`): tested for
        every pair of groups and Holm-corrected together; every other test is exploratory.

    Returns
    -------
    DataFrame
        ``COMPARISON_COLUMNS`` (+ ``omnibus_p, omnibus_test`` for > 2 groups, unadjusted) and
        ``note``; planned rows first, then the families (time budget, bout rate, bout duration,
        transitions). Effects are ``a`` minus ``b``: Hedges' g (paired: of the differences)
        with its noncentral-t interval (:func:`hedges_g_interval`), and Cliff's delta.
        ``q_value`` is the adjusted p-value named in ``correction``: Holm over the planned
        tests, Benjamini-Hochberg within the family for the exploratory ones. Tests without
        variation are ``testable=False`` with NaN p and are not counted. ``attrs["warnings"]``
        lists design problems, such as groups too small for any test to reach ``alpha``, and
        recordings averaged into their subject; ``attrs["alpha"]`` the level,
        ``attrs["paired"]`` the design.
        :func:`~ethoscribe.multiplicity.family_summary` counts the tests per family.
    """
    need = ["metric", "motif", "value", by] + ([subject_column] if paired else [])
    check_columns(metrics, need, "the metrics table")
    if test not in ("permutation", "rank"):
        raise InputError(f"test must be 'permutation' or 'rank'; got {test!r}")
    table, unit, averaged = _unit_table(metrics, by, subject_column)
    groups = sorted(table[by].unique())
    if len(groups) < 2:
        raise InputError(f"column {by!r} holds {len(groups)} group(s) {groups}; need >= 2")
    design = _design_notes(table, unit, by, paired)
    if unit in table.columns:
        sizes = table.groupby(by)[unit].nunique()
    else:  # no session column: the largest number of values any test has per group
        sizes = table.groupby([by, "metric", "motif"]).size().groupby(level=0).max()
    small = sizes[sizes < 2]
    if len(small):
        what = unit
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
            stats = _pair(x, y, paired, test, n_resamples, exact_threshold, [random_state, t, j])
            rows.append(
                {"metric": metric, "motif": motif, "group_a": ga, "group_b": gb, **stats, **extra}
            )
    out = adjust(pd.DataFrame(rows), parse_planned(planned), alpha)
    family_rank = {f: i for i, f in enumerate(FAMILY_ORDER)}
    out = out.assign(
        _first=out["analysis"] != "planned",
        _family=out["family"].map(family_rank).fillna(len(family_rank)),
    ).sort_values(["_first", "_family", "metric", "motif"], kind="stable")
    out = out.drop(columns=["_first", "_family"]).reset_index(drop=True)
    warnings = ([averaged] if averaged else []) + design
    blocked = out["floor"] > alpha
    if blocked.any():
        note = "too few values: the smallest reachable p exceeds alpha"
        out.loc[blocked, "note"] = [f"{note} ({f:.3g} > {alpha})" for f in out["floor"][blocked]]
        warnings.append(
            f"{int(blocked.sum())} of {len(out)} comparisons cannot reach p < {alpha} with their "
            f"group sizes (smallest reachable p {out['floor'][blocked].min():.3g}); add sessions"
        )
    if out["note"].str.endswith("fewer than 2 values in a group").any():
        warnings.append("some comparisons have fewer than 2 values in a group (not testable)")
    omnibus = ["omnibus_p", "omnibus_test"] if len(groups) > 2 else []
    out = out.reindex(columns=[*COMPARISON_COLUMNS, *omnibus, "note"])
    out.attrs["warnings"] = warnings
    out.attrs["alpha"] = alpha
    out.attrs["paired"] = bool(paired)
    return out
