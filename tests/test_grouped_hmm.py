"""Behaviour-level states: the eigenvalue-gap count and the grouped HMM (method "grouped_hmm").

Outside references: eigenvalues from ``scipy.linalg.eigvals``; agreement from scikit-learn's
``adjusted_rand_score``; the 4-state matrix and its eigenvalues 1, .90, .68, .62 are the
deeptime 0.5.0 PCCA+ example recorded in tests/test_lumping.py. Phases of one rhythm:
distances from ``scipy.spatial.distance.mahalanobis``, groups from
``scipy.sparse.csgraph.connected_components``, the exchange lift against a worked example and
transitions counted on a simulated chain.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import scipy.linalg
from sklearn.metrics import adjusted_rand_score

from ethoscribe.errors import InputError
from ethoscribe.segment.grouped_hmm import GroupedHMM
from ethoscribe.segment.lumping import eigen_gap_sets

P4 = np.array(
    [[0.80, 0.15, 0.04, 0.01], [0.15, 0.80, 0.01, 0.04],
     [0.04, 0.01, 0.80, 0.15], [0.01, 0.04, 0.15, 0.80]]
)  # fmt: skip


def _block_matrix(sizes: list[int], leave: float) -> np.ndarray:
    """Symmetric transition matrix: uniform mixing inside each block, ``leave`` spread evenly
    over the states of the other blocks."""
    n = sum(sizes)
    block = np.repeat(np.arange(len(sizes)), sizes)
    P = np.zeros((n, n))
    for i in range(n):
        same = block == block[i]
        P[i, same] = (1 - leave) / same.sum()
        P[i, ~same] = leave / (~same).sum()
    return P


def test_eigen_gap_of_the_published_four_state_example():
    best, table = eigen_gap_sets(P4, fps=1.0, lag_s=1.0, candidates=[1, 2, 3, 4])
    # deeptime's eigenvalues of this matrix (tests/test_lumping.py): 1, .90, .68, .62; the
    # largest gap is below the second, so 2 sets, as deeptime's PCCA+ groups them. 4 sets
    # (every state) has no eigenvalue below it to measure a gap against: not a candidate.
    assert best == 2
    gaps = {row["n_states"]: row["eigen_gap"] for row in table}
    assert sorted(gaps) == [1, 2, 3]
    np.testing.assert_allclose([gaps[1], gaps[2], gaps[3]], [0.10, 0.22, 0.06], atol=1e-10)


def test_eigen_gap_finds_the_blocks_of_a_block_diagonal_chain():
    P = _block_matrix([3, 2, 4], leave=0.02)
    # scipy: eigenvalues of the block chain; 1 and two slow ones near 1, the rest 0.
    reference = np.sort(np.real(scipy.linalg.eigvals(P)))[::-1]
    best, table = eigen_gap_sets(P, fps=1.0, lag_s=1.0, candidates=range(2, 9))
    assert best == 3
    ours = [row["eigenvalue"] for row in table]  # lambda_2 .. lambda_8
    np.testing.assert_allclose(ours, reference[1:8], atol=1e-10)
    # a lag of 5 frames raises every eigenvalue to the 5th power (scipy on P^5 agrees)
    _, lagged = eigen_gap_sets(P, fps=1.0, lag_s=5.0, candidates=[3])
    np.testing.assert_allclose(lagged[0]["eigenvalue"], reference[2] ** 5, rtol=1e-8)


def test_eigen_gap_refuses_candidates_outside_the_states():
    with pytest.raises(InputError, match="no candidate"):
        eigen_gap_sets(P4, fps=1.0, lag_s=1.0, candidates=[4, 5])


def _rhythmic_sequence(seed: int, n_bouts: int = 60):
    """Three behaviours: two rhythmic (postures alternating every 4 frames inside a bout),
    one still. Bouts of 60-120 frames at 20 fps."""
    rng = np.random.default_rng(seed)
    postures = {0: [(0.0, 0.0), (2.0, 0.0)], 1: [(0.0, 6.0), (2.0, 6.0)], 2: [(8.0, 3.0)]}
    X, truth, phase = [], [], []
    for b in range(n_bouts):
        behaviour = b % 3
        n = int(rng.integers(60, 121))
        for t in range(n):
            p = postures[behaviour][(t // 4) % len(postures[behaviour])]
            X.append(rng.normal(p, 0.3))
            truth.append(behaviour)
            phase.append(2 * behaviour + (t // 4) % len(postures[behaviour]))
    return np.array(X), np.array(truth), np.array(phase)


def test_grouped_hmm_labels_behaviours_and_keeps_the_phases():
    X, truth, phase = _rhythmic_sequence(0)
    model = GroupedHMM(max_states=5, min_states=2, fps=20.0, n_restarts=1, random_state=0)
    model.fit(X, [len(X)])
    assert model.n_fine_states_ == 5 and model.n_states_ == 3
    # scikit-learn's ARI: the sets are the behaviours, the fine states their phases
    grouped = adjusted_rand_score(truth, model.predict(X))
    assert grouped > 0.95
    # the fine states follow the phases (the sticky prior of 1-s bouts slows them down)
    assert adjusted_rand_score(phase, model.predict_fine(X)) > 0.6
    assert adjusted_rand_score(truth, model.predict_fine(X)) < grouped
    prob = model.predict_proba(X)
    assert prob.shape == (len(X), 3)
    np.testing.assert_allclose(prob.sum(1), 1.0, atol=1e-9)
    np.testing.assert_allclose(model.transmat_.sum(1), 1.0)
    table = model.selection_.table
    assert model.selection_.criterion == "eigen_gap" and model.selection_.best == 3
    assert table.loc[table["eigen_gap"].idxmax(), "n_states"] == 3


def test_grouped_hmm_with_a_given_count_and_its_saved_state():
    X, _, _ = _rhythmic_sequence(1, n_bouts=30)
    model = GroupedHMM(n_states=3, max_states=5, fps=20.0, n_restarts=1).fit(X)
    assert model.selection_ is None and model.n_states_ == 3
    meta, arrays = model.to_state()
    again = GroupedHMM.from_state(meta, arrays)
    np.testing.assert_array_equal(again.predict(X), model.predict(X))
    np.testing.assert_array_equal(again.assignment_, model.assignment_)
    meta["assignment"] = [0] * len(model.assignment_)
    with pytest.raises(InputError, match="assignment"):
        GroupedHMM.from_state(meta, arrays)
    with pytest.raises(InputError, match="max_states"):
        GroupedHMM(n_states=6, max_states=5).fit(X)


def test_behaviour_model_gives_both_levels_and_saves_them():
    from ethoscribe.segment.model import BehaviourModel
    from ethoscribe.simulate import simulate_session

    tracks = [simulate_session(duration_s=60, seed=s, session=f"s{s}")[0] for s in (1, 2)]
    model = BehaviourModel(
        method="grouped_hmm", state_range=(2, 6), segmenter={"n_restarts": 1, "n_iter": 30}
    ).fit(tracks)
    labels = model.label(tracks)
    scored = labels[labels["state"] >= 0]
    assignment = model.state_tree_["fine_assignment"]
    assert len(assignment) == model.segmenter_.n_fine_states_ == 6
    assert scored["state"].max() < model.n_states_ <= 6
    assert (scored["fine_state"] >= 0).all() and (labels["fine_state"] < 6).all()
    # the fine level is a refinement: every fine state falls mostly in its own group
    mapped = np.asarray(assignment)[scored["fine_state"].to_numpy()]
    assert (mapped == scored["state"].to_numpy()).mean() > 0.9
    assert model.selection_.criterion == "eigen_gap"
    # merged bouts' frames are left out of the evidence, so no label has a near-0 probability
    assert (scored["probability"] < 0.01).mean() < 0.002
    meta, arrays = model.to_state()
    again = BehaviourModel.from_state(meta, arrays)
    assert again.n_states_ == model.n_states_ and again.state_tree_ == model.state_tree_
    assert again.selection_.reason == model.selection_.reason != ""
    np.testing.assert_array_equal(again.label(tracks)["state"], labels["state"])


def test_the_tree_cut_maps_states_to_their_sets():
    import pandas as pd

    from ethoscribe.segment.lumping import merge_tree
    from ethoscribe.segment.model import BehaviourModel

    # The published 4-state example (deeptime's PCCA+ puts 0, 1 and 2, 3 together at 2 sets)
    model = BehaviourModel()
    model.state_tree_ = {
        "levels": merge_tree(P4, fps=1.0, lag_s=1.0),
        "suggested_assignment": [0, 0, 1, 1],
    }
    labels = pd.DataFrame({"state": [0, 1, 2, 3, -1]})
    assert model.cut_tree(labels).tolist() == [0, 0, 1, 1, -1]
    assert model.cut_tree(labels, n_sets=2).tolist() == [0, 0, 1, 1, -1]
    assert model.cut_tree(labels, n_sets=4).tolist() == [0, 1, 2, 3, -1]
    with pytest.raises(InputError, match="levels"):
        model.cut_tree(labels, n_sets=7)


def test_grouping_the_elbow_model_by_its_time_scales():
    # The held-out elbow picks the fine states (here the phases: 5 postures); the time-scale
    # rule then joins states exchanged faster than 1 s (the 4-frame phases at 20 fps).
    X, truth, _ = _rhythmic_sequence(2)
    model = GroupedHMM(
        fine_states="elbow", group_rule="time_scales", max_states=6, min_states=2, fps=20.0,
        n_restarts=1, random_state=0,
    ).fit(X, [len(X) // 2, len(X) - len(X) // 2])  # fmt: skip
    assert model.selection_.criterion == "heldout"  # the elbow's curve, with both reasons
    assert "elbow" in model.selection_.reason and "time scale" in model.selection_.reason
    assert model.n_states_ <= model.n_fine_states_
    assert adjusted_rand_score(truth, model.predict(X)) > 0.95  # scikit-learn's ARI
    # Its saved state is strict JSON (candidates the early stop never fitted have no values)
    # and reloads the same choice, criterion included.
    meta, arrays = model.to_state()
    again = GroupedHMM.from_state(json.loads(json.dumps(meta, allow_nan=False)), arrays)
    assert (again.selection_.criterion, again.selection_.best) == ("heldout", model.selection_.best)
    with pytest.raises(InputError, match="group_rule"):
        GroupedHMM(group_rule="spectral").fit(X)
    with pytest.raises(InputError, match="fine_states"):
        GroupedHMM(fine_states="many").fit(X)


def test_discover_with_grouped_states_writes_both_levels(tmp_path):
    # the bundled example sessions (invented voles), trimmed; whole discover run incl. report
    from _example_study import trimmed_study
    from ethoscribe.workspace import discover, label_sessions
    from ethoscribe.workspace.files import load_model

    (tmp_path / "study").mkdir()
    study = trimmed_study(tmp_path / "study", ["session_01", "session_09"], 1800)
    ws = discover(
        [study], tmp_path / "ws", manifest=study / "manifest.csv", method="grouped_hmm",
        stability=True, progress=False,
    )  # fmt: skip
    summary = ws.summary
    choice = summary["state_count_choice"]
    assert choice["criterion"] == "eigen_gap" and choice["reason"].startswith(
        f"{summary['n_states']} behaviours"
    )
    assert "fine_assignment" in summary["state_tree"]
    labels = ws.state_labels()
    assert "fine_state" in labels.columns
    assert labels["state"].max() < summary["n_states"]
    assert (ws.path / "report.html").is_file()
    model = load_model(ws.path / "model")
    assert model.n_states_ == summary["n_states"]
    new = label_sessions(
        ws.path, [study / "session_09.parquet"], tmp_path / "new", manifest=study / "manifest.csv",
        progress=False,
    )  # fmt: skip
    assert new.state_labels()["motif"].isin(labels["motif"]).all()


def test_unit_overlap_is_the_bhattacharyya_coefficient():
    from scipy.spatial.distance import euclidean

    from ethoscribe.segment.lumping import unit_overlap

    share = np.random.default_rng(3).dirichlet(np.ones(5), size=4)
    overlap = unit_overlap(share)
    for a in range(4):
        for b in range(4):
            # Hellinger distance via scipy: ||sqrt p - sqrt q||^2 = 2 - 2 BC
            hell2 = euclidean(np.sqrt(share[a]), np.sqrt(share[b])) ** 2
            assert overlap[a, b] == pytest.approx(1 - hell2 / 2, abs=1e-12)


def test_join_across_units_pairs_are_mutual_nearest_neighbours():
    from sklearn.neighbors import NearestNeighbors

    from ethoscribe.segment.lumping import join_across_units

    rng = np.random.default_rng(4)
    means = rng.normal(size=(7, 3))
    # states 0-2 used in unit 0 only, 3-5 in unit 1 only, 6 in both
    share = np.array([[1, 0]] * 3 + [[0, 1]] * 3 + [[0.5, 0.5]], dtype=float)
    assignment, pairs = join_across_units(means, share)
    # reference: scikit-learn's nearest neighbour of each state among the other unit's states
    a_side, b_side = np.arange(3), np.arange(3, 6)
    to_b = NearestNeighbors(n_neighbors=1).fit(means[b_side]).kneighbors(means[a_side])[1][:, 0]
    to_a = NearestNeighbors(n_neighbors=1).fit(means[a_side]).kneighbors(means[b_side])[1][:, 0]
    expected = [(int(a), int(b_side[to_b[a]])) for a in a_side if to_a[to_b[a]] == a]
    assert sorted(pairs) == expected and len(expected) >= 1
    for a, b in pairs:
        assert assignment[a] == assignment[b]
    assert len(np.unique(assignment)) == 7 - len(pairs)
    # the shared state is never joined; one unit only: nothing to join
    assert all(6 not in p for p in pairs)
    assert join_across_units(means, np.ones((7, 1)))[1] == []
    # mutual=False: every unit-specific state joins its scikit-learn nearest in the other unit
    loose, nearest_pairs = join_across_units(means, share, mutual=False)
    expected = {(int(a), int(b_side[to_b[a]])) for a in a_side}
    expected |= {(int(a_side[to_a[i]]), int(b)) for i, b in enumerate(b_side)}
    assert set(nearest_pairs) == expected
    for a, b in nearest_pairs:
        assert loose[a] == loose[b]


def test_lumped_transitions_match_the_counted_group_sequence():
    from ethoscribe.segment.lumping import lumped_transitions

    T = np.array([[0.7, 0.2, 0.1, 0.0], [0.1, 0.6, 0.2, 0.1], [0.0, 0.3, 0.6, 0.1],
                  [0.2, 0.0, 0.3, 0.5]])  # fmt: skip
    groups = np.array([0, 0, 1, 2])
    rng = np.random.default_rng(5)
    n = 200_000
    u = rng.random(n)
    cum = T.cumsum(1)
    s = np.empty(n, dtype=int)
    s[0] = 0
    for t in range(1, n):
        s[t] = min(int(np.searchsorted(cum[s[t - 1]], u[t])), 3)
    g = groups[s]
    counted = np.zeros((3, 3))
    np.add.at(counted, (g[:-1], g[1:]), 1)
    counted /= counted.sum(1, keepdims=True)
    # frequencies counted on a simulated stationary chain (Monte Carlo, 200,000 steps)
    np.testing.assert_allclose(lumped_transitions(T, groups), counted, atol=0.01)


def _two_unit_sequence(seed: int):
    """Three behaviours in two units; behaviour 0's posture differs between the units."""
    rng = np.random.default_rng(seed)
    X, truth, lengths = [], [], []
    for unit in range(2):
        postures = {0: (1.5 * unit, 0.0), 1: (0.0, 6.0), 2: (6.0, 3.0)}
        n_unit = 0
        for _ in range(30):
            behaviour = int(rng.integers(3))
            n = int(rng.integers(40, 81))
            X.append(rng.normal(postures[behaviour], 0.2, (n, 2)))
            truth += [behaviour] * n
            n_unit += n
        lengths.append(n_unit)
    return np.vstack(X), np.array(truth), lengths


