"""Frames weighted by the residuals' autocorrelation (``segment.correlation``,
``BehaviourModel(frame_weight=...)``), checked against statsmodels, hmmlearn and a closed form."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hmmlearn.hmm import GaussianHMM as ReferenceHMM
from statsmodels.tsa.stattools import acovf

from ethoscribe.errors import InputError
from ethoscribe.segment.correlation import (
    integrated_time,
    pooled_autocorrelation,
    residual_time,
    whitened_residuals,
)
from ethoscribe.segment.hmm import GaussianHMM
from ethoscribe.segment.model import BehaviourModel
from ethoscribe.simulate import simulate_session
from test_hmm_reference import _ours, _random_model

QUICK = {"n_restarts": 1, "n_iter": 30}


def _ar1(phi: float, n: int, rng: np.random.Generator) -> np.ndarray:
    x = np.empty(n)
    x[0] = rng.normal() / np.sqrt(1 - phi**2)
    noise = rng.normal(size=n)
    for t in range(1, n):
        x[t] = phi * x[t - 1] + noise[t]
    return x


def test_autocorrelation_of_one_series_is_statsmodels_adjusted_autocovariance():
    x = _ar1(0.7, 500, np.random.default_rng(0))
    ours = pooled_autocorrelation(x[:, None], [500], 40)
    # statsmodels acovf with adjusted=True divides lag k's products by n - k; demean=False
    # because residuals from state means are taken as mean zero
    ref = acovf(x, adjusted=True, demean=False, fft=False, nlag=40)
    np.testing.assert_allclose(ours, ref / ref[0], rtol=1e-10, atol=1e-12)


def test_autocorrelation_pools_columns_and_sequences_by_pair_counts():
    rng = np.random.default_rng(1)
    parts = [rng.normal(size=(n, 2)) + np.sin(np.arange(n) / 5)[:, None] for n in (300, 120)]
    ours = pooled_autocorrelation(np.vstack(parts), [300, 120], 30)
    # the same from statsmodels: each series' adjusted autocovariance times its n - k pairs
    # gives its lag products; summed over series and columns, divided by all pairs
    products, pairs = np.zeros(31), np.zeros(31)
    for part in parts:
        for col in part.T:
            n_pairs = len(col) - np.arange(31)
            products += acovf(col, adjusted=True, demean=False, fft=False, nlag=30) * n_pairs
            pairs += n_pairs
    expected = products / pairs
    np.testing.assert_allclose(ours, expected / expected[0], rtol=1e-10)


@pytest.mark.parametrize("phi", [0.0, 0.5, 0.9])
def test_integrated_time_of_an_ar1_autocorrelation_is_its_closed_form(phi):
    # AR(1): rho(k) = phi^k, tau_int = (1 + phi) / (1 - phi) (Sokal 1997, "Monte Carlo
    # methods in statistical mechanics", section 3, exponential autocorrelation; from memory).
    # Sokal's window (M >= 5 tau) leaves out 2 phi^(M+1) / (1 - phi) < 1e-3 here.
    expected = (1 + phi) / (1 - phi)
    assert integrated_time(phi ** np.arange(2000.0)) == pytest.approx(expected, rel=1e-3)


def test_integrated_time_estimated_from_an_ar1_sample():
    phi = 0.8
    x = _ar1(phi, 100_000, np.random.default_rng(2))
    tau = integrated_time(pooled_autocorrelation(x[:, None], [len(x)], 2000))
    # closed form (1 + phi) / (1 - phi) = 9; the estimate's relative error is about
    # sqrt(2 (2M + 1) / n) ~ 5 % at Sokal's window M ~ 45 (Sokal 1997, eq. 3.19; from memory)
    assert tau == pytest.approx((1 + phi) / (1 - phi), rel=0.15)


def test_residual_time_whitens_by_each_state_covariance():
    rng = np.random.default_rng(3)
    means = np.array([[0.0, 0.0], [10.0, -4.0]])
    covars = np.array([[[4.0, 1.0], [1.0, 2.0]], [[1.0, 0.0], [0.0, 9.0]]])
    states = np.repeat([0, 1, 0], 2000)
    white = np.column_stack([_ar1(0.6, len(states), rng) for _ in range(2)]) * np.sqrt(1 - 0.36)
    X = np.empty_like(white)
    for k in (0, 1):
        at = states == k
        X[at] = means[k] + white[at] @ np.linalg.cholesky(covars[k]).T
    np.testing.assert_allclose(whitened_residuals(X, states, means, covars), white, atol=1e-10)
    tau = residual_time(X, [len(X)], states, means, covars)
    assert tau == pytest.approx((1 + 0.6) / (1 - 0.6), rel=0.1)  # AR(1) closed form


@pytest.mark.parametrize("weight", [1.0, 0.25, 0.03])
def test_weighted_decoding_matches_hmmlearn_with_tempered_emissions(weight):
    X, sp, tm, means, covars, _ = _random_model("full")
    lengths = np.array([120, 200, 80])

    class Tempered(ReferenceHMM):
        """hmmlearn 0.3.3's own Viterbi and forward-backward on w * log N(x; mean, cov)."""

        def _compute_log_likelihood(self, X):
            return weight * super()._compute_log_likelihood(X)

    ref = Tempered(4, covariance_type="full", init_params="", implementation="log")
    ref.startprob_, ref.transmat_, ref.means_, ref.covars_ = sp, tm, means, covars
    ours = _ours(sp, tm, means, covars, "full")
    np.testing.assert_array_equal(ours.predict(X, lengths, weight=weight), ref.predict(X, lengths))
    np.testing.assert_allclose(
        ours.predict_proba(X, lengths, weight=weight),
        ref.predict_proba(X, lengths),
        atol=1e-8,
    )
    with pytest.raises(InputError, match="weight"):
        ours.predict(X, lengths, weight=0.0)


