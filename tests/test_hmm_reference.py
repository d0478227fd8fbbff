"""Agreement of the Gaussian HMM with the reference library hmmlearn 0.3.3 on random models."""

from __future__ import annotations

import numpy as np
import pytest
from hmmlearn.hmm import GaussianHMM as ReferenceHMM
from scipy.linalg import solve_triangular

from ethoscribe.segment import _hmm_gaussian as hmm_gaussian
from ethoscribe.segment._hmm_gaussian import (
    GaussianEmission,
    _lower_inverse,
    frame_products,
    gaussian_e_step,
    gaussian_m_step,
)
from ethoscribe.segment.agreement import adjusted_rand
from ethoscribe.segment.hmm import GaussianHMM
from test_hmm_sampling import sample_sticky_hmm

K, D = 4, 3
LENGTHS = np.array([120, 200, 80])


def _random_model(covariance_type: str, seed: int = 0):
    rng = np.random.default_rng(seed)
    means = rng.normal(0, 2, (K, D))
    if covariance_type == "full":
        a = rng.normal(size=(K, D, D))
        covars = a @ a.transpose(0, 2, 1) + 0.3 * np.eye(D)
        ref_covars = covars
    else:
        ref_covars = rng.uniform(0.3, 2.0, (K, D))
        covars = np.zeros((K, D, D))
        covars[:, np.arange(D), np.arange(D)] = ref_covars
    startprob = rng.dirichlet(np.ones(K))
    transmat = rng.dirichlet(np.ones(K), size=K)
    X = rng.normal(0, 2.5, (int(LENGTHS.sum()), D)) + 1.0
    return X, startprob, transmat, means, covars, ref_covars


def _reference(covariance_type, startprob, transmat, means, ref_covars, **kw):
    ref = ReferenceHMM(
        K, covariance_type=covariance_type, implementation="scaling", init_params="", **kw
    )
    ref.startprob_, ref.transmat_, ref.means_, ref.covars_ = startprob, transmat, means, ref_covars
    return ref


def _ours(startprob, transmat, means, covars, covariance_type) -> GaussianHMM:
    meta = {
        "kind": "ethoscribe.GaussianHMM", "format_version": 1,
        "params": GaussianHMM(n_states=K, covariance_type=covariance_type).get_params(),
        "n_states": K, "n_features": D, "log_likelihood": 0.0, "n_iter": 0,
        "converged": True, "covariance_floor": 1e-3, "n_fit_frames": 0,
    }  # fmt: skip
    arrays = {"means": means, "covars": covars, "startprob": startprob, "transmat": transmat}
    return GaussianHMM.from_state(meta, arrays)


@pytest.mark.parametrize("covariance_type", ["full", "diag"])
def test_scores_posteriors_and_viterbi_match_hmmlearn(covariance_type):
    X, sp, tm, means, covars, ref_covars = _random_model(covariance_type)
    ref = _reference(covariance_type, sp, tm, means, ref_covars)
    ours = _ours(sp, tm, means, covars, covariance_type)
    # reference library: hmmlearn 0.3.3 GaussianHMM (implementation="scaling")
    np.testing.assert_allclose(
        GaussianEmission(means, covars, covariance_type).log_likelihood(X),
        ref._compute_log_likelihood(X),
        rtol=1e-12,
        atol=1e-10,
    )
    assert ours.score(X, LENGTHS) == pytest.approx(ref.score(X, LENGTHS), rel=1e-12)
    np.testing.assert_allclose(
        ours.predict_proba(X, LENGTHS), ref.predict_proba(X, LENGTHS), atol=1e-8
    )
    ref_logprob, ref_path = ref.decode(X, LENGTHS, algorithm="viterbi")
    logprob, path = ours.decode(X, LENGTHS)
    assert np.array_equal(path, ref_path)
    assert logprob == pytest.approx(ref_logprob, rel=1e-12)
    # MAP labels: hmmlearn 0.3.3 decode(algorithm="map") (EXTERNAL-CHECKS.md)
    _, ref_map = ref.decode(X, LENGTHS, algorithm="map")
    assert np.array_equal(ours.predict_proba(X, LENGTHS).argmax(axis=1), ref_map)
    # BIC and the free-parameter count as hmmlearn counts them
    assert ours.n_parameters() == sum(ref._get_n_fit_scalars_per_param().values())
    assert ours.bic(X, LENGTHS) == pytest.approx(ref.bic(X, LENGTHS), rel=1e-12)


