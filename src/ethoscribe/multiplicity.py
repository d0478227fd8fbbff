"""Which tests are corrected together: planned comparisons and families of exploratory tests.

A study usually plans a few comparisons before it looks at the data (e.g. "enriched voles dig
more": the time budget and bout rate of digging); everything else the tables hold is looked at
afterwards. Following common practice in confirmatory research (pre-specified primary outcomes,
every other outcome reported as exploratory), :func:`adjust` corrects

- the **planned** tests together with Holm's (1979) step-down method, which keeps the chance of
  any false rejection among them below ``alpha`` (family-wise error rate);
- every other test as **exploratory**, Benjamini-Hochberg (1995) within its **family** -- one per
  kind of measurement: time budget, bout rate, bout duration, transitions -- which keeps the
  expected share of false discoveries among that family's rejections below ``alpha``.

A test without variation (every value equal, or fewer than two values in a group) is **not
testable**: its p-value is NaN and it is not counted in any family.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np
import pandas as pd

from ethoscribe.effects import benjamini_hochberg, holm
from ethoscribe.errors import InputError, listed

__all__ = ["FAMILIES", "METRIC_ALIASES", "adjust", "family_summary", "headline", "parse_planned"]

FAMILIES = {
    "time_budget": "time_budget",
    "bout_rate_per_min": "bout_rate",
    "mean_bout_s": "bout_duration",
    "median_bout_s": "bout_duration",
    "transition": "transitions",
}
FAMILY_ORDER = ("time_budget", "bout_rate", "bout_duration", "transitions")
METRIC_ALIASES = {
    "bout_rate": "bout_rate_per_min",
    "bout_duration": "mean_bout_s",
    "mean_bout": "mean_bout_s",
    "median_bout": "median_bout_s",
    "transitions": "transition",
}
PLANNED, EXPLORATORY = "planned", "exploratory"


def parse_planned(spec: str | Iterable[str | tuple[str, str]] | None) -> list[tuple[str, str]]:
    """``"time_budget:digging,bout_rate:digging"`` -> ``[(metric, motif), ...]``.

    Metric names are those of the metrics table or their short forms (``bout_rate``,
    ``bout_duration`` = ``mean_bout_s``, ``transitions``); a transition's motif is written
    ``from->to`` (``transition:walking->digging``). Motif names are the curated ones.

    Examples
    --------
    >>> parse_planned("time_budget:digging, bout_rate:digging")
    [('time_budget', 'digging'), ('bout_rate_per_min', 'digging')]
    """
    if spec is None:
        return []
    items = [p for p in spec.split(",")] if isinstance(spec, str) else list(spec)
    out: list[tuple[str, str]] = []
    for item in items:
        if isinstance(item, str):
            if not item.strip():
                continue
            metric, sep, motif = item.strip().partition(":")
            if not sep or not metric.strip() or not motif.strip():
                msg = (
                    f"planned comparison {item.strip()!r} is not METRIC:MOTIF; write e.g. "
                    "'time_budget:digging,bout_rate:digging'"
                )
                raise InputError(msg)
        else:
            metric, motif = item
        metric, motif = str(metric).strip(), str(motif).strip()
        pair = (METRIC_ALIASES.get(metric, metric), motif)
        if pair not in out:
            out.append(pair)
    return out


def _check_planned(table: pd.DataFrame, planned: list[tuple[str, str]]) -> None:
    metrics = sorted(set(table["metric"]))
    for metric, motif in planned:
        if metric not in metrics:
            short = sorted({*metrics, *(a for a, m in METRIC_ALIASES.items() if m in metrics)})
            msg = f"planned comparison {metric}:{motif}: no metric {metric!r}; metrics: {short}"
            raise InputError(msg)
        motifs = sorted(set(table.loc[table["metric"] == metric, "motif"].astype(str)))
        if motif not in motifs:
            shown = listed(motifs, 15)
            msg = (
                f"planned comparison {metric}:{motif}: no motif {motif!r} for {metric!r} "
                f"(motifs: {shown}); use the names after curation"
            )
            raise InputError(msg)


def adjust(
    tests: pd.DataFrame, planned: list[tuple[str, str]] | None = None, alpha: float = 0.05
) -> pd.DataFrame:
    """Label and correct a table of tests (``metric, motif, p_value``; NaN p = not testable).

    Adds ``analysis`` (``planned`` / ``exploratory``), ``family``, ``testable``, ``q_value``
    (the adjusted p-value: Holm over the planned tests, Benjamini-Hochberg q within the
    family for the others), ``correction`` (what was done, with the number of tests) and
    ``significant`` (``q_value < alpha``).

    Examples
    --------
    >>> t = pd.DataFrame({"metric": ["time_budget", "time_budget", "transition"],
    ...                   "motif": ["dig", "walk", "dig->walk"], "p_value": [0.01, 0.04, np.nan]})
    >>> adjust(t, [("time_budget", "dig")])[["analysis", "q_value", "correction"]].values.tolist()
    [['planned', 0.01, 'Holm over 1 planned test'], ['exploratory', 0.04, 'Benjamini-Hochberg \
within time_budget (1 test)'], ['exploratory', nan, 'not testable']]
    """
    planned = list(planned or [])
    _check_planned(tests, planned)
    out = tests.copy()
    keys = list(zip(out["metric"], out["motif"].astype(str), strict=True))
    is_planned = np.array([k in set(planned) for k in keys], dtype=bool)
    out["analysis"] = np.where(is_planned, PLANNED, EXPLORATORY)
    out["family"] = [FAMILIES.get(m, m) for m in out["metric"]]
    p = out["p_value"].to_numpy(np.float64)
    out["testable"] = ~np.isnan(p)
    q = np.full(len(out), np.nan)
    correction = np.full(len(out), "not testable", dtype=object)
    chosen = is_planned & out["testable"].to_numpy()
    n = int(chosen.sum())
    q[chosen] = holm(p[chosen])
    correction[chosen] = f"Holm over {n} planned test{'s' * (n != 1)}"
    for family in out["family"].unique():
        rows = (~is_planned) & (out["family"] == family).to_numpy() & out["testable"].to_numpy()
        n = int(rows.sum())
        q[rows] = benjamini_hochberg(p[rows])
        correction[rows] = f"Benjamini-Hochberg within {family} ({n} test{'s' * (n != 1)})"
    out["q_value"] = q
    out["correction"] = correction
    out["significant"] = out["q_value"] < alpha
    return out


def family_summary(stats: pd.DataFrame, alpha: float = 0.05) -> pd.DataFrame:
    """One row per set of tests corrected together: planned first, then the families.

    Columns ``analysis, family, correction, tests, not_testable, significant`` (``tests``
    counts the testable ones; ``significant``: adjusted p below ``alpha``).

    Examples
    --------
    >>> t = adjust(pd.DataFrame({"metric": ["time_budget"] * 2, "motif": ["a", "b"],
    ...                          "p_value": [0.001, np.nan]}))
    >>> family_summary(t)[["family", "tests", "not_testable", "significant"]].values.tolist()
    [['time_budget', 1, 1, 1]]
    """
    rows = []
    planned = stats[stats["analysis"] == PLANNED]
    if len(planned):
        rows.append(_summary_row(planned, PLANNED, "planned comparisons", "Holm", alpha))
    explore = stats[stats["analysis"] != PLANNED]
    order = [f for f in FAMILY_ORDER if f in set(explore["family"])]
    order += sorted(set(explore["family"]) - set(order))
    for family in order:
        part = explore[explore["family"] == family]
        rows.append(_summary_row(part, EXPLORATORY, family, "Benjamini-Hochberg", alpha))
    columns = ["analysis", "family", "correction", "tests", "not_testable", "significant"]
    return pd.DataFrame(rows, columns=columns)


def _summary_row(part: pd.DataFrame, analysis: str, family: str, method: str, alpha: float):
    testable = part["testable"].astype(bool)
    return {
        "analysis": analysis,
        "family": family,
        "correction": method,
        "tests": int(testable.sum()),
        "not_testable": int((~testable).sum()),
        "significant": int((part["q_value"] < alpha).sum()),
    }


def headline(stats: pd.DataFrame, alpha: float) -> str:
    """Planned results one by one, then the exploratory families' counts (one paragraph).

    ``stats`` is :func:`ethoscribe.stats.compare_groups` output.
    """
    planned = stats[stats["analysis"] == "planned"]
    if len(planned):
        n = int(planned["testable"].sum())
        parts = []
        for _, r in planned.iterrows():
            what = f"{r['metric']} of {r['motif']!r} ({r['group_a']} vs {r['group_b']}"
            if not r["testable"]:
                parts.append(f"{what}: {r['note']})")
                continue
            verdict = "significant" if r["significant"] else "not significant"
            parts.append(
                f"{what}: Hedges' g = {r['effect_size']:.2f}, p = {r['p_value']:.2g}, "
                f"Holm-adjusted p = {r['q_value']:.2g}, {verdict})"
            )
        text = f"Planned (confirmatory, Holm over {n} tests): " + "; ".join(parts) + "."
    else:
        text = "No planned comparisons were given (--primary); every test is exploratory."
    fam = family_summary(stats, alpha)
    fam = fam[fam["analysis"] == "exploratory"]
    counts = []
    for _, r in fam.iterrows():
        extra = f", {r['not_testable']} not testable" if r["not_testable"] else ""
        counts.append(f"{r['family']} {r['significant']} of {r['tests']}{extra}")
    if counts:
        text += (
            f" Exploratory (Benjamini-Hochberg within each family, q < {alpha}; a reason to look "
            f"at the bouts, not a finding): {'; '.join(counts)}."
        )
    return text
