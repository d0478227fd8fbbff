"""Reuse of fitted models: the final fit started from the automatic state count's fits (an
option) and a stability report comparing models it is given (discover's own check refits
instead: see test_discover_reuse)."""

from __future__ import annotations

import numpy as np
import pytest
from hmmlearn.hmm import GaussianHMM as ReferenceHMM
from sklearn.metrics import adjusted_rand_score

from ethoscribe.errors import InputError
from ethoscribe.segment.hmm import GaussianHMM
from ethoscribe.segment.select import select_n_states
from ethoscribe.segment.stability import stability_report
from test_hmm_sampling import sample_sticky_hmm

K = 3
FLOOR = 1e-6  # small: hmmlearn regularises covariances otherwise than we do (see _hmm_fit)


def _by_first_mean(means: np.ndarray) -> np.ndarray:
    return means[np.lexsort(means.T[::-1])]


@pytest.mark.parametrize("covariance_type", ["full", "diag"])
def test_warm_started_fit_reaches_hmmlearns_optimum_from_the_same_start(covariance_type):
    # invented data: 3-state sticky Gaussian HMM, two sessions
    X, _, lengths = sample_sticky_hmm(seed=5, n_states=K, lengths=(500, 500))
    start = GaussianHMM(K, covariance_type=covariance_type, n_restarts=1, n_iter=2).fit(X, lengths)
    ours = GaussianHMM(
        K, covariance_type=covariance_type, expected_bout_s=None, n_restarts=1, n_iter=500,
        tol=1e-10, min_covar=FLOOR, fit_max_frames=None,
    ).fit(X, lengths, init_models=[start])  # fmt: skip
    # Reference: hmmlearn 0.3.3's Baum-Welch from the same parameters, with the same start
    # prior (1/K pseudo-counts, a Dirichlet concentration 1 + 1/K), no transition prior and
    # the plain ML covariance (covars_prior 0).
    covars = start.covars_ if covariance_type == "full" else np.diagonal(start.covars_, 0, 1, 2)
    ref = ReferenceHMM(
        K, covariance_type=covariance_type, implementation="scaling", init_params="",
        params="stmc", n_iter=500, tol=1e-10 * len(X), min_covar=FLOOR,
        startprob_prior=1 + 1 / K, covars_prior=0.0, covars_weight=1.0,
    )  # fmt: skip
    ref.startprob_, ref.transmat_ = start.startprob_, start.transmat_
    ref.means_, ref.covars_ = start.means_, covars
    ref.fit(X, lengths)
    # the warm restart (the last) ends where hmmlearn ends; a usual restart may only do better
    warm = ours.restart_log_likelihoods_[-1]
    assert warm == pytest.approx(ref.score(X, lengths) / len(X), abs=1e-5)
    assert ours.log_likelihood_ >= warm - 1e-12
    np.testing.assert_allclose(_by_first_mean(ours.means_), _by_first_mean(ref.means_), atol=1e-3)
    assert adjusted_rand_score(ours.predict(X, lengths), ref.predict(X, lengths)) > 0.999


def test_warm_start_needs_few_iterations_and_checks_the_shape():
    X, _, lengths = sample_sticky_hmm(seed=6, n_states=K, lengths=(600, 600))
    cold = GaussianHMM(K, n_restarts=1).fit(X, lengths)
    warm = GaussianHMM(K, n_restarts=1).fit(X, lengths, init_models=[cold])
    # from an optimum EM stays there: the warm restart ends at the same likelihood
    assert len(warm.restart_log_likelihoods_) == 2
    assert warm.restart_log_likelihoods_[1] == pytest.approx(cold.log_likelihood_, abs=1e-4)
    with pytest.raises(InputError, match="init_models must have 4 states"):
        GaussianHMM(4, n_restarts=1).fit(X, lengths, init_models=[cold])


def test_count_keeps_its_fold_fits_and_their_split_half_agreement():
    X, _, lengths = sample_sticky_hmm(seed=7, n_states=K, lengths=(400,) * 4)
    sel = select_n_states(X, lengths, [2, 3], rule="elbow", model_params={"n_restarts": 1})
    for k, row in sel.table.set_index("n_states").iterrows():
        a, b = sel.fold_models[k]
        assert a.n_states_ == b.n_states_ == k
        # the recorded split-half ARI is that of these two models' labels (scikit-learn ARI)
        ari = adjusted_rand_score(a.predict(X, lengths), b.predict(X, lengths))
        assert row["split_half_ari"] == pytest.approx(ari, abs=1e-12)


