"""Property tests of cleaning (hypothesis): nothing is invented in long gaps, shapes are kept,
gap filling is idempotent. Tracks are random walks with random gaps (invented data)."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from ethoscribe.clean import clean, fill_gaps
from ethoscribe.pose import PoseTracks

FPS = 30.0
SMOOTHERS = ["savgol", "median", None]


@st.composite
def gappy_tracks(draw):
    n = draw(st.integers(2, 80))
    n_kp = draw(st.integers(1, 3))
    n_dims = draw(st.sampled_from([2, 3]))
    seed = draw(st.integers(0, 2**32 - 1))
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, 1, n_kp, n_dims)).cumsum(axis=0)
    # gaps: runs of missing frames with random starts and lengths up to 40 frames
    for _ in range(draw(st.integers(0, 4))):
        k, start = draw(st.integers(0, n_kp - 1)), draw(st.integers(0, n - 1))
        x[start : start + draw(st.integers(1, 40)), 0, k] = np.nan
    return x, draw(st.sampled_from([0.0, 0.1, 0.2, 0.5])), draw(st.sampled_from(SMOOTHERS))


def long_gaps(x: np.ndarray, max_gap: int) -> np.ndarray:
    """(F, A, K) True inside runs of missing frames longer than ``max_gap`` (or at the ends)."""
    missing = np.isnan(x[..., 0])
    out = np.zeros_like(missing)
    n = missing.shape[0]
    for a in range(missing.shape[1]):
        for k in range(missing.shape[2]):
            m = missing[:, a, k]
            edge = np.diff(np.concatenate(([0], m.astype(np.int8), [0])))
            for s, e in zip(np.flatnonzero(edge == 1), np.flatnonzero(edge == -1), strict=True):
                if e - s > max_gap or s == 0 or e == n:
                    out[s:e, a, k] = True
    return out


@settings(max_examples=60, deadline=None)
@given(gappy_tracks())
def test_cleaning_never_invents_values_in_long_gaps_and_keeps_the_shape(case):
    x, max_gap_s, method = case
    tracks = PoseTracks(x, keypoints=[f"k{i}" for i in range(x.shape[2])], fps=FPS, units="mm")
    cleaned, report = clean(tracks, max_gap_s=max_gap_s, smooth=method)
    assert cleaned.coords.shape == x.shape
    assert report.invalid.shape == (x.shape[0], 1)
    never = long_gaps(x, int(np.floor(max_gap_s * FPS + 1e-9)))
    assert np.isnan(cleaned.coords[never]).all()
    np.testing.assert_array_equal(
        report.invalid[:, 0], np.isnan(cleaned.coords[..., 0]).any(-1)[:, 0]
    )


@settings(max_examples=60, deadline=None)
@given(gappy_tracks())
def test_fill_gaps_is_idempotent_and_keeps_measured_points(case):
    x, max_gap_s, _ = case
    once, _ = fill_gaps(x, FPS, max_gap_s)
    twice, filled_again = fill_gaps(once, FPS, max_gap_s)
    np.testing.assert_array_equal(once, twice)
    assert not filled_again.any()
    measured = ~np.isnan(x)
    np.testing.assert_array_equal(once[measured], x[measured])
    assert np.isnan(once[long_gaps(x, int(np.floor(max_gap_s * FPS + 1e-9)))]).all()
