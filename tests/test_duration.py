"""Minimum-duration decoding: with d = 1 it is the HMM (hmmlearn 0.3.3 as the reference);
with d > 1 it equals brute-force enumeration of every path that keeps the duration rule, and
hmmlearn run on the explicitly built expanded chain (K x d states, tied emissions)."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hmmlearn.hmm import CategoricalHMM, GaussianHMM
from scipy.special import logsumexp
from scipy.stats import geom, norm

from ethoscribe.errors import InputError
from ethoscribe.segment.duration import forward_backward, viterbi, with_outlier_frames

START = np.array([0.8, 0.2])
TRANS = np.array([[0.6, 0.4], [0.5, 0.5]])
EMIT = np.array([[0.2, 0.4, 0.4], [0.5, 0.4, 0.1]])


def _reference(start=START, trans=TRANS, emit=EMIT) -> CategoricalHMM:
    hmm = CategoricalHMM(n_components=len(start), init_params="", params="")
    hmm.startprob_, hmm.transmat_, hmm.emissionprob_ = start, trans, emit
    return hmm


def _log_b(emit: np.ndarray, obs: np.ndarray) -> np.ndarray:
    return np.log(emit[:, obs].T)


def test_one_frame_minimum_is_the_hmm():
    # Jurafsky & Martin's ice-cream HMM (parameters from memory): observations 3 1 3 give
    # P(O) = 0.028562 and the Viterbi path HOT COLD HOT with probability 0.0128.
    obs = np.array([2, 0, 2])
    post = forward_backward(_log_b(EMIT, obs), START, TRANS, 1)
    path, best = viterbi(_log_b(EMIT, obs), START, TRANS, 1)
    np.testing.assert_allclose(np.exp(post.log_likelihood), 0.028562, atol=1e-6)
    np.testing.assert_array_equal(path, [0, 1, 0])
    np.testing.assert_allclose(np.exp(best), 0.0128, atol=1e-6)


def test_one_frame_minimum_equals_hmmlearn_on_many_sequences():
    rng = np.random.default_rng(0)
    K = 4
    start = rng.dirichlet(np.ones(K))
    trans = rng.dirichlet(np.ones(K), size=K) * 0.3 + 0.7 * np.eye(K)
    emit = rng.dirichlet(np.ones(6), size=K)
    lengths = np.array([200, 1, 57, 3])
    obs = rng.integers(0, 6, lengths.sum())
    post = forward_backward(_log_b(emit, obs), start, trans, 1, lengths)
    path, best = viterbi(_log_b(emit, obs), start, trans, 1, lengths)
    hmm = _reference(start, trans, emit)  # hmmlearn 0.3.3: score, posteriors, Viterbi path
    np.testing.assert_allclose(post.gamma, hmm.predict_proba(obs[:, None], lengths), atol=1e-12)
    np.testing.assert_allclose(
        post.log_likelihood.sum(), hmm.score(obs[:, None], lengths), rtol=1e-12
    )
    ref_best, ref_path = hmm.decode(obs[:, None], lengths, algorithm="viterbi")
    np.testing.assert_array_equal(path, ref_path)
    np.testing.assert_allclose(best.sum(), ref_best, rtol=1e-12)


def _runs(path) -> list[int]:
    return [len(list(g)) for _, g in itertools.groupby(path)]


def _feasible(path: tuple[int, ...], d: int, complete: bool) -> bool:
    runs = _runs(path)
    if len(runs) == 1:
        return True  # a sequence shorter than d is one bout
    return all(r >= d for r in (runs if complete else runs[:-1]))


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


@pytest.mark.parametrize("complete", [True, False])
@pytest.mark.parametrize("n_frames", [7, 2])
def test_minimum_duration_equals_brute_force(complete, n_frames):
    # Reference: every state path of the sequence enumerated; those breaking the rule dropped.
    rng = np.random.default_rng(1)
    obs = rng.integers(0, 3, n_frames)
    logE = _log_b(EMIT, obs)
    for d in (2, 3):
        paths = [
            p for p in itertools.product(range(2), repeat=n_frames) if _feasible(p, d, complete)
        ]
        probs = np.array([_path_probability(p, obs, d) for p in paths])
        post = forward_backward(logE, START, TRANS, d, last_bout_complete=complete)
        np.testing.assert_allclose(np.exp(post.log_likelihood), probs.sum(), rtol=1e-12)
        marg = np.zeros((n_frames, 2))
        for p, w in zip(paths, probs, strict=True):
            marg[np.arange(n_frames), p] += w
        np.testing.assert_allclose(post.gamma, marg / probs.sum(), atol=1e-13)
        path, best = viterbi(logE, START, TRANS, d, last_bout_complete=complete)
        np.testing.assert_allclose(np.exp(best), probs.max(), rtol=1e-12)
        np.testing.assert_array_equal(path, paths[int(probs.argmax())])
        assert _feasible(tuple(path), d, complete)


def _expanded(start, trans, emit, d):
    """The chain of (state, age) sub-states written out: sub-state k * d + j."""
    K = len(start)
    big = np.zeros((K * d, K * d))
    for k in range(K):
        for j in range(d - 1):
            big[k * d + j, k * d + j + 1] = 1.0
        for m in range(K):
            big[k * d + d - 1, m * d + (d - 1 if m == k else 0)] = trans[k, m]
    big_start = np.zeros(K * d)
    big_start[::d] = start
    return big_start, big, np.repeat(emit, d, axis=0)


def test_minimum_duration_equals_hmmlearn_on_the_expanded_chain():
    # Reference: hmmlearn's GaussianHMM on the K*d-state chain built by hand (each sub-state
    # with its state's mean and variance), posteriors summed over each state's ages. hmmlearn
    # lets a path end in any sub-state, which is last_bout_complete=False here. Continuous
    # observations: no two paths tie.
    rng = np.random.default_rng(2)
    K, d = 3, 4
    start = rng.dirichlet(np.ones(K))
    trans = rng.dirichlet(np.ones(K), size=K) * 0.4 + 0.6 * np.eye(K)
    means, sds = np.array([-1.0, 0.0, 1.5]), np.array([0.7, 1.0, 0.8])
    lengths = np.array([300, 2, 41])
    x = rng.normal(size=lengths.sum()) * 1.5
    big_start, big_trans, _ = _expanded(start, trans, np.eye(K), d)
    hmm = GaussianHMM(n_components=K * d, covariance_type="diag", init_params="", params="")
    hmm.startprob_, hmm.transmat_ = big_start, big_trans
    hmm.means_ = np.repeat(means, d)[:, None]
    hmm.covars_ = np.repeat(sds**2, d)[:, None]
    ref_post = hmm.predict_proba(x[:, None], lengths).reshape(-1, K, d).sum(axis=2)
    ref_best, ref_path = hmm.decode(x[:, None], lengths, algorithm="viterbi")
    log_b = norm.logpdf(x[:, None], means, sds)  # scipy.stats
    post = forward_backward(log_b, start, trans, d, lengths, last_bout_complete=False)
    path, best = viterbi(log_b, start, trans, d, lengths, last_bout_complete=False)
    np.testing.assert_allclose(post.gamma, ref_post, atol=1e-11)
    np.testing.assert_allclose(
        post.log_likelihood.sum(), hmm.score(x[:, None], lengths), rtol=1e-12
    )
    np.testing.assert_array_equal(path, ref_path // d)
    np.testing.assert_allclose(best.sum(), ref_best, rtol=1e-12)


def test_every_bout_keeps_the_minimum_and_probabilities_follow_the_labels():
    rng = np.random.default_rng(3)
    K, d = 5, 6
    trans = np.full((K, K), 0.05 / (K - 1)) + 0.95 * np.eye(K) - 0.05 / (K - 1) * np.eye(K)
    log_b = rng.normal(size=(2000, K)) * 3.0  # noisy evidence: plain Viterbi makes short bouts
    lengths = np.array([1500, 4, 496])
    path, _ = viterbi(log_b, np.full(K, 1 / K), trans, d, lengths)
    post = forward_backward(log_b, np.full(K, 1 / K), trans, d, lengths)
    bounds = np.cumsum(lengths)
    for piece in np.split(path, bounds[:-1]):
        runs = _runs(piece)
        assert len(runs) == 1 or min(runs) >= d
    np.testing.assert_allclose(post.gamma.sum(axis=1), 1.0, atol=1e-12)
    own = post.gamma[np.arange(len(path)), path]
    assert np.quantile(own, 0.01) > 0.05  # the labels are probable under their own model


def test_frames_the_rule_forces_to_explain_badly():
    # Bouts of evidence (10 frames) shorter than the minimum (25) with sharp states: every
    # path keeping the rule crosses frames its state explains ~800 nats worse than the other,
    # far below the smallest double. Reference: hmmlearn's log-space GaussianHMM on the
    # expanded chain (as above), with free ends.
    K, d = 2, 25
    start, trans = np.array([0.5, 0.5]), np.array([[0.9, 0.1], [0.2, 0.8]])
    means, sds = np.array([-1.0, 1.0]), np.array([0.05, 0.05])
    x = np.tile(np.repeat([-1.0, 1.0], 10), 8) + np.random.default_rng(5).normal(0, 0.05, 160)
    big_start, big_trans, _ = _expanded(start, trans, np.eye(K), d)
    hmm = GaussianHMM(n_components=K * d, covariance_type="diag", init_params="", params="")
    hmm.startprob_, hmm.transmat_ = big_start, big_trans
    hmm.means_, hmm.covars_ = np.repeat(means, d)[:, None], np.repeat(sds**2, d)[:, None]
    log_b = norm.logpdf(x[:, None], means, sds)  # scipy.stats
    post = forward_backward(log_b, start, trans, d, last_bout_complete=False)
    path, _ = viterbi(log_b, start, trans, d, last_bout_complete=False)
    ref = hmm.predict_proba(x[:, None]).reshape(-1, K, d).sum(axis=2)
    np.testing.assert_allclose(post.gamma, ref, atol=1e-9)
    np.testing.assert_allclose(post.log_likelihood[0], hmm.score(x[:, None]), rtol=1e-12)
    np.testing.assert_array_equal(path, hmm.predict(x[:, None]) // d)
    complete = forward_backward(log_b, start, trans, d)
    assert np.isfinite(complete.gamma).all()
    np.testing.assert_allclose(complete.gamma.sum(axis=1), 1.0)


def test_bad_arguments_are_named():
    with pytest.raises(InputError, match="min_frames"):
        viterbi(np.zeros((3, 2)), START, TRANS, 0)
    with pytest.raises(InputError, match="min_frames"):
        forward_backward(np.zeros((3, 2)), START, TRANS, 2.5)
    with pytest.raises(InputError, match="lengths"):
        viterbi(np.zeros((3, 2)), START, TRANS, 2, np.array([2, 2]))


def test_gaussian_hmm_labels_with_a_minimum_bout():
    from ethoscribe.segment.hmm import GaussianHMM as OwnHMM

    rng = np.random.default_rng(4)
    K, D = 3, 2
    means = rng.normal(0, 1.5, (K, D))
    covars = np.stack([np.eye(D) * v for v in (0.5, 1.0, 0.8)])
    trans = np.full((K, K), 0.1 / (K - 1)) + np.eye(K) * (0.9 - 0.1 / (K - 1))
    own = OwnHMM(n_states=K, fps=30.0)
    own.means_, own.covars_, own.startprob_, own.transmat_ = means, covars, np.full(K, 1 / K), trans
    own.n_states_, own.n_features_in_ = K, D
    lengths = np.array([400, 7, 93])
    X = rng.normal(size=(lengths.sum(), D)) * 1.5
    ref = GaussianHMM(n_components=K, covariance_type="full", init_params="", params="")
    ref.startprob_, ref.transmat_, ref.means_, ref.covars_ = own.startprob_, trans, means, covars
    labels, proba = own.predict_min_duration(X, lengths, 1)
    # hmmlearn 0.3.3 with the same parameters: Viterbi path and posteriors of the plain HMM
    np.testing.assert_array_equal(labels, ref.predict(X, lengths))
    np.testing.assert_allclose(proba, ref.predict_proba(X, lengths), atol=1e-10)
    labels, proba = own.predict_min_duration(X, lengths, 10)
    for piece in np.split(labels, np.cumsum(lengths)[:-1]):
        runs = _runs(piece)
        assert len(runs) == 1 or min(runs) >= 10
    assert len(set(labels[400:407])) == 1  # a session shorter than the minimum: one bout


def test_outlier_frames_mix_each_state_with_the_average():
    rng = np.random.default_rng(6)
    log_b = rng.normal(size=(50, 4)) * 30.0
    out = with_outlier_frames(log_b, 0.05)
    # reference: scipy.special.logsumexp of the two mixture terms, frame by frame
    mix = np.broadcast_to(logsumexp(log_b, axis=1, keepdims=True) - np.log(4), (50, 4))
    ref = logsumexp(np.stack([np.log(0.95) + log_b, np.log(0.05) + mix]), axis=0)
    np.testing.assert_allclose(out, ref, rtol=1e-12)
    np.testing.assert_array_equal(with_outlier_frames(log_b, 0.0), log_b)
    with pytest.raises(InputError, match="outlier share"):
        with_outlier_frames(log_b, 1.0)


def test_outlier_frames_let_a_short_burst_be_absorbed():
    # 6 frames far outside state 0 (800 nats) inside it, while state 1 explains state 0's
    # frames only 5 nats worse; minimum bout 20. The plain chain stretches state 1 over 20
    # frames (cost 14 x 5) rather than keep 0 (6 x 800); with outlier frames the burst costs
    # ~6 x log(0.025) and is absorbed.
    log_b = np.zeros((80, 2))
    log_b[:, 1] = -5.0
    log_b[40:46] = [-800.0, 0.0]
    trans = np.array([[0.99, 0.01], [0.01, 0.99]])
    plain, _ = viterbi(log_b, START, trans, 20)
    robust = with_outlier_frames(log_b, 0.05)
    absorbed, _ = viterbi(robust, START, trans, 20)
    assert len(_runs(plain)) == 3 and min(_runs(plain)) == 20
    assert _runs(absorbed) == [80]
    post = forward_backward(robust, START, trans, 20)
    assert post.gamma[40:46, 0].min() > 0.9


@pytest.mark.parametrize("n_first", [4, 5, 9])
def test_bout_durations_are_the_hmms_geometric_truncated_at_the_minimum(n_first):
    # A bout of the chain lasts n >= d frames with probability a^(n-d) (1 - a): the HMM's own
    # geometric duration (scipy.stats.geom with p = 1 - a) conditioned on lasting >= d, which
    # by memorylessness is the geometric shifted by d - 1, so the fitted self-transitions need
    # no renormalising. Emissions that allow one path only make the likelihood that path's.
    d, n_frames = 4, 15
    start = np.array([0.7, 0.2, 0.1])
    trans = np.array([[0.9, 0.06, 0.04], [0.1, 0.85, 0.05], [0.3, 0.3, 0.4]])
    states = np.r_[np.zeros(n_first, dtype=int), np.ones(n_frames - n_first, dtype=int)]
    log_b = np.full((n_frames, 3), -np.inf)
    log_b[np.arange(n_frames), states] = 0.0

    a0, a1 = trans[0, 0], trans[1, 1]
    expected = (
        start[0]
        * geom.pmf(n_first, 1 - a0) / geom.sf(d - 1, 1 - a0)  # first bout lasts n_first
        * trans[0, 1] / (1 - a0)  # leaves to state 1
        * geom.sf(n_frames - n_first - 1, 1 - a1) / geom.sf(d - 1, 1 - a1)  # second still on
    )  # fmt: skip
    post = forward_backward(log_b, start, trans, d)
    np.testing.assert_allclose(np.exp(post.log_likelihood), expected, rtol=1e-12)
    path, best = viterbi(log_b, start, trans, d)
    np.testing.assert_array_equal(path, states)
    np.testing.assert_allclose(np.exp(best), expected, rtol=1e-12)