def test_stability_with_a_given_reference_and_halves():
    X, _, lengths = sample_sticky_hmm(seed=8, n_states=K, lengths=(400,) * 4)
    final = GaussianHMM(K, n_restarts=2, random_state=5).fit(X, lengths)
    halves = [GaussianHMM(K, n_restarts=1, random_state=9).fit(X[:800], [400, 400]),
              GaussianHMM(K, n_restarts=1, random_state=9).fit(X[800:], [400, 400])]  # fmt: skip
    fitted = []

    def make(seed):
        model = GaussianHMM(K, n_restarts=1, n_iter=30, random_state=seed)
        fitted.append(seed)
        return model

    report = stability_report(make, X, lengths, seeds=(0, 1), reference=final, half_models=halves)
    assert fitted == [1]  # only the second seed is refitted
    ref_labels = final.predict(X, lengths)
    other = GaussianHMM(K, n_restarts=1, n_iter=30, random_state=1).fit(X, lengths)
    # scikit-learn's ARI as the outside reference of the agreements
    assert report.summary["ari_halves"] == pytest.approx(
        adjusted_rand_score(halves[0].predict(X, lengths), halves[1].predict(X, lengths))
    )
    assert report.pairwise_ari.iloc[0, 1] == pytest.approx(
        adjusted_rand_score(ref_labels, other.predict(X, lengths))
    )
    # the table lists the reference model's own states
    share = np.bincount(ref_labels, minlength=K) / len(X)
    np.testing.assert_allclose(report.table["occupancy"], share)
    with pytest.raises(InputError, match="half_models must be two"):
        stability_report(make, X, lengths, half_models=halves[:1])


def test_stability_uses_given_seed_fits_in_place_of_refits():
    X, _, lengths = sample_sticky_hmm(seed=10, n_states=K, lengths=(400,) * 4)
    final = GaussianHMM(K, n_restarts=2, random_state=5).fit(X, lengths)
    other = GaussianHMM(K, n_restarts=2, random_state=6).fit(X, lengths)  # another seed's fit
    fitted = []

    def make(seed):
        fitted.append(seed)
        return GaussianHMM(K, n_restarts=1, n_iter=30, random_state=seed)

    report = stability_report(
        make, X, lengths, seeds=(0, 1, 2), split_halves=False, reference=final,
        seed_models=[other],
    )  # fmt: skip
    assert fitted == [2]
    # scikit-learn's ARI between the model and the other seed's fit
    assert report.pairwise_ari.iloc[0, 1] == pytest.approx(
        adjusted_rand_score(final.predict(X, lengths), other.predict(X, lengths))
    )


def test_stability_refits_on_the_given_frames_and_compares_on_the_sample():
    X_fit, _, len_fit = sample_sticky_hmm(seed=11, n_states=K, lengths=(300,) * 6)
    X, lengths = X_fit[::2], np.full(6, 150)  # the comparison's sample: every other frame

    def make(seed):
        return GaussianHMM(K, n_restarts=1, n_iter=30, random_state=seed)

    report = stability_report(make, X, lengths, seeds=(0, 1), fit_on=(X_fit, len_fit))
    full = [make(s).fit(X_fit, len_fit).predict(X, lengths) for s in (0, 1)]
    order = np.random.default_rng(0).permutation(6)  # sessions shuffled with the first seed
    halves = []
    for part in (np.sort(order[0::2]), np.sort(order[1::2])):
        rows = np.concatenate([np.arange(300 * s, 300 * s + 300) for s in part])
        halves.append(make(0).fit(X_fit[rows], len_fit[part]).predict(X, lengths))
    # scikit-learn's ARI of the refits' labels of the sample
    assert report.pairwise_ari.iloc[0, 1] == pytest.approx(adjusted_rand_score(*full))
    assert report.summary["ari_halves"] == pytest.approx(adjusted_rand_score(*halves))
    with pytest.raises(InputError, match="fit_on has 1 features"):
        stability_report(make, X, lengths, fit_on=(X_fit[:, :1], len_fit))
