"""The vertical axis of 3-D tracks: read from the tracks by default, checked when given.

Invented data: the package's simulated fish (``glass_minnow``, z up), seeds fixed below;
the same fish with the axes exchanged stand for tracks with y or x up.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from ethoscribe.errors import InputWarning
from ethoscribe.features import FeaturePipeline
from ethoscribe.features.vertical_check import (
    choose_vertical_axis,
    resolve_up_axis,
    vertical_direction,
    vertical_evidence,
    warn_vertical_axis,
)
from ethoscribe.pose import PoseTracks
from ethoscribe.simulate.session import simulate_session

SEED = 11


@pytest.fixture(scope="module")
def fish():
    tracks, _ = simulate_session("glass_minnow", duration_s=30, fps=50, seed=SEED)
    return tracks


def _exchange(tracks, a: int, b: int):
    coords = tracks.coords.copy()
    coords[..., [a, b]] = coords[..., [b, a]]
    return tracks.replace(coords=coords)


def test_evidence_by_hand():
    # two keypoints 2 apart along x and 1 along z, moving 1 per frame along x for 21 frames
    c = np.zeros((21, 1, 2, 3))
    c[:, 0, 1] = [2.0, 0.0, 1.0]
    c[..., 0] += np.arange(21)[:, None, None]
    e = vertical_evidence([PoseTracks(c, keypoints=["a", "b"], fps=30.0)])
    # spread: population sd of two values d apart is d/2; range: numpy's linear quantiles
    # of 1..21 (centroids) at 0.05 and 0.95 are 2 and 20
    assert e["spread"] == [1.0, 0.0, 0.5]
    assert np.allclose(e["range"], [18.0, 0.0, 0.0])


@pytest.mark.parametrize(("order", "up"), [((0, 1, 2), "z"), ((0, 2, 1), "y"), ((2, 1, 0), "x")])
def test_the_vertical_is_read_from_the_tracks(fish, order, up):
    turned = fish.replace(coords=fish.coords[..., list(order)].copy())
    axis, why = choose_vertical_axis([turned])
    assert axis == up and "range least" in why
    assert resolve_up_axis([turned], "auto")[0] == up
    assert resolve_up_axis([turned], "x") == ("x", "x (given)")  # a given axis is kept


def _clips_y_up(fish):
    """30 one-second clips of the fish with y up, named in order."""
    y_up = fish.coords[..., [0, 2, 1]]
    return [
        fish.replace(coords=y_up[i : i + 50].copy(), confidence=fish.confidence[i : i + 50],
                     session=f"clip{i:04d}")
        for i in range(0, 1500, 50)
    ]  # fmt: skip


def test_short_clips_that_mostly_stay_in_place_still_show_the_vertical(fish):
    # 30 one-second clips, y up: in most the fish barely moves; the quarter that travel most
    # show the floor plane (the bench's upright figure cut into 947 one-second clips likewise)
    assert choose_vertical_axis(_clips_y_up(fish))[0] == "y"


def test_no_clear_sign_keeps_z(fish):
    # a tethered animal: the body turns and bends but its centre does not travel
    still = fish.coords - np.nanmean(fish.coords, axis=2, keepdims=True)
    tethered = fish.replace(coords=still[..., [0, 2, 1]])
    assert choose_vertical_axis([tethered])[0] is None
    axis, why = resolve_up_axis([tethered], "auto")
    assert axis == "z" and why.startswith("z (assumed: the tracks give no clear sign")
    flat = fish.replace(coords=fish.coords[..., :2].copy())
    assert resolve_up_axis([flat], "auto") == ("z", "")


def test_fish_with_z_up_pass_quietly(fish):
    with warnings.catch_warnings():
        warnings.simplefilter("error", InputWarning)
        assert warn_vertical_axis([fish], "z") is None


def test_fish_with_y_up_are_named_and_the_option_silences_it(fish):
    turned = _exchange(fish, 1, 2)  # y up, as motion capture often has it
    with pytest.warns(InputWarning, match=r"range least\s+along it.*up_axis='y'"):
        assert warn_vertical_axis([turned], "z") == "y"
    with warnings.catch_warnings():
        warnings.simplefilter("error", InputWarning)
        assert warn_vertical_axis([turned], "y") is None
    with pytest.warns(InputWarning, match="up_axis='y'"):
        FeaturePipeline().fit([turned])


def test_a_fish_gives_no_sign_of_which_way_is_up(fish):
    # No floor under a swimming fish: its lowest and highest keypoints rise and fall together,
    # so the direction is not read (kept as given), upside down or not.
    assert vertical_direction([fish], "z") == (1, "")
    down = fish.replace(coords=fish.coords * [1.0, -1.0, -1.0])
    assert vertical_direction([down], "z") == (1, "")
    assert vertical_direction([fish.replace(coords=fish.coords[..., :2])], "z") == (1, "")


def test_2d_tracks_are_not_checked(fish):
    flat = fish.replace(coords=fish.coords[..., :2].copy())
    assert warn_vertical_axis([flat], "z") is None


@pytest.mark.filterwarnings("always:3-D tracks:UserWarning")  # shown by the command line
def test_command_line_sets_the_vertical_axis(fish, tmp_path, capsys):
    import json

    from ethoscribe.cli import command_line_message, main
    from ethoscribe.io import write_tidy

    short = fish.replace(coords=fish.coords[:1000], confidence=fish.confidence[:1000])
    write_tidy(_exchange(short, 1, 2), tmp_path / "fish.parquet")  # y up
    common = ["--states", "2", "--quiet", "--jobs", "1", "--no-stability-check"]
    # by default the vertical is read from the tracks, and the run says so
    assert main(["discover", str(tmp_path / "fish.parquet"), "--out", str(tmp_path / "a"),
                 *common]) == 0  # fmt: skip
    assert "--up-axis" not in capsys.readouterr().err
    features = json.loads((tmp_path / "a" / "summary.json").read_text())["features"]
    assert features["up_axis"] == "y"
    assert features["up_axis_report"].startswith("y (chosen from the tracks")
    report = (tmp_path / "a" / "report.html").read_text()
    assert "Vertical axis of the 3-D tracks: y (chosen" in report
    # an axis given against the tracks' evidence is kept, with the warning in command-line words
    assert main(["discover", str(tmp_path / "fish.parquet"), "--out", str(tmp_path / "b"),
                 "--up-axis", "z", *common]) == 0  # fmt: skip
    assert "--up-axis y" in capsys.readouterr().err
    model = (tmp_path / "b" / "model" / "model.json").read_text()
    assert '"up_axis": "z"' in model and '"up_axis_report": "z (given)"' in model
    assert command_line_message("pass up_axis='y' (command line: --up-axis y)") == (
        "pass --up-axis y"
    )
    # a swimmer shows no floor, so which way the vertical points is not read: given by hand
    assert main(["discover", str(tmp_path / "fish.parquet"), "--out", str(tmp_path / "c"),
                 "--up-direction", "down", *common]) == 0  # fmt: skip
    said = json.loads((tmp_path / "c" / "summary.json").read_text())["features"]
    assert said["up_axis_report"].endswith("; y points down (given); postures are drawn "
                                           "turned upright")  # fmt: skip


def test_labels_do_not_depend_on_which_axis_points_up(fish):
    # The same fish with y or x up give the z-up labels: every feature is taken about the
    # vertical the tracks show (the upright figure of the validation bench likewise: ARI with
    # its truth 0.555 whichever axis is up, 0.263 with y up before; benchmarks/README.md).
    from ethoscribe.segment.model import BehaviourModel

    def labels(tracks):
        model = BehaviourModel(n_states=3, random_state=0).fit([tracks])
        return model.label([tracks])["state"].to_numpy(), model.features_.up_axis

    z_up, axis = labels(fish)
    assert axis == "z"
    for order, up in (((0, 2, 1), "y"), ((2, 1, 0), "x")):
        got, axis = labels(fish.replace(coords=fish.coords[..., list(order)].copy()))
        assert axis == up
        assert np.array_equal(got, z_up)


@pytest.mark.filterwarnings("ignore:3-D tracks:UserWarning")  # the z run's, as expected
def test_a_fit_made_with_z_assumed_is_not_reused_for_tracks_with_y_up(fish, tmp_path, monkeypatch):
    # Fits made before the vertical was read from the tracks assumed z under the same settings
    # digest (and version number); rerunning such a workspace must fit again when the tracks
    # show another axis. The old state is reproduced by making both reads say z.
    import ethoscribe.segment.model as model_module
    import ethoscribe.workspace.runs as runs_module
    from ethoscribe.io import write_tidy
    from ethoscribe.workspace import discover

    short = fish.replace(coords=fish.coords[:1000], confidence=fish.confidence[:1000])
    write_tidy(_exchange(short, 1, 2), tmp_path / "fish.parquet")  # y up
    run = {"out": tmp_path / "ws", "states": 2, "stability": False, "progress": False, "jobs": 1}
    with monkeypatch.context() as m:
        for module in (model_module, runs_module):
            m.setattr(module, "resolve_up_axis", lambda s, up: ("z", ""), raising=False)
        assert discover(tmp_path / "fish.parquet", **run).model().features_.up_axis == "z"
    assert discover(tmp_path / "fish.parquet", **run).model().features_.up_axis == "y"


def test_the_study_preview_reads_enough_short_clips_to_see_the_vertical(fish, tmp_path):
    # The new-study panel's preview read the first two sessions only: two one-second clips
    # give no sign (z assumed) where discover, reading all, finds y. It now reads on until two
    # minutes of tracks (at most 50 sessions).
    from ethoscribe.io import write_tidy
    from ethoscribe.workspace.preview import preview_study

    clips = _clips_y_up(fish)
    assert choose_vertical_axis(clips[:2])[0] is None  # what two clips show
    for clip in clips:
        write_tidy(clip, tmp_path / f"{clip.session}.csv")
    info = preview_study(tmp_path, fps=50)
    assert info["up_axis_auto"] == "y" and info["up_axis"] == "y"