@pytest.fixture(scope="module")
def sessions():
    return [simulate_session(duration_s=60, seed=s, session=f"s{s}")[0] for s in (1, 2)]


@pytest.fixture(scope="module")
def weighted(sessions):
    return BehaviourModel(n_states=4, segmenter=QUICK, frame_weight="autocorrelation").fit(sessions)


def test_model_weight_is_one_over_the_residual_time(weighted, sessions):
    feats, _ = weighted.transform_features(sessions)
    X = np.vstack([f.values[f.valid] for f in feats])
    lengths = [int(f.valid.sum()) for f in feats]
    seg = weighted.segmenter_
    tau = residual_time(X, lengths, seg.predict(X, lengths), seg.means_, seg.covars_)
    assert weighted.frame_weight_ == pytest.approx(1 / tau)
    assert weighted.frame_time_s_ == pytest.approx(tau / weighted.fps_)
    assert 0 < weighted.frame_weight_ < 1  # windowed features: frames are correlated


def test_model_labels_with_the_weight_and_saves_it(weighted, sessions):
    labels = weighted.label(sessions)
    feats, _ = weighted.transform_features(sessions)
    X = np.vstack([f.values[f.valid] for f in feats])
    lengths = [int(f.valid.sum()) for f in feats]
    plain = BehaviourModel(n_states=4, segmenter=QUICK).fit(sessions)
    # the fit is unchanged; only the decoding counts frames differently
    np.testing.assert_array_equal(plain.segmenter_.means_, weighted.segmenter_.means_)
    w = weighted.frame_weight_
    posterior = weighted.segmenter_.predict_proba(X, lengths, weight=w)
    scored = labels["state"].to_numpy() >= 0
    groups = weighted.phase_groups_
    if groups is None:  # the probability column is the weighted posterior of the label
        own = np.take_along_axis(posterior, labels["state"].to_numpy()[scored][:, None], 1)
        np.testing.assert_allclose(labels["probability"].to_numpy()[scored], own[:, 0])
    meta, arrays = weighted.to_state()
    rebuilt = BehaviourModel.from_state(json.loads(json.dumps(meta)), arrays)
    assert rebuilt.frame_weight_ == weighted.frame_weight_
    pd.testing.assert_frame_equal(rebuilt.label(sessions), labels)
    older = {k: v for k, v in meta.items() if k not in ("frame_weight", "frame_time_s")}
    older["params"] = {k: v for k, v in meta["params"].items() if k != "frame_weight"}
    assert BehaviourModel.from_state(older, arrays).frame_weight_ == 1.0
    with pytest.raises(InputError, match="frame_weight"):
        BehaviourModel.from_state({**meta, "frame_weight": 2.0}, arrays)


def test_frame_weight_values_are_checked(sessions):
    for params in (
        {"frame_weight": 0.0},
        {"frame_weight": 1.5},
        {"frame_weight": "auto"},
        {"frame_weight": True},
        {"frame_weight": 0.5, "method": "changepoint"},
        {"frame_weight": "autocorrelation", "causal": True},
    ):
        with pytest.raises(InputError, match="frame_weight"):
            BehaviourModel(n_states=3, **params).fit(sessions)
    assert GaussianHMM().get_params()  # the segmenter's own parameters are untouched
