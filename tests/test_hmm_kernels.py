"""HMM recursions on textbook worked examples, through the categorical (log B) path."""

from __future__ import annotations

import numpy as np
import pytest

from ethoscribe.errors import InputError
from ethoscribe.segment._hmm_kernels import (
    forward_backward_log,
    forward_filter_log,
    viterbi_log,
)

# Ice cream (Jurafsky & Martin, Speech and Language Processing, 3rd ed. draft, Appendix A;
# parameters from memory): states HOT=0, COLD=1; observations are 1..3 ice creams.
ICE_START = np.array([0.8, 0.2])
ICE_TRANS = np.array([[0.6, 0.4], [0.5, 0.5]])
ICE_EMIT = np.array([[0.2, 0.4, 0.4], [0.5, 0.4, 0.1]])
ICE_OBS = np.array([3, 1, 3]) - 1

# Umbrella world (Russell & Norvig, AIMA 3rd ed., ch. 15): RAIN=0, NO RAIN=1.
RAIN_TRANS = np.array([[0.7, 0.3], [0.3, 0.7]])
RAIN_EMIT = np.array([[0.1, 0.9], [0.8, 0.2]])  # columns: no umbrella, umbrella

# Occasionally dishonest casino (Durbin, Eddy, Krogh & Mitchison 1998; from memory):
# FAIR=0, LOADED=1.
CASINO_START = np.array([0.5, 0.5])
CASINO_TRANS = np.array([[0.95, 0.05], [0.10, 0.90]])
CASINO_EMIT = np.array([[1 / 6] * 6, [0.1] * 5 + [0.5]])


def _log_b(emit: np.ndarray, obs: np.ndarray) -> np.ndarray:
    return np.log(emit[:, obs].T)


def test_ice_cream_forward_values_and_likelihood():
    filtered, log_scale = forward_filter_log(_log_b(ICE_EMIT, ICE_OBS), ICE_START, ICE_TRANS)
    alpha = filtered * np.exp(np.cumsum(log_scale))[:, None]
    # alpha_1 = [.32, .02], alpha_2 = [.0404, .069], alpha_3 = [.023496, .005066]
    # (Jurafsky & Martin, Appendix A, from memory)
    np.testing.assert_allclose(alpha[0], [0.32, 0.02], rtol=1e-12)
    np.testing.assert_allclose(alpha[1], [0.0404, 0.069], rtol=1e-12)
    np.testing.assert_allclose(alpha[2], [0.023496, 0.005066], rtol=1e-12)
    # P(3 1 3) = 0.028562 (Jurafsky & Martin, Appendix A, from memory)
    assert np.exp(log_scale.sum()) == pytest.approx(0.028562, rel=1e-12)
    post = forward_backward_log(_log_b(ICE_EMIT, ICE_OBS), ICE_START, ICE_TRANS)
    assert np.exp(post.log_likelihood[0]) == pytest.approx(0.028562, rel=1e-12)


def test_ice_cream_viterbi_path_and_probability():
    path, logprob = viterbi_log(_log_b(ICE_EMIT, ICE_OBS), ICE_START, ICE_TRANS)
    # HOT COLD HOT with probability 0.0128 (Jurafsky & Martin, Appendix A, from memory)
    assert path.tolist() == [0, 1, 0]
    assert np.exp(logprob[0]) == pytest.approx(0.0128, rel=1e-12)


def test_umbrella_filtering_and_smoothing():
    obs = np.array([1, 1, 0, 1, 1])  # umbrella, umbrella, none, umbrella, umbrella
    log_b = _log_b(RAIN_EMIT, obs)
    start = np.array([0.5, 0.5])  # prior .5 pushed through the symmetric model stays .5
    filtered, _ = forward_filter_log(log_b[:2], start, RAIN_TRANS)
    # filtered P(rain) 0.8182 then 0.8834 (Russell & Norvig, AIMA 3rd ed., ch. 15)
    np.testing.assert_allclose(filtered[:, 0], [0.8182, 0.8834], atol=5e-5)
    # one-step prediction 0.627 (Russell & Norvig, AIMA 3rd ed., ch. 15)
    assert (filtered[0] @ RAIN_TRANS)[0] == pytest.approx(0.627, abs=5e-4)
    post = forward_backward_log(log_b, start, RAIN_TRANS)
    # smoothed [0.8673, 0.8204, 0.3075, 0.8204, 0.8673] (Russell & Norvig, AIMA 3rd ed., ch. 15)
    np.testing.assert_allclose(
        post.gamma[:, 0], [0.8673, 0.8204, 0.3075, 0.8204, 0.8673], atol=5e-5
    )
    np.testing.assert_allclose(post.gamma.sum(axis=1), 1.0, rtol=1e-14)


