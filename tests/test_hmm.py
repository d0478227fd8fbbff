"""GaussianHMM estimator: conventions, recovery on invented data, determinism, health."""

from __future__ import annotations

import inspect
import io
import json

import numpy as np
import pandas as pd
import pytest
from tqdm.auto import tqdm

from ethoscribe.errors import InputError, NotFittedError
from ethoscribe.segment import hmm as hmm_module
from ethoscribe.segment._hmm_fit import run_em
from ethoscribe.segment.agreement import adjusted_rand
from ethoscribe.segment.hmm import GaussianHMM
from ethoscribe.segment.postprocess import runs
from ethoscribe.segment.sampling import representative_blocks
from test_hmm_sampling import sample_sticky_hmm

FAST = {"n_restarts": 2, "n_iter": 60}


@pytest.fixture(scope="module")
def data():
    return sample_sticky_hmm(seed=11)


@pytest.fixture(scope="module")
def fitted(data):
    X, _, lengths = data
    return GaussianHMM(n_states=4, **FAST).fit(X, lengths)


def test_init_only_stores_and_get_set_params():
    model = GaussianHMM(n_states=3, covariance_type="oops")
    assert model.get_params()["covariance_type"] == "oops"  # validated in fit, not here
    assert set(model.get_params()) == set(inspect.signature(GaussianHMM).parameters)
    model.set_params(covariance_type="diag")
    assert model.covariance_type == "diag"
    with pytest.raises(ValueError, match="Invalid parameter"):  # scikit-learn's BaseEstimator
        model.set_params(n_components=3)


@pytest.mark.parametrize(
    ("params", "text"),
    [
        ({"n_states": 0}, "n_states"),
        ({"covariance_type": "tied"}, "covariance_type"),
        ({"expected_bout_s": 0.01}, "expected_bout_s"),
        ({"min_covar": 0.0}, "min_covar"),
        ({"engine": "gpu"}, "engine"),
        ({"fit_max_frames": 10}, "fit_max_frames"),
    ],
)
def test_bad_parameters_raise_input_error(params, text):
    X = np.random.default_rng(0).normal(size=(50, 2))
    with pytest.raises(InputError, match=text):
        GaussianHMM(**params).fit(X)


def test_unfitted_model_raises():
    for method in ("predict", "predict_proba", "score", "filter", "decode"):
        with pytest.raises(NotFittedError):
            getattr(GaussianHMM(), method)(np.zeros((3, 2)))


def test_bad_input_is_explained(fitted, data):
    X, _, lengths = data
    with pytest.raises(InputError, match="NaN"):
        fitted.predict(np.where(np.arange(len(X))[:, None] == 5, np.nan, X), lengths)
    with pytest.raises(InputError, match="fitted on 3 features"):
        fitted.predict(X[:, :2], lengths)
    with pytest.raises(InputError, match="sum to the number of frames"):
        fitted.predict(X, [10, 20])
    with pytest.raises(InputError, match="distinct frames"):
        GaussianHMM(n_states=5).fit(np.repeat([[0.0, 1.0], [2.0, 3.0]], 50, axis=0))


@pytest.mark.parametrize("seed", range(5))
def test_recovers_a_sticky_four_state_hmm(seed):
    # invented data: 4-state sticky Gaussian HMM with known parameters, 3 sessions
    X, truth, lengths = sample_sticky_hmm(seed=seed)
    model = GaussianHMM(n_states=4, random_state=seed, **FAST).fit(X, lengths)
    assert adjusted_rand(truth, model.predict(X, lengths)) >= 0.9


def test_same_seed_gives_identical_arrays(data, fitted):
    X, _, lengths = data
    again = GaussianHMM(n_states=4, **FAST).fit(X, lengths)
    for name in ("means_", "covars_", "startprob_", "transmat_", "restart_log_likelihoods_"):
        assert np.array_equal(getattr(fitted, name), getattr(again, name)), name
    assert np.array_equal(fitted.predict(X, lengths), again.predict(X, lengths))


def test_state_round_trip_through_json_and_npz(data, fitted):
    X, _, lengths = data
    meta, arrays = fitted.to_state()
    buffer = io.BytesIO()
    np.savez(buffer, **arrays)
    buffer.seek(0)
    with np.load(buffer, allow_pickle=False) as npz:
        loaded = {k: npz[k] for k in npz.files}
    rebuilt = GaussianHMM.from_state(json.loads(json.dumps(meta)), loaded)
    assert np.array_equal(rebuilt.predict(X, lengths), fitted.predict(X, lengths))
    assert np.array_equal(rebuilt.predict_proba(X, lengths), fitted.predict_proba(X, lengths))
    assert rebuilt.get_params() == fitted.get_params()
    with pytest.raises(InputError, match="array 'means'"):
        GaussianHMM.from_state(meta, {**arrays, "means": arrays["means"][:2]})


