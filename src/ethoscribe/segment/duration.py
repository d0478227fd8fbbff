"""Decoding with a minimum bout duration: no bout shorter than ``min_frames``, by construction.

Merging short bouts after Viterbi decoding (``postprocess.enforce_min_bout``) leaves frames
whose own posterior gives their new label almost no probability. Here the duration rule is
part of the model instead: every state ``k`` becomes a chain of ``d = min_frames`` sub-states
``(k, 0) -> (k, 1) -> ... -> (k, d-1)``, entered only at ``(k, 0)`` (from ``(l, d-1)`` with the
HMM's ``a_lk``, ``l != k``) and left only from ``(k, d-1)``, which keeps itself with ``a_kk``.
Each bout therefore lasts at least ``d`` frames; beyond that its duration stays geometric, as
in the HMM (an explicit-duration / semi-Markov model with a shifted geometric duration, Yu
2010, Artificial Intelligence 174, 215-243). With ``d = 1`` it is exactly the HMM: the same
forward pass, likelihood, posteriors and Viterbi path.

By default a sequence must also end at age ``d-1``, so its last bout is complete too and every
bout of a sequence is at least ``d`` frames long; a sequence shorter than ``d`` frames is one
bout. Viterbi on the chain gives the labels; forward-backward on the same chain, summed over
each state's sub-states, gives every frame the probability of its state under the duration
rule, so the decoded label and its probability come from one model.

Cost: ``O(T K (K + d))`` time and ``O(T K)`` memory (numba kernels in ``_duration_kernels``).
Forward-backward runs in log space (about ``10 K`` exponentials or logarithms per frame): the
duration rule can force a path through frames its states explain very badly, and the scaled
recursion of an ordinary HMM then loses the states that matter below the smallest double.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from ethoscribe.errors import InputError
from ethoscribe.segment._duration_kernels import md_forward, md_posteriors, md_viterbi
from ethoscribe.segment._hmm_kernels import _check_chain, _row_max

OUTLIER_SHARE = 0.05
"""Default share of frames whose features are taken to say nothing about their state (see
:func:`with_outlier_frames`). On the validation bench 0.01, 0.05 and 0.2 gave the same labels
to within 0.002 ARI on four sources: it only has to be small and well above zero."""


def with_outlier_frames(log_emission: np.ndarray, share: float = OUTLIER_SHARE) -> np.ndarray:
    """Emission log-likelihoods of a model in which a share of frames are uninformative.

    ``log((1 - share) b_k(x) + share * mean_l b_l(x))``: with probability ``share`` a frame's
    features come from any state's distribution, whatever the state. Under a minimum bout
    this lets a burst of frames shorter than the minimum that looks like another state be
    absorbed by the bout around it (at ``log share`` per frame) instead of being stretched
    into a whole bout of that state, as the plain emission forces when states are sharp.

    Parameters
    ----------
    log_emission : array (T, K)
    share : float in [0, 1)

    Returns
    -------
    array (T, K)

    Examples
    --------
    >>> out = with_outlier_frames(np.array([[0.0, -np.inf]]), 0.1)  # log-likelihoods
    >>> np.exp(out).round(3).tolist()
    [[0.95, 0.05]]
    """
    if not 0.0 <= share < 1.0:
        raise InputError(f"outlier share must be in [0, 1); got {share!r}")
    log_emission = np.asarray(log_emission, dtype=np.float64)
    if share == 0.0:
        return log_emission.copy()
    frame_max = _row_max(np.ascontiguousarray(log_emission))[:, None]
    with np.errstate(divide="ignore"):
        rel = log_emission - frame_max
        mix = np.log(np.exp(rel).mean(axis=1, keepdims=True))
        return np.logaddexp(np.log1p(-share) + rel, np.log(share) + mix) + frame_max


class DurationPosteriors(NamedTuple):
    """gamma : (T, K) state posteriors per frame; log_likelihood : (n_sequences,) log of the
    probability of each sequence summed over the paths that keep the duration rule."""

    gamma: np.ndarray
    log_likelihood: np.ndarray


def _prepare(log_emission, startprob, transmat, min_frames, lengths, last_bout_complete):
    if isinstance(min_frames, bool) or not isinstance(min_frames, int | np.integer):
        raise InputError(f"min_frames must be a whole number of frames >= 1; got {min_frames!r}")
    d = int(min_frames)
    if d < 1:
        raise InputError(f"min_frames must be >= 1; got {d}")
    log_emission, startprob, transmat, starts, ends = _check_chain(
        log_emission, startprob, transmat, lengths
    )
    complete = (ends - starts >= d) & bool(last_bout_complete)
    return log_emission, startprob, transmat, starts, ends, complete, d


def _relative_log_emission(log_emission: np.ndarray, overwrite: bool) -> tuple[np.ndarray, ...]:
    """``log_b - frame max`` (smaller numbers, same decisions) and the frame maxima."""
    frame_max = _row_max(log_emission)
    out = log_emission if overwrite else np.empty_like(log_emission)
    np.subtract(log_emission, frame_max[:, None], out=out)
    return out, frame_max


def forward_backward(
    log_emission: np.ndarray,
    startprob: np.ndarray,
    transmat: np.ndarray,
    min_frames: int,
    lengths: np.ndarray | None = None,
    last_bout_complete: bool = True,
    overwrite: bool = False,
) -> DurationPosteriors:
    """State posteriors per frame under the minimum bout duration, and log-likelihoods.

    Parameters
    ----------
    log_emission : array (T, K)
        ``log P(obs_t | state k)``.
    startprob : array (K,); transmat : array (K, K), rows sum to one.
    min_frames : int
        Shortest bout ``d`` (frames); 1 is the plain HMM.
    lengths : int array (n_sequences,), optional
        Sequences stacked along the frame axis; no bout crosses a boundary.
    last_bout_complete : bool
        Require the last bout of a sequence to be ``d`` frames long too (sequences shorter
        than ``d`` are one bout either way).
    overwrite : bool
        Reuse ``log_emission`` as a work buffer (its content is destroyed).

    Returns
    -------
    DurationPosteriors
        ``gamma (T, K)`` (rows sum to one), ``log_likelihood (n_sequences,)``.

    Examples
    --------
    >>> log_b = np.log([[.9, .1], [.1, .9], [.9, .1]])
    >>> post = forward_backward(log_b, np.array([.5, .5]), np.full((2, 2), .5), 3)
    >>> post.gamma.round(3).tolist()  # one bout of 3 frames: state 0 or state 1
    [[0.9, 0.1], [0.9, 0.1], [0.9, 0.1]]
    """
    log_emission, startprob, transmat, starts, ends, complete, d = _prepare(
        log_emission, startprob, transmat, min_frames, lengths, last_bout_complete
    )
    log_b, frame_max = _relative_log_emission(log_emission, overwrite)
    trans_in, stay = _entry_matrix(transmat, d)
    with np.errstate(divide="ignore"):
        log_start, log_stay = np.log(startprob), np.log(stay)
    entry, last, gamma = np.empty_like(log_b), np.empty_like(log_b), np.empty_like(log_b)
    shift, log_z = np.empty(len(log_b)), np.empty(len(starts))
    args = (d, starts, ends, complete, entry, last, shift, log_z)
    md_forward(log_b, log_start, trans_in, log_stay, *args)
    md_posteriors(log_b, trans_in, log_stay, *args, gamma)
    log_likelihood = log_z + np.add.reduceat(frame_max, starts)
    return DurationPosteriors(gamma, log_likelihood)


def viterbi(
    log_emission: np.ndarray,
    startprob: np.ndarray,
    transmat: np.ndarray,
    min_frames: int,
    lengths: np.ndarray | None = None,
    last_bout_complete: bool = True,
) -> tuple[np.ndarray, np.ndarray]:
    """Most probable state path with every bout at least ``min_frames`` long.

    Parameters are those of :func:`forward_backward`.

    Returns
    -------
    path : int64 array (T,); log_prob : array (n_sequences,) joint log-probability of each
    sequence with its path (-inf when no path keeps the rule).

    Examples
    --------
    >>> log_b = np.log([[.9, .1], [.9, .1], [.01, .99], [.9, .1], [.9, .1]])
    >>> sticky = np.array([[.9, .1], [.1, .9]])
    >>> viterbi(log_b, np.array([.5, .5]), sticky, 1)[0].tolist()
    [0, 0, 1, 0, 0]
    >>> viterbi(log_b, np.array([.5, .5]), sticky, 2)[0].tolist()
    [0, 0, 0, 0, 0]
    """
    log_emission, startprob, transmat, starts, ends, complete, d = _prepare(
        log_emission, startprob, transmat, min_frames, lengths, last_bout_complete
    )
    log_b, frame_max = _relative_log_emission(log_emission, overwrite=False)
    trans_in, stay = _entry_matrix(transmat, d)
    with np.errstate(divide="ignore"):
        log_start, log_in, log_stay = np.log(startprob), np.log(trans_in), np.log(stay)
    path = np.empty(len(log_b), dtype=np.int64)
    best = np.empty(len(starts))
    md_viterbi(log_b, log_start, log_in, log_stay, d, starts, ends, complete, path, best)
    return path, best + np.add.reduceat(frame_max, starts)


def _entry_matrix(transmat: np.ndarray, d: int) -> tuple[np.ndarray, np.ndarray]:
    """Transitions into age 0 (the diagonal removed when d > 1) and the self-transitions."""
    stay = np.ascontiguousarray(np.diag(transmat))
    if d == 1:
        return transmat, stay
    trans_in = transmat.copy()
    np.fill_diagonal(trans_in, 0.0)
    return trans_in, stay
