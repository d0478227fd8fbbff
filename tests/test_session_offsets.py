"""Per-session offsets inside the Gaussian HMM (``GaussianHMM(session_offsets=True)``).

The offset step is checked against scikit-learn's linear models on the same data; the whole EM
on simulated sessions with planted offsets (a recovery test: invented data, known answers).
"""

from __future__ import annotations

import io
import itertools
import json
import warnings

import numpy as np
import pytest
from sklearn.linear_model import LinearRegression, Ridge

from ethoscribe.errors import InputError
from ethoscribe.segment.agreement import adjusted_rand
from ethoscribe.segment.hmm import GaussianHMM
from ethoscribe.segment.session_offsets import map_offsets, offset_step

MEANS = np.array([[0.0, 0.0, 0.0], [4.0, 0.0, 1.0], [0.0, 4.0, -1.0]])


def _sessions(seed: int, n_sessions: int = 6, n_frames: int = 1500, spread: float = 0.8):
    """Sessions of 3 sticky states with different behaviour mixes and planted offsets."""
    rng = np.random.default_rng(seed)
    offsets = rng.normal(0, spread, (n_sessions, MEANS.shape[1]))
    offsets -= offsets.mean(axis=0)
    X, z = [], []
    for s in range(n_sessions):
        mix = np.roll([0.6, 0.25, 0.15], s)  # every session mostly one behaviour
        states: list[int] = []
        while len(states) < n_frames:
            states += [int(rng.choice(3, p=mix))] * int(rng.integers(30, 90))
        states_arr = np.array(states[:n_frames])
        X.append(MEANS[states_arr] + offsets[s] + rng.normal(0, 0.4, (n_frames, 3)))
        z.append(states_arr)
    return np.concatenate(X), np.concatenate(z), np.full(n_sessions, n_frames), offsets


def test_map_offset_equals_ridge_on_whitened_frames():
    # One session, three states with full covariances, hard posteriors: the MAP offset
    # minimises sum_t (x_t - mu_k - b)^T Sigma_k^-1 (x_t - mu_k - b) + alpha |b|^2, the ridge
    # regression of the whitened residuals L_k^-1 (x_t - mu_k) on the design L_k^-1 (one D x D
    # block per frame). Reference: scikit-learn Ridge(alpha, fit_intercept=False).
    rng = np.random.default_rng(3)
    K, D, T, alpha = 3, 3, 240, 25.0
    a = rng.normal(size=(K, D, D))
    covars = a @ a.transpose(0, 2, 1) + 0.5 * np.eye(D)
    means = rng.normal(0, 2, (K, D))
    z = rng.integers(0, K, T)
    X = means[z] + rng.normal(0, 1, (T, D)) + np.array([0.7, -0.3, 1.1])
    gamma = np.eye(K)[z]
    b, V = map_offsets(
        X, gamma, np.array([T]), np.array([0]), 1, means, covars, np.arange(D), alpha * np.eye(D)
    )
    inv_chol = np.linalg.inv(np.linalg.cholesky(covars))  # L_k^-1
    design = np.concatenate([inv_chol[k] for k in z])
    target = np.concatenate([inv_chol[k] @ (x - means[k]) for k, x in zip(z, X, strict=True)])
    ref = Ridge(alpha=alpha, fit_intercept=False, solver="cholesky").fit(design, target).coef_
    np.testing.assert_allclose(b[0], ref, rtol=1e-9, atol=1e-10)
    # the posterior covariance of the offset is the inverse of the ridge normal matrix
    np.testing.assert_allclose(V[0], np.linalg.inv(design.T @ design + alpha * np.eye(D)))


def test_offsets_of_a_column_subset_equal_ridge_on_those_columns():
    # Offsets on columns {0, 2} only: the design keeps those columns of L_k^-1 (reference:
    # scikit-learn Ridge on the reduced design); column 1 stays at 0.
    rng = np.random.default_rng(4)
    K, D, T, alpha = 2, 3, 150, 4.0
    a = rng.normal(size=(K, D, D))
    covars = a @ a.transpose(0, 2, 1) + 0.5 * np.eye(D)
    means = rng.normal(0, 2, (K, D))
    z = rng.integers(0, K, T)
    X = means[z] + rng.normal(0, 1, (T, D)) + 0.5
    cols = np.array([0, 2])
    b, _ = map_offsets(
        X, np.eye(K)[z], np.array([T]), np.array([0]), 1, means, covars, cols, alpha * np.eye(2)
    )
    inv_chol = np.linalg.inv(np.linalg.cholesky(covars))
    design = np.concatenate([inv_chol[k][:, cols] for k in z])
    target = np.concatenate([inv_chol[k] @ (x - means[k]) for k, x in zip(z, X, strict=True)])
    ref = Ridge(alpha=alpha, fit_intercept=False, solver="cholesky").fit(design, target).coef_
    np.testing.assert_allclose(b[0, cols], ref, rtol=1e-9, atol=1e-10)
    assert b[0, 1] == 0.0


