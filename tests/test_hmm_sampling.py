"""Invented data for the HMM recovery tests: a sticky Gaussian HMM with known parameters.

Imported by the other HMM test files (``from test_hmm_sampling import sample_sticky_hmm``).
The data are simulated for recovery tests only (contract: invented data, said so).
"""

from __future__ import annotations

import numpy as np


def sample_sticky_hmm(
    seed: int,
    n_states: int = 4,
    n_features: int = 3,
    lengths: tuple[int, ...] = (600, 600, 600),
    stay: float = 0.97,
    separation: float = 4.0,
    glitch_rate: float = 0.0,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sample ``(X (T, D), true states (T,), lengths)`` from a sticky Gaussian HMM.

    Means sit on signed axes ``separation * (+-e_d)``, so every pair is at least
    ``separation * sqrt(2)`` apart; covariances are random rotations of eigenvalues in
    [0.5, 1.5]. With ``glitch_rate`` a fraction of frames is replaced by a draw from another
    state (single-frame tracking glitches).
    """
    rng = np.random.default_rng(seed)
    means = np.zeros((n_states, n_features))
    for k in range(n_states):
        means[k, k % n_features] = separation * (1 if (k // n_features) % 2 == 0 else -1)
    covs = []
    for _ in range(n_states):
        q, _ = np.linalg.qr(rng.normal(size=(n_features, n_features)))
        covs.append((q * rng.uniform(0.5, 1.5, n_features)) @ q.T)
    chol = np.linalg.cholesky(np.array(covs))
    xs, ss = [], []
    for n in lengths:
        stay_draw = rng.random(n) < stay
        jump = rng.integers(1, n_states, n)
        s = np.empty(n, dtype=np.int64)
        s[0] = rng.integers(n_states)
        for t in range(1, n):  # sampling only, not a hot path of the package
            s[t] = s[t - 1] if stay_draw[t] else (s[t - 1] + jump[t]) % n_states
        emitted = s.copy()
        if glitch_rate:
            g = rng.random(n) < glitch_rate
            emitted[g] = (s[g] + rng.integers(1, n_states, g.sum())) % n_states
        z = rng.normal(size=(n, n_features))
        xs.append(means[emitted] + np.einsum("tij,tj->ti", chol[emitted], z))
        ss.append(s)
    return np.vstack(xs), np.concatenate(ss), np.array(lengths, dtype=np.int64)


def test_sampler_has_the_requested_persistence():
    # the sampler itself: empirical self-transition frequency close to ``stay``
    _, s, _ = sample_sticky_hmm(0, lengths=(20_000,), stay=0.95)
    assert abs(np.mean(s[1:] == s[:-1]) - 0.95) < 0.01
