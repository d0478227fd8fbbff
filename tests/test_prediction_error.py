"""Prediction-error (event segmentation) boundaries.

Outside references: statsmodels' VAR least squares (the global model with ridge=0), numpy
``lstsq``; recovery on invented autoregressive data (said so at each test).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from sklearn.metrics import adjusted_rand_score
from statsmodels.tsa.api import VAR

from ethoscribe.errors import InputError, NotFittedError
from ethoscribe.segment.boundaries import pooled_boundary_scores
from ethoscribe.segment.changepoint import ChangePointSegmenter
from ethoscribe.segment.prediction_error import (
    PredictionErrorBoundaries,
    _lagged,
    _window_surprise,
)
from test_changepoint import regimes


def oscillation(freq: float, radius: float, fps: float = 30.0) -> tuple[float, float]:
    """AR(2) coefficients with complex roots radius * exp(+-2 pi i freq / fps)."""
    w = 2 * np.pi * freq / fps
    return 2 * radius * np.cos(w), -radius * radius


DYNAMICS = [(0.95, 0.0), oscillation(5, 0.9), (0.0, 0.0), oscillation(2, 0.95)]


def switching_ar(seed: int, n_segments: int = 24, d: int = 6, fps: float = 30.0):
    """Invented data: per-feature AR(2) whose coefficients switch every 2-5 s (smooth drift,
    a 5 Hz rhythm, white jitter, a 2 Hz rhythm), the same innovation noise throughout."""
    rng = np.random.default_rng(seed)
    durations = rng.integers(int(2 * fps), int(5 * fps), n_segments)
    kinds = [int(rng.integers(4))]
    while len(kinds) < n_segments:
        k = int(rng.integers(4))
        if k != kinds[-1]:
            kinds.append(k)
    lab = np.repeat(kinds, durations)
    x = np.zeros((len(lab), d))
    e = rng.normal(size=x.shape)
    coef = np.array(DYNAMICS)[lab]
    for t in range(2, len(lab)):  # sequential by nature; test data only
        x[t] = coef[t, 0] * x[t - 1] + coef[t, 1] * x[t - 2] + e[t]
    return x, np.cumsum(durations)[:-1]


def test_global_model_is_least_squares_var():
    x, _ = switching_ar(0, n_segments=6, d=3)
    pe = PredictionErrorBoundaries(order=2, ridge=0.0).fit(x)
    xs = (x - pe.mean_) / pe.scale_
    # Source: statsmodels VAR(2) OLS, rows [const, lag-1 block, lag-2 block] like ours.
    np.testing.assert_allclose(pe.coef_, VAR(xs).fit(2, trend="c").params, atol=1e-8)
    # Two sessions: lags never cross the join (numpy lstsq on both designs stacked).
    lengths = [300, len(x) - 300]
    pe2 = PredictionErrorBoundaries(ridge=0.0).fit(x, lengths)
    xs = (x - pe2.mean_) / pe2.scale_
    parts = [_lagged(xs[:300], 2), _lagged(xs[300:], 2)]
    z, y = np.vstack([p[0] for p in parts]), np.vstack([p[1] for p in parts])
    np.testing.assert_allclose(pe2.coef_, np.linalg.lstsq(z, y, rcond=None)[0], atol=1e-8)


def test_window_surprise_matches_direct_refits():
    rng = np.random.default_rng(1)
    x = rng.normal(size=(200, 2)).cumsum(axis=0) * 0.1 + rng.normal(size=(200, 2))
    z, y = _lagged(x, 2)
    coef = np.linalg.lstsq(z, y, rcond=None)[0]
    inv_var = np.array([1.0, 2.0])
    step, k, prior = 3, 5, 4.0
    surprise, _ = _window_surprise(z, y, coef, inv_var, step, k, prior)

    def fit(rows: slice) -> np.ndarray:
        zz, yy = z[rows], y[rows]
        lam = prior * (zz**2).mean(axis=0)
        lam[0] = 1e-6 * (zz[:, 0] ** 2).mean()
        return np.linalg.solve(zz.T @ zz + np.diag(lam), zz.T @ yy + lam[:, None] * coef)

    def err(w: np.ndarray, rows: slice) -> float:
        return float(((y[rows] - z[rows] @ w) ** 2 @ inv_var).sum())

    for j in (5, 20, 40):
        past, future = slice((j - k) * step, j * step), slice(j * step, (j + k) * step)
        wp, wf = fit(past), fit(future)
        direct = 0.5 * (
            np.log(err(wf, past) / err(wp, past)) + np.log(err(wp, future) / err(wf, future))
        )
        assert surprise[j] == pytest.approx(direct, rel=1e-7)


def test_finds_switches_of_autoregressive_dynamics():
    # Invented data (switching_ar); segments of 2-5 s, so the default 2-s memory fits.
    sessions = [switching_ar(seed) for seed in range(3)]
    X = np.vstack([s[0] for s in sessions])
    lengths = [len(s[0]) for s in sessions]
    pe = PredictionErrorBoundaries().fit(X, lengths)
    scores = pooled_boundary_scores([s[1] for s in sessions], pe.boundaries(X, lengths), margin=6)
    print(f"AR switches: precision {scores['precision']:.2f} recall {scores['recall']:.2f}")
    assert scores["f1"] >= 0.7
    z = pe.prediction_error(X, lengths)
    assert z.shape == (len(X),) and np.isfinite(z).all()


def test_few_false_boundaries_without_changes():
    rng = np.random.default_rng(1)
    x = np.zeros((20000, 6))
    e = rng.normal(size=x.shape)
    for t in range(1, len(x)):  # invented stationary AR(1), coefficient 0.9
        x[t] = 0.9 * x[t - 1] + e[t]
    found = PredictionErrorBoundaries().fit(x).boundaries(x)[0]
    assert len(found) <= 10  # <= 5 per 10^4 frames (the "auto" threshold was set for ~1)


def test_segmenter_with_prediction_error_boundaries():
    X, lengths, labels, bounds = regimes(seed=0)  # invented Gaussian regimes
    model = ChangePointSegmenter(method="prediction_error").fit(X, lengths)
    ari = adjusted_rand_score(labels, model.predict(X, lengths))
    f1 = pooled_boundary_scores(bounds, model.boundaries_, margin=6)["f1"]
    print(f"prediction-error segmenter: ARI {ari:.3f}, boundary F1 {f1:.3f}")
    assert ari >= 0.7 and f1 >= 0.75
    meta, arrays = model.to_state()
    rebuilt = ChangePointSegmenter.from_state(json.loads(json.dumps(meta)), arrays)
    np.testing.assert_array_equal(rebuilt.predict(X, lengths), model.predict(X, lengths))


def test_state_round_trip_and_bad_input():
    x, _ = switching_ar(2, n_segments=6)
    pe = PredictionErrorBoundaries(order=3, memory_s=1.0).fit(x, [300, len(x) - 300])
    meta, arrays = pe.to_state()
    rebuilt = PredictionErrorBoundaries.from_state(json.loads(json.dumps(meta)), arrays)
    np.testing.assert_array_equal(rebuilt.prediction_error(x), pe.prediction_error(x))
    with pytest.raises(InputError, match="order must be a whole number >= 1"):
        PredictionErrorBoundaries(order=0).fit(x)
    with pytest.raises(InputError, match="min_duration_s must be a positive"):
        PredictionErrorBoundaries(min_duration_s=-1).fit(x)
    with pytest.raises(InputError, match="threshold must be a positive number"):
        PredictionErrorBoundaries(threshold=-2).fit(x)
    with pytest.raises(InputError, match=r"session 1 has 3 frames"):
        PredictionErrorBoundaries().fit(x[:303], [300, 3])
    with pytest.raises(NotFittedError):
        PredictionErrorBoundaries().boundaries(x)
    with pytest.raises(InputError, match="fitted on 6 features but got 2"):
        pe.boundaries(x[:, :2])
