"""Screening of starting points once per fit (``GaussianHMM(screening="once")``) against
the screening of every restart, hmmlearn's EM from the same starts and the truth."""

from __future__ import annotations

import numpy as np
import pytest
from hmmlearn.hmm import GaussianHMM as ReferenceHMM
from sklearn.metrics import adjusted_rand_score

from ethoscribe.errors import InputError
from ethoscribe.segment._hmm_fit import same_states, screened_starts, sticky_transmat
from ethoscribe.segment.hmm import GaussianHMM
from test_hmm_sampling import sample_sticky_hmm

FLOOR = 1e-6  # small: hmmlearn regularises covariances otherwise than we do (see _hmm_fit)


def _overlapping(seed: int = 11):
    # invented data: 5 states 2 apart (overlapping), three sessions
    return sample_sticky_hmm(seed=seed, n_states=5, lengths=(800, 800, 800), separation=2.0)


def test_each_restart_reproduces_the_fit_before_the_option():
    X, _, lengths = _overlapping()
    m = GaussianHMM(5, n_restarts=3, init_candidates=4, n_jobs=1, random_state=3).fit(X, lengths)
    # Recorded from the code before screening="once" existed (main 68f0ea1), same call.
    recorded = [-4.212612924611333, -4.212612925076901, -4.2126129348613475]
    np.testing.assert_allclose(m.restart_log_likelihoods_, recorded, rtol=0, atol=1e-12)
    recorded_means = [
        [-0.0269947747, -0.0162509621, 2.0112860282],
        [2.0494584292, 0.0537004629, 0.0294435267],
        [0.0637567557, 1.9442165851, 0.0611409622],
        [-1.9825813913, -0.0509975622, -0.0014498691],
        [0.0372180551, -1.9750781835, -0.0327958358],
    ]
    np.testing.assert_allclose(m.means_, recorded_means, atol=1e-9)


def test_one_restart_gives_the_same_fit_either_way():
    X, _, lengths = _overlapping(12)
    fits = [
        GaussianHMM(5, n_restarts=1, screening=s, random_state=4).fit(X, lengths)
        for s in ("each_restart", "once")
    ]
    np.testing.assert_allclose(fits[0].means_, fits[1].means_, rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(fits[0].transmat_, fits[1].transmat_, rtol=1e-9, atol=1e-12)
    assert fits[0].log_likelihood_ == pytest.approx(fits[1].log_likelihood_, abs=1e-10)


def test_restarts_continue_the_best_screened_candidates_as_hmmlearn_would():
    X, _, lengths = _overlapping(13)
    K, n_restarts, seed = 5, 3, 6
    params = dict(
        expected_bout_s=None, min_covar=FLOOR, tol=1e-10, n_iter=500, fit_max_frames=None,
        init_candidates=6, random_state=seed,
    )  # fmt: skip
    ours = GaussianHMM(K, n_restarts=n_restarts, screening="once", **params).fit(X, lengths)
    # The same screening by hand: the fit centres the data and screens on restart 0's stream.
    offset = X.mean(axis=0)
    rng = np.random.default_rng(np.random.SeedSequence(seed).spawn(n_restarts + 1)[1])
    model = GaussianHMM(K, **params)
    starts = screened_starts(
        model, X - offset, np.asarray(lengths), K, sticky_transmat(K, None, 30.0),
        np.full(K, 1.0 / K), 0.0, rng, _NoBar(), n_restarts,
    )  # fmt: skip
    assert len(starts) == len(ours.restart_log_likelihoods_)
    lls = [s["log_likelihood"] for s in starts]
    assert lls == sorted(lls, reverse=True)  # best first
    for start, ll in zip(starts, ours.restart_log_likelihoods_, strict=True):
        # Reference: hmmlearn 0.3.3's Baum-Welch from the same screened parameters, with the
        # same start prior (Dirichlet 1 + 1/K), no transition prior, plain ML covariances.
        ref = ReferenceHMM(
            K, covariance_type="full", implementation="scaling", init_params="",
            params="stmc", n_iter=500, tol=1e-10 * len(X), min_covar=FLOOR,
            startprob_prior=1 + 1 / K, covars_prior=0.0, covars_weight=1.0,
        )  # fmt: skip
        ref.startprob_, ref.transmat_ = start["startprob"], start["transmat"]
        ref.means_, ref.covars_ = start["means"] + offset, start["covars"]
        ref.fit(X, lengths)
        assert ll == pytest.approx(ref.score(X, lengths) / len(X), abs=1e-5)


def test_once_recovers_the_states():
    X, truth, lengths = sample_sticky_hmm(seed=14, n_states=4, lengths=(1500, 1500))
    for screening in ("each_restart", "once"):
        m = GaussianHMM(4, n_restarts=2, screening=screening, random_state=0).fit(X, lengths)
        # agreement with the true states, scikit-learn's adjusted Rand index
        assert adjusted_rand_score(truth, m.predict(X, lengths)) > 0.95


def test_copies_of_a_candidate_are_screened_once():
    # invented data: two far apart clusters, so k-means from every seed finds the same pair
    rng = np.random.default_rng(0)
    X = np.r_[rng.normal(0, 1, (600, 2)), rng.normal(20, 1, (600, 2))]
    m = GaussianHMM(2, n_restarts=2, screening="once", random_state=0).fit(X, [600, 600])
    assert len(m.restart_log_likelihoods_) == 1  # one distinct start: one restart runs
    usual = GaussianHMM(2, n_restarts=2, random_state=0).fit(X, [600, 600])
    assert m.log_likelihood_ == pytest.approx(usual.log_likelihood_, abs=1e-8)


def test_same_states_ignores_the_order_only():
    a = np.arange(12.0).reshape(4, 3)
    assert same_states(a, a[[2, 0, 3, 1]])
    assert not same_states(a, a + 1e-3)
    assert not same_states(a, a[[0, 0, 2, 3]])  # a state twice is not a permutation
    assert not same_states(a, a[:3])


def test_bad_screening_is_named():
    X = np.random.default_rng(0).normal(size=(50, 2))
    with pytest.raises(InputError, match="screening"):
        GaussianHMM(2, screening="twice").fit(X)


class _NoBar:
    def set_postfix(self, **_):
        pass
