"""Lost keypoints filled from the body-shape model (probabilistic PCA, conditional Gaussian).

Outside references: scikit-learn's PCA (subspace and ``noise_variance_`` of probabilistic PCA,
Tipping & Bishop 1999), scikit-learn's LinearRegression (the conditional mean of a Gaussian is
the population least-squares regression of the lost coordinates on the seen ones). Data: the
package's own simulator (seeds fixed below) with keypoints hidden on purpose.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.decomposition import PCA
from sklearn.linear_model import LinearRegression

from ethoscribe.errors import InputError, InputWarning
from ethoscribe.missing_keypoints import (
    KeypointFiller,
    body_seen,
    conditional_fill,
    ppca_from_covariance,
)
from ethoscribe.segment.model import BehaviourModel
from ethoscribe.simulate import simulate_session

QUICK = {"n_restarts": 1, "n_iter": 30}


def hide_paws(tracks, seed: int, share: float = 0.15):
    """Each paw hidden for 1-4 s at a time on about ``share`` of the frames."""
    rng = np.random.default_rng(seed)
    coords = tracks.coords.copy()
    n = tracks.n_frames
    for k, name in enumerate(tracks.keypoints):
        if "paw" not in name:
            continue
        hidden = 0
        while hidden < share * n:
            length = int(rng.uniform(1, 4) * tracks.fps)
            start = int(rng.integers(0, n - length))
            coords[start : start + length, :, k] = np.nan
            hidden += length
    return tracks.replace(coords=coords)


def test_ppca_of_complete_data_equals_sklearn_pca():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(2000, 3)) @ rng.normal(size=(3, 8)) + 0.3 * rng.normal(size=(2000, 8))
    cov = np.cov(X, rowvar=False)
    W, s2 = ppca_from_covariance(cov, 3)
    ref = PCA(n_components=3).fit(X)  # scikit-learn: probabilistic PCA noise variance
    np.testing.assert_allclose(s2, ref.noise_variance_, rtol=1e-10)
    # same subspace: projections onto the two bases agree
    P_ours = W @ np.linalg.pinv(W)
    P_ref = ref.components_.T @ ref.components_
    np.testing.assert_allclose(P_ours, P_ref, atol=1e-10)
    # loadings: W^T W = L - s2 (Tipping & Bishop 1999, eq. 7)
    np.testing.assert_allclose(
        np.sort(np.diag(W.T @ W))[::-1], ref.explained_variance_ - s2, rtol=1e-10
    )


def test_conditional_mean_equals_least_squares_regression():
    rng = np.random.default_rng(1)
    A = rng.normal(size=(5, 5))
    cov, mean = A @ A.T + np.eye(5), rng.normal(size=5)
    sample = rng.multivariate_normal(mean, cov, size=400_000)
    # scikit-learn least squares of coordinates 3, 4 on 0, 1, 2 (population regression)
    reg = LinearRegression().fit(sample[:, :3], sample[:, 3:])
    queries = rng.normal(size=(4, 5))
    Y = queries.copy()
    Y[:, 3:] = np.nan
    filled, _ = conditional_fill(Y, mean, cov)
    np.testing.assert_allclose(filled[:, :3], queries[:, :3])
    np.testing.assert_allclose(filled[:, 3:], reg.predict(queries[:, :3]), atol=0.03)


def test_filled_paws_lie_near_the_hidden_truth():
    tracks, _ = simulate_session(duration_s=60, seed=5, noise=False)
    hidden = hide_paws(tracks, seed=5)
    filler = KeypointFiller().fit([hidden.coords[:, 0]])
    filled, seen = filler.transform(hidden.coords[:, 0])
    lost = np.isnan(hidden.coords[:, 0, :, 0])
    assert lost.any() and np.isfinite(filled).all()
    np.testing.assert_allclose(seen, body_seen(hidden.coords[:, 0]))
    error = np.linalg.norm(filled[lost] - tracks.coords[:, 0][lost], axis=-1)
    body = np.linalg.norm(tracks.coords[:, 0, 0] - tracks.coords[:, 0, -1], axis=-1).mean()
    # the mean body shape put at the frame is the fill to beat
    baseline = KeypointFiller(n_components=1).fit([tracks.coords[:, 0]])
    base = np.linalg.norm(
        baseline.transform(hidden.coords[:, 0])[0][lost] - tracks.coords[:, 0][lost], axis=-1
    )
    print(f"fill error median {np.median(error):.2f}, body length {body:.1f}")
    assert np.median(error) < 0.06 * body
    assert np.median(error) < np.median(base)


def test_the_unscored_rule_and_visible_points_kept():
    tracks, _ = simulate_session(duration_s=20, seed=2, noise=False)
    X = tracks.coords[:, 0].copy()
    filler = KeypointFiller(min_body_seen=0.6).fit([X])
    X[10, :5] = np.nan  # half the body: below the rule, stays lost
    X[11, :4] = np.nan  # 60 % seen: filled
    filled, seen = filler.transform(X)
    assert np.isnan(filled[10, :5]).all() and np.isfinite(filled[11]).all()
    np.testing.assert_array_equal(filled[11, 4:], X[11, 4:])  # seen points are not moved
    np.testing.assert_allclose(seen[[10, 11, 12]], [0.5, 0.6, 1.0])
    with pytest.raises(InputError, match="min_body_seen"):
        KeypointFiller(min_body_seen=1.5).fit([X])


def test_model_scores_frames_with_lost_paws():
    sessions = [
        hide_paws(simulate_session(duration_s=60, seed=s, session=f"s{s}")[0], seed=s)
        for s in (1, 2)
    ]
    model = BehaviourModel(n_states=4, segmenter=QUICK, random_state=0).fit(sessions)
    labels = model.label(sessions)
    most = labels["body_seen"] >= 0.7
    unscored = (labels.loc[most, "state"] < 0).mean()
    print(f"unscored where >= 70 % seen: {unscored:.3%}")
    assert unscored <= 0.05  # issue 12 target
    strict = BehaviourModel(n_states=4, segmenter=QUICK, min_body_seen=None).fit(sessions)
    lost = strict.label(sessions)
    assert (lost.loc[labels["body_seen"] < 1, "state"] == -1).mean() > 0.8
    # saved and reloaded: the filler comes back and labels are the same
    meta, arrays = model.to_state()
    again = BehaviourModel.from_state(meta, arrays).label(sessions)
    np.testing.assert_array_equal(again["state"], labels["state"])


def test_sessions_at_several_frame_rates_are_labelled_on_their_own_frames():
    from sklearn.metrics import adjusted_rand_score

    a, truth_a = simulate_session(duration_s=60, seed=1, session="slow", fps=30.0)
    b, truth_b = simulate_session(duration_s=60, seed=2, session="fast", fps=60.0)
    model = BehaviourModel(n_states=4, segmenter=QUICK, random_state=0).fit([a, b])
    assert model.fps_ == 30.0 and model.labels_at_input_rate_
    labels = model.label([a, b])
    fast = labels[labels["session"] == "fast"]
    assert len(fast) == b.n_frames
    np.testing.assert_allclose(fast["time_s"], np.arange(b.n_frames) / 60.0)
    slow = labels[labels["session"] == "slow"]
    # the same behaviour model on both: agreement with the simulated truth alike (scikit-learn)
    ari = [
        adjusted_rand_score(t["state"], part["state"])
        for t, part in ((truth_a, slow), (truth_b, fast))
    ]
    print(f"ARI at 30 fps {ari[0]:.3f}, at 60 fps {ari[1]:.3f}")
    assert min(ari) > 0.3 and abs(ari[0] - ari[1]) < 0.25
    meta, arrays = model.to_state()
    assert BehaviourModel.from_state(meta, arrays).labels_at_input_rate_


def _every_keypoint_seen(tracks):
    """``tracks`` with lost keypoints interpolated in time, with a little tracking noise (points
    on exact straight lines are taken for an export's interpolation, not seen), and every
    confidence 1."""
    coords = tracks.coords.copy()
    t = np.arange(tracks.n_frames)
    rng = np.random.default_rng(0)
    for a in range(coords.shape[1]):
        for k in range(coords.shape[2]):
            for d in range(coords.shape[3]):
                x = coords[:, a, k, d]
                ok = np.isfinite(x)
                x[~ok] = np.interp(t[~ok], t[ok], x[ok]) + rng.normal(0, 0.1, (~ok).sum())
    confidence = None if tracks.confidence is None else np.ones_like(tracks.confidence)
    return tracks.replace(coords=coords, confidence=confidence)


def test_filled_frames_scored_without_their_shape_columns():
    sim = [simulate_session(duration_s=60, seed=s, session=f"s{s}") for s in (1, 2)]
    sessions = [t for t, _ in sim]
    model = BehaviourModel(n_states=5, segmenter=QUICK, random_state=0).fit(sessions)
    tracks = sessions[0]
    n = round(3.3 * tracks.fps)
    lost = np.zeros(tracks.n_frames, dtype=bool)
    for a in np.linspace(0, tracks.n_frames - n, 5).astype(int):
        lost[a : a + n] = True
    coords = tracks.coords.copy()
    coords[lost, :, list(tracks.keypoints).index("left_forepaw")] = np.nan
    altered = tracks.replace(coords=coords)
    as_seen = model.label([altered])
    complete = _every_keypoint_seen(sessions[1])
    plain = model.label([complete])
    model.set_params(filled_frames="shape_left_out")
    left_out = model.label([altered])
    # every frame still scored, body_seen unchanged
    assert (left_out["state"] >= 0).all()
    np.testing.assert_array_equal(left_out["body_seen"], as_seen["body_seen"])
    # a session without a filled frame: the same labels and probabilities, exactly
    whole = model.label([complete]).drop(columns="motif")
    assert whole["body_seen"].min() == 1.0
    pd.testing.assert_frame_equal(whole, plain.drop(columns="motif"))
    # frames whose paw was filled no longer carry the confidence of fully seen ones
    before, after = as_seen["probability"][lost].mean(), left_out["probability"][lost].mean()
    print(f"mean probability of the filled frames {before:.3f} -> {after:.3f}")
    assert after < before - 0.02
    # the option is saved with the model and read back
    meta, arrays = model.to_state()
    again = BehaviourModel.from_state(meta, arrays)
    assert again.filled_frames == "shape_left_out"
    np.testing.assert_array_equal(again.label([altered])["state"], left_out["state"])
    with pytest.raises(InputError, match="filled_frames must be one of"):
        BehaviourModel(filled_frames="guess").fit(sessions)
    # refused, not ignored, where the labelling cannot leave features out of a frame
    with pytest.raises(InputError, match="filled_frames='shape_left_out' is not available"):
        BehaviourModel(filled_frames="shape_left_out", causal=True).fit(sessions)
    # the grouped HMM leaves them out through its fine HMM: the same two properties
    grouped = BehaviourModel(
        method="grouped_hmm", state_range=(2, 5), segmenter=QUICK, random_state=0
    ).fit(sessions)
    seen = grouped.label([altered, complete])
    grouped.set_params(filled_frames="shape_left_out")
    out = grouped.label([altered, complete])
    assert (out["state"] >= 0).all()
    pd.testing.assert_frame_equal(out[out["session"] == "s2"], seen[seen["session"] == "s2"])
    first = (out["session"] == "s1").to_numpy()
    assert out["probability"][first][lost].mean() < seen["probability"][first][lost].mean()


def _without(tracks, name):
    keep = [k for k in tracks.keypoints if k != name]
    idx = [tracks.keypoint_index(k) for k in keep]
    return tracks.replace(
        coords=tracks.coords[:, :, idx], confidence=tracks.confidence[:, :, idx], keypoints=keep
    )


def test_a_session_without_a_keypoint_is_scored_from_the_others():
    # A keypoint the tracker gained during the study: the first session's files lack it.
    from sklearn.metrics import adjusted_rand_score  # reference: scikit-learn

    sessions = [simulate_session(duration_s=60, seed=s, session=f"s{s}")[0] for s in (1, 2, 3)]
    given = [_without(sessions[0], "neck"), *sessions[1:]]
    with pytest.warns(InputWarning, match=r"are lacking.*'s1' \(neck\)"):
        model = BehaviourModel(n_states=4, segmenter=QUICK, random_state=0).fit(given)
    assert "neck" in model.keypoints_
    with pytest.warns(InputWarning, match="never seen"):
        labels = model.label(given[:1])
    assert (labels["state"] >= 0).mean() >= 0.95  # issue 12: >= 70 % of the body seen
    assert labels["body_seen"].max() == pytest.approx(0.9)  # 9 of 10 keypoints
    # The same frames with the keypoint: mostly the same labels.
    whole = model.label(sessions[:1])
    ari = adjusted_rand_score(whole["state"], labels["state"])
    print(f"ARI with and without the keypoint: {ari:.3f}")
    assert ari > 0.7


def test_keypoints_beyond_the_models_are_left_out_and_misspelt_ones_refused():
    # A model fitted without a keypoint (left out of the fit) labels a cohort tracked with it:
    # the extra keypoint is left out with a warning and the labels are those of the same
    # frames without it; an extra name that looks like a lacking one is still refused.
    sessions = [simulate_session(duration_s=60, seed=s, session=f"s{s}")[0] for s in (1, 2)]
    model = BehaviourModel(n_states=4, segmenter=QUICK, random_state=0)
    model.fit([_without(s, "tail_base") for s in sessions])
    with pytest.warns(InputWarning, match=r"left out \(tail_base;.*session\(s\): 's1'"):
        labels = model.label(sessions[:1])
    pd.testing.assert_frame_equal(labels, model.label([_without(sessions[0], "tail_base")]))
    misspelt = _without(sessions[0], "neck").replace(
        keypoints=[
            "nek" if k == "tail_base" else k for k in _without(sessions[0], "neck").keypoints
        ]
    )
    with pytest.raises(InputError, match="'nek' looks like 'neck'"):
        model.label([misspelt])


def test_a_keypoint_never_tracked_is_left_out_of_the_fit():
    # A keypoint below the confidence threshold on every frame of every session (hidden from
    # the camera) was refused; it is left out of the model with a warning, the model keeps the
    # name through saving, and the labels are those of a fit on the tracks without it.
    sessions = [simulate_session(duration_s=60, seed=s, session=f"s{s}")[0] for s in (1, 2)]
    hidden = [s.replace(confidence=np.where(
        np.asarray(s.keypoints) == "tail_base", 0.0, s.confidence)) for s in sessions]  # fmt: skip
    with pytest.warns(InputWarning, match=r"'tail_base' have no tracked position.*left out"):
        model = BehaviourModel(n_states=4, segmenter=QUICK, random_state=0).fit(hidden)
    assert "tail_base" not in model.keypoints_ and model.keypoints_left_out_ == ["tail_base"]
    meta, arrays = model.to_state()
    assert BehaviourModel.from_state(meta, arrays).keypoints_left_out_ == ["tail_base"]
    plain = BehaviourModel(n_states=4, segmenter=QUICK, random_state=0)
    plain.fit([_without(s, "tail_base") for s in hidden])
    with pytest.warns(InputWarning, match=r"left out \(tail_base"):
        labels = model.label(hidden[:1])
    pd.testing.assert_frame_equal(labels, plain.label([_without(hidden[0], "tail_base")]))
