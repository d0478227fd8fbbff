"""Transitions above chance: the quasi-independence fit and the per-transition test.

References: statsmodels' Poisson GLM with row and column effects on the off-diagonal cells (the
maximum-likelihood quasi-independence fit, Bishop, Fienberg & Holland 1975, ch. 5; from memory)
and ``scipy.stats.binomtest``. Counts are invented (seeded).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats as sps

from ethoscribe.ethogram import transitions_above_chance
from ethoscribe.plots.ethogram import motif_order, transition_diagram


def _counts(seed: int = 4, k: int = 5) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    n = rng.integers(2, 40, size=(k, k))
    n[0, 1] = 150  # a strong preference: motif m0 is followed by m1
    names = [f"m{i}" for i in range(k)]
    return pd.DataFrame(
        [(names[i], names[j], int(n[i, j])) for i in range(k) for j in range(k) if i != j],
        columns=["from_motif", "to_motif", "count"],
    )


def test_expected_counts_equal_a_poisson_quasi_independence_fit():
    table = _counts()
    out = transitions_above_chance(table)
    rows = pd.get_dummies(table["from_motif"], drop_first=True, dtype=float)
    cols = pd.get_dummies(table["to_motif"], drop_first=True, dtype=float)
    design = sm.add_constant(pd.concat([rows, cols], axis=1))
    fit = sm.GLM(table["count"], design, family=sm.families.Poisson()).fit()
    merged = out.merge(table.assign(fitted=fit.fittedvalues), on=["from_motif", "to_motif"])
    expected = merged["expected_probability"] * merged["n_from"]
    # statsmodels GLM (Poisson, row + column effects, diagonal left out)
    np.testing.assert_allclose(expected, merged["fitted"], rtol=1e-6)
    for _, r in out.iterrows():
        ref = sps.binomtest(r["count"], r["n_from"], r["expected_probability"], "greater")
        assert r["p_value"] == pytest.approx(ref.pvalue, rel=1e-9)  # scipy.stats.binomtest
    planted = out[(out["from_motif"] == "m0") & (out["to_motif"] == "m1")].iloc[0]
    assert planted["above_chance"] and planted["ratio"] > 1


def test_diagram_draws_only_transitions_above_chance_in_a_tree_order():
    table = _counts()
    tests = transitions_above_chance(table)
    fig = transition_diagram(tests, {f"m{i}": 0.2 for i in range(5)})
    arcs = [t for t in fig.data if t.mode == "lines"]
    assert len(arcs) == int(tests["above_chance"].sum()) >= 1
    assert "above chance" in fig.layout.title.text
    order = motif_order(pd.DataFrame(np.eye(3)[[1, 0, 2]] * 0.5 + 0.1, index=list("abc"),
                                     columns=list("abc")))  # fmt: skip
    assert sorted(order) == ["a", "b", "c"]


@pytest.mark.parametrize(
    "rows",
    [
        [("a", "b", 5)],  # b is never left
        [("a", "b", 5), ("b", "a", 3)],  # two motifs: nothing else could follow
        [("a", "b", 5), ("a", "c", 0), ("c", "a", 2)],  # c is never entered
        [("a", "b", 0), ("b", "c", 0), ("c", "a", 0)],  # nothing observed
    ],
)
def test_sparse_tables_give_valid_p_values(rows):
    table = pd.DataFrame(rows, columns=["from_motif", "to_motif", "count"])
    out = transitions_above_chance(table)
    assert out["p_value"].between(0, 1).all() and out["q_value"].between(0, 1).all()
    assert not out["above_chance"].any()  # nothing here beats chance
