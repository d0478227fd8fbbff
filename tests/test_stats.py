"""Group statistics against outside references, and recovery of a planted group difference.

References: Benjamini & Hochberg (1995) and statsmodels ``multipletests``; Efron & Tibshirani
(1993) mouse data and ``scipy.stats.permutation_test``; ``scipy.stats.mannwhitneyu`` /
``kruskal`` / ``wilcoxon`` / ``bootstrap``; Borenstein et al. (2009) and statsmodels
``effectsize_smd`` for Hedges' g; scipy's noncentral t and statsmodels'
``confint_noncentrality`` for its interval. The recovery test uses invented label tables (seeded).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import optimize
from scipy import stats as sps
from statsmodels.stats.meta_analysis import effectsize_smd
from statsmodels.stats.multitest import multipletests

from ethoscribe.errors import InputError
from ethoscribe.ethogram import bout_table, time_budget
from ethoscribe.plots.stats import group_difference_figure
from ethoscribe.stats import (
    COMPARISON_COLUMNS,
    benjamini_hochberg,
    bootstrap_ci,
    cliffs_delta,
    compare_groups,
    hedges_g,
    permutation_test,
    session_metrics,
)

BH_P = [
    0.0001,
    0.0004,
    0.0019,
    0.0095,
    0.0201,
    0.0278,
    0.0298,
    0.0344,
    0.0459,
    0.3240,
    0.4262,
    0.5719,
    0.6528,
    0.7590,
    1.000,
]
MOUSE_TREATMENT = [94, 197, 16, 38, 99, 141, 23]
MOUSE_CONTROL = [52, 104, 146, 10, 51, 30, 40, 27, 46]


def mean_diff(x, y, axis=-1):
    return np.mean(x, axis=axis) - np.mean(y, axis=axis)


def test_benjamini_hochberg_against_the_1995_example_and_statsmodels():
    q = benjamini_hochberg(BH_P)
    # Benjamini & Hochberg (1995), 15 p-values: 4 rejections at 0.05 (EXTERNAL-CHECKS.md)
    assert int((q <= 0.05).sum()) == 4
    # statsmodels multipletests(method="fdr_bh") adjusted values
    np.testing.assert_allclose(q, multipletests(BH_P, method="fdr_bh")[1], rtol=1e-12)
    np.testing.assert_allclose(q[:5], [0.0015, 0.003, 0.0095, 0.035625, 0.0603], rtol=1e-4)
    rng = np.random.default_rng(0)
    p = rng.random(200) ** 3
    np.testing.assert_allclose(benjamini_hochberg(p), multipletests(p, method="fdr_bh")[1])
    with_nan = benjamini_hochberg([0.01, np.nan, 0.04])
    assert np.isnan(with_nan[1]) and with_nan[0] == pytest.approx(0.02)


def test_permutation_mouse_data_against_efron_tibshirani_and_scipy():
    res = permutation_test(MOUSE_TREATMENT, MOUSE_CONTROL)
    assert res.method == "exact" and res.n_arrangements == 11440
    assert res.statistic == pytest.approx(86.857142857 - 56.222222222)
    ref = sps.permutation_test(
        (MOUSE_TREATMENT, MOUSE_CONTROL), mean_diff, n_resamples=np.inf, alternative="greater"
    )
    # Efron & Tibshirani (1993) exact one-sided p = 1613/11440 (from memory), scipy agrees
    assert ref.pvalue == pytest.approx(1613 / 11440)
    two = sps.permutation_test((MOUSE_TREATMENT, MOUSE_CONTROL), mean_diff, n_resamples=np.inf)
    # our two-sided p vs scipy's two-sided exact p (= 2 x 1613 / 11440)
    assert res.p_value == pytest.approx(two.pvalue, abs=1e-12)
    assert res.p_value == pytest.approx(2 * 1613 / 11440)


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_exact_permutation_p_matches_scipy_independent_and_paired(seed):
    rng = np.random.default_rng(seed)
    a, b = rng.normal(0, 1, 6), rng.normal(0.8, 1, 7)
    ref = sps.permutation_test((a, b), mean_diff, n_resamples=np.inf)  # scipy, exact
    assert permutation_test(a, b).p_value == pytest.approx(ref.pvalue, abs=1e-12)
    x, y = rng.normal(0, 1, 9), rng.normal(0.5, 1, 9)
    ref = sps.permutation_test(
        (x, y),
        lambda u, v, axis: np.mean(u - v, axis=axis),
        permutation_type="samples",
        n_resamples=np.inf,
    )
    # scipy permutation_type="samples" is the paired reference (2**9 sign patterns)
    res = permutation_test(x, y, paired=True)
    assert res.n_arrangements == 512 and res.p_value == pytest.approx(ref.pvalue, abs=1e-12)
    med = sps.permutation_test(
        (a, b),
        lambda u, v, axis: np.median(u, axis=axis) - np.median(v, axis=axis),
        n_resamples=np.inf,
    )
    assert permutation_test(a, b, "median_difference").p_value == pytest.approx(med.pvalue)


def test_monte_carlo_permutation_and_smallest_reachable_p():
    rng = np.random.default_rng(7)
    a, b = rng.normal(0, 1, 15), rng.normal(0.6, 1, 15)
    res = permutation_test(a, b, n_resamples=4000, random_state=3)
    assert res.method == "monte_carlo" and res.n_resamples == 4000
    assert (res.p_value * 4001 / 2) == pytest.approx(round(res.p_value * 4001 / 2))  # 2(k+1)/(n+1)
    ref = sps.permutation_test((a, b), mean_diff, n_resamples=20000, random_state=1)
    # scipy Monte Carlo reference: agree within Monte Carlo error (~4 standard errors)
    assert abs(res.p_value - ref.pvalue) < 4 * np.sqrt(ref.pvalue * (1 - ref.pvalue) / 4000) * 2
    small = permutation_test([1.0, 2.0, 3.0], [4.0, 5.0, 6.0])
    assert small.min_p_value == pytest.approx(0.1) and small.p_value == pytest.approx(0.1)


def test_hedges_g_textbook_example_statsmodels_and_direct_formula():
    def with_moments(mean, sd, n, seed):
        z = np.random.default_rng(seed).normal(size=n)
        return mean + sd * (z - z.mean()) / z.std(ddof=1)

    a, b = with_moments(103, 5.5, 50, 0), with_moments(100, 4.5, 50, 1)
    # Borenstein, Hedges, Higgins & Rothstein (2009), Introduction to Meta-Analysis, ch. 4:
    # means 103 / 100, SDs 5.5 / 4.5, n 50 / 50 -> d = 0.5970, g = 0.5924 (from memory)
    assert hedges_g(a, b) == pytest.approx(0.5924, abs=1e-4)
    # statsmodels effectsize_smd (uses the approximate J = 1 - 3 / (4 N - 9))
    assert hedges_g(a, b) == pytest.approx(effectsize_smd(103, 5.5, 50, 100, 4.5, 50)[0], rel=1e-4)
    x, y = np.array([3.1, 4.5, 2.2, 5.0]), np.array([1.0, 2.5, 2.0])
    df = 5
    sp = np.sqrt((3 * x.var(ddof=1) + 2 * y.var(ddof=1)) / df)
    j = math.gamma(df / 2) / (math.sqrt(df / 2) * math.gamma((df - 1) / 2))
    assert hedges_g(x, y) == pytest.approx(j * (x.mean() - y.mean()) / sp)  # direct formula
    assert j == pytest.approx(1 - 3 / (4 * df - 1), abs=2e-3)  # the usual approximation
    d = np.array([0.5, 1.0, -0.2, 0.8])
    j3 = math.gamma(1.5) / (math.sqrt(1.5) * math.gamma(1.0))
    paired = hedges_g(d + 1.0, np.ones(4), paired=True)
    assert paired == pytest.approx(j3 * d.mean() / d.std(ddof=1))


def test_hedges_g_interval_inverts_the_noncentral_t_and_matches_statsmodels():
    from statsmodels.stats.oneway import confint_noncentrality

    from ethoscribe.stats import hedges_g_interval

    rng = np.random.default_rng(3)
    a, b = rng.normal(1.0, 1.0, 7), rng.normal(0.0, 1.0, 9)
    low, high = hedges_g_interval(a, b)
    df, scale = 14, np.sqrt(1 / 7 + 1 / 9)
    j = math.gamma(df / 2) / (math.sqrt(df / 2) * math.gamma((df - 1) / 2))
    t = sps.ttest_ind(a, b).statistic  # scipy's pooled two-sample t
    # scipy's noncentral t: the observed t is the 97.5 % / 2.5 % quantile at the bounds
    assert sps.nct.cdf(t, df, low / j / scale) == pytest.approx(0.975, abs=1e-7)
    assert sps.nct.cdf(t, df, high / j / scale) == pytest.approx(0.025, abs=1e-7)
    assert low < hedges_g(a, b) < high
    # the noncentral F of t^2 on (1, df) gives the same bounds where the interval is far from
    # 0 (P(T < -t) is then negligible): scipy's ncf inverted directly, and statsmodels'
    # confint_noncentrality (within its solver's tolerance, ~3e-4 here)
    big = b - 4.0
    low, high = hedges_g_interval(a, big)
    t = sps.ttest_ind(a, big).statistic
    for bound, p in ((low, 0.975), (high, 0.025)):
        nc = optimize.brentq(lambda v, p=p: sps.ncf.cdf(t**2, 1, df, v) - p, 1e-6, 1e3, xtol=1e-12)
        assert bound == pytest.approx(np.sqrt(nc) * j * scale, rel=1e-8)
    nc = confint_noncentrality(t**2, (1, df), alpha=0.05)
    np.testing.assert_allclose(np.sqrt(nc) * j * scale, [low, high], rtol=1e-3)
    # paired: the one-sample t of the differences on n - 1
    d = rng.normal(0.8, 1.0, 8)
    low, high = hedges_g_interval(d + 1.0, np.ones(8), paired=True)
    j7 = math.gamma(3.5) / (math.sqrt(3.5) * math.gamma(3.0))
    t = sps.ttest_1samp(d, 0.0).statistic
    assert sps.nct.cdf(t, 7, low / j7 * np.sqrt(8)) == pytest.approx(0.975, abs=1e-7)
    assert sps.nct.cdf(t, 7, high / j7 * np.sqrt(8)) == pytest.approx(0.025, abs=1e-7)


def test_hedges_g_interval_stays_finite_with_three_sessions_per_group():
    # Three sessions per group with near-equal values: a percentile bootstrap gave bounds of
    # 1e15 (resamples repeating one value); the noncentral-t interval is wide and finite, and
    # holds the estimate (common practice: an interval that excludes its own estimate is wrong).
    from ethoscribe.stats import hedges_g_interval

    for a, b in [([0.21, 0.22, 0.215], [0.35, 0.36, 0.33]), ([1.0, 1.1, 1.2], [5.0, 5.05, 5.2])]:
        low, high = hedges_g_interval(a, b)
        assert np.isfinite([low, high]).all() and low < hedges_g(a, b) < high < 0
    assert np.isnan(hedges_g_interval([1.0, 1.0], [2.0, 2.0])).all()  # no spread: undefined


def test_the_animals_of_a_session_are_one_unit_of_analysis():
    # Two animals per session, two sessions per group: the animals are averaged per session
    # and the test is the exact permutation test of the four session means (reference:
    # scipy.stats.permutation_test; its smallest two-sided p with 2 against 2 is 1/3).
    rng = np.random.default_rng(5)
    rows = []
    for g, shift in (("a", 0.0), ("b", 1.0)):
        for s in range(2):
            for animal in ("m1", "m2"):
                rows.append({"session": f"{g}{s}", "animal": animal, "group": g,
                             "subject": f"{g}{s}", "metric": "time_budget", "motif": "dig",
                             "value": shift + rng.normal(0.0, 0.1)})  # fmt: skip
    metrics = pd.DataFrame(rows)
    out = compare_groups(metrics).iloc[0]
    means = metrics.groupby(["group", "session"])["value"].mean()
    assert (out.n_a, out.n_b) == (2, 2)
    assert out.mean_a == pytest.approx(means["a"].mean())
    ref = sps.permutation_test(
        (means["a"].to_numpy(), means["b"].to_numpy()),
        lambda x, y: x.mean() - y.mean(), permutation_type="independent",
    )  # fmt: skip
    assert out.p_value == pytest.approx(ref.pvalue) and out.p_value == pytest.approx(1 / 3)
    assert out.effect_size == pytest.approx(hedges_g(means["a"], means["b"]))
    (said,) = compare_groups(metrics).attrs["warnings"][:1]
    assert said.startswith("The 8 recordings (sessions x animals) are 4 sessions: each")
    shared = metrics.assign(subject=metrics["session"].str[0] + "cage" + metrics["session"])
    assert (
        compare_groups(shared)
        .attrs["warnings"][0]
        .startswith("The 8 recordings (sessions x animals) are 4 subjects")
    )
    # a subject given to both sessions of a group (one animal filmed twice): one value each
    twice = metrics.assign(subject=metrics["group"])
    with pytest.raises(InputError, match="single subject"):
        compare_groups(twice)
    # animals as their own subjects (separate arenas filmed together): 4 against 4
    apart = metrics.assign(subject=metrics["session"] + metrics["animal"])
    out = compare_groups(apart)
    assert (out.iloc[0].n_a, out.iloc[0].n_b) == (4, 4) and out.attrs["warnings"] == []


def test_cliffs_delta_definition_and_mann_whitney_relation():
    # hand example: a = (1, 4, 6), b = (2, 4): pairs 1<2, 1<4, 4>2, 4=4, 6>2, 6>4
    # -> (3 greater - 2 smaller) / 6 (definition, Cliff 1993)
    assert cliffs_delta([1, 4, 6], [2, 4]) == pytest.approx(1 / 6)
    rng = np.random.default_rng(4)
    a, b = rng.integers(0, 6, 11).astype(float), rng.integers(1, 7, 9).astype(float)
    u = sps.mannwhitneyu(a, b).statistic
    # delta = 2 U / (n_a n_b) - 1 with scipy's U of the first sample
    assert cliffs_delta(a, b) == pytest.approx(2 * u / (len(a) * len(b)) - 1)
    assert cliffs_delta([3, 1, 2], [1, 1, 2], paired=True) == pytest.approx(1 / 3)


def test_bootstrap_percentile_interval_against_scipy():
    rng = np.random.default_rng(5)
    a, b = rng.normal(2, 1, 25), rng.normal(1, 1.5, 30)
    ours = bootstrap_ci(a, statistic="mean", n_resamples=20000, random_state=1)
    ref = sps.bootstrap((a,), np.mean, n_resamples=20000, method="percentile", random_state=2)
    # scipy.stats.bootstrap(method="percentile"): same interval up to resampling noise
    np.testing.assert_allclose(
        ours, [ref.confidence_interval.low, ref.confidence_interval.high], atol=0.03
    )
    ours = bootstrap_ci(a, b, "mean_difference", n_resamples=20000, random_state=1)
    ref = sps.bootstrap((a, b), mean_diff, n_resamples=20000, method="percentile", random_state=2)
    np.testing.assert_allclose(
        ours, [ref.confidence_interval.low, ref.confidence_interval.high], atol=0.04
    )
    assert bootstrap_ci(a, b, random_state=0) == bootstrap_ci(a, b, random_state=0)


def long_metrics(values: dict[str, list[float]], motif="m", metric="time_budget", subject=None):
    rows = []
    for group, vals in values.items():
        for i, v in enumerate(vals):
            rows.append(
                {
                    "session": f"{group}{i}",
                    "animal": "a",
                    "group": group,
                    "metric": metric,
                    "motif": motif,
                    "value": v,
                    "subject": subject[i] if subject else f"{group}{i}",
                }
            )
    return pd.DataFrame(rows)


def test_compare_groups_rank_tests_match_scipy_and_omnibus():
    rng = np.random.default_rng(8)
    vals = {
        "a": rng.normal(0, 1, 7).tolist(),
        "b": rng.normal(1, 1, 6).tolist(),
        "c": rng.normal(0.5, 1, 8).tolist(),
    }
    out = compare_groups(long_metrics(vals), test="rank")
    assert list(out.columns) == [*COMPARISON_COLUMNS, "omnibus_p", "omnibus_test", "note"]
    assert list(zip(out["group_a"], out["group_b"], strict=True)) == [
        ("a", "b"),
        ("a", "c"),
        ("b", "c"),
    ]
    for row in out.itertuples():
        ref = sps.mannwhitneyu(vals[row.group_a], vals[row.group_b], alternative="two-sided")
        assert row.p_value == pytest.approx(ref.pvalue)  # scipy.stats.mannwhitneyu
    assert out["omnibus_p"].iloc[0] == pytest.approx(sps.kruskal(*vals.values()).pvalue)  # scipy
    perm = compare_groups(long_metrics(vals), n_resamples=20000)
    f_stat = lambda *s, axis: sps.f_oneway(*s, axis=axis).statistic  # noqa: E731
    ref = sps.permutation_test(
        list(vals.values()), f_stat, n_resamples=5000, random_state=0, alternative="greater"
    )
    # scipy permutation test of the F statistic (Monte Carlo): within resampling error
    assert abs(perm["omnibus_p"].iloc[0] - ref.pvalue) < 0.03
    first = perm.iloc[0]
    assert first.p_value == pytest.approx(permutation_test(vals["a"], vals["b"]).p_value)
    assert first.effect_size == pytest.approx(hedges_g(vals["a"], vals["b"]))
    assert out.attrs["warnings"] == []
    ref_first = compare_groups(long_metrics(vals), reference="a", test="rank")
    assert ref_first["group_b"].tolist()[:2] == ["a", "a"]


def before_and_after(seed: int, n: int, before: tuple, change: tuple):
    """``n`` subjects measured before and after (normal values): the arrays, the subjects'
    names and the long metrics table of both conditions."""
    rng = np.random.default_rng(seed)
    first = rng.normal(*before, n)
    then = first + rng.normal(*change, n)
    subjects = [f"vole{i}" for i in range(n)]
    table = long_metrics({"after": then.tolist(), "before": first.tolist()}, subject=subjects)
    return first, then, subjects, table


def test_paired_design_matches_scipy_paired_tests():
    before, after, subjects, table = before_and_after(9, 10, (0, 1), (0.7, 0.6))
    table = table.iloc[::-1]  # row order must not matter: subjects are matched by name
    out = compare_groups(table, paired=True)
    ref = sps.permutation_test(
        (after, before),
        lambda u, v, axis: np.mean(u - v, axis=axis),
        permutation_type="samples",
        n_resamples=np.inf,
    )
    assert out["p_value"].iloc[0] == pytest.approx(ref.pvalue)  # scipy paired ("samples")
    assert out["test"].iloc[0] == "paired permutation exact"
    rank = compare_groups(table, paired=True, test="rank")
    assert rank["p_value"].iloc[0] == pytest.approx(sps.wilcoxon(after, before).pvalue)  # scipy
    with pytest.raises(InputError, match="missing column"):
        compare_groups(table.drop(columns="subject"), paired=True)
    third = long_metrics(
        {"later": (after + np.random.default_rng(10).normal(0, 0.5, 10)).tolist()}, subject=subjects
    )
    three = pd.concat([table, third], ignore_index=True)
    wide = three.pivot(index="subject", columns="group", values="value")  # matched by subject
    conditions = [wide[g].to_numpy() for g in wide.columns]
    perm = compare_groups(three, paired=True, n_resamples=20000)

    def between(*s, axis):
        means = np.stack([np.mean(x, axis=axis) for x in s])
        return ((means - means.mean(axis=0)) ** 2).sum(axis=0)

    ref = sps.permutation_test(
        conditions,
        between,
        permutation_type="samples",
        n_resamples=20000,
        alternative="greater",
        random_state=0,
    )
    # scipy within-subject ("samples") permutation of the between-condition sum of squares
    assert abs(perm["omnibus_p"].iloc[0] - ref.pvalue) < 0.02
    rank = compare_groups(three, paired=True, test="rank")
    assert rank["omnibus_p"].iloc[0] == pytest.approx(sps.friedmanchisquare(*conditions).pvalue)


def test_a_within_subject_design_tested_unpaired_is_named_and_missing_pairs_are_counted():
    before, after, _, table = before_and_after(4, 6, (0, 1), (0.8, 0.3))
    unpaired = compare_groups(table)
    assert any("6 of 6 subjects are in more than one group" in w and "--paired" in w
               for w in unpaired.attrs["warnings"])  # fmt: skip
    assert not any(
        "more than one group" in w for w in compare_groups(table, paired=True).attrs["warnings"]
    )
    # vole5 lost its 'after' session: paired tests read the 5 complete pairs, and say so
    gone = table[~((table["subject"] == "vole5") & (table["group"] == "after"))]
    out = compare_groups(gone, paired=True)
    assert "1 of 6 subjects lack one: 'vole5' (only 'before')" in " ".join(out.attrs["warnings"])
    ref = sps.permutation_test(
        (after[:5], before[:5]),
        lambda u, v, axis: np.mean(u - v, axis=axis),
        permutation_type="samples",
        n_resamples=np.inf,
    )
    assert out["p_value"].iloc[0] == pytest.approx(ref.pvalue)  # scipy paired ("samples")


def test_small_groups_get_a_note_and_bad_designs_clear_errors():
    out = compare_groups(long_metrics({"a": [1.0, 2.0, 3.0], "b": [4.0, 5.0, 6.0]}))
    assert out["p_value"].iloc[0] == pytest.approx(0.1)  # 3 vs 3: 2/20 is the floor
    assert "smallest reachable p" in out["note"].iloc[0] and not out["significant"].iloc[0]
    assert len(out.attrs["warnings"]) == 1 and "cannot reach" in out.attrs["warnings"][0]
    with pytest.raises(InputError, match=r"missing column\(s\) \['group'\].*it has"):
        compare_groups(long_metrics({"a": [1, 2], "b": [3, 4]}).drop(columns="group"))
    with pytest.raises(InputError, match="single subject"):
        compare_groups(long_metrics({"a": [1.0], "b": [3.0, 4.0]}))
    with pytest.raises(InputError, match="single session"):  # no subject column: sessions
        compare_groups(long_metrics({"a": [1.0], "b": [3.0, 4.0]}).drop(columns="subject"))
    with pytest.raises(InputError, match="need >= 2"):
        compare_groups(long_metrics({"a": [1.0, 2.0]}))
    with pytest.raises(InputError, match="'permutation' or 'rank'"):
        compare_groups(long_metrics({"a": [1, 2], "b": [3, 4]}), test="t")


def simulate_groups(
    seed: int,
    shifted: int = 0,
    ratio: float = 1.5,
    n_per_group: int = 8,
    n_motifs: int = 10,
    n_frames: int = 36_000,
    fps: float = 30.0,
):
    """Invented label tables: 'treated' spends ``ratio`` x the baseline time in one motif.

    Per session, a time budget is drawn from a Dirichlet around the group's budget; bouts with
    geometric lengths (mean 15-45 frames by motif) are drawn to match it; 0.2% frames invalid.
    Renormalising moves every other motif by -5.6% in 'treated' (not a null exactly).
    """
    rng = np.random.default_rng(seed)
    names = np.array([f"motif_{i + 1:02d}" for i in range(n_motifs)] + [""], dtype=object)
    mean_frames = np.linspace(15, 45, n_motifs)
    frames, rows = [], []
    for group in ("control", "treated"):
        base = np.full(n_motifs, 1.0 / n_motifs)
        if group == "treated":
            base[shifted] *= ratio
            base /= base.sum()
        for k in range(n_per_group):
            weight = rng.dirichlet(500.0 * base) / mean_frames
            states = rng.choice(
                n_motifs, int(3 * n_frames / mean_frames.mean()), p=weight / weight.sum()
            )
            seq = np.repeat(states, rng.geometric(1 / mean_frames[states]))[:n_frames]
            seq[rng.random(len(seq)) < 0.002] = -1
            frame, session = np.arange(len(seq)), f"{group}_{k:02d}"
            frames.append(
                pd.DataFrame(
                    {
                        "session": session,
                        "animal": "vole",
                        "frame": frame,
                        "time_s": frame / fps,
                        "state": seq,
                        "motif": names[seq],
                        "probability": np.where(seq >= 0, 0.9, np.nan),
                    }
                )
            )
            rows.append({"session": session, "group": group})
    return pd.concat(frames, ignore_index=True), pd.DataFrame(rows)


def test_session_metrics_long_table():
    labels, sessions = simulate_groups(seed=0, n_per_group=2, n_motifs=3, n_frames=3000)
    metrics = session_metrics(labels, bout_table(labels), sessions)
    assert list(metrics.columns) == [
        "session",
        "animal",
        "group",
        "subject",
        "metric",
        "motif",
        "value",
    ]
    assert set(metrics["metric"]) == {
        "time_budget",
        "bout_rate_per_min",
        "mean_bout_s",
        "median_bout_s",
        "transition",
    }
    tb = metrics[metrics["metric"] == "time_budget"].set_index(["session", "motif"])["value"]
    ref = time_budget(labels).set_index(["session", "motif"])["fraction"]
    pd.testing.assert_series_equal(tb, ref, check_names=False)
    moves = metrics[metrics["metric"] == "transition"]
    assert moves["motif"].str.contains("->").all()
    np.testing.assert_allclose(
        moves.assign(src=moves["motif"].str.split("->").str[0])
        .groupby(["session", "src"])["value"]
        .sum(),
        1.0,
    )
    with pytest.raises(InputError, match="not in the sessions table"):
        session_metrics(labels, bout_table(labels), sessions.iloc[1:])
    fig = group_difference_figure(compare_groups(metrics))
    assert len(fig.data) == 2


def test_recovery_of_a_planted_time_budget_shift_over_seeds():
    """Invented data: 8 vs 8 sessions, motif_01 +50% in 'treated'; seeds 0-7."""
    found, false, others = 0, 0, 0
    for seed in range(8):
        labels, sessions = simulate_groups(seed)
        metrics = session_metrics(labels, bout_table(labels), sessions)
        budget = metrics[metrics["metric"] == "time_budget"]
        out = compare_groups(budget).set_index("motif")
        found += bool(out.loc["motif_01", "q_value"] < 0.05)
        false += int(out.drop("motif_01")["significant"].sum())
        others += len(out) - 1
    print(f"planted motif found {found}/8; other motifs called {false}/{others}")
    assert found >= 7  # seen: 19/20 over seeds 0-19
    assert false / others <= 0.1  # seen: 4/180 (others do move by -5.6%)


def test_sessions_whose_subject_is_left_empty_are_subjects_of_their_own():
    # A manifest whose subject column is filled for some sessions only: the empty ones must
    # not be averaged together as one subject.
    labels, sessions = simulate_groups(seed=1, n_per_group=3, n_motifs=3, n_frames=1500)
    sessions = sessions.assign(subject=[np.nan, "", " "] * 2)
    out = compare_groups(session_metrics(labels, bout_table(labels), sessions))
    assert (out["n_a"] == 3).all() and (out["n_b"] == 3).all()
    assert not any("averaged" in w for w in out.attrs["warnings"])


def test_a_paired_report_says_so_and_joins_each_subjects_conditions():
    from ethoscribe.plots.ethogram import time_budget_figure
    from ethoscribe.workspace.report_sections import group_section

    before, after, subjects, table = before_and_after(5, 6, (0.2, 0.05), (0.2, 0.03))
    stats = compare_groups(table, paired=True, planned=["time_budget:m"])
    section = group_section(stats, 0.05, table)
    assert "Tests paired by subject" in section.text and "Paired design" in section.note
    figure = section.figures[0]
    joined = [t for t in figure.data if t.type == "scatter"]
    assert len(joined) == 6 and "one point per subject; lines join" in figure.layout.title.text
    for line in joined:  # each line runs through one subject's two values
        i = subjects.index(line.name)
        np.testing.assert_allclose(line.y, [after[i], before[i]])
    g, low, high = stats[["effect_size", "ci_low", "ci_high"]].iloc[0]
    assert f"g = {g:.2f} [{low:.2f}, {high:.2f}]" in figure.layout.annotations[0].text
    assert section.tables[0][1]["n"].tolist() == ["6 pairs"]
    unpaired = group_section(compare_groups(table, planned=["time_budget:m"]), 0.05, table)
    assert "paired" not in unpaired.text.split("Design notes")[0]
    assert "more than one group" in unpaired.text  # the design note is read at the top
    # three animals per session: the budgets' figure says whose points it shows
    budgets = pd.DataFrame(
        {"session": ["s1"] * 3, "animal": ["a", "b", "c"], "motif": "m", "fraction": 0.5}
    )
    assert "per session and animal" in time_budget_figure(budgets).layout.title.text
    assert "and animal" not in time_budget_figure(budgets.iloc[:1]).layout.title.text
