"""Held-out scoring with the per-session offset integrated over its prior
(``GaussianHMM.score_per_session(offset_scoring="marginal")``, the state count's
``offset_scoring``).

Checked against outside references: with one state the marginal is exactly a multivariate
normal over the stacked block (scipy.stats.multivariate_normal); with two states and a 1-D
offset, against numerical integration (scipy.integrate.quad) of hmmlearn's likelihood of the
shifted block times the prior density.
"""

from __future__ import annotations

import numpy as np
import pytest
from hmmlearn.hmm import GaussianHMM as ReferenceHMM
from scipy import integrate, stats

from ethoscribe.errors import InputError
from ethoscribe.segment.hmm import GaussianHMM
from ethoscribe.segment.select import select_n_states


def _one_state_model(columns):
    """A one-state HMM with offsets fitted on 4 sessions of 3 correlated features."""
    rng = np.random.default_rng(0)
    cov = np.array([[1.0, 0.3, 0.1], [0.3, 0.5, -0.2], [0.1, -0.2, 0.8]])
    shifts = rng.normal(0, 0.7, (4, 3))
    X = np.concatenate([rng.multivariate_normal(s, cov, 300) for s in shifts])
    model = GaussianHMM(
        n_states=1, n_restarts=1, session_offsets=True, offset_columns=columns, random_state=0
    )
    return model.fit(X, [300] * 4)


@pytest.mark.parametrize("columns", [None, [0, 2]])
def test_one_state_marginal_is_the_random_intercept_normal(columns):
    # One Gaussian state: the frames of a block share b ~ N(0, Psi) on the offset columns S,
    # so the stacked block is exactly normal with mean (mu, ..., mu) and covariance
    # I (x) Sigma + 11^T (x) E Psi E^T (a random intercept, Laird & Ware 1982), and Laplace's
    # method is exact. Reference: scipy.stats.multivariate_normal on the stacked block.
    model = _one_state_model(columns)
    assert model.offset_spread_ > 0
    S = model.offset_columns_
    D = model.n_features_in_
    psi = np.zeros((D, D))
    psi[np.ix_(S, S)] = np.linalg.inv(model.offset_precision_)
    rng = np.random.default_rng(1)
    lengths = np.array([40, 25])
    X = rng.normal(0, 1, (lengths.sum(), D)) + np.array([1.0, -0.5, 0.8])
    got = model.score_per_session(X, lengths, offset_scoring="marginal")
    a = 0
    for i, n in enumerate(lengths):
        cov = np.kron(np.eye(n), model.covars_[0]) + np.kron(np.ones((n, n)), psi)
        mean = np.tile(model.means_[0], n)
        ref = stats.multivariate_normal(mean, cov).logpdf(X[a : a + n].ravel())
        assert got[i] == pytest.approx(ref, abs=1e-8)  # scipy.stats.multivariate_normal
        a += n
    # the plugged-in MAP offset is credited with a free shift: higher than the marginal
    plugged = model.score_per_session(X, lengths)
    assert (plugged > got).all()


def _two_state_model():
    rng = np.random.default_rng(2)
    X = np.concatenate(
        [rng.normal(m + s, 0.6, (60, 1)) for s in (-0.5, 0.0, 0.4, 0.2) for m in (0.0, 3.0) * 5]
    )
    model = GaussianHMM(n_states=2, n_restarts=1, session_offsets=True, random_state=0)
    return model.fit(X, [600] * 4)


def test_two_state_marginal_close_to_numerical_integration():
    # Two states, one feature: the exact marginal is int p(x | b) N(b; 0, psi) db, here by
    # scipy.integrate.quad over hmmlearn's forward log-likelihood of x - b (a reference HMM
    # with the fitted parameters). Laplace's method is exact to O(1/n) in the block's frame
    # count: within 0.001 nats on a 200-frame block of both states, far below the gap to the
    # plugged-in MAP offset (about (1/2) log(n psi) nats).
    model = _two_state_model()
    assert model.offset_spread_ > 0
    ref_hmm = ReferenceHMM(n_components=2, covariance_type="full", init_params="", params="")
    ref_hmm.startprob_ = model.startprob_
    ref_hmm.transmat_ = model.transmat_
    ref_hmm.means_ = model.means_
    ref_hmm.covars_ = model.covars_
    rng = np.random.default_rng(5)
    z = np.repeat([0, 1, 0, 1], 50)
    x = model.means_[z] + 0.35 + rng.normal(0, 0.6, (200, 1))
    sd = float(np.sqrt(1.0 / model.offset_precision_[0, 0]))
    b_hat = float(model.offsets(x)[0, 0])
    peak = ref_hmm.score(x - b_hat)

    def density(b: float) -> float:
        return float(np.exp(ref_hmm.score(x - b) - peak) * stats.norm.pdf(b, 0.0, sd))

    area, _ = integrate.quad(density, b_hat - 1.0, b_hat + 1.0, points=[b_hat], epsabs=1e-13)
    exact = peak + np.log(area)  # scipy.integrate.quad over hmmlearn's score
    got = model.score_per_session(x, [200], offset_scoring="marginal")[0]
    plugged = model.score_per_session(x, [200])[0]
    assert got == pytest.approx(exact, abs=1e-3)
    assert plugged - exact > 0.5


def test_without_offsets_marginal_is_the_plain_score():
    rng = np.random.default_rng(0)
    X = np.r_[rng.normal(0, 1, (200, 2)), rng.normal(5, 1, (200, 2))]
    model = GaussianHMM(n_states=2, n_restarts=1).fit(X, [200, 200])
    np.testing.assert_array_equal(
        model.score_per_session(X, [200, 200], offset_scoring="marginal"),
        model.score_per_session(X, [200, 200]),
    )
    with pytest.raises(InputError, match="offset_scoring"):
        model.score_per_session(X, [200, 200], offset_scoring="plugged")
    with pytest.raises(InputError, match="offset_scoring"):
        select_n_states(X, [200, 200], candidates=[1, 2], offset_scoring="plugged")


def test_blocks_of_one_behaviour_no_longer_explained_by_their_offsets():
    # Invented sessions (the example of select_n_states): bouts of two behaviours (levels 0
    # and 8, 50 frames each), held out as 50-frame blocks, each block one behaviour. With its
    # MAP offset plugged in a block is explained by one state plus its offset, and the count is
    # 1; with the offset integrated over its prior, a shift of 8 SDs costs what the prior says
    # it should, and the held-out curve rises to 2 states.
    rng = np.random.default_rng(0)
    X = np.concatenate([rng.normal(m, 1, (50, 1)) for m in (0, 8) * 12])
    options = dict(candidates=[1, 2, 3], heldout="blocks", block_frames=50, rule="elbow")
    params = {"n_restarts": 1}
    plugged = select_n_states(X, [300] * 4, model_params=params, offset_scoring="map", **options)
    marginal = select_n_states(X, [300] * 4, model_params=params, **options)  # the default
    assert plugged.best == 1
    assert marginal.best == 2
