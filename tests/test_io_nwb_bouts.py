"""An ethogram's bouts in NWB files: round trip, into a session's pose file, and refusals.

The intervals table is checked with pynwb's own reader (``NWBHDF5IO``, ``to_dataframe``), not
only through ours.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ethoscribe.errors import InputError
from ethoscribe.ethogram import bout_table
from ethoscribe.io import read_nwb, write_nwb
from ethoscribe.simulate import simulate_session

pynwb = pytest.importorskip("pynwb")
pytest.importorskip("ndx_pose")

from ethoscribe.io.nwb_bouts import read_bouts_nwb, write_bouts_nwb  # noqa: E402

FPS = 30.0


def _labels(states, session="s1", animal="animal0"):
    states = np.asarray(states)
    names = np.array(["rest", "walk", "groom"], dtype=object)
    return pd.DataFrame(
        {
            "session": session,
            "animal": animal,
            "frame": np.arange(len(states)),
            "time_s": np.arange(len(states)) / FPS,
            "state": states,
            "motif": np.where(states >= 0, names[np.maximum(states, 0)], ""),
            "probability": np.where(states >= 0, 0.9, np.nan),
        }
    )


@settings(max_examples=15, deadline=None)
@given(st.lists(st.integers(-1, 2), min_size=1, max_size=60))
def test_bouts_round_trip(tmp_path_factory, states):
    bouts = bout_table(_labels(states), FPS)
    path = tmp_path_factory.mktemp("nwb") / "bouts.nwb"
    write_bouts_nwb(bouts, path)
    back = read_bouts_nwb(path)
    assert list(back.columns[:5]) == ["session", "animal", "motif", "start_s", "duration_s"]
    expected = bouts[back.columns].reset_index(drop=True)
    pd.testing.assert_frame_equal(back, expected, check_dtype=False, rtol=1e-12)


def test_bouts_go_into_the_sessions_pose_file(tmp_path):
    tracks, _ = simulate_session(duration_s=4, seed=1, session="s1")
    write_nwb(tracks, tmp_path / "s1.nwb")
    states = np.repeat([0, 1, -1, 2, 0], [30, 20, 5, 40, 25])
    bouts = bout_table(_labels(states), FPS)
    write_bouts_nwb(bouts, tmp_path / "s1.nwb", into=tmp_path / "s1.nwb")
    # pynwb's own reading of the table
    with pynwb.NWBHDF5IO(str(tmp_path / "s1.nwb"), "r") as io:
        table = io.read().intervals["behaviour_bouts"].to_dataframe()
    assert table["motif"].tolist() == ["rest", "walk", "groom", "rest"]
    np.testing.assert_allclose(table["start_time"], [0, 1, 55 / 30, 95 / 30])
    np.testing.assert_allclose(table["stop_time"], [1, 50 / 30, 95 / 30, 4])
    # the pose tracks are still there, unchanged
    again = read_nwb(tmp_path / "s1.nwb")
    np.testing.assert_array_equal(again.coords, tracks.coords)
    with pytest.raises(InputError, match="already holds an intervals table 'behaviour_bouts'"):
        write_bouts_nwb(bouts, tmp_path / "s1.nwb", into=tmp_path / "s1.nwb")
    other = bout_table(_labels(states, session="s2"), FPS)
    with pytest.raises(InputError, match="is session 's1' but the bouts are of session 's2'"):
        write_bouts_nwb(other, tmp_path / "x.nwb", into=tmp_path / "s1.nwb")
    assert not (tmp_path / "x.nwb").exists()


def test_refusals_name_the_file_and_the_fix(tmp_path):
    both = pd.concat([bout_table(_labels([0, 1]), FPS), bout_table(_labels([1], "s2"), FPS)])
    with pytest.raises(InputError, match=r"bouts come from \['s1', 's2'\]; pass bouts\["):
        write_bouts_nwb(both, tmp_path / "b.nwb")
    with pytest.raises(InputError, match=r"lacks the column\(s\) \['duration_s'\]"):
        write_bouts_nwb(both.drop(columns="duration_s"), tmp_path / "b.nwb")
    tracks, _ = simulate_session(duration_s=1, seed=1, session="s1")
    write_nwb(tracks, tmp_path / "pose.nwb")
    with pytest.raises(InputError, match=r"no intervals table 'behaviour_bouts' \(found none"):
        read_bouts_nwb(tmp_path / "pose.nwb")