def test_alternating_steps_without_prior_equal_least_squares_with_session_dummies():
    # Posteriors fixed (hard states), prior strength 0: alternating the means (from the frames
    # minus their offsets) with the offset step converges to the least-squares fit of
    # x = mu_state + b_session with sum_s b_s = 0. Reference: scikit-learn LinearRegression on
    # state one-hot columns plus sum-to-zero (effect-coded) session columns.
    X, z, lengths, _ = _sessions(seed=1, n_sessions=4, n_frames=300)
    K, S = 3, len(lengths)
    session = np.repeat(np.arange(S), lengths)
    gamma = np.eye(K)[z]
    covars = np.repeat(np.eye(3)[None], K, axis=0)
    b = np.zeros((S, 3))
    for _ in range(500):
        Xc = X - b[session]
        means = (gamma.T @ Xc) / gamma.sum(axis=0)[:, None]
        b, means, _, _ = offset_step(
            X, gamma, lengths, np.arange(S), S, means, covars, gamma.sum(0), np.arange(3), 1e15
        )
    effects = np.zeros((len(X), S - 1))
    for s in range(S - 1):
        effects[session == s, s] = 1.0
    effects[session == S - 1] = -1.0
    design = np.hstack([gamma, effects])
    coef = LinearRegression(fit_intercept=False).fit(design, X).coef_.T  # (K + S - 1, D)
    ref_b = np.vstack([coef[K:], -coef[K:].sum(axis=0)])
    np.testing.assert_allclose(b, ref_b, atol=1e-7)
    np.testing.assert_allclose(means, coef[:K], atol=1e-7)


@pytest.fixture(scope="module")
def planted():
    X, z, lengths, offsets = _sessions(seed=0)
    params = dict(n_states=3, fps=30.0, n_restarts=2, random_state=0, n_jobs=1)
    plain = GaussianHMM(**params).fit(X, lengths)
    model = GaussianHMM(**params, session_offsets=True).fit(X, lengths)
    return X, z, lengths, offsets, plain, model


def test_planted_offsets_recovered_and_behaviours_kept(planted):
    # Recovery on invented sessions: each session is mostly one behaviour (60 %), with an
    # offset of about 2 within-state SDs; the offsets come back (not the behaviour mix) and
    # the states are the behaviours.
    X, z, lengths, offsets, plain, model = planted
    assert model.session_offsets_.shape == offsets.shape
    np.testing.assert_allclose(model.session_offsets_, offsets, atol=0.05)
    assert adjusted_rand(z, model.predict(X, lengths)) > 0.97
    # the states' spread is the within-session noise (SD 0.4), not noise plus individuals
    assert np.diagonal(model.covars_, axis1=1, axis2=2).max() < 0.4**2 * 1.2
    assert np.diagonal(plain.covars_, axis1=1, axis2=2).max() > 0.4**2 * 2
    assert 0.0 < model.offset_spread_ < 100.0


def test_new_session_gets_its_own_offset(planted):
    # A session the model did not see, mostly behaviour 2, with its own offset: labelling
    # estimates the offset (parameters fixed) and finds the behaviours.
    _, _, _, _, _, model = planted
    X_new, z_new, lengths_new, _ = _sessions(seed=7, n_sessions=1, n_frames=2000)
    shift = np.array([1.2, -0.9, 0.6])
    X_new = X_new + shift
    found = model.offsets(X_new, lengths_new)
    np.testing.assert_allclose(found[0], shift, atol=0.08)
    assert adjusted_rand(z_new, model.predict(X_new, lengths_new)) > 0.95


def test_causal_path_uses_offset_zero(planted):
    # The causal filter cannot see a session's future: offset 0, as the streaming filter.
    from ethoscribe.segment.streaming_hmm import HMMFilter

    X, _, lengths, _, _, model = planted
    first = X[: lengths[0]]
    live = HMMFilter(model)
    streamed = np.array([live.push(x) for x in first[:200]])
    np.testing.assert_allclose(model.filter(first[:200]), streamed, atol=1e-10)


