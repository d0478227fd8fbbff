"""The new-study panel, driven from Python as a person would click it: choose a folder, check
the files (sessions, keypoints, the automatic body axis shown), discover, get the workbench.

Data: two simulated sessions of the package's invented animals (dune voles), a few seconds each;
the bundled body plan's axis runs tail_base -> nose.
"""

from __future__ import annotations

import pytest

import ethoscribe
from _reliability_data import write_study
from ethoscribe.widgets import NewStudy, Workbench
from ethoscribe.workspace import Workspace


def test_from_a_folder_of_pose_files_to_the_workbench(tmp_path):
    study = write_study(tmp_path / "study")
    panel = ethoscribe.new_study(study)
    assert isinstance(panel, NewStudy)
    panel.run.click()  # nothing checked yet and no results folder: a message, no traceback
    assert "ethoscribe-note-error" in panel.message.value
    panel.check.click()
    assert "ethoscribe-note-ok" in panel.message.value, panel.message.value
    assert "2 sessions (session_01, session_02)" in panel.found.value
    assert "chosen automatically" in panel.found.value
    tail, head = panel.preview["axis"]
    assert panel.tail.options[0] == (f"automatic ({tail})", "automatic")
    assert panel.head.options[0] == (f"automatic ({head})", "automatic")
    assert ("nose", "nose") in panel.head.options and panel.out.value.endswith("study_results")
    panel.tail.value = "tail_base"  # one end only: refused clearly
    panel.run.click()
    assert "choose both ends of the body axis" in panel.message.value
    panel.head.value = "nose"
    panel.states.value = 3
    panel.out.value = str(tmp_path / "results")
    panel.run.click()
    assert "ethoscribe-note-ok" in panel.message.value, panel.message.value
    ws = Workspace(tmp_path / "results")
    assert ws.summary["n_states"] == 3 and ws.summary["features"]["axis"] == ["tail_base", "nose"]
    assert isinstance(panel.workbench, Workbench) and panel.result.children == (panel.workbench,)
    panel.workbench.close()


def _fish_study(folder, seconds, axes):
    """Two invented fish of the package's simulator (50 fps), the coordinates ``axes`` of
    its x, y, z (z up) written as tidy CSV files into ``folder``."""
    import numpy as np

    from ethoscribe.simulate import simulate_session
    from ethoscribe.simulate.examples import tidy_table

    folder.mkdir()
    for i in (1, 2):
        tracks, _ = simulate_session("glass_minnow", seconds, 50.0, seed=i, session=f"fish_{i}")
        seen = tracks.replace(coords=np.ascontiguousarray(tracks.coords[..., list(axes)]))
        tidy_table(seen).to_csv(folder / f"fish_{i}.csv", index=False)
    return folder


def test_a_folder_without_pose_files_is_a_message(tmp_path):
    (tmp_path / "empty").mkdir()
    panel = NewStudy(tmp_path / "empty")
    panel.check.click()
    assert "ethoscribe-note-error" in panel.message.value
    with pytest.raises(ethoscribe.InputError):
        panel._check()


# discover itself warns about the y axis chosen at the end (the panel's check showed it first)
@pytest.mark.filterwarnings("ignore::ethoscribe.errors.InputWarning")
def test_three_dimensional_tracks_get_a_vertical_axis_choice(tmp_path):
    study = _fish_study(tmp_path / "fish", 20.0, (0, 1, 2))  # z up, as simulated
    panel = NewStudy(study)
    assert panel.up.layout.display == "none"  # nothing read yet
    panel.fps.value = 50.0
    panel.check.click()
    assert "ethoscribe-note-ok" in panel.message.value, panel.message.value
    assert panel.up.layout.display == "" and panel.preview["n_dims"] == 3
    assert "vertical axis" not in panel.found.value  # z is up, as chosen
    assert panel.up.options[0] == ("automatic (z)", "auto")  # read from the tracks
    panel.up.value = "y"
    panel.check.click()  # y chosen for z-up fish: the check says so, and where to change it
    assert "vertical axis is taken to be y" in panel.found.value
    assert "Vertical axis" in panel.found.value  # where to change it
    assert panel.up.options[0] == ("automatic (z)", "auto")  # what auto would use, still
    # which way it points: a swimmer shows no floor, so up is assumed; the user may say down
    assert panel.upward.layout.display == ""
    assert panel.upward.options[0] == ("automatic (up)", "auto")
    panel.upward.value = "down"
    panel.states.value = 3
    panel.out.value = str(tmp_path / "results")
    panel.run.click()  # the choice reaches discover (a user may know better than the check)
    assert "ethoscribe-note-ok" in panel.message.value, panel.message.value
    features = Workspace(tmp_path / "results").model().features_
    assert (features.up_axis, features.up_direction, features.up_sign_) == ("y", "down", -1)
    panel.workbench.close()


def test_a_session_lacking_a_keypoint_is_checked_as_discover_reads_it(tmp_path):
    # The first file lacks 'neck' (added to the tracker later): the check reads the study's
    # keypoints, as discover does, and shows the warning instead of refusing the study.
    import pandas as pd

    study = write_study(tmp_path / "study")
    first = study / "session_01.parquet"
    table = pd.read_parquet(first)
    table[table["keypoint"] != "neck"].to_parquet(first)
    panel = NewStudy(study)
    panel.check.click()
    assert "ethoscribe-note-error" not in panel.message.value, panel.message.value
    assert "neck" in panel.preview["keypoints"] and len(panel.preview["keypoints"]) == 10
    assert any("are lacking" in w and "(neck)" in w for w in panel.preview["warnings"])


@pytest.mark.filterwarnings("default:view='above' is given:UserWarning")  # chosen knowingly
def test_two_dimensional_tracks_filmed_from_the_side_get_a_camera_choice(tmp_path):
    study = _fish_study(tmp_path / "tank", 30.0, (0, 2))  # seen through the tank's wall
    panel = NewStudy(study)
    assert panel.view.layout.display == "none"  # nothing read yet
    panel.fps.value = 50.0
    panel.check.click()
    assert "ethoscribe-note-ok" in panel.message.value, panel.message.value
    assert panel.view.layout.display == "" and panel.up.layout.display == "none"
    assert panel.view.options[0] == ("automatic (from the side)", "auto")
    assert "Camera: from the side, y vertical (read from the tracks" in panel.found.value
    panel.view.value = "above"  # the person knows better: reaches discover
    panel.states.value = 3
    panel.out.value = str(tmp_path / "results")
    panel.run.click()
    assert "ethoscribe-note-ok" in panel.message.value, panel.message.value
    ws = Workspace(tmp_path / "results")
    assert ws.model().view_ == "above" and ws.summary["features"]["view"] == "above"
    panel.workbench.close()
