"""The validation bench's scorers against scikit-learn / scipy, and one tiny source end to end.

References: scikit-learn ``adjusted_rand_score`` / ``normalized_mutual_info_score``; scipy
``linear_sum_assignment`` (Hungarian) and ``maximum_bipartite_matching`` (boundary matching);
the worked values of /work/shared/EXTERNAL-CHECKS.md ("Agreement", "Hungarian").
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from benchmarks.validity.scoring import matched_accuracy, score_units, unit_boundaries
from benchmarks.validity.sources import upsample
from scipy.optimize import linear_sum_assignment
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import maximum_bipartite_matching
from sklearn.metrics import adjusted_rand_score, normalized_mutual_info_score


def _random_labels(rng, n, k):
    """Piecewise-constant labels with runs, as segmentations have."""
    runs = rng.integers(1, 12, size=n)
    return np.repeat(rng.integers(0, k, size=n), runs)[:n]


def test_agreement_scores_equal_scikit_learn_worked_example():
    s = score_units({("s", "a"): np.array([0, 0, 1, 1])}, {("s", "a"): np.array([0, 0, 1, 2])}, 30)
    # EXTERNAL-CHECKS.md (scikit-learn): adjusted_rand_score([0,0,1,1],[0,0,1,2]) = 0.571429,
    # NMI of the same pair 0.8.
    assert s["ari"] == pytest.approx(0.571429, abs=1e-6)
    assert s["nmi"] == pytest.approx(0.8, abs=1e-12)
    assert s["states_found"] == 3 and s["states_true"] == 2


@pytest.mark.parametrize("seed", range(5))
def test_scores_equal_scikit_learn_and_scipy_on_random_labelings(seed):
    rng = np.random.default_rng(seed)
    truth = {("s1", "a"): _random_labels(rng, 300, 4), ("s2", "a"): _random_labels(rng, 200, 4)}
    found = {k: _random_labels(rng, len(v), 6) for k, v in truth.items()}
    truth[("s1", "a")][:20] = -1  # unlabelled truth frames: left out
    found[("s2", "a")][50:70] = -1  # unscored frames: left out of ARI, counted as unscored
    s = score_units(truth, found, fps=30)
    t = np.concatenate([truth[k] for k in sorted(truth)])
    f = np.concatenate([found[k] for k in sorted(truth)])
    both = (t >= 0) & (f >= 0)
    # Reference: scikit-learn on the frames labelled in both.
    assert s["ari"] == pytest.approx(adjusted_rand_score(t[both], f[both]), abs=1e-12)
    assert s["nmi"] == pytest.approx(normalized_mutual_info_score(t[both], f[both]), abs=1e-12)
    # Reference: scipy's Hungarian method on the contingency table, maximising the overlap.
    table = np.zeros((t.max() + 1, f.max() + 1))
    np.add.at(table, (t[both], f[both]), 1)
    rows, cols = linear_sum_assignment(table, maximize=True)
    assert s["accuracy"] == pytest.approx(table[rows, cols].sum() / both.sum(), abs=1e-12)
    assert s["unscored_pct"] == pytest.approx(100 * (1 - both.sum() / (t >= 0).sum()))


def test_matched_accuracy_on_the_scipy_docs_cost_matrix():
    # scipy docs (EXTERNAL-CHECKS.md): linear_sum_assignment([[4,1,3],[2,0,5],[3,2,2]]) ->
    # columns [1, 0, 2], cost 5. Read as a contingency table of frames, the matched accuracy is
    # scipy's maximum-overlap assignment over all frames.
    cost = np.array([[4, 1, 3], [2, 0, 5], [3, 2, 2]])
    rows, cols = linear_sum_assignment(cost)
    assert cost[rows, cols].sum() == 5 and cols.tolist() == [1, 0, 2]
    truth = np.repeat(np.repeat(np.arange(3), 3), cost.ravel())
    found = np.repeat(np.tile(np.arange(3), 3), cost.ravel())
    r, c = linear_sum_assignment(cost, maximize=True)
    assert matched_accuracy(truth, found) == pytest.approx(cost[r, c].sum() / cost.sum())


def _max_matching(true_b, found_b, margin):
    """Brute reference: maximum one-to-one matching of boundaries within the margin (scipy)."""
    if len(true_b) == 0 or len(found_b) == 0:
        return 0
    adj = np.abs(np.subtract.outer(true_b, found_b)) <= margin
    match = maximum_bipartite_matching(csr_matrix(adj.astype(int)), perm_type="column")
    return int((match >= 0).sum())


@pytest.mark.parametrize("seed", range(8))
def test_boundary_counts_equal_maximum_bipartite_matching(seed):
    rng = np.random.default_rng(seed)
    n = 400
    truth = _random_labels(rng, n, 3)
    found = truth.copy()
    shift = rng.integers(-8, 9)
    found = np.roll(found, shift)  # the same boundaries, displaced
    found[rng.random(n) < 0.02] = rng.integers(0, 3)  # plus spurious ones
    s = score_units({("s", "a"): truth}, {("s", "a"): found}, fps=25, margin_s=0.2)
    tb, fb = unit_boundaries(truth, found)
    matched = _max_matching(tb, fb, 5)
    assert s["margin_frames"] == [5]  # 0.2 s at 25 fps
    assert (s["boundaries_true"], s["boundaries_found"]) == (len(tb), len(fb))
    assert s["boundary_recall"] == pytest.approx(matched / len(tb))
    assert s["boundary_precision"] == pytest.approx(matched / len(fb))


@pytest.mark.parametrize("shift", [-4, 0, 3])
def test_boundary_lag_is_the_shift_of_late_or_early_labels(shift):
    # Labels displaced by a known number of frames (the construction is the reference): every
    # found boundary lies `shift` frames after its true one, so the median lag is shift / fps.
    truth = np.repeat(np.arange(20) % 3, 30)
    found = np.r_[np.full(max(shift, 0), truth[0]), truth][: len(truth)]
    if shift < 0:
        found = np.r_[truth[-shift:], np.full(-shift, truth[-1])]
    s = score_units({("s", "a"): truth}, {("s", "a"): found}, fps=25)
    assert s["boundary_lag_s"] == pytest.approx(shift / 25)
    none = score_units({("s", "a"): truth}, {("s", "a"): np.zeros_like(truth)}, fps=25)
    assert np.isnan(none["boundary_lag_s"])  # no found boundary within 1 s


def test_gaps_in_truth_and_unscored_frames_make_no_boundaries():
    truth = np.array([0, 0, 0, -1, -1, 1, 1, 1])
    found = np.array([2, 2, -1, -1, 3, 3, 3, 3])
    tb, fb = unit_boundaries(truth, found)
    # Unlabelled truth frames removed: [0,0,0,1,1,1] and found [2,2,2(filled),3,3,3].
    assert tb.tolist() == [3] and fb.tolist() == [3]


def test_upsampling_interpolates_values_and_repeats_labels():
    x = np.array([[0.0], [3.0], [6.0]])
    up, labels = upsample(x, np.array([0, 1, 1]), 3)
    # np.interp (linear) between samples; held at the last sample.
    assert up[:, 0].tolist() == [0, 1, 2, 3, 4, 5, 6, 6, 6]
    assert labels.tolist() == [0, 0, 0, 1, 1, 1, 1, 1, 1]


@pytest.mark.slow
def test_one_tiny_source_end_to_end(tmp_path, monkeypatch):
    from benchmarks.validity import __main__ as bench
    from benchmarks.validity.sources import LOADERS, Source, source

    from ethoscribe.simulate import simulate_session

    @source("tiny_test_source", "two short simulated sessions (test only)")
    def tiny(seed: int = 0) -> Source:
        sessions, truth = [], {}
        for i in range(2):
            tracks, table = simulate_session(duration_s=60, seed=seed + i, session=f"s{i}")
            sessions.append(tracks)
            truth[(tracks.session, tracks.animals[0])] = table["state"].to_numpy()
        return Source(
            "tiny_test_source",
            "simulated (ethoscribe)",
            sessions,
            truth,
            [str(k) for k in range(8)],
            {"sessions": ["s0", "s1"]},
        )

    try:
        assert bench.main(["--out", str(tmp_path), "--source", "tiny_test_source"]) == 0
    finally:
        LOADERS.pop("tiny_test_source")
    doc = json.loads((tmp_path / "validity.json").read_text())
    result = doc["sources"]["tiny_test_source"]
    assert doc["meta"]["seed"] == 0 and doc["meta"]["versions"]["hmmlearn"]
    for pipeline in ("ethoscribe", "reference"):
        assert "error" not in result[pipeline], result[pipeline].get("error")
        assert -1 <= result[pipeline]["ari"] <= 1
        assert result[pipeline]["frames_labelled"] == 2 * 1800
    assert "tiny_test_source" in (tmp_path / "validity.md").read_text()


def test_the_reference_refits_without_constant_columns_when_hmmlearn_gives_up(monkeypatch):
    # TSSB ElectricDevices (shipped inside aeon): the reference's PCA of the one series gives
    # constant columns, and hmmlearn 0.3.3 stopped on them at seed 2 with "'covars' must be
    # symmetric, positive-definite" (on another machine it did not). The reference then leaves
    # them out and fits again, as a user would; forced here by failing the first fit.
    pytest.importorskip("aeon.datasets")
    from benchmarks.validity.pipelines import run_reference
    from benchmarks.validity.sources.aeon_series import electric_devices
    from hmmlearn.hmm import GaussianHMM

    fit, calls = GaussianHMM.fit, []

    def failing_once(self, X, lengths=None):
        calls.append(X.shape[1])
        if len(calls) == 1:
            raise ValueError("'covars' must be symmetric, positive-definite")
        return fit(self, X, lengths)

    monkeypatch.setattr(GaussianHMM, "fit", failing_once)
    src = electric_devices(2)
    labels, info = run_reference(src, 2)
    assert "positive-definite" in info["failed_fit"]
    assert calls[1] == info["params"]["columns"] == 2 < calls[0]  # the series and its speed
    [states] = labels.values()
    assert len(states) == src.sessions[0].n_frames and len(np.unique(states)) > 1


def test_clips_cut_at_every_true_bout():
    from benchmarks.probe_clips import clips_of
    from benchmarks.validity.sources import Source

    from ethoscribe.pose import PoseTracks

    coords = np.arange(40 * 2 * 2, dtype=float).reshape(40, 1, 2, 2)
    tracks = PoseTracks(coords, np.ones((40, 1, 2)), fps=10.0, keypoints=("a", "b"), session="s")
    codes = np.r_[[0] * 25, [-1] * 5, [1] * 4, [2] * 6]  # bouts of 2.5, 0.5 (no label), 0.4, 0.6 s
    src = Source("t", "simulated", [tracks], {("s", tracks.animals[0]): codes}, ["x", "y", "z"])
    clips = clips_of(src, min_s=0.5)
    # the unlabelled and the 0.4-s bouts dropped
    assert [c.n_frames for c in clips.sessions] == [25, 6]
    np.testing.assert_array_equal(clips.sessions[1].coords, coords[34:40])
    assert [v.tolist() for v in clips.truth.values()] == [[0] * 25, [2] * 6]
    assert len({c.session for c in clips.sessions}) == 2


@pytest.mark.slow
@pytest.mark.filterwarnings("ignore")
def test_basic_motions_trials_as_sessions_are_labelled_as_activities():
    # UEA BasicMotions (Bagnall et al. 2018, shipped inside aeon's wheel): 80 trials of 10 s,
    # one activity each, cut back into trials (consecutive trials of one activity stay one
    # clip). Every clip holds one activity, so per-session offsets and joining states used in
    # different sessions cannot tell a session from an activity: the model leaves both out
    # (with both, ARI 0.25 and 2 states; benchmarks/README.md, "Clips of one behaviour each").
    # One fit's ARI moves with the processor's floating-point kernels (model seed 0: above 0.8
    # where this was written, 0.67 with 4 states on an AMD EPYC, seeds 1-4 there 0.87-0.94):
    # the median of three seeds is checked.
    pytest.importorskip("aeon")
    from benchmarks.probe_clips import clips_of
    from benchmarks.validity import pipelines
    from benchmarks.validity.sources import LOADERS, _import_all

    _import_all()
    src = clips_of(LOADERS["basic_motions"](seed=0), 2.0)
    assert len(src.sessions) >= 40
    scores = []
    for seed in range(3):
        found, info = pipelines.run_ethoscribe(src, seed)
        assert info["unit_lambda"] > 0.5
        scores.append(score_units(src.truth, found, src.unit_fps)["ari"])
    assert np.median(scores) > 0.8
