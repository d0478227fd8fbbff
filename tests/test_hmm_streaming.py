"""Frame-by-frame filtering equals the batch forward filter."""

from __future__ import annotations

import numpy as np
import pytest

from ethoscribe.errors import InputError, NotFittedError
from ethoscribe.segment.hmm import GaussianHMM
from ethoscribe.segment.streaming_hmm import HMMFilter
from test_hmm_sampling import sample_sticky_hmm


@pytest.fixture(scope="module")
def model_and_data():
    X, _, lengths = sample_sticky_hmm(seed=1, lengths=(300, 200))
    return GaussianHMM(n_states=4, n_restarts=1).fit(X, lengths), X, lengths


def test_push_matches_batch_filter_per_session(model_and_data):
    model, X, lengths = model_and_data
    batch = model.filter(X, lengths)
    live = HMMFilter(model)
    pushed = []
    for start, n in zip(np.cumsum(lengths) - lengths, lengths, strict=True):
        live.reset()
        pushed.extend(live.push(x) for x in X[start : start + n])
        assert live.n_frames == n
    np.testing.assert_allclose(np.array(pushed), batch, atol=1e-12)
    assert live.log_likelihood == pytest.approx(model.score_per_session(X, lengths)[-1], 1e-12)


def test_missing_frame_is_a_prediction_step(model_and_data):
    model, X, _ = model_and_data
    live = HMMFilter(model)
    before = live.push(X[0])
    after = live.push(np.full(X.shape[1], np.nan))
    np.testing.assert_allclose(after, before @ model.transmat_, rtol=1e-12)
    assert np.isfinite(live.log_likelihood)


def test_wrong_frames_are_refused(model_and_data):
    model, X, _ = model_and_data
    with pytest.raises(InputError, match="expected 3 features"):
        HMMFilter(model).push(X[0, :2])
    with pytest.raises(NotFittedError):
        HMMFilter(GaussianHMM())
