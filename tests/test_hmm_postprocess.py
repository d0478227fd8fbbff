"""Minimum bout duration and deterministic state order."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ethoscribe.errors import InputError
from ethoscribe.segment.postprocess import (
    enforce_min_bout,
    order_states_by_occupancy,
    relabel,
    runs,
)


def test_short_bout_joins_the_longer_neighbour():
    labels = np.array([0, 0, 0, 0, 1, 2, 2])
    assert enforce_min_bout(labels, 2).tolist() == [0, 0, 0, 0, 0, 2, 2]


def test_posteriors_decide_when_given():
    labels = np.array([0, 0, 0, 0, 1, 2, 2])
    prob = np.full((7, 3), 0.1)
    prob[4] = [0.1, 0.3, 0.6]  # the short bout looks more like state 2
    assert enforce_min_bout(labels, 2, probabilities=prob).tolist() == [0, 0, 0, 0, 2, 2, 2]


def test_never_across_sessions_and_invalid_frames_stay():
    labels = np.array([0, 0, 0, 1, 1, 1, 2, -1, 3, 3, 3])
    out = enforce_min_bout(labels, 2, lengths=[4, 7])
    # frame 3 ends session 0: it joins state 0, not the 1s of session 1; frame 6 cannot join
    # the invalid frame, so it joins its left neighbour; -1 is neither changed nor spread
    assert out.tolist() == [0, 0, 0, 0, 1, 1, 1, -1, 3, 3, 3]
    single = enforce_min_bout(np.array([4, 4, 5]), 5, lengths=[2, 1])
    assert single.tolist() == [4, 4, 5]  # a session that is one short bout stays


def test_chain_of_short_bouts_resolves():
    labels = np.array([0] * 6 + [1, 2, 3, 1, 2] + [4] * 6)
    out = enforce_min_bout(labels, 3)
    start, stop, _, _ = runs(out)
    assert (stop - start).min() >= 3
    assert set(np.unique(out)) <= {0, 4}


def test_bad_arguments():
    with pytest.raises(InputError, match="sum to 3"):
        enforce_min_bout(np.zeros(3, int), 2, lengths=[1, 1])
    with pytest.raises(InputError, match="probabilities"):
        enforce_min_bout(np.array([0, 3]), 2, probabilities=np.ones((2, 2)))


@settings(max_examples=150, deadline=None)
@given(
    labels=st.lists(st.integers(-1, 3), min_size=1, max_size=60),
    min_frames=st.integers(1, 6),
    cut=st.integers(0, 60),
)
def test_properties(labels, min_frames, cut):
    labels = np.array(labels)
    cut = min(cut, len(labels) - 1)
    lengths = [cut, len(labels) - cut] if cut > 0 else [len(labels)]
    out = enforce_min_bout(labels, min_frames, lengths=lengths)
    assert np.array_equal(out == -1, labels == -1)  # invalid frames exactly preserved
    ends = np.cumsum(lengths)
    for s0, s1 in zip(np.r_[0, ends[:-1]], ends, strict=True):
        # new labels come from the same session
        assert set(out[s0:s1]) <= set(labels[s0:s1])
    start, stop, lab, sess = runs(out, np.array(lengths))
    short = (stop - start < min_frames) & (lab >= 0)
    for i in np.flatnonzero(short):
        # a remaining short bout has no labelled neighbour in its session
        nbrs = [j for j in (i - 1, i + 1) if 0 <= j < len(lab) and sess[j] == sess[i]]
        assert all(lab[j] < 0 for j in nbrs)


def test_order_and_relabel():
    occupancy = np.array([5.0, 9.0, 5.0, 1.0])
    means = np.array([[1.0, 0.0], [0.0, 0.0], [0.0, 2.0], [0.0, 0.0]])
    order = order_states_by_occupancy(occupancy, means)
    assert order.tolist() == [1, 2, 0, 3]  # ties (5, 5) broken by the first mean coordinate
    assert relabel(np.array([0, 1, 2, 3, -1]), order).tolist() == [2, 0, 1, 3, -1]
