"""EM on every s-th frame (``GaussianHMM(fit_rate=...)``): the thinned fit is hmmlearn's EM on
the thinned frames, and its transition matrix is taken to one frame by the matrix root."""

from __future__ import annotations

import numpy as np
import pytest
from hmmlearn.hmm import GaussianHMM as ReferenceHMM
from scipy.linalg import expm, logm
from sklearn.metrics import adjusted_rand_score

from ethoscribe.errors import InputError
from ethoscribe.segment._hmm_fit import fit_stride, thin_frames, transition_root
from ethoscribe.segment.hmm import GaussianHMM
from test_hmm_sampling import sample_sticky_hmm

K = 3
FLOOR = 1e-6  # small: hmmlearn regularises covariances otherwise than we do (see _hmm_fit)


def _generator(rng: np.random.Generator, n: int, rate: float) -> np.ndarray:
    """A random transition-rate matrix: non-negative off the diagonal, rows summing to 0."""
    Q = rng.uniform(0.2, 1.0, (n, n)) * rate
    np.fill_diagonal(Q, 0.0)
    np.fill_diagonal(Q, -Q.sum(axis=1))
    return Q


@pytest.mark.parametrize("steps", [2, 3, 5])
def test_root_of_an_embeddable_matrix_is_its_one_step_matrix(steps):
    # A chain observed every `steps` frames: P = expm(steps * Q) for a rate matrix Q, so the
    # one-frame matrix is expm(Q) (scipy.linalg.expm, the reference), and equals
    # expm(logm(P) / steps) (scipy.linalg.logm: inverse scaling and squaring, another
    # algorithm than the Schur-Pade root the function uses).
    rng = np.random.default_rng(steps)
    Q = _generator(rng, 5, rate=0.05)
    P = expm(steps * Q)
    root = transition_root(P, steps)
    np.testing.assert_allclose(root, expm(Q), atol=1e-10)
    np.testing.assert_allclose(root, np.real(expm(logm(P) / steps)), atol=1e-10)
    # its steps-th power gives the thinned matrix back (numpy.linalg.matrix_power)
    np.testing.assert_allclose(np.linalg.matrix_power(root, steps), P, atol=1e-10)


def test_root_without_a_stochastic_root_is_still_a_transition_matrix():
    # eigenvalue -0.4: no real square root exists (the embedding problem); the result is the
    # regularised one, rows summing to 1 and no probability below the floor
    P = np.array([[0.3, 0.7, 0.0], [0.7, 0.3, 0.0], [0.05, 0.05, 0.9]])
    root = transition_root(P, 2)
    assert np.isfinite(root).all() and (root > 0).all()
    np.testing.assert_allclose(root.sum(axis=1), 1.0, atol=1e-12)
    # the state held long keeps the square root of its self-transition
    assert root[2, 2] == pytest.approx(np.sqrt(0.9), abs=0.01)
    assert transition_root(P, 1) is not P and np.array_equal(transition_root(P, 1), P)


def test_stride_and_thinned_sequences():
    assert [fit_stride(fps, 10.0) for fps in (30.0, 25.0, 50.0, 120.0, 9.0)] == [3, 2, 5, 12, 1]
    assert fit_stride(30.0, None) == 1
    X = np.arange(10.0)[:, None]
    thin, lengths = thin_frames(X, np.array([5, 5]), 3)
    assert thin.ravel().tolist() == [0.0, 3.0, 5.0, 8.0] and lengths.tolist() == [2, 2]


@pytest.mark.parametrize("covariance_type", ["full", "diag"])
def test_thinned_fit_is_hmmlearns_em_on_every_sth_frame(covariance_type):
    # invented data: 3-state sticky Gaussian HMM at 30 frames/s, two sessions
    X, _, lengths = sample_sticky_hmm(seed=11, n_states=K, lengths=(900, 900), stay=0.99)
    stride = 3
    start = GaussianHMM(K, covariance_type=covariance_type, n_restarts=1, n_iter=2).fit(X, lengths)
    ours = GaussianHMM(
        K, covariance_type=covariance_type, expected_bout_s=None, fps=30.0, fit_rate=10.0,
        full_rate_iter=0, n_restarts=1, n_iter=500, tol=1e-10, min_covar=FLOOR,
        fit_max_frames=None,
    ).fit(X, lengths, init_models=[start])  # fmt: skip
    assert ours.fit_stride_ == stride
    # Reference: hmmlearn 0.3.3's Baum-Welch on frames 0, 3, 6, ... of each session, from the
    # same parameters with the start's transitions over 3 frames (its matrix cubed), the same
    # start prior (1/K pseudo-counts), no transition prior and the plain ML covariance.
    X3, len3 = X[np.r_[0:900:3, 900:1800:3]], [300, 300]
    covars = start.covars_ if covariance_type == "full" else np.diagonal(start.covars_, 0, 1, 2)
    ref = ReferenceHMM(
        K, covariance_type=covariance_type, implementation="scaling", init_params="",
        params="stmc", n_iter=500, tol=1e-10 * len(X3), min_covar=FLOOR,
        startprob_prior=1 + 1 / K, covars_prior=0.0, covars_weight=1.0,
    )  # fmt: skip
    ref.startprob_, ref.transmat_ = start.startprob_, np.linalg.matrix_power(start.transmat_, 3)
    ref.means_, ref.covars_ = start.means_, covars
    ref.fit(X3, len3)
    order = [int(np.argmin(((ref.means_ - m) ** 2).sum(axis=1))) for m in ours.means_]
    assert sorted(order) == list(range(K))
    np.testing.assert_allclose(ours.means_, ref.means_[order], atol=1e-3)
    # the saved matrix is per frame: three frames of it are hmmlearn's thinned matrix
    thinned = np.linalg.matrix_power(ours.transmat_, stride)
    np.testing.assert_allclose(thinned, ref.transmat_[np.ix_(order, order)], atol=1e-3)
    # the log-likelihood reported is that of every frame under the saved (per-frame) model
    assert ours.log_likelihood_ == pytest.approx(ours.score_per_frame(X, lengths), abs=1e-9)
    assert adjusted_rand_score(ours.predict(X, lengths), ref.predict(X, lengths)) > 0.999


