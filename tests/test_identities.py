"""Tracks that exchange animals (a multi-animal tracker swapping identities), given back.

References: the exchanges are injected into invented sessions, so the right tracks are known
by construction (a recovery test); the kernel's median distances are checked against numpy's
``nanmedian``; the assignment step is scipy's ``linear_sum_assignment``."""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from ethoscribe.clean import CleanParams, StreamingCleaner, clean
from ethoscribe.clean import _kernels as kern
from ethoscribe.clean.steps import IdentityKeeper, relink_by_shape
from ethoscribe.errors import InputError
from ethoscribe.simulate import simulate_session


@pytest.fixture(scope="module")
def trio():
    """Invented scenario: three animals in one arena for 40 s."""
    return simulate_session(duration_s=40, n_animals=3, seed=5)[0]


def _closest_frames(tracks, i, j, n, rng):
    """``n`` frames among the tenth where animals i and j are nearest (exchanges happen as
    animals touch)."""
    centre = np.nanmean(tracks.coords, axis=2)
    d = np.linalg.norm(centre[:, i] - centre[:, j], axis=-1)
    near = np.flatnonzero(d < np.nanquantile(d, 0.1))
    return np.sort(rng.choice(near[(near > 30) & (near < len(d) - 30)], n, replace=False))


def _exchanged(tracks, events):
    """The tracks with each (frame, permutation) applied from that frame on."""
    x, c = tracks.coords.copy(), tracks.confidence.copy()
    for t, perm in events:
        x[t:], c[t:] = x[t:][:, perm], c[t:][:, perm]
    return tracks.replace(coords=x, confidence=c)


def test_exchanged_tracks_are_given_back_their_animals(trio):
    rng = np.random.default_rng(0)
    events = [(t, [1, 0, 2]) for t in _closest_frames(trio, 0, 1, 2, rng)]
    events += [(t, [0, 2, 1]) for t in _closest_frames(trio, 1, 2, 2, rng)]
    events.sort(key=lambda e: e[0])
    expected, report = clean(trio)
    assert report.params["identity_exchanges"] == 0  # nothing exchanged: nothing done
    cleaned, report = clean(_exchanged(trio, events))
    assert report.params["identity_exchanges"] == 4
    np.testing.assert_allclose(cleaned.coords, expected.coords, equal_nan=True)
    np.testing.assert_allclose(cleaned.confidence, expected.confidence, equal_nan=True)
    # the per-animal quality follows the animals too
    assert report.per_keypoint.equals(clean(trio)[1].per_keypoint)
    # kept as the file numbers them when asked
    kept, report = clean(_exchanged(trio, events), CleanParams(repair_identities=False))
    assert report.params["identity_exchanges"] == 0
    assert not np.allclose(kept.coords, expected.coords, equal_nan=True)
    with pytest.raises(InputError, match="repair_identities must be True or False"):
        CleanParams(repair_identities="no")


def test_a_cycle_of_three_and_an_exchange_while_one_track_is_lost(trio):
    step = clean(trio)[1].params["max_speed"] / trio.fps  # the jump bound, per frame
    t = int(_closest_frames(trio, 0, 1, 1, np.random.default_rng(1))[0])
    x = trio.coords.copy()
    x[t:] = x[t:][:, [2, 0, 1]]  # every track takes the next animal
    order = IdentityKeeper(3, step, 30).run(x)
    assert (order[:t] == [0, 1, 2]).all() and (order[t:] == [1, 2, 0]).all()
    # track 1 lost from 5 frames before to 20 after; track 0 leaps onto animal 1 meanwhile
    y = trio.coords.copy()
    y[t:, [0, 1]] = y[t:, [1, 0]]
    y[t - 5 : t + 20, 0 + 1] = np.nan
    order = IdentityKeeper(3, step, 30).run(y)
    assert (order[t:, :2] == [1, 0]).all() and (order[:t, :2] == [0, 1]).all()


def test_streaming_gives_the_identities_causal_cleaning_gives(trio):
    events = [(t, [1, 0, 2]) for t in _closest_frames(trio, 0, 1, 3, np.random.default_rng(2))]
    swapped = _exchanged(trio, events)
    conf = np.where(np.random.default_rng(3).random(trio.confidence.shape) < 0.05, 0.2, 0.9)
    swapped = swapped.replace(confidence=conf)
    p = CleanParams(max_speed=clean(trio)[1].params["max_speed"])
    offline, report = clean(swapped, p, causal=True)
    assert report.params["identity_exchanges"] == 3
    stream = StreamingCleaner(p, trio.keypoints, trio.fps, n_animals=3, units=trio.units)
    pushed = np.stack([stream.push(x, c) for x, c in zip(swapped.coords, conf, strict=True)])
    np.testing.assert_allclose(pushed, offline.coords, equal_nan=True)


def test_kernel_distances_equal_numpys_median():
    # Reference: numpy nanmedian over keypoints of the distances to each track's last seen
    # points (random points, a third missing; every point is seen on the frame before here)
    rng = np.random.default_rng(4)
    x = rng.normal(size=(50, 3, 5, 2))
    x[rng.random(x.shape[:3]) < 0.3] = np.nan
    last = np.full((3, 5, 2), np.nan)
    last_t = np.full((3, 5), -1, np.int64)
    dist = kern.identity_block(x, 0, last, last_t, 1, -1.0)  # floor < 0: every frame
    prev = x[:-1]
    gap = np.linalg.norm(prev[:, :, None] - x[1:, None], axis=-1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN slices
        expected = np.nanmedian(gap, axis=-1)
    np.testing.assert_allclose(dist[1:], expected, equal_nan=True)
    assert np.isnan(dist[0]).all()  # nothing seen before the first frame


def test_an_exchange_while_both_animals_are_lost_is_read_from_their_proportions(trio):
    # The trio's animals differ in size (median radius 79, 61 and 56 px): tracks 0 and 1
    # exchanged while both were lost for 1 s, too long for motion to say who is who, are
    # given back by their bodies' proportions; the frames before keep the file's numbers.
    t = int(_closest_frames(trio, 0, 1, 1, np.random.default_rng(5))[0])
    lost = trio.coords.copy()
    lost[t - 15 : t + 15, :2] = np.nan
    lost = trio.replace(coords=lost)
    swapped = _exchanged(lost, [(t, [1, 0, 2])])
    cleaned, report = clean(swapped)
    assert report.params["identity_exchanges"] == 1
    np.testing.assert_allclose(cleaned.coords, clean(lost)[0].coords, equal_nan=True)
    # causal cleaning cannot read a stretch's proportions before it has passed: kept there
    assert clean(swapped, causal=True)[1].params["identity_exchanges"] == 0
    # two animals of one build (the same body, moved aside) are not told apart by it
    twin = trio.coords.copy()
    twin[:, 1] = twin[:, 0] + np.array([300.0, 0.0])
    x = twin.copy()
    x[t:, :2] = x[t:, [1, 0]]
    x[t - 15 : t + 15, :2] = np.nan
    order, changed = relink_by_shape(x, trio.fps)
    assert changed == 0 and (order == [0, 1, 2]).all()
