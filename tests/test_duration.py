"""Minimum-duration decoding: with d = 1 it is the HMM (hmmlearn 0.3.3 as the reference);
with d > 1 it equals brute-force enumeration of every path that keeps the duration rule."""

from __future__ import annotations

import itertools

import numpy as np
from hmmlearn.hmm import CategoricalHMM

from ethoscribe.segment.duration import forward_backward, viterbi

START = np.array([0.8, 0.2])
TRANS = np.array([[0.6, 0.4], [0.5, 0.5]])
EMIT = np.array([[0.2, 0.4, 0.4], [0.5, 0.4, 0.1]])


def _reference() -> CategoricalHMM:
    hmm = CategoricalHMM(n_components=2, init_params="", params="")
    hmm.startprob_, hmm.transmat_, hmm.emissionprob_ = START, TRANS, EMIT
    return hmm


def test_one_frame_minimum_is_the_hmm():
    # Jurafsky & Martin's ice-cream HMM (parameters from memory): observations 3 1 3 give
    # P(O) = 0.028562 and the Viterbi path HOT COLD HOT with probability 0.0128.
    obs = np.array([2, 0, 2])
    logE = np.log(EMIT[:, obs].T)
    post, ll = forward_backward(logE, TRANS, START, 1)
    path, best = viterbi(logE, TRANS, START, 1)
    np.testing.assert_allclose(np.exp(ll), 0.028562, atol=1e-6)
    np.testing.assert_array_equal(path, [0, 1, 0])
    np.testing.assert_allclose(np.exp(best), 0.0128, atol=1e-6)
    rng = np.random.default_rng(0)
    obs = rng.integers(0, 3, 200)
    logE = np.log(EMIT[:, obs].T)
    post, ll = forward_backward(logE, TRANS, START, 1)
    hmm = _reference()  # hmmlearn: score, posteriors and Viterbi path
    np.testing.assert_allclose(ll, hmm.score(obs[:, None]), rtol=1e-10)
    np.testing.assert_allclose(post, hmm.predict_proba(obs[:, None]), atol=1e-10)
    path, best = viterbi(logE, TRANS, START, 1)
    ref_best, ref_path = hmm.decode(obs[:, None], algorithm="viterbi")
    np.testing.assert_array_equal(path, ref_path)
    np.testing.assert_allclose(best, ref_best, rtol=1e-10)


def _feasible(path: tuple[int, ...], d: int) -> bool:
    runs = [len(list(g)) for _, g in itertools.groupby(path)]
    return all(r >= d for r in runs[:-1])  # the last bout may be cut by the end


def _path_probability(path, obs, d) -> float:
    p = START[path[0]] * EMIT[path[0], obs[0]]
    run = 1
    for t in range(1, len(path)):
        a, b = path[t - 1], path[t]
        if a == b:
            p *= 1.0 if run < d else TRANS[a, a]
            run += 1
        else:
            p *= TRANS[a, b]
            run = 1
        p *= EMIT[b, obs[t]]
    return p


def test_minimum_duration_equals_brute_force():
    rng = np.random.default_rng(1)
    obs = rng.integers(0, 3, 7)
    logE = np.log(EMIT[:, obs].T)
    for d in (2, 3):
        paths = [p for p in itertools.product(range(2), repeat=7) if _feasible(p, d)]
        probs = np.array([_path_probability(p, obs, d) for p in paths])
        post, ll = forward_backward(logE, TRANS, START, d)
        np.testing.assert_allclose(np.exp(ll), probs.sum(), rtol=1e-10)
        marg = np.zeros((7, 2))
        for p, w in zip(paths, probs, strict=True):
            marg[np.arange(7), p] += w
        np.testing.assert_allclose(post, marg / probs.sum(), atol=1e-12)
        path, best = viterbi(logE, TRANS, START, d)
        np.testing.assert_allclose(np.exp(best), probs.max(), rtol=1e-10)
        np.testing.assert_array_equal(path, paths[int(probs.argmax())])
        assert _feasible(tuple(path), d)
