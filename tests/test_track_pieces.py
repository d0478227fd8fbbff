"""Animals that leave, and trackers that cut one animal's track into pieces.

Outside reference: the joins are checked against a brute-force search over every assignment
(the Hungarian method's optimum, Kuhn 1955, equals the cheapest permutation).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from ethoscribe.errors import InputError
from ethoscribe.features import FeaturePipeline
from ethoscribe.pose import PoseTracks
from ethoscribe.simulate import simulate_session
from ethoscribe.track_pieces import join_track_pieces


def _walk(rng, n, start):
    return start + np.cumsum(rng.normal(scale=0.5, size=(n, 2)), axis=0)


def test_pieces_of_one_animal_are_joined_and_the_joins_reported():
    rng = np.random.default_rng(1)  # seed 1
    n = 200
    coords = np.full((n, 3, 2, 2), np.nan)
    a = _walk(rng, n, np.array([0.0, 0.0]))
    b = _walk(rng, n, np.array([100.0, 100.0]))
    coords[:100, 0] = a[:100, None]  # track0: the first animal until it is lost
    coords[:, 1] = b[:, None]  # track1: the other animal all along
    coords[120:, 2] = a[120:, None]  # track2: the first animal found again
    tracks = PoseTracks(coords, keypoints=["nose", "tail"], fps=10,
                        animals=["track0", "track1", "track2"])  # fmt: skip
    joined, joins = join_track_pieces(tracks)
    assert joined.animals == ("track0", "track1")
    assert [(j["piece"], j["joined_to"], j["gap_frames"]) for j in joins] == [
        ("track2", "track0", 20)  # frames 100-119 missing
    ]
    np.testing.assert_array_equal(joined.coords[120:, 0], coords[120:, 2])
    assert joined.meta["track_joins"] == joins
    # A gap longer than allowed leaves the piece an animal of its own.
    alone, none = join_track_pieces(tracks, max_gap_s=1.0)
    assert alone.n_animals == 3 and none == []
    with pytest.raises(InputError, match="max_distance must be"):
        join_track_pieces(tracks, max_distance=-1)


def test_simultaneous_restarts_take_the_cheapest_assignment():
    rng = np.random.default_rng(2)  # seed 2
    ends = rng.uniform(0, 50, size=(3, 2))
    starts = ends[[2, 0, 1]] + rng.normal(scale=0.5, size=(3, 2))
    coords = np.full((20, 6, 1, 2), np.nan)
    for i in range(3):
        coords[:8, i, 0] = ends[i]
        coords[10:, 3 + i, 0] = starts[i]
    names = [f"track{i}" for i in range(6)]
    _, joins = join_track_pieces(PoseTracks(coords, keypoints=["c"], fps=5, animals=names))
    got = sum(j["distance"] for j in joins)
    cost = np.linalg.norm(ends[:, None] - starts[None], axis=-1)
    best = min(sum(cost[i, p[i]] for i in range(3)) for p in itertools.permutations(range(3)))
    assert got == pytest.approx(best)  # brute force over all 6 assignments
    assert {(j["joined_to"], j["piece"]) for j in joins} == {
        ("track2", "track3"), ("track0", "track4"), ("track1", "track5")
    }  # fmt: skip


def test_an_animal_alone_keeps_its_own_features_when_the_other_leaves():
    tracks, _ = simulate_session(duration_s=60, n_animals=2, seed=4, noise=False)
    n = tracks.n_frames
    coords, conf = tracks.coords.copy(), tracks.confidence.copy()
    coords[n // 2 :, 1], conf[n // 2 :, 1] = np.nan, np.nan  # the second animal leaves
    left = tracks.replace(coords=coords, confidence=conf)
    pipe = FeaturePipeline(axis=("tail_base", "nose")).fit([tracks])
    assert pipe.social_
    mine, other = pipe.transform(left)
    late = slice(n // 2 + 30, n)  # past the filters' reach of the leaving
    assert mine.valid[late].mean() > 0.95  # was 0: social features voided every frame
    assert not other.valid[late].any()
    social = [i for i, c in enumerate(pipe.columns_) if "nearest" in c]
    assert len(social) == 8 and social == list(range(len(pipe.columns_) - 8, len(pipe.columns_)))
    np.testing.assert_array_equal(mine.values[late][mine.valid[late]][:, social], 0.0)
