"""Numba recursions of the minimum-duration chain (see :mod:`ethoscribe.segment.duration`).

State ``k`` of the HMM becomes ``d`` sub-states ``(age j, k)``, ``j = 0 .. d-1``: a bout enters
at age 0, ages one step per frame with probability 1 and, at age ``d-1`` ("at least d frames"),
stays with ``A[k, k]`` or enters another state ``l`` with ``A[k, l]``. With ``d = 1`` the single
age is both the entry and the last one, and the chain is the HMM itself.

Per frame each recursion costs ``K^2`` (entries) plus ``K * d`` (ages); arrays are laid out
(age, state) so inner loops run over contiguous states. Everything runs in log space, the
variables shifted by their maximum every frame (the shifts are kept): a young age adds the
frame's log emission (no exponential), so only entries and last ages need ``exp``/``log``.
The forward pass keeps the age-0 and age-(d-1) variables of every frame (``T x K`` each, not
``T x K x d``); the backward pass needs only those, because sub-state (j, k) at frame t is
(0, k) at frame t - j: the posterior of state k at t is that of its last age at t plus those
of entering k in the d - 1 frames up to t.

``complete[s]`` says whether sequence ``s`` must end at age ``d-1`` (its last bout is
also at least ``d`` frames long); it is False for sequences shorter than ``d``, which are then
one bout.
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, fastmath=False, nogil=True)
def _log_mat_vec(log_v, mat, out, tmp):  # pragma: no cover
    """``out[k] = log sum_i exp(log_v[i]) mat[i, k]`` with one exp per ``i`` (max shifted)."""
    n = log_v.shape[0]
    m = -np.inf
    for i in range(n):
        if log_v[i] > m:
            m = log_v[i]
    out[:] = 0.0
    if m == -np.inf:
        out[:] = -np.inf
        return
    for i in range(n):
        tmp[i] = np.exp(log_v[i] - m)
    for i in range(n):  # i outer, k inner: contiguous rows
        e_i = tmp[i]
        row = mat[i]
        for k in range(out.shape[0]):
            out[k] += e_i * row[k]
    for k in range(out.shape[0]):
        out[k] = np.log(out[k]) + m if out[k] > 0.0 else -np.inf


@njit(cache=True, fastmath=False, nogil=True)
def _log_add(a, b):  # pragma: no cover
    if a < b:
        a, b = b, a
    if b == -np.inf:
        return a
    return a + np.log1p(np.exp(b - a))


@njit(cache=True, fastmath=False, nogil=True)
def _shift_to_max(values):  # pragma: no cover
    """Subtract the largest finite value from ``values`` (d, K) and return it (0 if none)."""
    m = -np.inf
    for j in range(values.shape[0]):
        for k in range(values.shape[1]):
            if values[j, k] > m:
                m = values[j, k]
    if m == -np.inf:
        return 0.0
    for j in range(values.shape[0]):
        for k in range(values.shape[1]):
            values[j, k] -= m
    return m


@njit(cache=True, fastmath=False, nogil=True)
def md_forward(
    log_b, log_start, trans_in, log_stay, d, starts, ends, complete, entry, last, shift, log_z
):  # pragma: no cover
    """Forward pass in log space. ``entry[t]``, ``last[t]``: log forward variables of age 0
    and age d-1 minus ``shift[t]``; ``log_z[s]``: log-likelihood of sequence ``s``.

    ``trans_in`` is the transition matrix with a zero diagonal for ``d > 1`` (entries come
    from other states only) and the full matrix for ``d = 1``; ``log_stay`` its log diagonal.
    """
    n_states = log_b.shape[1]
    cur = np.empty((d, n_states))
    inflow = np.empty(n_states)
    tmp = np.empty(n_states)
    for s in range(starts.shape[0]):
        t0, t1 = starts[s], ends[s]
        cur[:] = -np.inf
        for k in range(n_states):
            cur[0, k] = log_start[k] + log_b[t0, k]
        total = 0.0
        for t in range(t0, t1):
            lb = log_b[t]
            if t > t0:
                _log_mat_vec(cur[d - 1], trans_in, inflow, tmp)
                if d > 1:
                    for k in range(n_states):
                        cur[d - 1, k] = _log_add(cur[d - 1, k] + log_stay[k], cur[d - 2, k]) + lb[k]
                    for j in range(d - 2, 0, -1):
                        for k in range(n_states):
                            cur[j, k] = cur[j - 1, k] + lb[k]
                for k in range(n_states):
                    cur[0, k] = inflow[k] + lb[k]
            total += _shift_to_max(cur)
            shift[t] = total
            entry[t] = cur[0]
            last[t] = cur[d - 1]
        acc = -np.inf
        for j in range(d - 1 if complete[s] else 0, d):
            for k in range(n_states):
                acc = _log_add(acc, cur[j, k])
        log_z[s] = acc + total


@njit(cache=True, fastmath=False, nogil=True)
def md_posteriors(
    log_b, trans_in, log_stay, d, starts, ends, complete, entry, last, shift, log_z, gamma
):  # pragma: no cover
    """Backward pass in log space; ``gamma[t, k]`` = posterior of state k at t (all ages).

    A young age is deterministic: sub-state (j, k) at t is (0, k) at t - j, so the posterior
    of state k at t is that of its last age at t plus those of entering k at t - d + 2 .. t.
    Only ages 0 and d-1 need posteriors: 2K exponentials per frame.
    """
    n_states = log_b.shape[1]
    beta = np.empty((d, n_states))
    v = np.empty(n_states)
    out = np.empty(n_states)
    tmp = np.empty(n_states)
    for s in range(starts.shape[0]):
        t0, t1 = starts[s], ends[s]
        for j in range(d):
            value = 0.0 if (j == d - 1 or not complete[s]) else -np.inf
            for k in range(n_states):
                beta[j, k] = value
        gamma[t0:t1] = 0.0
        back = 0.0  # sum of the shifts taken out of beta
        for t in range(t1 - 1, t0 - 1, -1):
            if t < t1 - 1:
                lb = log_b[t + 1]
                for k in range(n_states):
                    v[k] = beta[0, k] + lb[k]
                _log_mat_vec_rows(v, trans_in, out, tmp)
                if d > 1:
                    for k in range(n_states):
                        out[k] = _log_add(out[k], log_stay[k] + lb[k] + beta[d - 1, k])
                    for j in range(d - 1):
                        for k in range(n_states):
                            beta[j, k] = beta[j + 1, k] + lb[k]
                for k in range(n_states):
                    beta[d - 1, k] = out[k]
                back += _shift_to_max(beta)
            offset = shift[t] + back - log_z[s]
            g_t = gamma[t]
            for k in range(n_states):
                g_t[k] += np.exp(last[t, k] + beta[d - 1, k] + offset)
            if d > 1:
                stop = min(t + d - 1, t1)
                for k in range(n_states):
                    p = np.exp(entry[t, k] + beta[0, k] + offset)
                    if p > 0.0:
                        for u in range(t, stop):
                            gamma[u, k] += p
        for t in range(t0, t1):  # rows sum to one up to rounding: make it exact
            g_t = gamma[t]
            total = 0.0
            for k in range(n_states):
                total += g_t[k]
            inv = 1.0 / total if total > 0.0 else 0.0
            for k in range(n_states):
                g_t[k] *= inv


@njit(cache=True, fastmath=False, nogil=True)
def _log_mat_vec_rows(log_v, mat, out, tmp):  # pragma: no cover
    """``out[i] = log sum_k mat[i, k] exp(log_v[k])`` with one exp per ``k``."""
    n = log_v.shape[0]
    m = -np.inf
    for k in range(n):
        if log_v[k] > m:
            m = log_v[k]
    if m == -np.inf:
        out[:] = -np.inf
        return
    for k in range(n):
        tmp[k] = np.exp(log_v[k] - m)
    for i in range(out.shape[0]):
        row = mat[i]
        acc = 0.0
        for k in range(n):
            acc += row[k] * tmp[k]
        out[i] = np.log(acc) + m if acc > 0.0 else -np.inf


@njit(cache=True, fastmath=False, nogil=True)
def md_viterbi(
    log_b, log_start, log_in, log_stay, d, starts, ends, complete, path, best_logprob
):  # pragma: no cover
    """Most probable path of the chain in log space; ``log_in`` has -inf on the diagonal for
    ``d > 1``. Ties keep the lowest state index (as ``_hmm_kernels._viterbi``)."""
    n_states = log_b.shape[1]
    longest = 0
    for s in range(starts.shape[0]):
        longest = max(longest, ends[s] - starts[s])
    came_from = np.zeros((longest, n_states), dtype=np.int32)  # entered k at t from which state
    kept = np.zeros((longest, n_states), dtype=np.uint8)  # last age at t came from last age
    delta = np.empty((d, n_states))
    best_in = np.empty(n_states)
    for s in range(starts.shape[0]):
        t0, t1 = starts[s], ends[s]
        delta[:] = -np.inf
        for k in range(n_states):
            delta[0, k] = log_start[k] + log_b[t0, k]
        for t in range(t0 + 1, t1):
            bp = came_from[t - t0]
            prev_last = delta[d - 1]
            best_in[:] = -np.inf
            bp[:] = 0
            for i in range(n_states):  # strict '>' keeps the lowest state index on ties
                d_i = prev_last[i]
                row = log_in[i]
                for k in range(n_states):
                    v = d_i + row[k]
                    if v > best_in[k]:
                        best_in[k] = v
                        bp[k] = i
            lb = log_b[t]
            if d == 1:
                for k in range(n_states):
                    delta[0, k] = best_in[k] + lb[k]
                continue
            kp = kept[t - t0]
            for k in range(n_states):
                v_stay = prev_last[k] + log_stay[k]
                v_age = delta[d - 2, k]
                if v_stay > v_age:
                    kp[k] = 1
                    delta[d - 1, k] = v_stay + lb[k]
                else:
                    kp[k] = 0
                    delta[d - 1, k] = v_age + lb[k]
            for j in range(d - 2, 0, -1):
                for k in range(n_states):
                    delta[j, k] = delta[j - 1, k] + lb[k]
            for k in range(n_states):
                delta[0, k] = best_in[k] + lb[k]
        # end: the last age when the last bout must be complete, else any age
        k_best, j_best = 0, d - 1
        v_best = -np.inf
        first_age = d - 1 if complete[s] else 0
        for j in range(first_age, d):
            for k in range(n_states):
                if delta[j, k] > v_best:
                    v_best, k_best, j_best = delta[j, k], k, j
        best_logprob[s] = v_best
        k, j = k_best, j_best
        for t in range(t1 - 1, t0 - 1, -1):
            path[t] = k
            if t == t0:
                break
            if j == 0 or d == 1:
                k, j = came_from[t - t0, k], d - 1
            elif j == d - 1 and kept[t - t0, k] == 1:
                pass
            else:
                j -= 1
