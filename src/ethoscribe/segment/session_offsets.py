"""Per-session offsets inside the Gaussian HMM (``GaussianHMM(session_offsets=True)``).

Where a marker or sensor sits on an individual moves its static feature levels for a whole
session, sometimes by as much as two behaviours differ. A plain Gaussian HMM then spends its
states on individuals. Here the emission of session ``s`` in state ``k`` is

    x_t ~ N(mu_k + b_s, Sigma_k),

with ``b_s`` an offset of the session (non-zero only on the offset columns ``S``), estimated
inside EM from the state posteriors: a session that is mostly one behaviour keeps that
behaviour, because its offset is measured from each frame's own state mean, not from the
session's overall level.

**Prior (shrinkage).** ``b_s ~ N(0, psi W^-1)`` on the columns ``S``, where
``W = sum_k pi_k (Sigma_k^-1)[S, S]`` is the occupancy-weighted within-state precision: the
offsets are isotropic in within-state-whitened units, and their spread ``psi`` is estimated by
EM itself (type-II maximum likelihood, as the variance of a random intercept in a linear mixed
model; Laird & Ware 1982). The prior precision ``P_0 = W / psi`` is worth ``1 / psi`` frames of
one state: no constant is tuned, individuals that differ little are pulled towards zero, and
a data set without individual offsets drives ``psi`` (and the offsets) towards zero.

**Identifiability.** A common shift of every offset is a shift of every state mean. After each
offset step the offsets' unweighted mean (where the Gaussian prior of equal precision is
highest) is taken off the offsets and added to the state means: the likelihood is unchanged and
the prior gains, so the step keeps EM monotone.

**EM (ECM, Meng & Rubin 1993).** Per iteration: the E-step of the plain HMM on ``x_t - b_s``;
the usual M-step of start, transition, means and covariances from those frames; then, with the
new means and covariances and the same posteriors ``gamma``, the MAP offsets

    b_s = (P_0 + A_s)^-1 r_s,   A_s = sum_{t in s} sum_k gamma_tk (Sigma_k^-1)[S, S],
    r_s = sum_{t in s} sum_k gamma_tk [Sigma_k^-1 (x_t - mu_k)]_S,

(restricted to ``S``: the normal equations of a Gaussian linear model with design on ``S``),
their centring, and ``psi = sum_s (b_s^T W b_s + tr(W V_s)) / ((n_sessions - 1) |S|)`` with
``V_s = (P_0 + A_s)^-1`` (one degree of freedom goes to the centring).

**Labelling.** A session the model did not see gets its MAP offset by EM with every other
parameter fixed (at most ``LABEL_ITER`` iterations from ``b = 0``), then is decoded on
``x_t - b``. A model fitted on one session saw no spread between individuals: it is fitted and
labels as without offsets (``offset_spread_ = 0``). The causal (streaming) path cannot see a
session's future: it uses ``b = 0``, the typical individual.

**Held-out scoring.** A held-out session scored with its own MAP offset plugged in,
``log p(x | b^)``, is credited with a free shift: a block of one behaviour is then explained by
one state plus its offset. Its marginal likelihood ``log p(x) = log int p(x | b) p(b) db``
counts the offset as what it is, a draw from the prior. :func:`marginal_log_likelihood`
approximates it by Laplace's method around the MAP offset (Tierney & Kadane 1986; the
random-intercept marginal of Laird & Ware 1982 is its linear-Gaussian case). The state count
scores held-out units this way by default (:mod:`ethoscribe.segment.select`).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ethoscribe.errors import InputError
from ethoscribe.segment._hmm_fit import fit_frames, run_em
from ethoscribe.segment._hmm_gaussian import (
    e_step_buffers,
    gaussian_posteriors,
)

LABEL_ITER = 20  # EM iterations for a new session's offset (stops earlier when it settles)
LABEL_TOL = 1e-3  # ... once no offset moves by more than this many within-state SDs
# How a held-out session is scored (GaussianHMM.score_per_session, the state count): its MAP
# offset plugged in, or its offset integrated over the prior (module doc, "Held-out scoring").
OFFSET_SCORINGS = ("map", "marginal")
START_SPREAD = 1.0  # psi before the first offset step: offsets of about one within-state SD


def offset_columns(columns: Any, n_features: int) -> np.ndarray:
    """The columns that carry offsets (``None``: all), as sorted unique int indices."""
    if columns is None:
        return np.arange(n_features)
    idx = np.unique(np.asarray(columns, dtype=np.int64).ravel())
    if len(idx) == 0 or idx[0] < 0 or idx[-1] >= n_features:
        msg = (
            f"offset_columns must be indices of feature columns in [0, {n_features}); got "
            f"{list(np.asarray(columns).ravel())!r:.80}"
        )
        raise InputError(msg)
    return idx


def _precisions(covars: np.ndarray) -> np.ndarray:
    return np.linalg.inv(covars)


def _session_sums(X, gamma, lengths, sequence_session, n_sessions):
    """Per session: ``G (n_s, K)`` sum of gamma, ``S1 (n_s, K, D)`` sum of gamma x."""
    K, D = gamma.shape[1], X.shape[1]
    G = np.zeros((n_sessions, K))
    S1 = np.zeros((n_sessions, K, D))
    a = 0
    for n, s in zip(lengths, sequence_session, strict=True):
        g = gamma[a : a + n]
        G[s] += g.sum(axis=0)
        S1[s] += g.T @ X[a : a + n]
        a += n
    return G, S1


def map_offsets(
    X: np.ndarray,
    gamma: np.ndarray,
    lengths: np.ndarray,
    sequence_session: np.ndarray,
    n_sessions: int,
    means: np.ndarray,
    covars: np.ndarray,
    columns: np.ndarray,
    prior_precision: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """MAP offsets given the state posteriors: ``b (n_sessions, D)`` (zero outside
    ``columns``) and their posterior covariances ``V (n_sessions, |S|, |S|)`` (module doc).

    ``X`` are the frames without offsets; ``prior_precision`` is ``P_0 (|S|, |S|)``.
    """
    prec = _precisions(covars)
    G, S1 = _session_sums(X, gamma, lengths, sequence_session, n_sessions)
    S = columns
    A = np.einsum("sk,kij->sij", G, prec[np.ix_(np.arange(len(prec)), S, S)])
    R = S1 - G[:, :, None] * means[None]  # sum gamma (x - mu_k), (n_s, K, D)
    r = np.einsum("kij,skj->si", prec[:, S, :], R)
    H = A + prior_precision[None]
    b_S = np.linalg.solve(H, r[:, :, None])[:, :, 0]
    V = np.linalg.inv(H)
    b = np.zeros((n_sessions, X.shape[1]))
    b[:, S] = b_S
    return b, V


def within_precision(covars: np.ndarray, occupancy: np.ndarray, columns: np.ndarray):
    """``W = sum_k pi_k (Sigma_k^-1)[S, S]`` (module doc)."""
    pi = np.asarray(occupancy, dtype=np.float64)
    pi = pi / max(pi.sum(), np.finfo(np.float64).tiny)
    prec = _precisions(covars)[:, columns][:, :, columns]
    return np.einsum("k,kij->ij", pi, prec)


def offset_step(X, gamma, lengths, sequence_session, n_sessions, means, covars, occupancy,
                columns, spread):  # fmt: skip
    """One conditional maximisation of the offsets, their centring and their spread.

    Returns ``(offsets (n_s, D), means (K, D) shifted by the centring, spread, P_0)``.
    """
    W = within_precision(covars, occupancy, columns)
    P0 = W / spread
    b, V = map_offsets(X, gamma, lengths, sequence_session, n_sessions, means, covars, columns, P0)
    means = means.copy()
    if n_sessions < 2:  # one session: an offset is a shift of every state mean
        return np.zeros_like(b), means, spread, P0
    centre = b.mean(axis=0)
    b -= centre
    means += centre
    S = columns
    quad = np.einsum("si,ij,sj->", b[:, S], W, b[:, S]) + np.einsum("ij,sji->", W, V)
    spread = max(float(quad) / ((n_sessions - 1) * len(S)), 1e-12)
    return b, means, spread, W / spread


class OffsetStep:
    """The offsets' part of EM (module doc) for ``_hmm_fit.run_em``: the frames minus their
    session's offset for the E-step, the offset step after each M-step, and the offsets,
    spread and prior precision in the result."""

    def __init__(self, model, lengths: np.ndarray, sequence_session: Any, n_features: int):
        self.columns = offset_columns(model.offset_columns, n_features)
        self.sequence_session = np.asarray(sequence_session, dtype=np.int64)
        seq = self.sequence_session
        self.n_sessions = int(seq.max()) + 1 if len(seq) else 0
        self.frame_session = np.repeat(seq, lengths)
        self.offsets = np.zeros((self.n_sessions, n_features))
        self.spread, self.prior = START_SPREAD, None

    def begin(self, covars: np.ndarray, start: dict[str, Any] | None) -> None:
        """Start from ``start``'s offsets when it has them for these sessions, else from 0."""
        if start is not None and start.get("offsets") is not None:
            if len(start["offsets"]) == self.n_sessions:
                self.offsets = start["offsets"].copy()
                self.spread = float(start["offset_spread"])
        ones = np.ones(len(covars))
        self.prior = within_precision(covars, ones, self.columns) / self.spread

    def frames(self, X: np.ndarray) -> np.ndarray:
        return X - self.offsets[self.frame_session]

    def step(self, X, gamma, lengths, means, covars, post) -> np.ndarray:
        """The MAP offsets, centred, and the new spread; returns the state means shifted by
        the centring."""
        self.offsets, means, self.spread, self.prior = offset_step(
            X, gamma, lengths, self.sequence_session, self.n_sessions, means, covars, post,
            self.columns, self.spread,
        )  # fmt: skip
        return means

    def result(self) -> dict[str, Any]:
        return {
            "offsets": self.offsets,
            "offset_spread": self.spread,
            "offset_precision": self.prior,
        }