def test_round_trip_through_json_and_npz(planted):
    X, _, lengths, _, _, model = planted
    meta, arrays = model.to_state()
    buffer = io.BytesIO()
    np.savez(buffer, **arrays)
    buffer.seek(0)
    with np.load(buffer, allow_pickle=False) as npz:
        loaded = {k: npz[k] for k in npz.files}
    rebuilt = GaussianHMM.from_state(json.loads(json.dumps(meta)), loaded)
    assert rebuilt.get_params() == model.get_params()
    np.testing.assert_array_equal(rebuilt.session_offsets_, model.session_offsets_)
    np.testing.assert_array_equal(rebuilt.offset_precision_, model.offset_precision_)
    assert np.array_equal(rebuilt.predict(X, lengths), model.predict(X, lengths))
    with pytest.raises(InputError, match="session_offsets"):
        GaussianHMM.from_state(meta, {k: v for k, v in arrays.items() if k != "offset_precision"})


def test_options_checked():
    X = np.random.default_rng(0).normal(size=(200, 2))
    with pytest.raises(InputError, match="session_offsets"):
        GaussianHMM(n_states=2, session_offsets=True, engine="hmmlearn").fit(X)
    with pytest.raises(InputError, match="offset_columns"):
        GaussianHMM(n_states=2, session_offsets=True, offset_columns=[]).fit(X)
    with pytest.raises(InputError, match="offset_columns"):
        GaussianHMM(n_states=2, session_offsets=True, offset_columns=[5], n_restarts=1).fit(X)


def test_behaviour_model_reaches_the_option():
    # BehaviourModel(segmenter={"session_offsets": True}) fits, labels and saves with offsets.
    from ethoscribe.segment.model import BehaviourModel
    from ethoscribe.simulate import simulate_session

    sessions = [simulate_session(duration_s=40, seed=s, session=f"s{s}")[0] for s in (1, 2)]
    model = BehaviourModel(n_states=4, segmenter={"session_offsets": True}, random_state=0)
    table = model.fit(sessions).label(sessions)
    assert model.segmenter_.session_offsets_.shape[0] == 2
    meta, arrays = model.to_state()
    again = BehaviourModel.from_state(json.loads(json.dumps(meta)), arrays)
    assert again.label(sessions)["state"].equals(table["state"])


def test_one_session_fits_and_labels_as_without_offsets():
    # One session shows no spread between individuals: the fit is the plain one (same EM, same
    # seed) and labelling adds no offset, on that session or a new one.
    X, _, lengths, _ = _sessions(seed=2, n_sessions=1, n_frames=1200)
    params = dict(n_states=3, fps=30.0, n_restarts=1, random_state=0, n_jobs=1)
    plain = GaussianHMM(**params).fit(X, lengths)
    model = GaussianHMM(**params, session_offsets=True).fit(X, lengths)
    np.testing.assert_array_equal(model.means_, plain.means_)
    assert model.offset_spread_ == 0.0 and not model.session_offsets_.any()
    assert np.array_equal(model.predict(X + 0.5), plain.predict(X + 0.5))


def test_offsets_with_thinned_frames(planted):
    # EM first on every 3rd frame (fit_rate=10 of 30 fps), then on every frame: the offsets
    # carry through both stages and come back as without thinning.
    X, _, lengths, offsets, _, _ = planted
    params = dict(n_states=3, fps=30.0, n_restarts=1, random_state=0, n_jobs=1)
    model = GaussianHMM(**params, session_offsets=True, fit_rate=10.0).fit(X, lengths)
    assert model.fit_stride_ == 3
    np.testing.assert_allclose(model.session_offsets_, offsets, atol=0.05)