@pytest.mark.parametrize("covariance_type", ["full", "diag"])
def test_one_em_iteration_matches_hmmlearn(covariance_type):
    X, sp, tm, means, covars, ref_covars = _random_model(covariance_type, seed=1)
    start_counts = np.full(K, 0.25)
    trans_counts = 3.0 * (np.eye(K) * 0.8 + 0.2 / K)
    # hmmlearn's Dirichlet priors are concentrations: ours are pseudo-counts = prior - 1.
    # covars_prior=0 / covars_weight=1 make hmmlearn's covariance update the plain ML scatter.
    ref = _reference(
        covariance_type, sp, tm, means, ref_covars, n_iter=1, params="stmc",
        startprob_prior=1 + start_counts, transmat_prior=1 + trans_counts,
        covars_prior=0.0, covars_weight=1.0,
    )  # fmt: skip
    ref.fit(X, LENGTHS)
    stats, _ = gaussian_e_step(X, LENGTHS, sp, tm, means, covars, covariance_type)
    for floor in (0.0, 1e-3):
        new_sp, new_tm, new_means, new_covars = gaussian_m_step(
            stats, covariance_type, floor, start_counts, trans_counts
        )
        # reference library: hmmlearn 0.3.3, one Baum-Welch iteration from the same start;
        # our floor is min_covar * I added after the division
        np.testing.assert_allclose(new_sp, ref.startprob_, atol=1e-8)
        np.testing.assert_allclose(new_tm, ref.transmat_, atol=1e-8)
        np.testing.assert_allclose(new_means, ref.means_, atol=1e-8)
        np.testing.assert_allclose(new_covars, ref.covars_ + floor * np.eye(D), atol=1e-8)


def test_hmmlearn_engine_reaches_the_same_states():
    X, _, lengths = sample_sticky_hmm(seed=5, n_states=3, lengths=(500, 500))
    fast = GaussianHMM(n_states=3, n_restarts=1, random_state=0).fit(X, lengths)
    reference = GaussianHMM(n_states=3, n_restarts=1, engine="hmmlearn", random_state=0)
    reference.fit(X, lengths)
    # hmmlearn's own EM (reference path) finds the same segmentation and likelihood
    assert adjusted_rand(fast.predict(X, lengths), reference.predict(X, lengths)) > 0.99
    assert fast.log_likelihood_ == pytest.approx(reference.log_likelihood_, abs=5e-3)
    np.testing.assert_allclose(fast.means_, reference.means_, atol=0.05)


def test_kept_frame_products_give_the_same_em_iteration_as_hmmlearn(monkeypatch):
    # The frames' products computed once per fit (frame_products) instead of in every E-step:
    # the same sums exactly, so still one hmmlearn iteration; chunks of 100 frames (not 43,690)
    # so that the sums cross chunk boundaries.
    monkeypatch.setattr(hmm_gaussian, "_CHUNK_BYTES", 8 * 6 * 100)
    X, sp, tm, means, covars, ref_covars = _random_model("full", seed=2)
    products = frame_products(X)
    iu, ju = np.triu_indices(D)
    # reference: numpy's outer product of each frame, upper triangle
    np.testing.assert_array_equal(products, np.einsum("ti,tj->tij", X, X)[:, iu, ju])
    kept, _ = gaussian_e_step(X, LENGTHS, sp, tm, means, covars, "full", products=products)
    plain, _ = gaussian_e_step(X, LENGTHS, sp, tm, means, covars, "full")
    for a, b in zip(kept, plain, strict=True):
        np.testing.assert_array_equal(a, b)
    ref = _reference("full", sp, tm, means, ref_covars, n_iter=1, params="mc", covars_prior=0.0)
    ref.fit(X, LENGTHS)
    *_, new_means, new_covars = gaussian_m_step(kept, "full", 0.0)
    # reference library: hmmlearn 0.3.3, one Baum-Welch iteration from the same start
    np.testing.assert_allclose(new_means, ref.means_, atol=1e-8)
    np.testing.assert_allclose(new_covars, ref.covars_, atol=1e-8)


def test_precision_factors_equal_scipys_triangular_solve():
    _, _, _, _, covars, _ = _random_model("full", seed=3)
    for c in np.linalg.cholesky(covars):
        # reference: scipy.linalg.solve_triangular (the same LAPACK trtrs, so equal exactly)
        np.testing.assert_array_equal(_lower_inverse(c), solve_triangular(c, np.eye(D), lower=True))
    with pytest.raises(ValueError, match="infs or NaNs"):  # as solve_triangular refuses them
        GaussianEmission(np.zeros((1, D)), np.full((1, D, D), np.nan), "full")
