"""3-D tracks whose vertical axis is not the assumed one are named before fitting.

Invented data: the package's simulated fish (``glass_minnow``, z up), seeds fixed below.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from ethoscribe.errors import InputWarning
from ethoscribe.features import FeaturePipeline
from ethoscribe.features.vertical_check import axis_profile, warn_vertical_axis
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


def test_profile_by_hand():
    # two keypoints 2 apart along x and 1 along z, moving 1 per frame along x
    c = np.zeros((5, 1, 2, 3))
    c[:, 0, 1] = [2.0, 0.0, 1.0]
    c[..., 0] += np.arange(5)[:, None, None]
    travel, extent = axis_profile([PoseTracks(c, keypoints=["a", "b"], fps=30.0)])
    assert travel.tolist() == [1.0, 0.0, 0.0] and extent.tolist() == [2.0, 0.0, 1.0]


def test_fish_with_z_up_pass_quietly(fish):
    with warnings.catch_warnings():
        warnings.simplefilter("error", InputWarning)
        assert warn_vertical_axis([fish], "z") is None


def test_fish_with_y_up_are_named_and_the_option_silences_it(fish):
    turned = _exchange(fish, 1, 2)  # y up, as motion capture often has it
    with pytest.warns(InputWarning, match=r"travel least\s+along y.*up_axis='y'"):
        assert warn_vertical_axis([turned], "z") == "y"
    with warnings.catch_warnings():
        warnings.simplefilter("error", InputWarning)
        assert warn_vertical_axis([turned], "y") is None
    with pytest.warns(InputWarning, match="up_axis='y'"):
        FeaturePipeline().fit([turned])


def test_2d_tracks_are_not_checked(fish):
    flat = fish.replace(coords=fish.coords[..., :2].copy())
    assert warn_vertical_axis([flat], "z") is None


@pytest.mark.filterwarnings("always:3-D tracks:UserWarning")  # shown by the command line
def test_command_line_sets_the_vertical_axis(fish, tmp_path, capsys):
    from ethoscribe.cli import command_line_message, main
    from ethoscribe.io import write_tidy

    short = fish.replace(coords=fish.coords[:1000], confidence=fish.confidence[:1000])
    write_tidy(_exchange(short, 1, 2), tmp_path / "fish.parquet")
    common = ["--states", "2", "--quiet", "--jobs", "1", "--no-stability-check"]
    assert main(["discover", str(tmp_path / "fish.parquet"), "--out", str(tmp_path / "a"),
                 *common]) == 0  # fmt: skip
    assert "--up-axis y" in capsys.readouterr().err  # the warning, in command-line words
    assert main(["discover", str(tmp_path / "fish.parquet"), "--out", str(tmp_path / "b"),
                 "--up-axis", "y", *common]) == 0  # fmt: skip
    assert "--up-axis" not in capsys.readouterr().err
    model = (tmp_path / "b" / "model" / "model.json").read_text()
    assert '"up_axis": "y"' in model
    assert command_line_message("pass up_axis='y' (command line: --up-axis y)") == (
        "pass --up-axis y"
    )