def test_fitted_attributes_and_state_order(data, fitted):
    X, _, lengths = data
    assert fitted.means_.shape == (4, 3) and fitted.covars_.shape == (4, 3, 3)
    assert fitted.n_states_ == 4 and fitted.n_features_in_ == 3
    assert fitted.restart_log_likelihoods_.shape == (2,)
    assert fitted.log_likelihood_ == pytest.approx(fitted.restart_log_likelihoods_.max())
    assert fitted.covariance_floor_ == 1e-3 and fitted.n_fit_frames_ == len(X)
    assert fitted.converged_ and 1 <= fitted.n_iter_ <= 60
    assert fitted.log_likelihood_ == pytest.approx(fitted.score_per_frame(X, lengths), rel=1e-9)
    occupancy = fitted.predict_proba(X, lengths).sum(axis=0)
    assert np.all(np.diff(occupancy) <= 1e-6)  # decreasing time budget
    assert np.linalg.eigvalsh(fitted.covars_).min() >= 1e-3 * (1 - 1e-9)  # the floor holds


def test_scores_are_consistent(data, fitted):
    X, _, lengths = data
    per_session = fitted.score_per_session(X, lengths)
    assert per_session.shape == (3,)
    assert per_session.sum() == pytest.approx(fitted.score(X, lengths), rel=1e-12)
    filtered, smoothed = fitted.filter(X, lengths), fitted.predict_proba(X, lengths)
    ends = np.cumsum(lengths) - 1
    np.testing.assert_allclose(filtered[ends], smoothed[ends], atol=1e-10)
    np.testing.assert_allclose(filtered.sum(axis=1), 1.0, rtol=1e-12)
    logprob, labels = fitted.decode(X, lengths)
    assert logprob <= fitted.score(X, lengths) and np.array_equal(
        labels, fitted.predict(X, lengths)
    )


def test_decoding_in_batches_matches_one_batch(data, fitted, monkeypatch):
    X, _, lengths = data
    whole = fitted.predict_proba(X, lengths), fitted.predict(X, lengths), fitted.score(X, lengths)
    monkeypatch.setattr(hmm_module, "_DECODE_BATCH", 500)
    parts = fitted.predict_proba(X, lengths), fitted.predict(X, lengths), fitted.score(X, lengths)
    np.testing.assert_allclose(parts[0], whole[0], atol=1e-13)
    assert np.array_equal(parts[1], whole[1]) and parts[2] == pytest.approx(whole[2])


def test_persistence_prior_reduces_flicker():
    # invented data: 3 sticky states with 4 % single-frame glitches drawn from another state
    X, truth, lengths = sample_sticky_hmm(
        seed=2, n_states=3, n_features=2, lengths=(1500,) * 3, stay=0.985,
        separation=3.0, glitch_rate=0.04,
    )  # fmt: skip
    common = {"n_states": 3, "expected_bout_s": 2.0, "random_state": 2, **FAST}
    free = GaussianHMM(persistence_strength=0.0, **common).fit(X, lengths)
    prior = GaussianHMM(**common).fit(X, lengths)
    n_free = len(runs(free.predict(X, lengths), lengths)[0])
    n_prior = len(runs(prior.predict(X, lengths), lengths)[0])
    assert n_prior < 0.97 * n_free
    assert np.diag(prior.transmat_).mean() > np.diag(free.transmat_).mean()
    ari_free = adjusted_rand(truth, free.predict(X, lengths))
    assert adjusted_rand(truth, prior.predict(X, lengths)) >= ari_free - 0.005


def test_representative_blocks_cover_every_session():
    lengths = np.array([10_000, 2_000, 500, 30])
    rng = np.random.default_rng(0)
    starts, stops = representative_blocks(lengths, 3_000, 400, rng)
    ends = np.cumsum(lengths)
    session = np.searchsorted(ends, starts, side="right")
    assert set(session) == {0, 1, 2, 3}  # every session contributes
    assert np.all(np.searchsorted(ends, stops - 1, side="right") == session)  # no straddling
    assert np.all(starts[1:] >= stops[:-1])  # ordered, non-overlapping
    assert abs((stops - starts).sum() - 3_000) <= 40
    assert (stops - starts).max() <= 400
    share = np.bincount(session, weights=stops - starts)
    assert share[0] > share[1] > share[2]  # proportional to session length