def test_grouped_hmm_joins_one_behaviour_seen_in_two_units():
    X, truth, lengths = _two_unit_sequence(6)
    kw = dict(n_states=3, max_states=4, fps=20.0, n_restarts=1, random_state=0)
    joined = GroupedHMM(join="units", **kw).fit(X, lengths)
    plain = GroupedHMM(**kw).fit(X, lengths)
    fine = joined.predict_fine(X, lengths)
    assert adjusted_rand_score(truth, fine) < 0.99  # behaviour 0 is two fine states
    assert len(joined.joined_) == 1
    # scikit-learn's ARI against the simulated behaviours
    assert adjusted_rand_score(truth, joined.predict(X, lengths)) > 0.95
    assert adjusted_rand_score(truth, plain.predict(X, lengths)) < 0.9
    with pytest.raises(InputError, match="join"):
        GroupedHMM(join="posture").fit(X, lengths)


# --- phases of one rhythm (group_rule="phases") -------------------------------------------


def test_exchange_lift_against_a_worked_example_and_a_simulated_chain():
    from ethoscribe.segment.lumping import exchange_lift

    # Worked by hand: P is doubly stochastic, so pi = (1/3, 1/3, 1/3); state 0 is left with flux
    # 1/3 * 0.1, by chance half of it to each other state (1/60). Exchange 0-1 observed
    # 2 * 1/3 * 0.08, expected 2/60: lift 1.6. Exchange 0-2: 2 * 1/3 * 0.02 over
    # 1/60 + (1/3 * 0.04) / 2: 0.571.
    P = np.array([[0.90, 0.08, 0.02], [0.08, 0.90, 0.02], [0.02, 0.02, 0.96]])
    lift = exchange_lift(P)
    np.testing.assert_allclose(lift[0, 1], 1.6, rtol=1e-9)
    np.testing.assert_allclose(lift[0, 2], (2 / 150) / (1 / 60 + 1 / 150), rtol=1e-9)
    np.testing.assert_allclose(lift, lift.T)
    assert np.all(np.diag(lift) == 0)
    # A non-symmetric chain: the lift from transitions counted on a simulated chain (Monte
    # Carlo, 200,000 steps; exits of each state split by chance in proportion to the
    # occupancy counted), stationary distribution from scipy.linalg.eig's left eigenvector.
    T = np.array([[0.7, 0.2, 0.1, 0.0], [0.1, 0.6, 0.2, 0.1], [0.0, 0.3, 0.6, 0.1],
                  [0.2, 0.0, 0.3, 0.5]])  # fmt: skip
    values, left = scipy.linalg.eig(T, left=True, right=False)
    pi = np.abs(np.real(left[:, np.argmin(np.abs(values - 1))]))
    pi /= pi.sum()
    rng = np.random.default_rng(3)
    n = 200_000
    u, cum = rng.random(n), T.cumsum(1)
    s = np.empty(n, dtype=int)
    s[0] = 0
    for t in range(1, n):
        s[t] = min(int(np.searchsorted(cum[s[t - 1]], u[t])), 3)
    counts = np.zeros((4, 4))
    np.add.at(counts, (s[:-1], s[1:]), 1)
    exits = counts.sum(1) - np.diag(counts)
    chance = exits[:, None] * pi[None, :] / (1 - pi)[:, None]
    off = ~np.eye(4, dtype=bool)
    counted = np.where(off, (counts + counts.T) / np.where(off, chance + chance.T, 1), 0)
    np.testing.assert_allclose(exchange_lift(T), counted, rtol=0.05, atol=0.01)


