"""Frames scored by the Gaussian marginal of some of their columns (``hidden=``).

Outside reference: scipy.stats.multivariate_normal (the log-density of the sub-vector under
the sub-mean and sub-covariance: the marginal of a Gaussian over a subset of its coordinates,
e.g. Bishop 2006, Pattern Recognition and Machine Learning, eq. 2.98). Data invented here.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import multivariate_normal

from ethoscribe.errors import InputError
from ethoscribe.segment._hmm_gaussian import GaussianEmission, marginal_emission
from ethoscribe.segment.hmm import GaussianHMM


def _states(rng, k: int, d: int) -> tuple[np.ndarray, np.ndarray]:
    means = rng.normal(0, 2, (k, d))
    a = rng.normal(0, 1, (k, d, d))
    covars = a @ np.swapaxes(a, 1, 2) + 0.5 * np.eye(d)
    return means, covars


@pytest.mark.parametrize("covariance_type", ["full", "diag"])
def test_marginal_emission_equals_scipy_on_the_sub_vector(covariance_type):
    rng = np.random.default_rng(3)
    means, covars = _states(rng, 3, 5)
    if covariance_type == "diag":
        covars = np.stack([np.diag(np.diag(c)) for c in covars])
    X = rng.normal(0, 2, (40, 5))
    hidden = np.zeros((40, 5), dtype=bool)
    hidden[5:15, :3] = True  # one pattern
    hidden[20:25, [1, 4]] = True  # another
    hidden[30, :] = True  # every column: no evidence
    out = GaussianEmission(means, covars, covariance_type).log_likelihood(X)
    full = out.copy()
    marginal_emission({}, means, covars, covariance_type, X, hidden, out)
    for t in range(len(X)):
        keep = np.flatnonzero(~hidden[t])
        for k in range(len(means)):
            if len(keep) == 0:
                want = 0.0
            else:  # scipy on the sub-vector and sub-covariance
                sub = covars[k][np.ix_(keep, keep)]
                want = multivariate_normal(means[k, keep], sub).logpdf(X[t, keep])
            assert out[t, k] == pytest.approx(want, rel=1e-10, abs=1e-10)
    np.testing.assert_array_equal(out[~hidden.any(1)], full[~hidden.any(1)])


def test_decoding_with_columns_hidden_everywhere_is_the_hmm_of_the_other_columns():
    rng = np.random.default_rng(5)
    means, covars = _states(rng, 3, 4)
    states = np.repeat(rng.integers(0, 3, 30), 20)
    X = np.stack([rng.multivariate_normal(means[s], covars[s]) for s in states])
    hmm = GaussianHMM(n_states=3, n_restarts=1, n_iter=30, random_state=0).fit(X, [300, 300])
    hidden = np.zeros_like(X, dtype=bool)
    hidden[:, [0, 2]] = True
    small = GaussianHMM(n_states=3)
    keep = [1, 3]
    small.means_, small.covars_ = hmm.means_[:, keep], hmm.covars_[:, keep][:, :, keep]
    small.startprob_, small.transmat_ = hmm.startprob_, hmm.transmat_
    small.n_states_, small.n_features_in_ = 3, 2
    small.covariance_type, small.session_offsets = hmm.covariance_type, False
    proba = hmm.predict_proba(X, [300, 300], hidden=hidden)
    np.testing.assert_allclose(proba, small.predict_proba(X[:, keep], [300, 300]), atol=1e-12)
    np.testing.assert_array_equal(
        hmm.predict(X, [300, 300], hidden=hidden), small.predict(X[:, keep], [300, 300])
    )
    # nothing hidden: the plain decoding, exactly
    none = np.zeros_like(hidden)
    np.testing.assert_array_equal(
        hmm.predict_proba(X, [300, 300], hidden=none), hmm.predict_proba(X, [300, 300])
    )
    with pytest.raises(InputError, match="hidden must be a bool array"):
        hmm.predict(X, [300, 300], hidden=hidden[:10])