def test_offsets_given_once_equal_those_estimated_inside(planted):
    # Labels and scores with each session's offset estimated once (GaussianHMM.offsets) and
    # passed down equal those of the calls that estimate it themselves, and (reference library:
    # hmmlearn 0.3.3 GaussianHMM, implementation="scaling") those of the same HMM on the
    # frames minus their session's offset.
    from hmmlearn.hmm import GaussianHMM as ReferenceHMM

    X, _, lengths, _, _, model = planted
    b = model.offsets(X, lengths)
    assert b.shape == (len(lengths), X.shape[1]) and np.abs(b).max() > 0.5
    assert np.array_equal(model.predict(X, lengths, offsets=b), model.predict(X, lengths))
    np.testing.assert_array_equal(
        model.predict_proba(X, lengths, offsets=b), model.predict_proba(X, lengths)
    )
    np.testing.assert_array_equal(
        model.score_per_session(X, lengths, offsets=b), model.score_per_session(X, lengths)
    )
    assert model.score(X, lengths, offsets=b) == model.score(X, lengths)
    assert model.bic(X, lengths, offsets=b) == model.bic(X, lengths)
    np.testing.assert_array_equal(  # Laplace's method around the MAP offsets given
        model.score_per_session(X, lengths, "marginal", offsets=b),
        model.score_per_session(X, lengths, "marginal"),
    )
    given = model.predict_min_duration(X, lengths, 10, 0.01, offsets=b)
    inside = model.predict_min_duration(X, lengths, 10, 0.01)
    assert np.array_equal(given[0], inside[0]) and np.array_equal(given[1], inside[1])
    ref = ReferenceHMM(3, covariance_type="full", implementation="scaling", init_params="")
    ref.startprob_, ref.transmat_ = model.startprob_, model.transmat_
    ref.means_, ref.covars_ = model.means_, model.covars_
    moved = X - np.repeat(b, lengths, axis=0)
    assert model.score(X, lengths, offsets=b) == pytest.approx(ref.score(moved, lengths), rel=1e-9)
    np.testing.assert_allclose(
        model.predict_proba(X, lengths, offsets=b), ref.predict_proba(moved, lengths), atol=1e-8
    )
    assert np.array_equal(model.predict(X, lengths, offsets=b), ref.predict(moved, lengths))
    # a subset of the sessions scored with their rows of the offsets (the state count's folds)
    keep = [0, 2, 5]
    parts = np.split(X, np.cumsum(lengths)[:-1])
    sub = np.concatenate([parts[s] for s in keep])
    ref_sub = [ref.score(parts[s] - b[s]) for s in keep]
    np.testing.assert_allclose(
        model.score_per_session(sub, lengths[keep], offsets=b[keep]), ref_sub, rtol=1e-9
    )


def test_offsets_given_are_checked(planted):
    X, _, lengths, _, plain, model = planted
    with pytest.raises(InputError, match=r"offsets must be finite numbers of shape \(6, 3\)"):
        model.predict(X, lengths, offsets=np.zeros((5, 3)))
    with pytest.raises(InputError, match="NaN or infinite"):
        model.score(X, lengths, offsets=np.full((6, 3), np.nan))
    # a model without offsets takes them as given: zeros change nothing
    assert np.array_equal(plain.predict(X, lengths, offsets=np.zeros((6, 3))), plain.predict(X))


def test_behaviour_model_estimates_offsets_once_for_labels_and_fit_check(monkeypatch):
    # BehaviourModel.label estimates each session's offset once (BehaviourModel.offsets) for
    # the labels and the fit check; given or estimated inside, the results are the same.
    from pandas.testing import assert_frame_equal

    import ethoscribe.segment.hmm as hmm_module
    from ethoscribe.errors import InputWarning
    from ethoscribe.segment.model import BehaviourModel
    from ethoscribe.simulate import simulate_session

    sessions = [simulate_session(duration_s=40, seed=s, session=f"s{s}")[0] for s in (1, 2, 3)]
    model = BehaviourModel(n_states=4, random_state=0).fit(sessions[:2])
    assert model.segmenter_.session_offsets  # the "hmm" method's default
    feats, _ = model.transform_features(sessions)
    b = model.offsets(feats)
    assert b.shape == (len(feats), feats[0].values.shape[1])
    given = model.label_features(feats, offsets=b)
    assert_frame_equal(given, model.label_features(feats))
    assert model.fit_shares(feats, offsets=b) == model.fit_shares(feats)
    calls = []
    original = hmm_module.label_offsets
    monkeypatch.setattr(hmm_module, "label_offsets", lambda *a: calls.append(1) or original(*a))
    with warnings.catch_warnings():  # session s3 is unlike the two fitted: the fit check says so
        warnings.simplefilter("ignore", InputWarning)
        assert_frame_equal(model.label(sessions), given)
    assert len(calls) == 1  # one batch of every session: one estimate
    with pytest.raises(InputError, match="rows but 3 feature sets"):
        model.label_features(feats, offsets=b[:2])
    plain = BehaviourModel(n_states=4, random_state=0, segmenter={"session_offsets": False})
    plain.fit(sessions[:2])
    assert plain.offsets(feats) is None
    with pytest.raises(InputError, match="has no session offsets"):
        plain.label_features(feats, offsets=b)


