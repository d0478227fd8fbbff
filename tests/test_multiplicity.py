"""Planned comparisons and families of exploratory tests, against outside references.

References: the Benjamini & Hochberg (1995) example p-values and statsmodels ``multipletests``
(Holm and BH); ``scipy.stats.bootstrap`` and ``scipy.stats.permutation_test`` for the library
calls behind the intervals and tests. Data are invented (seeded).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps
from statsmodels.stats.multitest import multipletests

from ethoscribe.errors import InputError
from ethoscribe.multiplicity import adjust, family_summary, headline, parse_planned
from ethoscribe.stats import bootstrap_ci, compare_groups, holm, permutation_test

BH_P = [0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240,
        0.4262, 0.5719, 0.6528, 0.7590, 1.000]  # fmt: skip


def test_holm_against_statsmodels_and_the_1995_example():
    adjusted = holm(BH_P)
    # statsmodels multipletests(method="holm"); on the BH 1995 example Holm rejects 3
    np.testing.assert_allclose(adjusted, multipletests(BH_P, method="holm")[1])
    assert int((adjusted < 0.05).sum()) == 3
    rng = np.random.default_rng(2)
    p = rng.uniform(0, 0.2, 40)
    np.testing.assert_allclose(holm(p), multipletests(p, method="holm")[1])
    with_nan = holm([0.01, np.nan, 0.04])
    assert np.isnan(with_nan[1]) and with_nan[[0, 2]].tolist() == pytest.approx([0.02, 0.04])


def test_bootstrap_interval_equals_scipy_when_every_resample_is_defined():
    rng = np.random.default_rng(5)
    a, b = rng.normal(2, 1, 8), rng.normal(1, 1.5, 8)
    ref = sps.bootstrap(
        (a, b), lambda x, y, axis=-1: x.mean(axis) - y.mean(axis), n_resamples=2000,
        method="percentile", rng=np.random.default_rng(4),
    )  # fmt: skip
    ours = bootstrap_ci(a, b, "mean_difference", 2000, random_state=4)
    # scipy.stats.bootstrap(method="percentile"), same generator: the same interval
    assert ours == pytest.approx((ref.confidence_interval.low, ref.confidence_interval.high))
    # many ties: scipy's interval is NaN, ours drops the undefined resamples
    tied_a, tied_b = np.r_[np.zeros(7), 0.1], np.r_[np.zeros(6), 0.1, 0.2]
    low, high = bootstrap_ci(tied_a, tied_b, "hedges_g", 2000, random_state=0)
    assert np.isfinite([low, high]).all() and low < high


def test_paired_and_monte_carlo_permutations_equal_scipy():
    rng = np.random.default_rng(9)
    a, b = rng.normal(0, 1, 12), rng.normal(0.4, 1, 12)
    ours = permutation_test(a, b, paired=True)
    ref = sps.permutation_test(
        (a, b), lambda x, y, axis: (x - y).mean(axis), permutation_type="samples",
        n_resamples=np.inf,
    )  # fmt: skip
    assert ours.method == "exact" and ours.p_value == pytest.approx(ref.pvalue)  # scipy, exact
    mc = permutation_test(a, b, n_resamples=5000, exact_threshold=100, random_state=1)
    ref = sps.permutation_test(
        (a, b), lambda x, y, axis: x.mean(axis) - y.mean(axis), n_resamples=5000,
        rng=np.random.default_rng(1),
    )  # fmt: skip
    assert mc.method == "monte_carlo" and mc.p_value == ref.pvalue  # scipy, same generator


def _table(values: dict[tuple[str, str], tuple[list[float], list[float]]]) -> pd.DataFrame:
    rows = []
    for (metric, motif), pair in values.items():
        for group, vals in zip(("a", "b"), pair, strict=True):
            rows += [
                {"session": f"{group}{i}", "group": group, "metric": metric, "motif": motif,
                 "value": v}
                for i, v in enumerate(vals)
            ]  # fmt: skip
    return pd.DataFrame(rows)


def test_families_planned_set_and_untestable_rows():
    rng = np.random.default_rng(3)
    values = {
        ("time_budget", "dig"): (rng.normal(0.2, 0.03, 8), rng.normal(0.1, 0.03, 8)),
        ("time_budget", "walk"): (rng.normal(0.3, 0.03, 8), rng.normal(0.3, 0.03, 8)),
        ("time_budget", "rest"): (rng.normal(0.3, 0.03, 8), rng.normal(0.31, 0.03, 8)),
        ("bout_rate_per_min", "dig"): (rng.normal(5, 1, 8), rng.normal(4, 1, 8)),
        ("bout_rate_per_min", "walk"): (rng.normal(5, 1, 8), rng.normal(5, 1, 8)),
        ("mean_bout_s", "walk"): (rng.normal(2, 0.3, 8), rng.normal(2, 0.3, 8)),
        ("transition", "rest->dig"): ([0.0] * 8, [0.0] * 8),  # never seen: no variation
        ("transition", "walk->dig"): (rng.uniform(0, 1, 8), rng.uniform(0, 1, 8)),
    }
    out = compare_groups(_table(values), planned="time_budget:dig,bout_rate:dig")
    assert out["analysis"].tolist()[:2] == ["planned", "planned"]
    planned = out[out["analysis"] == "planned"]
    # statsmodels multipletests: Holm over the planned set alone
    np.testing.assert_allclose(
        planned["q_value"], multipletests(planned["p_value"], method="holm")[1]
    )
    flat = out[out["metric"] == "transition"].set_index("motif")
    assert not flat.loc["rest->dig", "testable"] and np.isnan(flat.loc["rest->dig", "p_value"])
    assert flat.loc["rest->dig", "note"] == "not testable: no variation"
    # the untestable row is not counted: the transitions family holds one test
    assert flat.loc["walk->dig", "q_value"] == pytest.approx(flat.loc["walk->dig", "p_value"])
    assert flat.loc["walk->dig", "correction"] == "Benjamini-Hochberg within transitions (1 test)"
    budget = out[(out["family"] == "time_budget") & (out["analysis"] == "exploratory")]
    # statsmodels multipletests: BH within the time-budget family only
    np.testing.assert_allclose(
        budget["q_value"], multipletests(budget["p_value"], method="fdr_bh")[1]
    )
    summary = family_summary(out)
    assert summary["family"].tolist() == [
        "planned comparisons", "time_budget", "bout_rate", "bout_duration", "transitions"
    ]  # fmt: skip
    assert summary.set_index("family").loc["transitions", ["tests", "not_testable"]].tolist() == [
        1,
        1,
    ]
    text = headline(out, 0.05)
    assert text.startswith("Planned (confirmatory, Holm over 2 tests): time_budget of 'dig'")
    assert "transitions 0 of 1, 1 not testable" in text
    without = compare_groups(_table(values))
    assert (without["analysis"] == "exploratory").all()
    assert headline(without, 0.05).startswith("No planned comparisons were given")


def test_planned_specification_is_parsed_and_checked():
    assert parse_planned("time_budget:dig, bout_duration:dig, transition:a->b") == [
        ("time_budget", "dig"), ("mean_bout_s", "dig"), ("transition", "a->b")
    ]  # fmt: skip
    assert parse_planned([("bout_rate", "x")]) == [("bout_rate_per_min", "x")]
    assert parse_planned(None) == [] and parse_planned("") == []
    with pytest.raises(InputError, match="not METRIC:MOTIF"):
        parse_planned("time_budget")
    tests = pd.DataFrame({"metric": ["time_budget"], "motif": ["dig"], "p_value": [0.1]})
    with pytest.raises(InputError, match=r"no motif .walk.*dig"):
        adjust(tests, [("time_budget", "walk")])
    with pytest.raises(InputError, match="no metric 'speed'"):
        adjust(tests, [("speed", "dig")])
