"""Label agreement against scikit-learn, scipy and ruptures."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import linear_sum_assignment
from sklearn.metrics import adjusted_rand_score, normalized_mutual_info_score

from ethoscribe.errors import InputError
from ethoscribe.segment.agreement import (
    adjusted_rand,
    boundary_f1,
    contingency_table,
    label_boundaries,
    match_states,
    normalized_mutual_info,
)


def test_adjusted_rand_and_nmi_reference_values():
    # adjusted_rand_score([0,0,1,1],[0,0,1,2]) = 0.571429; NMI 0.8 (scikit-learn docs)
    assert adjusted_rand([0, 0, 1, 1], [0, 0, 1, 2]) == pytest.approx(0.571429, abs=1e-6)
    assert normalized_mutual_info([0, 0, 1, 1], [0, 0, 1, 2]) == pytest.approx(0.8, abs=1e-6)


def test_wrappers_equal_sklearn_and_ignore_invalid_frames():
    rng = np.random.default_rng(0)
    a, b = rng.integers(0, 5, 300), rng.integers(0, 4, 300)
    b[:100] = a[:100] % 4
    # reference library: scikit-learn adjusted_rand_score / normalized_mutual_info_score
    assert adjusted_rand(a, b) == pytest.approx(adjusted_rand_score(a, b), abs=1e-12)
    assert normalized_mutual_info(a, b) == pytest.approx(normalized_mutual_info_score(a, b))
    a_missing = a.copy()
    a_missing[::10] = -1
    keep = a_missing >= 0
    assert adjusted_rand(a_missing, b) == pytest.approx(adjusted_rand_score(a[keep], b[keep]))
    with pytest.raises(InputError, match="same frames"):
        adjusted_rand(a, b[:-1])


def test_hungarian_reference_example():
    cost = np.array([[4, 1, 3], [2, 0, 5], [3, 2, 2]])
    rows, cols = linear_sum_assignment(cost)
    # columns [1, 0, 2], cost 5 (scipy.optimize.linear_sum_assignment docs)
    assert cols.tolist() == [1, 0, 2] and cost[rows, cols].sum() == 5
    # the same matrix as overlaps: match_states maximises the total overlap
    a = np.repeat(np.repeat([0, 1, 2], 3), cost.ravel())
    b = np.repeat(np.tile([0, 1, 2], 3), cost.ravel())
    table, _, _ = contingency_table(a, b)
    assert np.array_equal(table, cost)
    best_rows, best_cols = linear_sum_assignment(cost, maximize=True)
    match = match_states(a, b)
    assert [match.mapping[r] for r in best_rows] == best_cols.tolist()


def test_match_recovers_a_permutation_with_per_state_scores():
    rng = np.random.default_rng(1)
    a = rng.integers(0, 4, 1000)
    perm = np.array([2, 0, 3, 1])
    b = perm[a]
    b[:50] = 0  # some disagreement
    match = match_states(a, b)
    assert match.mapping == {0: 2, 1: 0, 2: 3, 3: 1}
    row = match.table.set_index("state_a")
    overlap = ((a == 1) & (b == 0)).sum()
    union = ((a == 1) | (b == 0)).sum()
    assert row.loc[1, "jaccard"] == pytest.approx(overlap / union)
    assert row.loc[1, "f1"] == pytest.approx(2 * overlap / ((a == 1).sum() + (b == 0).sum()))
    assert match.jaccard.min() > 0.8


def test_unmatched_states_score_zero():
    match = match_states([0, 0, 1, 1, 2], [5, 5, 7, 7, 7])
    assert match.mapping == {0: 5, 1: 7, 2: -1}
    assert match.table["jaccard"].tolist()[2] == 0.0


def test_boundaries_from_labels_and_f1():
    assert label_boundaries([0, 0, 1, 1, 1, 2], [4, 2]).tolist() == [2, 5]
    score = boundary_f1([100, 200], [103, 150, 199], margin_frames=5)
    assert (score.n_matched, score.recall) == (2, 1.0)
    assert score.precision == pytest.approx(2 / 3) and score.f1 == pytest.approx(0.8)
    empty = boundary_f1([], [], 3)
    assert (empty.precision, empty.recall, empty.f1) == (1.0, 1.0, 1.0)
    # nothing predicted: precision 0, as scikit-learn's precision_score(zero_division=0)
    missed = boundary_f1([10, 20], [], 3)
    assert (missed.precision, missed.recall, missed.f1) == (0.0, 0.0, 0.0)
    # each boundary is used once: two predictions near one true boundary count once
    assert boundary_f1([10], [9, 11], 2).n_matched == 1


def test_boundary_f1_matches_ruptures_on_separated_boundaries():
    from ruptures.metrics import precision_recall

    rng = np.random.default_rng(4)
    for _ in range(20):
        true = np.sort(rng.choice(np.arange(1, 100), 6, replace=False)) * 50
        kept = true[rng.random(6) < 0.7]
        pred = np.unique(np.r_[kept + rng.integers(-8, 9, len(kept)), rng.integers(1, 4999, 2)])
        n = 5000
        # reference library: ruptures 1.1.10 precision_recall (breakpoint lists end with n)
        p_ref, r_ref = precision_recall([*true, n], [*pred, n], margin=10)
        ours = boundary_f1(true, pred, margin_frames=10)
        assert (ours.precision, ours.recall) == pytest.approx((p_ref, r_ref))