def test_thinned_then_full_rate_fit_finds_the_states_of_the_full_fit():
    X, truth, lengths = sample_sticky_hmm(seed=12, n_states=4, lengths=(1500,) * 3, stay=0.98)
    full = GaussianHMM(4, fps=30.0, n_restarts=1).fit(X, lengths)
    fast = GaussianHMM(4, fps=30.0, n_restarts=1, fit_rate=10.0).fit(X, lengths)
    assert fast.fit_stride_ == 3 and full.fit_stride_ == 1
    # the states of the simulation (scikit-learn's ARI) and the full fit's likelihood
    assert adjusted_rand_score(truth, fast.predict(X, lengths)) > 0.98
    assert fast.log_likelihood_ == pytest.approx(full.log_likelihood_, abs=1e-3)
    np.testing.assert_allclose(np.diag(fast.transmat_), np.diag(full.transmat_), atol=0.01)
    # a saved thinned model comes back with its parameters
    meta, arrays = fast.to_state()
    again = GaussianHMM.from_state(meta, arrays)
    assert again.fit_rate == 10.0
    assert np.array_equal(again.predict(X, lengths), fast.predict(X, lengths))


def test_too_few_thinned_frames_fall_back_to_a_smaller_stride():
    # 2 x 60 frames of 3 features: 3 full-covariance states need 12 frames; stride 12 (120
    # fps thinned to 10) would leave 10
    X, _, lengths = sample_sticky_hmm(seed=13, n_states=K, lengths=(60, 60))
    m = GaussianHMM(K, fps=120.0, n_restarts=1, fit_rate=10.0).fit(X, lengths)
    assert 1 <= m.fit_stride_ < 12


@pytest.mark.parametrize(
    ("params", "match"),
    [({"fit_rate": 0}, "fit_rate must be"), ({"fit_rate": 10, "full_rate_iter": -1}, "full_rate")],
)
def test_bad_thinning_options_are_named(params, match):
    X, _, lengths = sample_sticky_hmm(seed=14, n_states=K, lengths=(300,))
    with pytest.raises(InputError, match=match):
        GaussianHMM(K, **params).fit(X, lengths)


def test_the_count_thins_only_when_told():
    from ethoscribe.segment.select import choose_n_states

    X, _, lengths = sample_sticky_hmm(seed=15, n_states=K, lengths=(600,) * 4)
    params = {"fps": 30.0, "fit_rate": 10.0}  # the final model's options
    plain = choose_n_states(X, lengths, candidates=[2, 3], model_params=params, stop_after=None)
    assert {m.fit_stride_ for pair in plain.fold_models.values() for m in pair} == {1}
    thin = choose_n_states(
        X, lengths, candidates=[2, 3], model_params=params, stop_after=None, fit_rate=10.0
    )
    assert {m.fit_stride_ for pair in thin.fold_models.values() for m in pair} == {3}
    assert thin.best == plain.best == K


@pytest.mark.parametrize(
    "options",
    [
        {"thin_screening": True},
        {"screening": "once"},
        {"screening": "once", "thin_screening": True},
    ],
)
def test_every_screening_recovers_the_states(options):
    X, truth, lengths = sample_sticky_hmm(seed=16, n_states=4, lengths=(1200,) * 3, stay=0.98)
    m = GaussianHMM(4, fps=30.0, n_restarts=2, fit_rate=10.0, **options).fit(X, lengths)
    assert m.fit_stride_ == 3
    # the simulation's states (scikit-learn's ARI)
    assert adjusted_rand_score(truth, m.predict(X, lengths)) > 0.98
