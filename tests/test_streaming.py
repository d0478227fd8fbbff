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
