"""Gaussian emission algebra of the HMM: log-densities, sufficient statistics, M-step.

Everything is BLAS matrix products over chunks of frames, so memory stays bounded (a few MB
of temporaries) whatever the number of frames: never a (T, K, D) array.

- Full covariance: with the Cholesky factor ``Sigma_k = L_k L_k^T`` and ``P_k = L_k^{-T}``, the
  Mahalanobis term is ``||x P_k - mu_k P_k||^2``; ``x [P_1 ... P_K]`` is one (n, D) @ (D, K*D)
  product per chunk.
- Diagonal: ``sum_d (x_d - mu_d)^2 / s_d`` expanded into two (n, D) @ (D, K) products.
  Frames are first centred on the mean of the state means, which keeps the expansion accurate.
- M-step statistics: ``gamma^T X`` and, for full covariances, ``gamma^T Z`` with
  ``Z = upper-triangle of x x^T`` (n, D(D+1)/2): one product instead of K weighted scatters.
  ``Z`` depends on the frames only, so EM computes it once per fit (:func:`frame_products`)
  and reuses it in every iteration and restart instead of once per chunk and E-step.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from scipy.linalg.lapack import dtrtrs

from ethoscribe.segment._hmm_kernels import (
    Posteriors,
    _half_squared_norms,
    _upper_products,
    forward_backward_log,
)

COVARIANCE_TYPES = ("full", "diag")
_LOG_2PI = float(np.log(2.0 * np.pi))
_CHUNK_BYTES = 2**21  # ~2 MB work buffers: stays in cache, still long enough for BLAS
# Largest frame_products kept for a fit (1.1 kB a frame at D=16): 32 MB holds the screening
# subsample (20,000 frames) and the state count's quick fits (10,000). Reading them back is
# memory-bound, so it only pays while they stay in the last-level cache: measured per E-step
# at D=16, K=7, the M-step sums took 10-20 % less at 5,000-20,000 frames, about the same
# beyond. Larger fits compute the products per chunk in every E-step, with the same values.
PRODUCTS_MAX_BYTES = 2**25


class SufficientStatistics(NamedTuple):
    """Expected counts from one E-step.

    start (K,), trans (K, K), post (K,) frames per state, obs (K, D) sum of gamma x,
    obs2 (K, D, D) sum of gamma x x^T (full) or (K, D) sum of gamma x^2 (diag),
    log_likelihood (n_sequences,).
    """

    start: np.ndarray
    trans: np.ndarray
    post: np.ndarray
    obs: np.ndarray
    obs2: np.ndarray
    log_likelihood: np.ndarray


def repair_covariances(covars: np.ndarray, floor: float) -> np.ndarray:
    """Symmetrise and, where a Cholesky factorisation fails, clip eigenvalues at ``floor``."""
    covars = 0.5 * (covars + np.swapaxes(covars, 1, 2))
    try:
        np.linalg.cholesky(covars)  # all at once: the usual case, one call instead of K
        return covars
    except np.linalg.LinAlgError:
        pass
    for k in range(len(covars)):
        try:
            np.linalg.cholesky(covars[k])
        except np.linalg.LinAlgError:
            vals, vecs = np.linalg.eigh(covars[k])
            vals = np.maximum(vals, max(floor, 1e-12))
            covars[k] = (vecs * vals) @ vecs.T
    return covars


class GaussianEmission:
    """Prepared Gaussian log-densities of K states.

    Parameters
    ----------
    means : array (K, D)
    covars : array (K, D, D), symmetric positive definite (only the diagonal is read for
        ``"diag"``).
    covariance_type : {"full", "diag"}

    Examples
    --------
    >>> em = GaussianEmission(np.zeros((1, 2)), np.eye(2)[None], "full")
    >>> round(float(em.log_likelihood(np.zeros((1, 2)))[0, 0]), 6)  # -log(2 pi)
    -1.837877
    """

    def __init__(self, means: np.ndarray, covars: np.ndarray, covariance_type: str):
        means = np.asarray(means, dtype=np.float64)
        n_states, n_dims = means.shape
        self.n_states, self.n_dims = n_states, n_dims
        self.covariance_type = covariance_type
        self.center = means.mean(axis=0)
        mu = means - self.center
        if covariance_type == "full":
            chol = np.asarray_chkfinite(np.linalg.cholesky(covars))  # as solve_triangular checks
            prec = np.stack([_lower_inverse(c).T for c in chol])
            # d-major columns, proj[:, d*K + k] = P_k[:, d], so the squared norms vectorise over k
            self.proj = np.ascontiguousarray(prec.transpose(1, 2, 0).reshape(n_dims, -1))
            self.offset = np.einsum("kd,kde->ek", mu, prec).ravel()
            quad = 2.0 * np.log(np.diagonal(chol, axis1=1, axis2=2)).sum(axis=1)  # log det
            self.chunk = max(64, _CHUNK_BYTES // (8 * n_states * n_dims))
        else:
            var = np.diagonal(covars, axis1=1, axis2=2)
            inv = 1.0 / var
            self.w_sq = np.ascontiguousarray((-0.5 * inv).T)  # (D, K) for x'^2
            self.w_lin = np.ascontiguousarray((mu * inv).T)  # (D, K) for x'
            quad = np.log(var).sum(axis=1) + (mu * mu * inv).sum(axis=1)
            self.chunk = max(256, _CHUNK_BYTES // (8 * max(n_states, n_dims)))
        self.const = -0.5 * (n_dims * _LOG_2PI + quad)

    def log_likelihood(self, X: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
        """``log N(x_t | mu_k, Sigma_k)`` for every frame and state, shape (T, K)."""
        n_frames = X.shape[0]
        if out is None:
            out = np.empty((n_frames, self.n_states))
        for a in range(0, n_frames, self.chunk):
            xc = X[a : a + self.chunk] - self.center
            part = out[a : a + len(xc)]
            if self.covariance_type == "full":
                _half_squared_norms(xc @ self.proj, self.offset, self.const, self.n_dims, part)
            else:
                np.matmul(xc * xc, self.w_sq, out=part)
                part += xc @ self.w_lin
                part += self.const
        return out


def marginal_emission(
    emission_of: dict[bytes, GaussianEmission],
    means: np.ndarray,
    covars: np.ndarray,
    covariance_type: str,
    X: np.ndarray,
    hidden: np.ndarray,
    out: np.ndarray,
) -> np.ndarray:
    """``out`` (T, K) with the rows of frames that hide columns replaced by the Gaussian
    marginal of their other columns, ``log N(x_t[keep] | mu_k[keep], Sigma_k[keep, keep])``.

    The marginal of a Gaussian over a subset of its coordinates is the Gaussian of the
    sub-vector with the sub-covariance, so this is exact (no imputation). ``hidden`` (T, D)
    is True where a column of a frame is left out; each distinct pattern's emission is made
    once and kept in ``emission_of`` (reused across calls). A frame hiding every column gets
    0 for every state (it says nothing about the state).
    """
    rows = np.flatnonzero(hidden.any(axis=1))
    if len(rows) == 0:
        return out
    patterns, which = np.unique(hidden[rows], axis=0, return_inverse=True)
    for p, pattern in enumerate(patterns):
        r = rows[which.ravel() == p]
        keep = np.flatnonzero(~pattern)
        if len(keep) == 0:
            out[r] = 0.0
            continue
        key = pattern.tobytes()
        if key not in emission_of:
            sub = covars[:, keep][:, :, keep]
            emission_of[key] = GaussianEmission(means[:, keep], sub, covariance_type)
        out[r] = emission_of[key].log_likelihood(X[np.ix_(r, keep)])
    return out


def _lower_inverse(chol: np.ndarray) -> np.ndarray:
    """``chol^{-1}`` of a lower-triangular C-ordered factor: the LAPACK call that
    ``scipy.linalg.solve_triangular(chol, I, lower=True)`` makes (same values), without its
    input checks (they cost more than the solve at this size, K times per E-step)."""
    inv, info = dtrtrs(chol.T, np.eye(len(chol)), lower=0, trans=1)
    if info != 0:
        raise np.linalg.LinAlgError(f"singular Cholesky factor (trtrs info {info})")
    return inv


def frame_products(X: np.ndarray) -> np.ndarray | None:
    """``Z`` of :func:`gaussian_statistics` for every frame, shape (T, D(D+1)/2): the upper
    triangle of each ``x x^T``, or None above ``PRODUCTS_MAX_BYTES`` (then computed per chunk).

    ``X`` is the matrix the E-steps will see (same rows, same values): every entry is one
    product of two of its values, so it equals the per-chunk ``Z`` exactly.
    """
    n_frames, n_dims = X.shape
    iu, ju = np.triu_indices(n_dims)
    if n_frames * len(iu) * 8 > PRODUCTS_MAX_BYTES:
        return None
    out = np.empty((n_frames, len(iu)))
    _upper_products(np.ascontiguousarray(X, dtype=np.float64), iu, ju, out)
    return out


def gaussian_statistics(
    X: np.ndarray, gamma: np.ndarray, covariance_type: str, products: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Posterior-weighted sums ``post (K,)``, ``obs (K, D)``, ``obs2`` (as SufficientStatistics).

    ``products``: :func:`frame_products` of ``X`` (full covariance; read instead of computing
    them again; same sums, chunk by chunk as without).
    """
    n_frames, n_dims = X.shape
    post = gamma.sum(axis=0)
    obs = gamma.T @ X
    if covariance_type == "diag":
        obs2 = np.zeros_like(obs)
        chunk = max(256, _CHUNK_BYTES // (8 * n_dims))
        for a in range(0, n_frames, chunk):
            x = X[a : a + chunk]
            obs2 += gamma[a : a + chunk].T @ (x * x)
        return post, obs, obs2
    iu, ju = np.triu_indices(n_dims)
    tri = np.zeros((gamma.shape[1], len(iu)))
    chunk = max(64, _CHUNK_BYTES // (8 * len(iu)))
    buf = np.empty((min(chunk, n_frames), len(iu))) if products is None else None
    for a in range(0, n_frames, chunk):
        if products is None:
            x = X[a : a + chunk]
            z = buf[: len(x)]
            _upper_products(x, iu, ju, z)
        else:
            z = products[a : a + chunk]
        # a contiguous copy of gamma^T: OpenBLAS is ~2x slower on the transposed operand here
        tri += np.ascontiguousarray(gamma[a : a + chunk].T) @ z
    obs2 = np.empty((gamma.shape[1], n_dims, n_dims))
    obs2[:, iu, ju] = tri
    obs2[:, ju, iu] = tri
    return post, obs, obs2


def e_step_buffers(n_frames: int, n_states: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Three (T, K) work arrays for :func:`gaussian_e_step`, touched once so that EM
    iterations reuse resident memory instead of faulting in fresh pages every time."""
    return tuple(np.full((n_frames, n_states), 0.0) for _ in range(3))  # full() writes: resident


def gaussian_e_step(
    X: np.ndarray,
    lengths: np.ndarray,
    startprob: np.ndarray,
    transmat: np.ndarray,
    means: np.ndarray,
    covars: np.ndarray,
    covariance_type: str,
    work: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None,
    products: np.ndarray | None = None,
) -> tuple[SufficientStatistics, np.ndarray]:
    """One E-step: sufficient statistics and the posteriors ``gamma (T, K)``.

    ``work``: buffers from :func:`e_step_buffers`; ``gamma`` then lives in ``work[1]`` and is
    overwritten by the next call. ``products``: :func:`frame_products` of ``X``, if kept.
    """
    fb = gaussian_posteriors(X, lengths, startprob, transmat, means, covars, covariance_type, work)
    return statistics_from(X, fb, covariance_type, products), fb.gamma


def gaussian_posteriors(
    X: np.ndarray,
    lengths: np.ndarray,
    startprob: np.ndarray,
    transmat: np.ndarray,
    means: np.ndarray,
    covars: np.ndarray,
    covariance_type: str,
    work: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None,
) -> Posteriors:
    """The first half of :func:`gaussian_e_step`: posteriors, expected transitions and
    log-likelihoods, before the sums of the M-step (EM reads the log-likelihood first and
    skips those sums after its last E-step)."""
    emission = GaussianEmission(means, covars, covariance_type)
    log_b = emission.log_likelihood(X, out=None if work is None else work[0])
    fb_work = None if work is None else work[1:]
    return forward_backward_log(log_b, startprob, transmat, lengths, overwrite=True, work=fb_work)


def statistics_from(
    X: np.ndarray, fb: Posteriors, covariance_type: str, products: np.ndarray | None = None
) -> SufficientStatistics:
    """The second half of :func:`gaussian_e_step`: the M-step's sums from the posteriors."""
    post, obs, obs2 = gaussian_statistics(X, fb.gamma, covariance_type, products)
    return SufficientStatistics(fb.start_sum, fb.xi_sum, post, obs, obs2, fb.log_likelihood)


def _normalise_rows(counts: np.ndarray) -> np.ndarray:
    counts = np.maximum(counts, 0.0)
    total = counts.sum(axis=-1, keepdims=True)
    n = counts.shape[-1]
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.where(total > 0, counts / total, 1.0 / n)
    return out


def gaussian_m_step(
    stats: SufficientStatistics,
    covariance_type: str,
    min_covar: float,
    start_prior_counts: np.ndarray | float = 0.0,
    trans_prior_counts: np.ndarray | float = 0.0,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """MAP M-step: ``(startprob (K,), transmat (K, K), means (K, D), covars (K, D, D))``.

    ``*_prior_counts`` are Dirichlet pseudo-counts (concentration minus one, as hmmlearn's
    ``startprob_prior - 1``). ``min_covar`` is added to the diagonal of every covariance after
    dividing the scatter by the state's frame count (a floor, not a prior that fades with data).
    States with no frames get their means from ``obs / tiny`` = 0 and must be re-seeded by the
    caller.
    """
    startprob = _normalise_rows(stats.start + start_prior_counts)
    transmat = _normalise_rows(stats.trans + trans_prior_counts)
    n = np.maximum(stats.post, np.finfo(np.float64).tiny)
    means = stats.obs / n[:, None]
    n_dims = means.shape[1]
    if covariance_type == "diag":
        var = np.maximum(stats.obs2 / n[:, None] - means**2, 0.0) + min_covar
        covars = np.zeros((len(means), n_dims, n_dims))
        idx = np.arange(n_dims)
        covars[:, idx, idx] = var
    else:
        covars = stats.obs2 / n[:, None, None] - means[:, :, None] * means[:, None, :]
        covars = 0.5 * (covars + np.swapaxes(covars, 1, 2))
        covars += min_covar * np.eye(n_dims)
    return startprob, transmat, means, covars