def test_casino_ten_sixes_decode_loaded():
    obs = np.full(10, 5)
    path, logprob = viterbi_log(_log_b(CASINO_EMIT, obs), CASINO_START, CASINO_TRANS)
    # ten 6s decode all Loaded, log-probability ln(.5 * .5^10 * .9^9) = -8.572864
    # (Durbin, Eddy, Krogh & Mitchison 1998, parameters from memory)
    assert path.tolist() == [1] * 10
    assert logprob[0] == pytest.approx(-8.572864, abs=5e-7)
    # stationary distribution (2/3, 1/3) of the casino chain (Durbin et al. 1998, from memory)
    np.testing.assert_allclose(np.array([2 / 3, 1 / 3]) @ CASINO_TRANS, [2 / 3, 1 / 3])


def test_casino_agrees_with_hmmlearn_categorical():
    from hmmlearn.hmm import CategoricalHMM

    rng = np.random.default_rng(3)
    rolls = rng.integers(0, 6, 400)
    lengths = np.array([150, 250])
    ref = CategoricalHMM(n_components=2, init_params="", params="")
    ref.startprob_, ref.transmat_, ref.emissionprob_ = CASINO_START, CASINO_TRANS, CASINO_EMIT
    log_b = _log_b(CASINO_EMIT, rolls)
    post = forward_backward_log(log_b, CASINO_START, CASINO_TRANS, lengths)
    # reference library: hmmlearn 0.3.3 CategoricalHMM score / predict_proba / viterbi decode
    assert post.log_likelihood.sum() == pytest.approx(ref.score(rolls[:, None], lengths), 1e-12)
    np.testing.assert_allclose(post.gamma, ref.predict_proba(rolls[:, None], lengths), atol=1e-10)
    ref_lp, ref_path = ref.decode(rolls[:, None], lengths, algorithm="viterbi")
    path, lp = viterbi_log(log_b, CASINO_START, CASINO_TRANS, lengths)
    assert np.array_equal(path, ref_path)
    assert lp.sum() == pytest.approx(ref_lp, rel=1e-12)


def test_sequences_are_independent():
    log_b = _log_b(ICE_EMIT, np.r_[ICE_OBS, ICE_OBS[::-1], ICE_OBS])
    post = forward_backward_log(log_b, ICE_START, ICE_TRANS, np.array([3, 3, 3]))
    single = forward_backward_log(_log_b(ICE_EMIT, ICE_OBS), ICE_START, ICE_TRANS)
    np.testing.assert_allclose(post.log_likelihood[[0, 2]], single.log_likelihood[0], rtol=1e-14)
    np.testing.assert_allclose(post.gamma[:3], single.gamma, rtol=1e-13)
    # xi_sum has 2 frame pairs per sequence, none across the boundaries
    assert post.xi_sum.sum() == pytest.approx(6.0, rel=1e-12)
    assert post.start_sum.sum() == pytest.approx(3.0, rel=1e-12)


def test_long_sequences_with_tiny_likelihoods_stay_finite():
    rng = np.random.default_rng(0)
    log_b = rng.normal(-800.0, 50.0, size=(20_000, 5))  # exp() of these underflows
    trans = np.full((5, 5), 0.01)
    np.fill_diagonal(trans, 0.96)
    post = forward_backward_log(log_b, np.full(5, 0.2), trans, np.array([5_000, 15_000]))
    _, log_scale = forward_filter_log(log_b, np.full(5, 0.2), trans)
    assert np.isfinite(post.log_likelihood).all() and np.isfinite(log_scale).all()
    np.testing.assert_allclose(post.gamma.sum(axis=1), 1.0, rtol=1e-12)
    path, lp = viterbi_log(log_b, np.full(5, 0.2), trans)
    assert np.isfinite(lp).all() and path.min() >= 0


def test_forward_backward_last_frame_equals_filtering():
    log_b = _log_b(ICE_EMIT, np.array([0, 2, 2, 1, 0, 2]))
    post = forward_backward_log(log_b, ICE_START, ICE_TRANS)
    filtered, _ = forward_filter_log(log_b, ICE_START, ICE_TRANS)
    np.testing.assert_allclose(post.gamma[-1], filtered[-1], rtol=1e-13)


def test_shape_mismatch_is_an_input_error():
    with pytest.raises(InputError, match="do not match"):
        forward_filter_log(np.zeros((4, 3)), ICE_START, ICE_TRANS)
    with pytest.raises(InputError, match="sum to 4"):
        viterbi_log(np.zeros((4, 2)), ICE_START, ICE_TRANS, np.array([2, 3]))