def test_subsampled_fit_decodes_everything():
    X, truth, lengths = sample_sticky_hmm(seed=4, lengths=(3000, 3000))
    model = GaussianHMM(n_states=4, fit_max_frames=1500, fps=10.0, **FAST).fit(X, lengths)
    assert 1400 <= model.n_fit_frames_ <= 1600
    assert adjusted_rand(truth, model.predict(X, lengths)) >= 0.9


def test_numerical_health_on_degenerate_data():
    rng = np.random.default_rng(0)
    X = np.c_[rng.normal(size=(400, 2)), np.full(400, 3.0)]  # one constant feature
    X[:200] += 6.0
    X[::7] = X[0]  # many duplicate frames
    for covariance_type in ("full", "diag"):
        model = GaussianHMM(n_states=6, covariance_type=covariance_type, **FAST).fit(X)
        assert np.isfinite(model.log_likelihood_) and np.isfinite(model.score(X))
        assert np.isfinite(model.predict_proba(X)).all()
        assert np.linalg.eigvalsh(model.covars_).min() > 0
        np.testing.assert_allclose(model.transmat_.sum(axis=1), 1.0)


def test_empty_state_is_reseeded_onto_the_data():
    X, truth, lengths = sample_sticky_hmm(seed=1, n_states=3)
    model = GaussianHMM(n_states=3, n_iter=50)
    far = np.full(3, 1e3)  # a state that no frame can use
    means = np.array([X[truth == 0].mean(axis=0), X[truth == 1].mean(axis=0), far])
    sticky = np.full((3, 3), 0.02) + 0.94 * np.eye(3)
    res = run_em(model, X, lengths, means, sticky, np.full(3, 1 / 3), 0.0, tqdm(disable=True))
    assert res["occupancy"].min() > 100  # re-seeded on the worst-explained frames
    assert np.abs(res["means"]).max() < 50


def test_far_outliers_keep_scores_finite(fitted, data):
    X, _, lengths = data
    Y = X.copy()
    Y[10] = 1e6  # far from every state: emission log-likelihood ~ -1e12
    assert np.isfinite(fitted.score(Y, lengths)) and np.isfinite(fitted.predict_proba(Y)).all()
    assert np.isfinite(fitted.decode(Y, lengths)[0])


def test_diag_and_random_init_recover():
    X, truth, lengths = sample_sticky_hmm(seed=8, n_states=3)
    for params in ({"covariance_type": "diag"}, {"init": "random", "n_restarts": 3}):
        model = GaussianHMM(n_states=3, **{**FAST, **params}).fit(X, lengths)
        assert adjusted_rand(truth, model.predict(X, lengths)) >= 0.9
        assert np.count_nonzero(model.covars_[0] - np.diag(np.diag(model.covars_[0]))) == (
            0 if params.get("covariance_type") == "diag" else 6
        )


# --- independent fits on threads ---------------------------------------------------------------
def _sticky_series(seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    # Invented: three Gaussian states in runs of 40 frames, two sequences.
    rng = np.random.default_rng(seed)
    states = np.repeat(rng.integers(0, 3, 60), 40)
    X = np.array([[0, 0], [4, 0], [0, 4]])[states] + rng.normal(size=(len(states), 2))
    return X, np.array([1200, 1200])


def test_restarts_on_threads_give_the_serial_fit_exactly():
    X, lengths = _sticky_series()
    serial = GaussianHMM(3, n_restarts=4, n_jobs=1, random_state=0).fit(X, lengths)
    threads = GaussianHMM(3, n_restarts=4, n_jobs=2, random_state=0).fit(X, lengths)
    assert np.array_equal(serial.restart_log_likelihoods_, threads.restart_log_likelihoods_)
    assert np.array_equal(serial.means_, threads.means_)
    assert np.array_equal(serial.transmat_, threads.transmat_)


def test_state_count_choice_and_stability_on_threads_equal_the_serial_ones():
    from ethoscribe.segment.select import choose_n_states
    from ethoscribe.segment.stability import stability_report

    X, lengths = _sticky_series(1)
    tables = [
        choose_n_states(X, lengths, candidates=range(2, 5), model_params={"n_jobs": j}).table
        for j in (1, 2)
    ]
    pd.testing.assert_frame_equal(*tables)
    reports = [
        stability_report(
            lambda s: GaussianHMM(3, n_restarts=1, random_state=s), X, lengths, n_jobs=j
        ).table
        for j in (1, 2)
    ]
    pd.testing.assert_frame_equal(*reports)
