"""Numba recursions of the minimum-duration chain (see :mod:`ethoscribe.segment.duration`).

State ``k`` of the HMM becomes ``d`` sub-states ``(age j, k)``, ``j = 0 .. d-1``: a bout enters
at age 0, ages one step per frame with probability 1 and, at age ``d-1`` ("at least d frames"),
stays with ``A[k, k]`` or enters another state ``l`` with ``A[k, l]``. With ``d = 1`` the single
age is both the entry and the last one, and the chain is the HMM itself.

Per frame each recursion costs ``K^2`` (entries) plus ``K * d`` (ages), arrays are laid out
(age, state) so inner loops run over contiguous states. Forward-backward is scaled as in
``_hmm_kernels`` (emissions divided by the frame maximum, forward variables normalised per
frame). The forward pass keeps only the age-0 and age-(d-1) variables of every frame
(``T x K`` each, not ``T x K x d``); the backward pass rebuilds the young ages of frame ``t``
from the entries of frames ``t - j`` and the emissions in between, since a young age is
deterministic. The posterior of frame ``t`` overwrites the entry variables of frame ``t``,
which no later (earlier-in-time) step reads.

``ends_complete[s]`` says whether sequence ``s`` must end at age ``d-1`` (its last bout is
also at least ``d`` frames long); it is False for sequences shorter than ``d``, which are then
one bout.
"""

from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, fastmath=False, nogil=True)
def md_forward(
    b, startprob, trans_in, stay, d, starts, ends, complete, entry, last, scale, z
):  # pragma: no cover
    """Scaled forward pass; ``entry[t]``, ``last[t]`` are age 0 and age d-1 (normalised).

    ``trans_in`` is the transition matrix with a zero diagonal for ``d > 1`` (entries come
    from other states only) and the full matrix for ``d = 1``; ``stay`` its diagonal.
    ``z[s]`` is the probability mass (in the scaled units) of the allowed end sub-states.
    """
    n_states = b.shape[1]
    cur = np.zeros((d, n_states))  # forward variables of frame t, before normalising
    inflow = np.empty(n_states)
    factor = np.empty(n_states)
    for s in range(starts.shape[0]):
        t0, t1 = starts[s], ends[s]
        cur[:] = 0.0
        for k in range(n_states):
            cur[0, k] = startprob[k] * b[t0, k]
        inv = 1.0
        for t in range(t0, t1):
            total = 0.0
            if t == t0:
                for k in range(n_states):
                    total += cur[0, k]
            else:  # the previous frame's normalisation is folded into this frame's factor
                b_t = b[t]
                for k in range(n_states):
                    factor[k] = b_t[k] * inv
                prev_last = cur[d - 1]
                inflow[:] = 0.0
                for i in range(n_states):  # i outer, k inner: contiguous rows
                    a_i = prev_last[i]
                    row = trans_in[i]
                    for k in range(n_states):
                        inflow[k] += a_i * row[k]
                if d > 1:
                    for k in range(n_states):
                        v = (prev_last[k] * stay[k] + cur[d - 2, k]) * factor[k]
                        cur[d - 1, k] = v
                        total += v
                    for j in range(d - 2, 0, -1):
                        older, young = cur[j - 1], cur[j]
                        for k in range(n_states):
                            v = older[k] * factor[k]
                            young[k] = v
                            total += v
                for k in range(n_states):
                    v = inflow[k] * factor[k]
                    cur[0, k] = v
                    total += v
            scale[t] = total
            inv = 1.0 / total if total > 0.0 else 0.0
            e_t, l_t = entry[t], last[t]
            for k in range(n_states):
                e_t[k] = cur[0, k] * inv
                l_t[k] = cur[d - 1, k] * inv
        acc = 0.0
        for k in range(n_states):
            acc += cur[d - 1, k] * inv
        z[s] = acc if complete[s] else 1.0


@njit(cache=True, fastmath=False, nogil=True)
def md_posteriors(
    b, trans_in, stay, d, starts, ends, complete, scale, entry, last
):  # pragma: no cover
    """Backward pass; writes the state posteriors (summed over ages) into ``entry``."""
    n_states = b.shape[1]
    beta = np.empty((d, n_states))
    w = np.empty((d, n_states))
    p = np.empty(n_states)
    gamma = np.empty(n_states)
    for s in range(starts.shape[0]):
        t0, t1 = starts[s], ends[s]
        for j in range(d):
            value = 1.0 if (j == d - 1 or not complete[s]) else 0.0
            for k in range(n_states):
                beta[j, k] = value
        for t in range(t1 - 1, t0 - 1, -1):
            if t < t1 - 1:
                inv = 1.0 / scale[t + 1] if scale[t + 1] > 0.0 else 0.0
                b_next = b[t + 1]
                for j in range(d):
                    for k in range(n_states):
                        w[j, k] = beta[j, k] * b_next[k] * inv
                w0 = w[0]
                for i in range(n_states):  # beta_t(last, i) = sum_k A_in[i, k] w(0, k) + ...
                    row = trans_in[i]
                    acc = 0.0
                    for k in range(n_states):
                        acc += row[k] * w0[k]
                    beta[d - 1, i] = acc
                if d > 1:
                    for i in range(n_states):
                        beta[d - 1, i] += stay[i] * w[d - 1, i]
                    for j in range(d - 1):
                        beta[j] = w[j + 1]
            # posterior: the last age from `last`, young ages rebuilt from earlier entries
            last_t = last[t]
            for k in range(n_states):
                gamma[k] = last_t[k] * beta[d - 1, k]
                p[k] = 1.0
            for j in range(d - 1):
                u = t - j
                if u < t0:
                    break
                e_u, b_u = entry[u], b[u]
                inv_u = 1.0 / scale[u] if scale[u] > 0.0 else 0.0
                for k in range(n_states):
                    gamma[k] += e_u[k] * p[k] * beta[j, k]
                    p[k] *= b_u[k] * inv_u
            total = 0.0
            for k in range(n_states):
                total += gamma[k]
            inv = 1.0 / total if total > 0.0 else 0.0
            out = entry[t]  # entry[t] is read above for the last time
            for k in range(n_states):
                out[k] = gamma[k] * inv


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