def run_offset_em(
    model, X, lengths, means, transmat, start_counts, trans_counts, bar, n_iter=None,
    start=None, shared=None, *, sequence_session,
) -> dict[str, Any]:  # fmt: skip
    """EM of the HMM with session offsets (module doc); as ``_hmm_fit.run_em``, plus
    ``offsets (n_sessions, D)``, ``offset_spread`` and ``offset_precision (|S|, |S|)`` in the
    result. ``sequence_session``: the session of every sequence of ``lengths``."""
    if shared is None or shared["X"] is not X:
        shared = fit_frames(X, "diag")  # the covariance only: the frames move with the offsets
    step = OffsetStep(model, lengths, sequence_session, means.shape[1])
    return run_em(
        model, X, lengths, means, transmat, start_counts, trans_counts, bar, n_iter, start,
        shared, offsets=step,
    )  # fmt: skip


def label_offsets(model, X: np.ndarray, lengths: np.ndarray) -> np.ndarray:
    """MAP offset of every session (sequence of ``lengths``) under the fitted ``model``, whose
    other parameters stay fixed: EM from ``b = 0`` (module doc). Shape (n_sessions, D)."""
    columns = np.asarray(model.offset_columns_, dtype=np.int64)
    n = len(lengths)
    sequence_session = np.arange(n)
    frame_session = np.repeat(sequence_session, lengths)
    b = np.zeros((n, X.shape[1]))
    if len(X) == 0 or model.offset_spread_ == 0:  # fitted on one session: offsets 0
        return b
    W = within_precision(model.covars_, np.ones(model.n_states_), columns)
    scale = np.sqrt(np.maximum(np.diag(W), 0.0))  # per column: 1 / within-state SD
    work = e_step_buffers(len(X), model.n_states_)
    for _ in range(LABEL_ITER):
        fb = gaussian_posteriors(
            X - b[frame_session], lengths, model.startprob_, model.transmat_, model.means_,
            model.covars_, model.covariance_type, work,
        )  # fmt: skip
        new, _ = map_offsets(
            X, fb.gamma, lengths, sequence_session, n, model.means_, model.covars_, columns,
            model.offset_precision_,
        )  # fmt: skip
        moved = float(np.abs((new - b)[:, columns] * scale).max(initial=0.0))
        b = new
        if moved < LABEL_TOL:
            break
    return b


