"""Grouping fine states into metastable sets (PCCA+) and the suggested merges.

Reference values: deeptime 0.5.0 ``deeptime.markov.pcca`` on the 4-state matrix below, as
recorded in the project's list of outside checks (PCCA+, Deuflhard & Weber 2005).
"""

from __future__ import annotations

import numpy as np

from ethoscribe.segment.lumping import (
    alternation_counts,
    lump_states,
    merge_tree,
    suggested_merges,
)

P = np.array(
    [[0.80, 0.15, 0.04, 0.01], [0.15, 0.80, 0.01, 0.04],
     [0.04, 0.01, 0.80, 0.15], [0.01, 0.04, 0.15, 0.80]]
)  # fmt: skip


def test_pcca_matches_deeptime_values():
    lump = lump_states(P, fps=1.0, n_sets=2, lag_s=1.0)
    # deeptime.markov.pcca(P, 2): assignments [0, 0, 1, 1], memberships 1/0 to 4 decimals,
    # coarse-grained transition matrix [[.95, .05], [.05, .95]]; eigenvalues 1, .90, .68, .62
    np.testing.assert_array_equal(lump.assignment, [0, 0, 1, 1])
    np.testing.assert_allclose(lump.memberships, [[1, 0], [1, 0], [0, 1], [0, 1]], atol=1e-4)
    np.testing.assert_allclose(lump.coarse, [[0.95, 0.05], [0.05, 0.95]], atol=1e-4)
    np.testing.assert_allclose(lump.eigenvalues, [1.0, 0.90, 0.68, 0.62], atol=1e-10)


def test_the_time_scale_rule_and_the_tree():
    # implied time scales -1/ln(lambda): 9.49, 2.59, 2.09 frames (eigenvalues above)
    lump = lump_states(P, fps=1.0, lag_s=1.0, min_timescale_s=3.0)
    assert lump.n_sets == 2 and "1 implied time scale" in lump.reason
    tree = merge_tree(P, fps=1.0, lag_s=1.0)
    assert [lv["n_sets"] for lv in tree] == [4, 3, 2, 1]
    assert tree[2]["assignment"] == [0, 0, 1, 1]
    np.testing.assert_allclose(tree[2]["timescale_s"], -1 / np.log(0.90))


def test_states_alternating_within_bouts_are_suggested_first():
    rng = np.random.default_rng(0)
    labels = []
    for _ in range(60):  # bouts of behaviour A (states 0 and 1 alternate) and B (state 2)
        labels += [0] * 5 + [1] * 5 + [0] * 5 + [1] * 5 if rng.random() < 0.5 else [2] * 20
    labels = np.array(labels)
    counts = alternation_counts(labels, 3, window=3)
    assert counts[0, 1] > 0 and counts[0, 1] == counts[1, 0]
    T = np.zeros((3, 3))
    np.add.at(T, (labels[:-1], labels[1:]), 1)
    T /= T.sum(1, keepdims=True)
    means = np.array([[0.0, 0.0], [0.5, 0.0], [3.0, 3.0]])
    best = suggested_merges(labels, means, T, fps=10.0, lag_s=1.0)[0]
    assert best["states"] == (0, 1) and best["alternation_share"] > 1


def test_the_model_keeps_its_state_tree_and_suggests_merges():
    from ethoscribe.segment.model import BehaviourModel
    from ethoscribe.simulate import simulate_session

    tracks = [simulate_session(duration_s=60, seed=s, session=f"s{s}")[0] for s in (1, 2)]
    model = BehaviourModel(n_states=5, segmenter={"n_restarts": 1, "n_iter": 30}).fit(tracks)
    tree = model.state_tree_
    assert [lv["n_sets"] for lv in tree["levels"]] == [5, 4, 3, 2, 1]
    assert len(tree["suggested_assignment"]) == 5 and tree["reason"]
    for group in model.merge_groups():
        assert len(group) >= 2 and set(group) <= set(range(5))
    pairs = model.suggested_merges(model.label(tracks), top=3)
    assert len(pairs) == 3 and pairs[0]["score"] >= pairs[-1]["score"]
    meta, arrays = model.to_state()
    again = BehaviourModel.from_state(meta, arrays)
    assert again.state_tree_ == tree and again.merge_groups() == model.merge_groups()
    meta["state_tree"] = {"levels": "damaged"}  # advice only: dropped, not refused
    assert BehaviourModel.from_state(meta, arrays).state_tree_ is None