def test_mean_distance_is_scipys_mahalanobis_under_the_pooled_covariance():
    from scipy.spatial.distance import mahalanobis

    from ethoscribe.segment.lumping import mean_distance

    rng = np.random.default_rng(4)
    means = rng.normal(size=(3, 4))
    A = rng.normal(size=(3, 4, 4))
    covars = A @ A.transpose(0, 2, 1) + np.eye(4)
    cols = [1, 3]
    got = mean_distance(means, covars, cols)
    for i, j in [(0, 1), (0, 2), (1, 2)]:
        pooled = 0.5 * (covars[i] + covars[j])[np.ix_(cols, cols)]
        want = mahalanobis(means[i, cols], means[j, cols], np.linalg.inv(pooled))  # scipy
        np.testing.assert_allclose(got[i, j], want, rtol=1e-10)
        assert got[j, i] == got[i, j]
    assert np.all(mean_distance(means, covars, []) == 0)


def test_pair_components_are_scipys_connected_components():
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    from ethoscribe.segment.lumping import pair_components

    pairs = [(5, 6), (5, 7), (6, 8), (2, 3), (8, 7)]
    graph = coo_matrix((np.ones(len(pairs)), tuple(np.array(pairs).T)), shape=(10, 10))
    n, want = connected_components(graph, directed=False)  # scipy
    got = pair_components(10, pairs)
    assert got.max() + 1 == n
    assert adjusted_rand_score(want, got) == 1.0  # same partition (scikit-learn)
    assert got.tolist() == [0, 1, 2, 2, 3, 4, 4, 4, 4, 5]  # numbered by first state


