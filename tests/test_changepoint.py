"""Change-point detection and the change-point segmenter.

Outside references: ruptures' signal generators with known breakpoints (``pw_constant``,
``pw_normal``) and ruptures' own metrics; scikit-learn's adjusted Rand index.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import ruptures as rpt
from ruptures.metrics import hausdorff as rpt_hausdorff
from ruptures.metrics import precision_recall
from sklearn.metrics import adjusted_rand_score

from ethoscribe.errors import InputError, NotFittedError
from ethoscribe.segment.boundaries import (
    boundaries_from_labels,
    boundary_scores,
    hausdorff,
    pooled_boundary_scores,
    to_breakpoints,
)
from ethoscribe.segment.changepoint import (
    CHANGE_POINT_METHODS,
    ChangePointSegmenter,
    auto_penalty,
    detect_change_points,
    robust_noise_variance,
)
from ethoscribe.segment.motifs import local_energy_features


def regimes(seed: int, n_sessions: int = 3, seconds: int = 60, fps: float = 30.0, d: int = 6):
    """Invented recovery data: 4 Gaussian regimes, segments of 1-5 s, no two alike in a row."""
    rng = np.random.default_rng(seed)
    means = rng.normal(0, 1.5, (4, d))
    sds = rng.uniform(0.5, 1.5, (4, d))
    xs, labels, bounds = [], [], []
    for _ in range(n_sessions):
        kinds, durations = [], []
        while sum(durations) < seconds * fps:
            k = int(rng.integers(4))
            if kinds and k == kinds[-1]:
                continue
            kinds.append(k)
            durations.append(int(rng.integers(int(fps), int(5 * fps) + 1)))
        lab = np.repeat(kinds, durations)
        xs.append(means[lab] + sds[lab] * rng.normal(size=(len(lab), d)))
        labels.append(lab)
        bounds.append(np.cumsum(durations)[:-1])
    return np.vstack(xs), np.array([len(x) for x in xs]), np.concatenate(labels), bounds


# --- detection on ruptures' generators ----------------------------------------------------------
@pytest.mark.parametrize("n_features", [1, 3, 6])
def test_auto_penalty_recovers_pw_constant_breakpoints(n_features):
    f1 = []
    for seed in range(6):
        x, bkps = rpt.pw_constant(1000, n_features, 5, noise_std=1.0, seed=seed)
        found = detect_change_points(x, min_size=5)
        f1.append(boundary_scores(bkps[:-1], found, margin=5)["f1"])
    # Source: ruptures.pw_constant draws the breakpoints it returns; F1 >= 0.9 asked at 5 frames.
    assert np.mean(f1) >= 0.9, f1


def test_pw_normal_covariance_changes_via_local_energy():
    # A change of correlation (+0.9 <-> -0.9) is a change of variance of the sum and the
    # difference of the two channels; their local energy turns it into a change of mean.
    f1 = []
    for seed in range(6):
        x, bkps = rpt.pw_normal(1000, 5, seed=seed)
        rotated = np.c_[x[:, 0] + x[:, 1], x[:, 0] - x[:, 1]] / np.sqrt(2)
        energy = local_energy_features(rotated, 20)
        found = detect_change_points(energy, min_size=10, noise_block=20)
        f1.append(boundary_scores(bkps[:-1], found, margin=10)["f1"])
    # Source: ruptures.pw_normal returns its breakpoints; F1 >= ~0.9 at a 10-frame margin.
    assert np.mean(f1) >= 0.9, f1


@pytest.mark.parametrize("method", ["pelt", "binseg"])
def test_other_methods_agree_with_kernel_on_short_series(method):
    x, bkps = rpt.pw_constant(600, 2, 4, noise_std=1.0, seed=3)
    found = detect_change_points(x, method=method, min_size=5)
    # Source: ruptures.pw_constant breakpoints (the grid of jump=5 costs at most 4 frames).
    assert boundary_scores(bkps[:-1], found, margin=5)["f1"] == 1.0


@pytest.mark.parametrize("method", ["kernel", "binseg"])
def test_fixed_number_of_changes(method):
    x, bkps = rpt.pw_constant(800, 3, 4, noise_std=1.0, seed=1)
    found = detect_change_points(x, method=method, n_change_points=4, min_size=5)
    assert len(found) == 4
    # Source: ruptures.pw_constant breakpoints.
    assert boundary_scores(bkps[:-1], found, margin=3)["f1"] == 1.0


def test_windowed_search_matches_one_piece_search():
    rng = np.random.default_rng(5)
    levels = rng.normal(0, 3, (41, 4))
    x = np.repeat(levels, 300, axis=0)[:12000] + rng.normal(size=(12000, 4))
    whole = detect_change_points(x, min_size=10, window=10**9)
    windows = detect_change_points(x, min_size=10, window=1000)
    assert boundary_scores(whole, windows, margin=1)["f1"] == 1.0


def test_noise_estimate_ignores_jumps():
    x, _ = rpt.pw_constant(5000, 3, 20, noise_std=2.0, delta=(5, 10), seed=0)
    # pw_constant adds noise of the given SD (2.0): variance 4 in every channel.
    np.testing.assert_allclose(robust_noise_variance(x), 4.0, rtol=0.1)
    np.testing.assert_allclose(robust_noise_variance(x, block=5), 4.0, rtol=0.2)
    pen = auto_penalty(x)
    assert pen == pytest.approx(2 * 3 * 4.0 * np.log(5000), rel=0.1)


def test_larger_penalty_never_finds_more_changes():
    x, _ = rpt.pw_constant(1500, 2, 8, noise_std=1.5, seed=2)
    counts = [len(detect_change_points(x, penalty=p, min_size=5)) for p in (5, 20, 80, 320)]
    assert counts == sorted(counts, reverse=True)


# --- our metrics against ruptures' --------------------------------------------------------------
def test_boundary_scores_and_hausdorff_match_ruptures():
    rng = np.random.default_rng(0)
    for _ in range(40):
        n, margin = 2000, int(rng.integers(3, 20))
        # True boundaries more than 2 margins apart: ruptures' first-come matching is then
        # one-to-one too, so the two must agree exactly.
        true = np.sort(rng.choice(np.arange(50, n - 50, 2 * margin + 1), 8, replace=False))
        pred = np.unique(np.clip(true + rng.integers(-2 * margin, 2 * margin, 8), 1, n - 1))
        pred = np.unique(np.r_[pred, rng.integers(1, n - 1, int(rng.integers(0, 4)))])
        ours = boundary_scores(true, pred, margin)
        # ruptures counts |d| < margin, ours |d| <= margin: ours(m) == ruptures(m + 1).
        p, r = precision_recall(to_breakpoints(true, n), to_breakpoints(pred, n), margin + 1)
        # Source: ruptures.metrics.precision_recall.
        assert (ours["precision"], ours["recall"]) == pytest.approx((p, r))
        # Source: ruptures.metrics.hausdorff.
        assert hausdorff(true, pred) == rpt_hausdorff(
            to_breakpoints(true, n), to_breakpoints(pred, n)
        )


def test_matching_is_one_to_one_and_maximal():
    # Two true boundaries 8 frames apart, detections between them: greedy first-come matching
    # lets the first true boundary take both detections; the optimal matching pairs both.
    s = boundary_scores([100, 108], [103, 106], margin=5)
    assert (s["n_matched"], s["f1"]) == (2, 1.0)
    assert boundary_scores([100], [99, 101], margin=5)["precision"] == 0.5
    assert boundary_scores([], [], margin=1)["f1"] == 1.0
    assert boundary_scores([5], [], margin=1)["f1"] == 0.0
    assert hausdorff([], [3]) == np.inf
    pooled = pooled_boundary_scores([[10], [20, 40]], [[10], [20]], margin=1)
    assert (pooled["n_true"], pooled["n_matched"]) == (3, 2)
    assert [b.tolist() for b in boundaries_from_labels(np.array([1, 1, 2, 2, 2]), [2, 3])] == [
        [],
        [],
    ]


# --- the segmenter ------------------------------------------------------------------------------
def test_segmenter_recovers_invented_regimes():
    X, lengths, labels, bounds = regimes(seed=0)
    model = ChangePointSegmenter(fps=30.0).fit(X, lengths)
    pred = model.predict(X, lengths)
    ari = adjusted_rand_score(labels, pred)
    scores = pooled_boundary_scores(bounds, model.boundaries_, margin=6)  # 0.2 s at 30 fps
    print(f"recovery (seed 0): motifs {model.n_motifs_}, ARI {ari:.3f}, F1 {scores['f1']:.3f}")
    assert model.n_motifs_ == 4
    assert ari >= 0.8  # reference metric: sklearn.metrics.adjusted_rand_score
    assert scores["f1"] >= 0.8


def test_segmenter_tables_state_and_determinism(tmp_path):
    X, lengths, _, _ = regimes(seed=1, n_sessions=2, seconds=40)
    params = {"n_motifs": 3, "random_state": 4}
    model = ChangePointSegmenter(**params).fit(X, lengths)
    assert model.get_params()["n_motifs"] == 3 and model.n_states_ == 3
    seg = model.predict_segments(X, lengths)
    assert list(seg.columns) == ["session", "start", "stop", "motif", "probability"]
    assert seg.groupby("session")["stop"].max().tolist() == lengths.tolist()
    labels = model.predict(X, lengths)
    assert labels.dtype == np.int64 and len(labels) == len(X)
    # Motif 0 has the largest time budget.
    budget = np.bincount(labels, minlength=3)
    assert budget[0] == budget.max()
    again = ChangePointSegmenter(**params).fit(X, lengths)
    np.testing.assert_array_equal(again.predict(X, lengths), labels)
    meta, arrays = model.to_state()
    json.dumps(meta)
    np.savez(tmp_path / "m.npz", **arrays)
    with np.load(tmp_path / "m.npz", allow_pickle=False) as f:
        loaded = {k: f[k] for k in f.files}
    rebuilt = ChangePointSegmenter.from_state(json.loads(json.dumps(meta)), loaded)
    np.testing.assert_array_equal(rebuilt.predict(X, lengths), labels)
    assert [b.tolist() for b in rebuilt.boundaries_] == [b.tolist() for b in model.boundaries_]


@pytest.mark.parametrize("method", ["pelt", "binseg"])
def test_segmenter_other_methods_run(method):
    X, lengths, labels, _ = regimes(seed=2, n_sessions=2, seconds=40)
    model = ChangePointSegmenter(method=method).fit(X, lengths)
    assert adjusted_rand_score(labels, model.predict(X, lengths)) > 0.7


def test_bad_input_messages():
    X, lengths, _, _ = regimes(seed=3, n_sessions=2, seconds=20)
    with pytest.raises(InputError, match="min_duration_s must be a positive"):
        ChangePointSegmenter(min_duration_s=0).fit(X, lengths)
    with pytest.raises(InputError, match="known methods: kernel, pelt, binseg, prediction_error"):
        ChangePointSegmenter(method="fancy").fit(X, lengths)
    with pytest.raises(InputError, match=r"session 1 has 5 frames"):
        ChangePointSegmenter().fit(X[: lengths[0] + 5], [lengths[0], 5])
    with pytest.raises(InputError, match="n_motifs must be an integer >= 1"):
        ChangePointSegmenter(n_motifs=0).fit(X, lengths)
    with pytest.raises(NotFittedError):
        ChangePointSegmenter().predict(X, lengths)
    model = ChangePointSegmenter(n_motifs=2).fit(X, lengths)
    with pytest.raises(InputError, match="fitted on 6 features but got 5"):
        model.predict(X[:, :5], lengths)
    with pytest.raises(InputError, match="known methods: " + ", ".join(CHANGE_POINT_METHODS)):
        detect_change_points(X, method="rbf")
    with pytest.raises(InputError, match="min_size must be"):
        detect_change_points(X, min_size=0)
    with pytest.raises(InputError, match="fewer than min_size"):
        detect_change_points(X[:3], min_size=5)
    with pytest.raises(InputError, match="NaN"):
        detect_change_points(np.r_[X[:10], [[np.nan] * 6]])
    with pytest.raises(InputError, match="needs a penalty"):
        detect_change_points(X, method="pelt", n_change_points=2)
    with pytest.raises(InputError, match="penalty must be"):
        detect_change_points(X, penalty=-1.0)
