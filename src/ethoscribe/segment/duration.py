"""Decoding with a minimum bout duration: no bout shorter than ``min_frames``, by construction.

Merging short bouts after Viterbi decoding (``postprocess.enforce_min_bout``) leaves frames
whose own posterior gives their new label almost no probability. Here the duration rule is
part of the model instead: every state ``k`` becomes a chain of ``d = min_frames`` sub-states
``(k, 0) -> (k, 1) -> ... -> (k, d-1)``, entered only at ``(k, 0)`` (from ``(l, d-1)`` with the
HMM's ``a_lk``, ``l != k``) and left only from ``(k, d-1)``, which keeps itself with ``a_kk``.
Each bout therefore lasts at least ``d`` frames; beyond that its duration stays geometric, as
in the HMM (an explicit-duration / semi-Markov model with a shifted geometric duration, Yu
2010, Artificial Intelligence 174, 215-243). With ``d = 1`` it is exactly the HMM: the same
forward pass, likelihood and Viterbi path.

Posteriors of the expanded model, summed over each state's sub-states, give every frame the
probability of its state under the duration rule, so the decoded label and its probability
come from one model.
"""

from __future__ import annotations

import numpy as np

from ethoscribe.errors import InputError


def _check(log_emission: np.ndarray, transmat: np.ndarray, startprob: np.ndarray, d: int):
    E = np.asarray(log_emission, dtype=np.float64)
    A = np.asarray(transmat, dtype=np.float64)
    pi = np.asarray(startprob, dtype=np.float64)
    K = A.shape[0]
    if E.ndim != 2 or E.shape[1] != K or A.shape != (K, K) or pi.shape != (K,):
        msg = (
            f"minimum-duration decoding needs log emissions (T, K), a (K, K) transition matrix "
            f"and K start probabilities; got {E.shape}, {A.shape}, {pi.shape}"
        )
        raise InputError(msg)
    if int(d) < 1:
        raise InputError(f"min_frames must be >= 1; got {d}")
    return E, A, pi, int(d)


def forward_backward(
    log_emission: np.ndarray, transmat: np.ndarray, startprob: np.ndarray, min_frames: int
) -> tuple[np.ndarray, float]:
    """Posterior of each state per frame (T, K) and the log-likelihood, under the minimum
    bout duration (scaled forward-backward over the K x d sub-states)."""
    E, A, pi, d = _check(log_emission, transmat, startprob, min_frames)
    T, K = E.shape
    if T == 0:
        return np.zeros((0, K)), 0.0
    shift = E.max(1, keepdims=True)
    B = np.exp(E - shift)  # (T, K), scaled emissions
    off = A * (1 - np.eye(K))  # entries from other states
    stay = np.diag(A).copy()
    alpha = np.zeros((T, K, d))
    scale = np.zeros(T)
    a = np.zeros((K, d))
    a[:, 0] = pi * B[0]
    c = a.sum()
    alpha[0] = a / c
    scale[0] = c
    for t in range(1, T):
        prev = alpha[t - 1]
        a = np.empty((K, d))
        last = prev[:, d - 1]
        if d == 1:
            a[:, 0] = last @ A
        else:
            a[:, 0] = last @ off
            a[:, 1:] = prev[:, :-1]
            a[:, d - 1] += last * stay
        a *= B[t][:, None]
        c = a.sum()
        alpha[t] = a / c
        scale[t] = c
    beta = np.ones((K, d))
    post = np.zeros((T, K))
    post[T - 1] = alpha[T - 1].sum(1)
    for t in range(T - 2, -1, -1):
        nb = beta * B[t + 1][:, None]  # (K, d) at t+1, times emission
        b = np.empty((K, d))
        if d == 1:
            b[:, 0] = A @ nb[:, 0]
        else:
            b[:, :-1] = nb[:, 1:]
            b[:, d - 1] = off @ nb[:, 0] + stay * nb[:, d - 1]
        beta = b / scale[t + 1]
        post[t] = (alpha[t] * beta).sum(1)
    post /= post.sum(1, keepdims=True)
    return post, float(np.log(scale).sum() + shift.sum())


def viterbi(
    log_emission: np.ndarray, transmat: np.ndarray, startprob: np.ndarray, min_frames: int
) -> tuple[np.ndarray, float]:
    """Most probable state path (T,) with every bout at least ``min_frames`` long (except
    a bout cut by the end of the sequence), and its log-probability."""
    E, A, pi, d = _check(log_emission, transmat, startprob, min_frames)
    T, K = E.shape
    if T == 0:
        return np.zeros(0, dtype=np.int64), 0.0
    with np.errstate(divide="ignore"):
        logA, logpi = np.log(A), np.log(pi)
    logoff = np.where(np.eye(K, dtype=bool), -np.inf, logA) if d > 1 else logA
    logstay = np.diag(logA).copy()
    delta = np.full((K, d), -np.inf)
    delta[:, 0] = logpi + E[0]
    entry_from = np.zeros((T, K), dtype=np.int32)  # best previous state on entering k at t
    kept = np.zeros((T, K), dtype=bool)  # (k, d-1) at t came from (k, d-1) (not (k, d-2))
    for t in range(1, T):
        cand = delta[:, d - 1][:, None] + logoff  # (from l, to k)
        entry_from[t] = cand.argmax(0)
        new = np.empty((K, d))
        new[:, 0] = cand.max(0)
        if d > 1:
            new[:, 1:] = delta[:, :-1]
            selfish = delta[:, d - 1] + logstay
            kept[t] = selfish > new[:, d - 1]
            new[:, d - 1] = np.maximum(new[:, d - 1], selfish)
        new += E[t][:, None]
        delta = new
    # a sequence may end inside a bout's minimum: any sub-state is a valid end
    k, j = np.unravel_index(np.argmax(delta), delta.shape)
    best = float(delta[k, j])
    path = np.empty(T, dtype=np.int64)
    for t in range(T - 1, -1, -1):
        path[t] = k
        if t == 0:
            break
        if j == 0:
            k, j = int(entry_from[t, k]), d - 1
        elif j == d - 1 and d > 1 and kept[t, k]:
            pass
        else:
            j -= 1
    return path, best