def test_join_phases_joins_a_cycle_of_phases_and_nothing_else():
    from ethoscribe.segment.lumping import join_phases

    # States 0-3: one gait in four phases (each hands over to the next, held 0.2 s at 20 fps),
    # same band amplitude (column 1); state 4 a still posture held 5 s, state 5 another still
    # posture with the same (low) band amplitude, exchanged with 4 more than by chance.
    fps, n = 20.0, 6
    T = np.full((n, n), 0.002)
    for a, b in [(0, 1), (1, 2), (2, 3), (3, 0)]:
        T[a, b] = 0.25 - 0.002 * (n - 2)
    T[4, 5] = T[5, 4] = 0.008
    np.fill_diagonal(T, 0.0)
    np.fill_diagonal(T, 1.0 - T.sum(1))
    means = np.array([[0, 3], [1, 3], [2, 3], [1, 3.1], [5, 0], [8, 0.1]], dtype=float)
    covars = np.repeat(np.eye(2)[None] * 0.25, n, axis=0)
    assignment, pairs = join_phases(T, means, covars, [1], fps)
    assert assignment.tolist() == [0, 0, 0, 0, 1, 2]
    assert {p["states"] for p in pairs} == {(0, 1), (1, 2), (2, 3), (0, 3)}
    assert all(p["lift"] > 1 and p["distance"] < 1 and max(p["stay_s"]) <= 1 for p in pairs)
    # no phase-free columns: nothing is joined
    assert join_phases(T, means, covars, [], fps)[0].tolist() == list(range(n))
    # the gait's phases with different band amplitudes are different rhythms: kept apart
    means[2:4, 1] = 6.0
    assert join_phases(T, means, covars, [1], fps)[0].tolist() == [0, 0, 1, 1, 2, 3]


