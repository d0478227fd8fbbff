"""Postures for the workbench (ethoscribe.postures) and the quick views under a naming
(ethoscribe.workspace.browsing)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ethoscribe.curation import Curation
from ethoscribe.errors import InputError
from ethoscribe.ethogram import bout_table, time_budget, transition_table
from ethoscribe.features import FeaturePipeline
from ethoscribe.pose import PoseTracks
from ethoscribe.postures import (
    egocentric_postures,
    evenly_spaced_frames,
    example_bouts,
    mean_postures,
    minimum_spanning_skeleton,
    posture_sums,
)
from ethoscribe.workspace.browsing import (
    bouts_for_names,
    budget_from_bouts,
    motif_overview,
    neighbour_counts,
    state_runs,
)


def _walker(seed: int = 0) -> PoseTracks:
    rng = np.random.default_rng(seed)  # invented tracks: a 3-point body walking and turning
    n = 200
    heading = np.cumsum(rng.normal(0, 0.05, n))
    body = np.array([[-1.0, 0.0], [0.0, 0.3], [1.0, 0.0]])  # tail, mid, nose
    c, s = np.cos(heading), np.sin(heading)
    rot = np.stack([np.stack([c, -s], -1), np.stack([s, c], -1)], -2)
    centre = np.cumsum(np.stack([c, s], -1) * 0.5, axis=0)
    coords = np.einsum("fij,kj->fki", rot, body) + centre[:, None]
    return PoseTracks(coords[:, None], keypoints=["tail", "mid", "nose"], fps=30, units="cm")


@pytest.mark.filterwarnings("ignore:the keypoints .* never move:UserWarning")  # a rigid body
def test_egocentric_postures_put_the_axis_along_x():
    tracks = _walker()
    pipe = FeaturePipeline(origin="tail", axis=("tail", "nose"), n_components=2).fit([tracks])
    ego = egocentric_postures(tracks, pipe)[:, 0]
    # Worked by hand: tail at the origin, nose 2 cm ahead on +x, mid 1 cm ahead and 0.3 aside,
    # in every frame, whatever the heading.
    np.testing.assert_allclose(ego[:, 0], 0.0, atol=1e-12)
    np.testing.assert_allclose(ego[:, 2], np.tile([2.0, 0.0], (len(ego), 1)), atol=1e-12)
    np.testing.assert_allclose(ego[:, 1], np.tile([1.0, 0.3], (len(ego), 1)), atol=1e-12)


def _walker_3d(seed: int = 0) -> tuple[PoseTracks, np.ndarray]:
    """Invented 3-D tracks, z up: a foot on the floor, a tail, a nose whose height rises and
    falls; the body walks and turns. Also the body-frame posture of every frame, by hand."""
    rng = np.random.default_rng(seed)
    n = 300
    heading = np.cumsum(rng.normal(0, 0.1, n))
    nose_up = rng.uniform(1.0, 3.0, n)
    body = np.zeros((n, 4, 3))  # tail, foot, mid, nose in the body frame: forward, aside, up
    body[:, 1] = [0.5, 0.4, 0.0]
    body[:, 2] = [1.0, 0.0, 1.0]
    body[:, 3, 0], body[:, 3, 2] = 2.0, nose_up
    body[:, 0, 2] = 1.0
    c, s = np.cos(heading), np.sin(heading)
    rot = np.zeros((n, 3, 3))
    rot[:, 0, 0], rot[:, 0, 1], rot[:, 1, 0], rot[:, 1, 1], rot[:, 2, 2] = c, -s, s, c, 1.0
    centre = np.cumsum(np.stack([c, s, 0 * c], -1) * 0.3, axis=0)
    coords = np.einsum("fij,fkj->fki", rot, body) + centre[:, None]
    tracks = PoseTracks(coords[:, None], keypoints=["tail", "foot", "mid", "nose"], fps=30)
    return tracks, body - body[:, :1] * [1.0, 1.0, 0.0]  # tail at the origin, heights kept


# Each a proper rotation of z-up tracks (determinant +1: no mirror image): the vertical along
# y or x, and camera coordinates (y and z growing downwards).
_TURNS = {
    "z up": ("z", [[1, 0, 0], [0, 1, 0], [0, 0, 1]]),
    "y up": ("y", [[0, 1, 0], [0, 0, 1], [1, 0, 0]]),
    "x up": ("x", [[0, 0, 1], [1, 0, 0], [0, 1, 0]]),
    "z down": ("z", [[1, 0, 0], [0, -1, 0], [0, 0, -1]]),
    "y down": ("y", [[1, 0, 0], [0, 0, -1], [0, 1, 0]]),
}


@pytest.mark.parametrize("turn", list(_TURNS))
def test_3d_postures_are_forward_sideways_up_whichever_axis_is_vertical(turn):
    # 3-D postures used to come out in the tracks' axis order (y up: sideways, height,
    # forward), so the drawings showed a body seen from behind; tracks whose vertical points
    # down were drawn upside down. Worked by hand (_walker_3d): tail at the origin, the foot
    # 0.5 ahead, 0.4 to the left and on the floor, the nose 2 ahead at its own height.
    tracks, expected = _walker_3d()
    up, matrix = _TURNS[turn]
    assert np.linalg.det(matrix) == pytest.approx(1.0)
    turned = tracks.replace(coords=tracks.coords @ np.asarray(matrix, dtype=float).T)
    pipe = FeaturePipeline(up_axis=up, origin="tail", axis=("tail", "nose")).fit([turned])
    assert pipe.up_sign_ == (-1 if "down" in turn else 1)
    assert ("points down" in pipe.up_report_) == ("down" in turn)
    ego = egocentric_postures(turned, pipe)[:, 0]
    np.testing.assert_allclose(ego, expected, atol=1e-9)
    meta, arrays = pipe.to_state()
    loaded = FeaturePipeline.from_state(json.loads(json.dumps(meta)), arrays)
    assert (loaded.up_sign_, loaded.up_report_) == (pipe.up_sign_, pipe.up_report_)
    del meta["fitted"]["up_sign_"], meta["fitted"]["up_report_"]  # saved before they were read
    assert FeaturePipeline.from_state(meta, arrays).up_sign_ == 1


def test_the_vertical_direction_given_by_hand_turns_the_drawings():
    # A body with no floor to read (it rises and falls as a whole, as a swimmer does), written
    # in camera coordinates (z down): read, there is no sign of the direction, so it stays drawn
    # upside down; given "down", it is drawn upright (worked by hand, _walker_3d).
    tracks, expected = _walker_3d()
    bob = 3.0 * np.sin(np.arange(tracks.n_frames) / 7.0)
    coords = tracks.coords.copy()
    coords[..., 2] += bob[:, None, None]
    expected = expected.copy()
    expected[..., 2] += bob[:, None]
    down = np.asarray(_TURNS["z down"][1], dtype=float)
    turned = tracks.replace(coords=coords @ down.T)
    options = {"up_axis": "z", "origin": "tail", "axis": ("tail", "nose")}
    read = FeaturePipeline(**options).fit([turned])
    assert (read.up_sign_, read.up_report_) == (1, "")
    assert not np.allclose(egocentric_postures(turned, read)[:, 0], expected)
    given = FeaturePipeline(**options, up_direction="down").fit([turned])
    assert given.up_sign_ == -1 and given.up_report_.startswith("z points down (given)")
    np.testing.assert_allclose(egocentric_postures(turned, given)[:, 0], expected, atol=1e-9)
    meta, arrays = given.to_state()
    loaded = FeaturePipeline.from_state(json.loads(json.dumps(meta)), arrays)
    assert (loaded.up_direction, loaded.up_sign_) == ("down", -1)
    with pytest.raises(InputError, match="up_direction must be 'auto', 'up' or 'down'"):
        FeaturePipeline(up_direction="-z").fit([turned])


@pytest.mark.filterwarnings("ignore:the keypoints .* never move:UserWarning")  # a rigid body
def test_egocentric_postures_refuse_other_keypoints():
    tracks = _walker()
    pipe = FeaturePipeline(n_components=2).fit([tracks])
    other = tracks.replace(keypoints=["a", "b", "c"])
    with pytest.raises(InputError, match="fitted on"):
        egocentric_postures(other, pipe)


def test_mean_postures_match_numpy_nanmean():
    rng = np.random.default_rng(1)
    P = rng.normal(size=(500, 4, 2))
    P[rng.random((500, 4)) < 0.1] = np.nan
    codes = rng.integers(-1, 3, 500)
    sums, counts = posture_sums(P, codes, 3)
    means = mean_postures(sums, counts, [[0], [1, 2]])
    # Reference: numpy's nanmean over the same frames (NaN keypoints skipped per keypoint).
    np.testing.assert_allclose(means[0], np.nanmean(P[codes == 0], axis=0))
    np.testing.assert_allclose(means[1], np.nanmean(P[(codes == 1) | (codes == 2)], axis=0))


def test_minimum_spanning_skeleton_joins_nearest_neighbours():
    # Hand-checked: points on a line are joined to their neighbours along it ...
    line = np.array([[0.0, 0], [3, 0], [1, 0], [6, 0]])
    assert minimum_spanning_skeleton(line, list("abcd")) == (("a", "c"), ("b", "c"), ("b", "d"))
    # ... and arms far apart meet at the centre (a star is the only tree of least length).
    star = np.array([[0.0, 0], [5, 0], [0, 5], [-5, 0]])
    edges = minimum_spanning_skeleton(star, ["centre", "e", "n", "w"])
    assert edges == (("centre", "e"), ("centre", "n"), ("centre", "w"))


def _bouts(**columns) -> pd.DataFrame:
    n = len(next(iter(columns.values())))
    base = {
        "session": "s1",
        "animal": "a",
        "motif": "m",
        "start_frame": np.arange(n) * 100,
        "n_frames": 10,
        "cut_before": False,
        "cut_after": False,
    }
    return pd.DataFrame({**base, **columns})


def test_example_bouts_prefer_whole_long_bouts_from_different_sessions():
    bouts = _bouts(
        session=["s1", "s1", "s2", "s3", "s3"],
        n_frames=[50, 40, 5, 30, 90],
        cut_after=[False, False, False, False, True],
    )
    chosen = example_bouts(bouts, n_examples=4)
    # s1's 50, then s3's uncut 30, then s2's 5 (one per session first), then s1's 40.
    assert chosen["n_frames"].tolist() == [50, 30, 5, 40]
    assert chosen["example"].tolist() == [0, 1, 2, 3]
    assert example_bouts(bouts.iloc[::-1], n_examples=4).equals(chosen)  # order-free


def test_example_bouts_per_motif_and_minimum_length():
    bouts = _bouts(motif=["x", "y", "x", "y"], n_frames=[1, 8, 9, 7])
    chosen = example_bouts(bouts, n_examples=1, min_frames=2)
    assert chosen[["motif", "n_frames"]].values.tolist() == [["x", 9], ["y", 8]]
    assert example_bouts(bouts, motifs=["y"])["motif"].unique().tolist() == ["y"]


def test_evenly_spaced_frames():
    assert evenly_spaced_frames(0, 3, 10).tolist() == [0, 1, 2]
    with pytest.raises(InputError):
        evenly_spaced_frames(5, 5, 3)


def _labels(states: list[list[int]]) -> pd.DataFrame:
    parts = []
    for i, seq in enumerate(states):
        n = len(seq)
        parts.append(
            pd.DataFrame(
                {
                    "session": f"s{i % 2}",
                    "animal": f"a{i // 2}",
                    "frame": np.arange(n),
                    "time_s": np.arange(n) / 10.0,
                    "state": seq,
                    "motif": "",
                    "probability": 0.9,
                }
            )
        )
    labels = pd.concat(parts, ignore_index=True)
    names = np.array(["", "motif_01", "motif_02", "motif_03", "motif_04"], dtype=object)
    labels["motif"] = names[labels["state"].to_numpy() + 1]
    return labels


@settings(max_examples=40, deadline=None)
@given(
    st.lists(st.lists(st.integers(-1, 3), min_size=2, max_size=40), min_size=1, max_size=4),
    st.lists(st.sampled_from(["x", "y", "z"]), min_size=4, max_size=4),
)
def test_views_under_any_naming_equal_the_ethogram_functions(states, names):
    labels = _labels(states)
    if (labels["state"] < 0).all():
        return
    naming = dict(enumerate(names))
    cur = Curation({k: f"motif_{k + 1:02d}" for k in range(4)})
    for motif in sorted(set(names)):
        chosen = [f"motif_{k + 1:02d}" for k, n in naming.items() if n == motif]
        if len(chosen) > 1:
            cur.merge(chosen, into=f"m_{motif}")
        else:
            cur.rename(chosen[0], f"m_{motif}")
    named = cur.apply(labels)
    expected = bout_table(named)  # reference: the ethogram's own run-length encoding
    got = bouts_for_names(state_runs(labels), cur.names)
    pd.testing.assert_frame_equal(got, expected, check_dtype=False)
    budget = time_budget(named)
    mine = budget_from_bouts(got, recordings=labels)
    pd.testing.assert_frame_equal(mine, budget, check_dtype=False)
    pairs = transition_table(expected, by=())[["from_motif", "to_motif", "count"]]
    mine = neighbour_counts(got)
    pd.testing.assert_frame_equal(mine.reset_index(drop=True), pairs, check_dtype=False)


def test_motif_overview_weights_stability_by_frames():
    labels = _labels([[0, 0, 0, 1, 2, 2]])
    bouts = bouts_for_names(state_runs(labels), {0: "x", 1: "x", 2: "y", 3: "w"})
    stability = pd.DataFrame({"state": [0, 1, 2, 3], "jaccard_seeds_mean": [1.0, 0.0, 0.5, 0.2]})
    runs = state_runs(labels)
    frames = runs.groupby("state")["n_frames"].sum().to_dict()
    table = motif_overview(bouts, {0: "x", 1: "x", 2: "y", 3: "w"}, stability, frames)
    row = table.set_index("motif")
    assert row.loc["x", "stability"] == pytest.approx(0.75)  # (3 x 1.0 + 1 x 0.0) / 4
    assert row.loc["x", "time_share"] == pytest.approx(4 / 6)
    assert row.loc["w", "n_bouts"] == 0