def marginal_log_likelihood(
    model, X: np.ndarray, lengths: np.ndarray, offsets: np.ndarray | None = None
) -> np.ndarray:
    """Log-likelihood of every session (sequence of ``lengths``) with its offset integrated
    over its prior, by Laplace's method around the MAP offset (module doc). Shape (n_sessions,).

    With ``d = |S|`` offset columns, prior precision ``P_0`` and MAP offset ``b^``
    (:func:`label_offsets`), Laplace's method (Tierney & Kadane 1986) on
    ``f(b) = log p(x | b) + log N(b; 0, P_0^-1)`` gives

        log p(x) ~= f(b^) + (d/2) log 2 pi - 1/2 log det H
                  = log p(x | b^) - 1/2 b^T P_0 b^ + 1/2 log det P_0 - 1/2 log det H,

    with ``H = P_0 + A`` and ``A = sum_t sum_k gamma_tk (Sigma_k^-1)[S, S]`` at ``b^``: the
    matrix of the offset step's normal equations (:func:`map_offsets`), i.e. the expected
    complete-data information about ``b``. With one state ``log p(x | b)`` is quadratic in
    ``b`` and ``H`` its exact curvature, so the formula is exact: the block's frames are then
    jointly normal with mean ``mu`` and covariance ``I (x) Sigma + 11^T (x) E Psi E^T``
    (``Psi = P_0^-1`` on the columns ``S``, ``E`` their embedding), the marginal of a random
    intercept (Laird & Ware 1982). With several states the exact curvature is lower by the
    information the unknown states carry about ``b`` (Louis 1982), small where the state
    posteriors are near 0 or 1; ``H`` is then the usual EM-based approximation of it.

    A model fitted on one session (``offset_spread_ = 0``) has no offsets: its plain
    log-likelihood.

    Parameters
    ----------
    model : fitted ``GaussianHMM`` with ``session_offsets``
    X : array (n_frames, n_features); lengths : int array (n_sessions,)
    offsets : array (n_sessions, n_features), optional
        The MAP offsets when already estimated (:func:`label_offsets`); None: estimated here.
    """
    b = label_offsets(model, X, lengths) if offsets is None else offsets
    frame_session = np.repeat(np.arange(len(lengths)), lengths)
    fb = gaussian_posteriors(
        X - b[frame_session], lengths, model.startprob_, model.transmat_, model.means_,
        model.covars_, model.covariance_type,
    )  # fmt: skip
    ll = np.asarray(fb.log_likelihood, dtype=np.float64)
    if len(X) == 0 or model.offset_spread_ == 0:
        return ll
    S = np.asarray(model.offset_columns_, dtype=np.int64)
    P0 = np.asarray(model.offset_precision_, dtype=np.float64)
    G = np.add.reduceat(fb.gamma, np.cumsum(lengths) - lengths, axis=0)  # (n_sessions, K)
    H = P0[None] + np.einsum("sk,kij->sij", G, _precisions(model.covars_)[:, S][:, :, S])
    b_S = b[:, S]
    quad = np.einsum("si,ij,sj->s", b_S, P0, b_S)
    _, logdet_p0 = np.linalg.slogdet(P0)
    _, logdet_h = np.linalg.slogdet(H)
    return ll - 0.5 * quad + 0.5 * (logdet_p0 - logdet_h)