def _gait_sequence(seed: int, n_bouts: int = 45, half: int = 6):
    """Two gaits and a still posture, bouts of 80-160 frames at 20 fps. In a gait, column 0
    swings between -2 and 2 every ``half`` frames (the phases); column 1 tells the behaviours
    apart and does not change with the phase."""
    rng = np.random.default_rng(seed)
    X, truth, phase = [], [], []
    for b in range(n_bouts):
        behaviour = b % 3
        n = int(rng.integers(80, 161))
        side = (np.arange(n) // half) % 2
        if behaviour == 2:
            mean = np.column_stack([np.full(n, 8.0), np.full(n, 2.5)])
            ph = np.full(n, 4)
        else:
            mean = np.column_stack([np.where(side, 2.0, -2.0), np.full(n, 5.0 * behaviour)])
            ph = 2 * behaviour + side
        X.append(mean + rng.normal(0, 0.3, (n, 2)))
        truth += [behaviour] * n
        phase += list(ph)
    return np.vstack(X), np.array(truth), np.array(phase)


def test_grouped_hmm_joins_only_phases():
    X, truth, phase = _gait_sequence(0)
    # No sticky 1-s prior: on a sequence this short it makes the fine fit cover both phases of
    # a gait with one two-humped state (a copy per stretch of bouts) instead of one per phase.
    kw = dict(max_states=5, min_states=2, fps=20.0, n_restarts=1, random_state=0)
    kw["expected_bout_s"] = None
    model = GroupedHMM(group_rule="phases", steady_columns=[1], **kw).fit(X)
    # scikit-learn's ARI: the fine states are the phases, the sets the behaviours
    assert adjusted_rand_score(phase, model.predict_fine(X)) > 0.95
    assert model.n_fine_states_ == 5 and model.n_states_ == 3
    assert adjusted_rand_score(truth, model.predict(X)) > 0.95
    assert len(model.phases_) == 2 and "phases of one rhythm" in model.group_reason_
    # column 0 as the "phase-free" one: the phases differ there, so nothing is joined
    apart = GroupedHMM(group_rule="phases", steady_columns=[0], **kw).fit(X)
    assert apart.n_states_ == apart.n_fine_states_ == 5
    meta, arrays = model.to_state()
    again = GroupedHMM.from_state(json.loads(json.dumps(meta, allow_nan=False)), arrays)
    np.testing.assert_array_equal(again.predict(X), model.predict(X))
    with pytest.raises(InputError, match="steady_columns"):
        GroupedHMM(group_rule="phases", **kw).fit(X)
    with pytest.raises(InputError, match="steady_columns"):
        GroupedHMM(group_rule="phases", steady_columns="band", **kw).fit(X)


def test_behaviour_model_fills_in_the_band_columns_as_phase_free():
    from ethoscribe.segment.model import BehaviourModel, steady_columns
    from ethoscribe.simulate import simulate_session

    tracks = [simulate_session(duration_s=60, seed=s, session=f"s{s}")[0] for s in (1, 2)]
    model = BehaviourModel(
        method="grouped_hmm",
        state_range=(2, 6),
        segmenter={"fine_states": "elbow", "group_rule": "phases", "n_restarts": 1, "n_iter": 30},
    ).fit(tracks)
    columns = model.features_.columns_
    cols = model.segmenter_.steady_columns
    assert cols == steady_columns(columns) and len(cols) > 0
    assert all("_band_" in columns[c] for c in cols)
    labels = model.label(tracks)
    assert (labels["state"] >= 0).all() and labels["state"].max() < model.n_states_
    meta, arrays = model.to_state()
    again = BehaviourModel.from_state(json.loads(json.dumps(meta, allow_nan=False)), arrays)
    np.testing.assert_array_equal(again.label(tracks)["state"], labels["state"])


def test_behaviour_model_join_phases_labels_the_joined_states(monkeypatch):
    # The rule itself is checked above against scipy; here the plumbing of the option: which
    # states the rule joins is fixed (fitted states 0 and 1), the labels must be the joined
    # Viterbi path with the minimum bout applied after joining, and must survive saving.
    import ethoscribe.segment.model as model_module
    from ethoscribe.segment.model import BehaviourModel, stack_valid
    from ethoscribe.segment.postprocess import enforce_min_bout
    from ethoscribe.simulate import simulate_session

    def fake_join(transmat, means, covars, columns, fps):
        assert columns and fps == 30.0
        groups = np.r_[0, np.arange(len(transmat) - 1)]
        return groups, [{"states": (0, 1), "lift": 3.0, "distance": 0.2, "stay_s": (0.3, 0.4)}]

    monkeypatch.setattr(model_module, "join_phases", fake_join)
    tracks = [simulate_session(duration_s=60, seed=s, session=f"s{s}")[0] for s in (1, 2)]
    kw = dict(n_states=4, segmenter={"n_restarts": 1, "n_iter": 30})
    plain = BehaviourModel(join_phases=False, **kw).fit(tracks)
    model = BehaviourModel(**kw).fit(tracks)  # join_phases=True: the default
    assert plain.phase_groups_ is None and "fine_state" not in plain.label(tracks)
    assert model.phase_groups_ == [0, 0, 1, 2] and model.n_states_ == 3
    labels = model.label(tracks)
    feats, _ = model.transform_features(tracks)
    X, lengths = stack_valid(feats)
    seg = model.segmenter_
    fine, prob = seg.predict(X, lengths), seg.predict_proba(X, lengths)
    g = np.array(model.phase_groups_)
    onehot = np.eye(3)[g]
    want = enforce_min_bout(g[fine], 15, lengths=lengths, probabilities=prob @ onehot)
    np.testing.assert_array_equal(labels["state"].to_numpy(), want)
    np.testing.assert_array_equal(labels["fine_state"].to_numpy(), fine)
    assert len(model.state_tree_["fine_assignment"]) == 4
    assert all(len(lv["assignment"]) == 3 for lv in model.state_tree_["levels"])
    assert {m["states"] for m in model.suggested_merges(labels)} <= {
        (a, b) for a in range(3) for b in range(a + 1, 3)
    }
    meta, arrays = model.to_state()
    again = BehaviourModel.from_state(json.loads(json.dumps(meta, allow_nan=False)), arrays)
    assert again.phase_groups_ == model.phase_groups_ and again.n_states_ == 3
    np.testing.assert_array_equal(again.label(tracks)["state"], labels["state"])
    meta["phase_groups"] = [0, 0, 0, 5]
    with pytest.raises(InputError, match="phase_groups"):
        BehaviourModel.from_state(meta, arrays)
    with pytest.raises(InputError, match="join_phases"):
        BehaviourModel(join_phases="yes").fit(tracks)


def test_stability_check_compares_the_labelled_states_when_phases_are_joined(monkeypatch):
    # Refits and the model's own segmenter must label as the model does (phases joined), so the
    # stability table lists the model's labelled states, the motifs' states.
    import ethoscribe.segment.model as model_module
    from ethoscribe.segment.model import BehaviourModel, PhaseJoined, labels_like_model
    from ethoscribe.simulate import simulate_session
    from ethoscribe.workspace.runs import _stability

    def fake_join(transmat, means, covars, columns, fps):
        groups = np.r_[0, np.arange(len(transmat) - 1)]
        return groups, [{"states": (0, 1), "lift": 3.0, "distance": 0.2, "stay_s": (0.3, 0.4)}]

    monkeypatch.setattr(model_module, "join_phases", fake_join)
    tracks = [simulate_session(duration_s=60, seed=s, session=f"s{s}")[0] for s in (1, 2)]
    model = BehaviourModel(n_states=4, segmenter={"n_restarts": 1, "n_iter": 30}).fit(tracks)
    feats, _ = model.transform_features(tracks)
    report = _stability(model, feats, seed=0, progress=False)
    assert report.table["state"].tolist() == [0, 1, 2] and report.summary["n_states"] == 3
    own = labels_like_model(model, model.segmenter_, own=True)
    assert isinstance(own, PhaseJoined) and own.n_states_ == 3
    plain = BehaviourModel(n_states=4, join_phases=False, segmenter={"n_restarts": 1}).fit(tracks)
    assert labels_like_model(plain, plain.segmenter_, own=True) is plain.segmenter_


def test_discover_with_joined_phases_saves_reloads_and_labels_new_sessions(tmp_path, monkeypatch):
    # Which states join is fixed (fitted 0 and 1); the workspace must keep the labelled states
    # (model file, stability table, labelling new sessions) consistent.
    import ethoscribe.segment.model as model_module
    from _example_study import trimmed_study
    from ethoscribe.workspace import discover, label_sessions
    from ethoscribe.workspace.files import load_model

    def fake_join(transmat, means, covars, columns, fps):
        groups = np.r_[0, np.arange(len(transmat) - 1)]
        return groups, [{"states": (0, 1), "lift": 3.0, "distance": 0.2, "stay_s": (0.3, 0.4)}]

    monkeypatch.setattr(model_module, "join_phases", fake_join)
    (tmp_path / "study").mkdir()
    study = trimmed_study(tmp_path / "study", ["session_01", "session_09"], 1800)
    ws = discover(
        [study], tmp_path / "ws", manifest=study / "manifest.csv", states=4, stability=True,
        progress=False,
    )  # fmt: skip
    summary = ws.summary
    assert summary["n_states"] == 3 and summary["state_tree"]["fine_assignment"] == [0, 0, 1, 2]
    labels = ws.state_labels()
    assert labels["state"].max() == 2 and labels["fine_state"].max() == 3
    assert pd.read_csv(ws.path / "stability.csv")["state"].tolist() == [0, 1, 2]
    model = load_model(ws.path / "model")
    assert model.n_states_ == 3 and model.phase_groups_ == [0, 0, 1, 2]
    new = label_sessions(
        ws.path, [study / "session_09.parquet"], tmp_path / "new", manifest=study / "manifest.csv",
        progress=False,
    )  # fmt: skip
    assert new.state_labels()["motif"].isin(labels["motif"]).all()


def test_expert_classifier_inputs_keep_every_fitted_state_when_phases_are_joined(monkeypatch):
    import ethoscribe.segment.model as model_module
    from ethoscribe.segment.model import BehaviourModel
    from ethoscribe.simulate import simulate_session
    from ethoscribe.workspace.expert import classifier_inputs

    def fake_join(transmat, means, covars, columns, fps):
        groups = np.r_[0, np.arange(len(transmat) - 1)]
        return groups, [{"states": (0, 1), "lift": 3.0, "distance": 0.2, "stay_s": (0.3, 0.4)}]

    monkeypatch.setattr(model_module, "join_phases", fake_join)
    tracks = [simulate_session(duration_s=40, seed=3, session="s3")[0]]
    model = BehaviourModel(n_states=4, segmenter={"n_restarts": 1, "n_iter": 20}).fit(tracks)
    feats, _ = model.transform_features(tracks)
    [inputs] = classifier_inputs(model, feats)
    assert model.n_states_ == 3
    assert inputs.shape == (len(feats[0].valid), feats[0].values.shape[1] + 4)
    valid = feats[0].valid
    np.testing.assert_allclose(inputs[valid, -4:].sum(1), 1.0, atol=1e-9)  # posteriors


def test_unit_shares_match_pandas_groupby_sums():
    from ethoscribe.segment.lumping import unit_shares

    rng = np.random.default_rng(8)
    lengths = [40, 25, 35]
    posterior = rng.dirichlet(np.ones(4), size=sum(lengths))
    posterior[:, 3] = 0.0  # a state with no frame: a row of zeros, not NaN
    share = unit_shares(posterior, lengths)
    # reference: pandas, the expected frames of each state summed per unit, over the state's total
    unit = np.repeat(np.arange(3), lengths)
    sums = pd.DataFrame(posterior).groupby(unit).sum().T.to_numpy()
    want = sums / np.where(sums.sum(1, keepdims=True) > 0, sums.sum(1, keepdims=True), 1.0)
    np.testing.assert_allclose(share, want, atol=1e-12)
    assert share[3].tolist() == [0.0, 0.0, 0.0]


def test_behaviour_model_join_units_labels_the_joined_states(monkeypatch):
    # The rule (join_across_units) is checked above against scikit-learn; here the plumbing of
    # BehaviourModel(join_units=True): which states it joins is fixed (fitted 0 and 2), composed
    # with the phase join (fitted 0 and 1) through the same phase_groups_ / fine_state labels.
    import ethoscribe.segment.model as model_module
    from ethoscribe.segment.lumping import unit_overlap
    from ethoscribe.segment.model import BehaviourModel, PhaseJoined, labels_like_model, stack_valid
    from ethoscribe.segment.postprocess import enforce_min_bout
    from ethoscribe.simulate import simulate_session

    seen = {}

    def fake_units(means, share, max_overlap=0.5, mutual=True):
        seen["share"] = share
        assert mutual and share.shape == (len(means), 2)  # two sessions: two units
        np.testing.assert_allclose(share.sum(1), 1.0)
        groups = np.r_[0, 1, 0, np.arange(2, len(means) - 1)]
        return groups, [(0, 2)]

    def fake_phases(transmat, means, covars, columns, fps):
        groups = np.r_[0, np.arange(len(transmat) - 1)]
        return groups, [{"states": (0, 1), "lift": 3.0, "distance": 0.2, "stay_s": (0.3, 0.4)}]

    monkeypatch.setattr(model_module, "join_across_units", fake_units)
    tracks = [simulate_session(duration_s=60, seed=s, session=f"s{s}")[0] for s in (1, 2)]
    kw = dict(n_states=4, segmenter={"n_restarts": 1, "n_iter": 30})
    units = BehaviourModel(join_phases=False, join_units=True, **kw).fit(tracks)
    assert units.phase_groups_ == [0, 1, 0, 2] and units.n_states_ == 3
    assert units.phase_pairs_ == [] and [p["states"] for p in units.unit_pairs_] == [[0, 2]]
    overlap = unit_overlap(seen["share"])[0, 2]
    assert units.unit_pairs_[0]["overlap"] == pytest.approx(overlap)
    assert "different units" in units.state_tree_["fine_reason"]
    labels = units.label(tracks)
    feats, _ = units.transform_features(tracks)
    X, lengths = stack_valid(feats)
    seg = units.segmenter_
    fine, prob = seg.predict(X, lengths), seg.predict_proba(X, lengths)
    g = np.array(units.phase_groups_)
    want = enforce_min_bout(g[fine], 15, lengths=lengths, probabilities=prob @ np.eye(3)[g])
    np.testing.assert_array_equal(labels["state"].to_numpy(), want)
    np.testing.assert_array_equal(labels["fine_state"].to_numpy(), fine)
    meta, arrays = units.to_state()
    again = BehaviourModel.from_state(json.loads(json.dumps(meta, allow_nan=False)), arrays)
    assert again.phase_groups_ == units.phase_groups_ and again.unit_pairs_ == units.unit_pairs_
    assert again.join_units is True
    np.testing.assert_array_equal(again.label(tracks)["state"], labels["state"])
    # refits for the stability check join across units too (they see the units when fitted)
    refit = labels_like_model(units, type(seg)(n_states=4, fps=30.0, n_restarts=1, n_iter=30))
    assert isinstance(refit, PhaseJoined) and refit.fit(X, lengths).n_states_ == 3
    # composed with the phase join: 0+1 (phases) and 0+2 (units) are one labelled state
    monkeypatch.setattr(model_module, "join_phases", fake_phases)
    both = BehaviourModel(join_units=True, **kw).fit(tracks)
    assert both.phase_groups_ == [0, 0, 0, 1] and both.n_states_ == 2
    assert "phases of one rhythm" in both.state_tree_["fine_reason"]
    assert "different units" in both.state_tree_["fine_reason"]
    # one unit: nothing to join across (the real rule)
    monkeypatch.undo()
    one = BehaviourModel(join_phases=False, join_units=True, **kw).fit(tracks[:1])
    assert one.phase_groups_ is None and one.unit_pairs_ == []
    with pytest.raises(InputError, match="join_units"):
        BehaviourModel(join_units="yes").fit(tracks)
