"""Messages that name sessions, keypoints, files or states say how many they leave out.

Long lists were shortened in three ways: cut at five without a word, cut with " ...", or with
" and N more". Every message now goes through :func:`ethoscribe.errors.listed`, which writes
the first few and then how many more there are. Data: invented names only.
"""

from __future__ import annotations

import pandas as pd
import pytest

from ethoscribe.errors import InputError, InputWarning, listed
from ethoscribe.io import read_manifest
from ethoscribe.segment.model import check_one_rate
from ethoscribe.workspace.browsing import bouts_for_names
from ethoscribe.workspace.runs import _warn_short_sessions


def test_listed_writes_every_item_up_to_the_limit_then_counts_the_rest():
    assert listed([]) == ""
    assert listed(["a", "b", "c"], limit=3) == "a, b, c"
    assert listed(["a", "b", "c", "d"], limit=3) == "a, b, c and 1 more"
    assert listed(range(12), limit=10, sep="; ") == "0; 1; 2; 3; 4; 5; 6; 7; 8; 9 and 2 more"


def test_sessions_of_other_frame_rates_are_counted_past_five():
    """Was: '30 fps ('s0', ..., 's4' ...)', without the number left out."""
    names = [f"s{i}" for i in range(8)]
    with pytest.raises(InputError) as said:
        check_one_rate([30.0] * 7 + [60.0], names)
    assert "30 fps ('s0', 's1', 's2', 's3', 's4' and 2 more), 60 fps ('s7')" in str(said.value)


def test_short_sessions_are_counted_past_five():
    """Was: the first five named, the others left out without a word."""
    rows = [{"session": f"s{i}", "duration_s": 0.1} for i in range(7)]
    with pytest.warns(InputWarning) as said:
        _warn_short_sessions(rows)
    (text,) = [str(w.message) for w in said]
    assert "'s4' (0.1 s) and 2 more last less than one bout" in text


def test_missing_manifest_files_are_counted_past_five(tmp_path):
    """Was: '; ...' after the first five."""
    lines = "".join(f"m{i},gone{i}.csv\n" for i in range(7))
    (tmp_path / "manifest.csv").write_text("session,path\n" + lines)
    with pytest.raises(InputError) as said:
        read_manifest(tmp_path / "manifest.csv")
    text = str(said.value)
    assert "7 listed file(s) do not exist" in text
    assert f"row 5 (session 'm4'): {tmp_path / 'gone4.csv'} and 2 more." in text


def test_unnamed_states_are_counted_past_ten():
    """Was: the first ten states, the others left out without a word."""
    runs = pd.DataFrame({"state": range(12), "n_frames": 1, "start": range(12), "cut_after": False})
    with pytest.raises(InputError) as said:
        bouts_for_names(runs, {})
    assert "states 0, 1, 2, 3, 4, 5, 6, 7, 8, 9 and 2 more of the runs" in str(said.value)