def _clips(seeds=(1, 2, 3), seconds=200.0):
    """Every simulated bout of at least 2 s its own session (clips of one behaviour each),
    and the behaviour codes of the clips' frames."""
    from ethoscribe.simulate import simulate_session

    clips, codes = [], []
    for s in seeds:
        tracks, truth = simulate_session(duration_s=seconds, seed=s, session=f"s{s}")
        state = truth["state"].to_numpy()
        edges = np.r_[0, np.flatnonzero(np.diff(state)) + 1, len(state)]
        for i, (a, b) in enumerate(itertools.pairwise(edges)):
            if b - a >= 2 * tracks.fps:
                coords, conf = tracks.coords[a:b], tracks.confidence[a:b]
                clips.append(tracks.replace(coords=coords, confidence=conf, session=f"s{s}_{i}"))
                codes.append(state[a:b])
    return clips, codes


# A clip of curling up holds one posture: the scale check rightly says it looks smaller.
@pytest.mark.filterwarnings("ignore:the animals of session")
def test_clips_of_one_behaviour_are_fitted_without_unit_rules():
    # Recovery test (invented data): when every session is one behaviour, a per-session offset
    # can stand in for the behaviour itself, and "used in different sessions" says nothing
    # about two states being one behaviour. The model sees that a frame's session tells its
    # state and leaves both rules out. (The validation bench's voles cut into such clips: ARI
    # 0.26 with both rules, 0.50 with offsets alone, 0.90 with neither; benchmarks/README.md,
    # "Clips of one behaviour each".)
    from ethoscribe.segment.model import BehaviourModel

    clips, codes = _clips()
    assert len(clips) >= 40
    model = BehaviourModel(random_state=0, state_range=(3, 8)).fit(clips)
    assert model.unit_rules_left_out_ and model.unit_lambda_ > 0.7
    assert not model.segmenter_.session_offsets and model.unit_pairs_ == []
    assert "without per-session offsets" in model.selection_.reason
    found = model.label(clips)["state"].to_numpy()
    assert adjusted_rand(np.concatenate(codes), found) > 0.8
    # saved and loaded: lambda is kept with the model, and it labels the same
    meta, arrays = model.to_state()
    again = BehaviourModel.from_state(json.loads(json.dumps(meta)), arrays)
    assert again.unit_lambda_ == pytest.approx(model.unit_lambda_)
    assert again.label(clips)["state"].equals(model.label(clips)["state"])


@pytest.mark.filterwarnings("ignore:the animals of session")
def test_offsets_asked_for_are_kept_on_clips():
    from ethoscribe.segment.model import BehaviourModel

    clips, _ = _clips(seeds=(1,), seconds=120.0)
    model = BehaviourModel(n_states=4, random_state=0, segmenter={"session_offsets": True})
    model.fit(clips)
    assert model.unit_rules_left_out_ and model.segmenter_.session_offsets


def test_sessions_of_several_behaviours_keep_the_unit_rules():
    from ethoscribe.segment.model import BehaviourModel
    from ethoscribe.simulate import simulate_session

    sessions = [simulate_session(duration_s=60, seed=s, session=f"s{s}")[0] for s in (1, 2, 3)]
    model = BehaviourModel(n_states=5, random_state=0).fit(sessions)
    assert model.unit_lambda_ < 0.2 and not model.unit_rules_left_out_
    assert model.segmenter_.session_offsets


def test_unit_lambda_is_goodman_kruskal_lambda_of_the_contingency_table():
    # Goodman & Kruskal's lambda of the column (state) given the row (unit), from scikit-learn's
    # contingency_matrix: (sum of the rows' maxima - the largest column total) / (n - that
    # total) (Goodman & Kruskal 1954; the asymmetric lambda of e.g. Agresti, Categorical Data
    # Analysis, from memory).
    from sklearn.metrics.cluster import contingency_matrix

    from ethoscribe.segment.model import unit_lambda

    rng = np.random.default_rng(0)
    lengths = np.array([7, 30, 1, 12])
    states = rng.integers(0, 4, lengths.sum())
    units = np.repeat(np.arange(len(lengths)), lengths)
    c = contingency_matrix(units, states)
    top = c.sum(axis=0).max()
    assert unit_lambda(states, lengths) == pytest.approx(
        (c.max(axis=1).sum() - top) / (c.sum() - top)
    )
    # every unit in the same proportions: 0 however much one state dominates; one state per
    # unit: 1; no frames, or one state everywhere: 0
    same = np.tile(np.r_[[0] * 8, 1, 2], 3)
    assert unit_lambda(same, [10, 10, 10]) == 0.0
    assert unit_lambda(np.repeat([0, 1, 2], 10), [10, 10, 10]) == 1.0
    assert unit_lambda(np.zeros(0, dtype=int), np.zeros(0, dtype=int)) == 0.0
    assert unit_lambda(np.zeros(20, dtype=int), [10, 10]) == 0.0
