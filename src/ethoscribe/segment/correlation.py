"""How many frames count as one independent observation: autocorrelation of the HMM residuals.

A Gaussian HMM treats every frame as an independent draw from its state's Gaussian. Windowed
features (band amplitudes smoothed over two cycles, low-passed speeds, smoothed keypoints)
make successive frames far from independent, so a run of frames slightly better explained by
another state adds up to strong evidence for a switch. The *integrated autocorrelation time*
``tau`` of the residuals (each frame minus its decoded state's mean, whitened by that state's
covariance) says how many frames carry the information of one independent frame: ``n``
correlated frames hold about as much as ``n / tau`` independent ones (Sokal 1997, "Monte Carlo
methods in statistical mechanics", section 3; the effective sample size of MCMC). Weighting
every frame's emission log-likelihood by ``1 / tau`` (a tempered, or power, likelihood) makes the
decoding count evidence at that rate. ``BehaviourModel(frame_weight="autocorrelation")`` uses
it; benchmarks/README.md ("Frames weighted by the residuals' autocorrelation") has the bench.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ethoscribe.errors import InputError

# Sokal's window constant: sum the autocorrelation up to the first lag M >= C * tau(M). 5 is
# his recommendation for autocorrelations close to exponential (bias of order exp(-C)).
SOKAL_C = 5.0


def pooled_autocorrelation(
    residuals: np.ndarray, lengths: Sequence[int] | np.ndarray, max_lag: int
) -> np.ndarray:
    """Autocorrelation at lags 0..``max_lag`` of residuals (mean zero by construction, so not
    demeaned), pooled over columns and sequences.

    Products ``r_t . r_{t+k}`` are summed over every column and every pair of frames ``k``
    apart inside one sequence, divided by the number of such pairs (the "adjusted" estimator),
    then by the lag-0 value. Lags no sequence reaches are NaN.

    Parameters
    ----------
    residuals : (n_frames, n_columns)
    lengths : frames of each sequence (sum = n_frames)
    max_lag : int

    Examples
    --------
    >>> r = np.array([[1.0], [-1.0], [1.0], [-1.0]])
    >>> pooled_autocorrelation(r, [4], 2).tolist()
    [1.0, -1.0, 1.0]
    """
    R = np.asarray(residuals, dtype=np.float64)
    if R.ndim == 1:
        R = R[:, None]
    lengths = np.asarray(lengths, dtype=np.int64)
    if int(lengths.sum()) != len(R) or (lengths < 0).any():
        raise InputError(f"lengths must sum to the {len(R)} frames; got a sum of {lengths.sum()}")
    max_lag = int(max_lag)
    products = np.zeros(max_lag + 1)
    pairs = np.zeros(max_lag + 1)
    start = 0
    for n in lengths:
        part = R[start : start + n]
        start += n
        if n == 0:
            continue
        size = 1 << int(2 * n - 1).bit_length()  # zero-padded: no wrap-around
        f = np.fft.rfft(part, size, axis=0)
        auto = np.fft.irfft(f * np.conj(f), size, axis=0)[: min(max_lag + 1, n)].sum(axis=1)
        products[: len(auto)] += auto
        pairs[: len(auto)] += R.shape[1] * (n - np.arange(len(auto)))
    with np.errstate(invalid="ignore", divide="ignore"):
        acov = np.where(pairs > 0, products / np.maximum(pairs, 1), np.nan)
    if not acov[0] > 0:
        raise InputError("the residuals are all zero: no autocorrelation to measure")
    return acov / acov[0]


def integrated_time(rho: np.ndarray, c: float = SOKAL_C) -> float:
    """Integrated autocorrelation time ``1 + 2 sum_{k=1..M} rho(k)`` (in lags) with Sokal's
    automatic window: the smallest ``M`` with ``M >= c * tau(M)``, or the last lag given.

    For an AR(1) process with coefficient ``phi`` it is ``(1 + phi) / (1 - phi)``.

    Examples
    --------
    >>> phi = 0.5
    >>> round(integrated_time(phi ** np.arange(200)), 6)
    3.0
    """
    rho = np.asarray(rho, dtype=np.float64)
    rho = rho[: np.argmax(~np.isfinite(rho))] if not np.isfinite(rho).all() else rho
    if len(rho) == 0 or rho[0] != 1.0:
        raise InputError("rho must start with the lag-0 autocorrelation 1")
    taus = 2.0 * np.cumsum(rho) - 1.0
    inside = np.arange(len(taus)) < c * taus
    window = int(np.argmin(inside)) if not inside.all() else len(taus) - 1
    return float(max(taus[window], 1.0))


def whitened_residuals(
    X: np.ndarray, states: np.ndarray, means: np.ndarray, covars: np.ndarray
) -> np.ndarray:
    """Every frame minus its state's mean, whitened by that state's covariance (Cholesky)."""
    X = np.asarray(X, dtype=np.float64)
    states = np.asarray(states, dtype=np.int64)
    out = np.empty_like(X)
    for k in range(len(means)):
        at = states == k
        if at.any():
            chol = np.linalg.cholesky(np.asarray(covars[k], dtype=np.float64))
            out[at] = np.linalg.solve(chol, (X[at] - means[k]).T).T
    return out


def residual_time(
    X: np.ndarray,
    lengths: Sequence[int] | np.ndarray,
    states: np.ndarray,
    means: np.ndarray,
    covars: np.ndarray,
) -> float:
    """Integrated autocorrelation time (frames) of the whitened residuals of decoded frames:
    how many successive frames hold the information of one independent frame (>= 1)."""
    lengths = np.asarray(lengths, dtype=np.int64)
    residuals = whitened_residuals(X, states, means, covars)
    rho = pooled_autocorrelation(residuals, lengths, int(lengths.max()) - 1)
    return integrated_time(rho)
