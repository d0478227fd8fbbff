"""Closed-loop labelling frame by frame equals offline forward filtering of the same session.

Data: the package's simulator (invented animal), without tracking noise and with it.
"""

from __future__ import annotations

import time

import numpy as np
import pytest

from ethoscribe.clean import clean
from ethoscribe.errors import InputError
from ethoscribe.segment.model import BehaviourModel
from ethoscribe.segment.streaming import StreamingLabeller
from ethoscribe.simulate import simulate_session


@pytest.fixture(scope="module")
def fitted():
    tracks, _ = simulate_session(duration_s=40, seed=3, noise=True)
    model = BehaviourModel(
        n_states=3, features={"causal": True}, cleaning={"max_speed": 3000.0}, min_bout_s=0
    ).fit([tracks])
    return model, tracks


def test_streamed_posteriors_equal_offline_forward_filtering(fitted):
    model, tracks = fitted
    # Offline reference: causal cleaning, causal features, then the HMM's forward filter
    # (GaussianHMM.filter, itself checked against the textbook recursions and hmmlearn).
    # Lost keypoints are filled per frame in both paths (the model's keypoint filler).
    cleaned, _ = clean(tracks, model.cleaning_, causal=True)
    [feats] = model.featurise_cleaned([cleaned])
    offline = model.segmenter_.filter(feats.values[feats.valid])
    live = StreamingLabeller(model)
    streamed, valid, times = [], [], []
    for t in range(tracks.n_frames):
        start = time.perf_counter()
        [label] = live.push(tracks.coords[t], tracks.confidence[t])
        times.append(time.perf_counter() - start)
        valid.append(label.state >= 0)
        if label.state >= 0:
            streamed.append(label.posterior)
    np.testing.assert_array_equal(np.array(valid), feats.valid)
    np.testing.assert_allclose(np.array(streamed), offline, atol=1e-8)
    print(
        f"\nstreaming labeller: p50 {np.percentile(times, 50) * 1e3:.3f} ms, "
        f"p99 {np.percentile(times, 99) * 1e3:.3f} ms per frame"
    )


def test_a_model_with_non_causal_features_is_refused(fitted):
    _, tracks = fitted
    offline = BehaviourModel(n_states=2).fit([tracks])
    with pytest.raises(InputError, match="causal"):
        StreamingLabeller(offline)


def test_a_causal_model_labels_offline_as_it_streams():
    # A model fitted through the causal path (causal cleaning with the automatic speed bound
    # fixed at fitting time, causal features, forward filter) labels a new session offline the
    # same way StreamingLabeller labels it frame by frame: the promise of the docs, >= 99 %.
    train, _ = simulate_session(duration_s=60, seed=11, noise=True)
    new, _ = simulate_session(duration_s=40, seed=12, noise=True)
    model = BehaviourModel(n_states=4, causal=True).fit([train])
    assert isinstance(model.cleaning_.max_speed, float)  # fixed, so streaming can use it
    offline = model.label([new])
    live = StreamingLabeller(model)
    streamed = np.array(
        [live.push(new.coords[t], new.confidence[t])[0].state for t in range(new.n_frames)]
    )
    agree = float(np.mean(streamed == offline["state"].to_numpy()))
    print(f"\ncausal model: streamed vs offline labels agree on {agree:.2%} of frames")
    assert agree >= 0.99
    assert (offline["state"] >= 0).mean() > 0.8  # most frames scored: not a vacuous match


def test_causal_needs_a_streaming_method():
    with pytest.raises(InputError, match="causal=True"):
        BehaviourModel(method="changepoint", causal=True)._check_params()
