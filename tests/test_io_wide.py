"""Wide pose tables (one row per frame) read through a user-given column pattern."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from ethoscribe.errors import InputError, InputWarning
from ethoscribe.io import read_pose, read_wide
from ethoscribe.io.wide import pattern_regex


def _wide(n=5, keypoints=("nose", "left_ear", "tail_base"), name="{keypoint}_{axis}", conf=True):
    df = pd.DataFrame({"frame": np.arange(n) + 50})
    for i, k in enumerate(keypoints):
        df[name.format(keypoint=k, axis="x")] = np.arange(n) * 1.0 + i
        df[name.format(keypoint=k, axis="y")] = np.arange(n) * -1.0 - i
        if conf:
            df[name.format(keypoint=k, axis="confidence")] = 0.5
    df["notes"] = "ok"
    return df


def _save(df, folder, name="w.csv"):
    p = folder / name
    if p.suffix == ".csv":
        df.to_csv(p, index=False)
    else:
        df.to_parquet(p, index=False)
    return p


@pytest.mark.parametrize("name", ["w.csv", "w.parquet"])
def test_default_pattern(tmp_path, name):
    with pytest.warns(InputWarning, match=r"'frame' looks like frame numbers \(50 to 54"):
        t = read_wide(_save(_wide(), tmp_path, name), fps=30)  # rows are frames 0, 1, ...
    assert t.keypoints == ("nose", "left_ear", "tail_base")  # underscores inside names are fine
    assert t.coords.shape == (5, 1, 3, 2) and t.session == "w" and t.animals == ("animal0",)
    assert t.coords[3, 0, 1].tolist() == [4.0, -4.0]
    assert np.all(t.confidence == 0.5)
    assert t.meta["ignored_columns"] == ["frame", "notes"] and t.meta["first_frame"] == 0


def test_frame_column_with_gap_and_animal_name(tmp_path):
    df = _wide(n=6, conf=False).drop(index=2)
    t = read_wide(_save(df, tmp_path), fps=25, frame_column="frame", animal="rat7")
    assert t.n_frames == 6 and t.meta["first_frame"] == 50 and t.animals == ("rat7",)
    assert np.isnan(t.coords[2]).all() and t.coords[3, 0, 0].tolist() == [3.0, -3.0]
    assert np.all(t.confidence[[0, 1, 3, 4, 5]] == 1)  # no confidence columns: 1 where present


def test_time_column_gives_fps(tmp_path):
    df = _wide(n=8)
    df["seconds"] = df.pop("frame") / 15.0
    t = read_wide(_save(df, tmp_path), time_column="seconds")
    assert t.fps == 15.0 and t.meta["first_frame"] == 50 and t.n_frames == 8


def test_animals_custom_axes_and_3d(tmp_path):
    df = pd.DataFrame({"t": [0, 1, 2]})
    for a in ("m1", "m2"):
        for k in ("nose", "tail"):
            for axis in ("X", "Y", "Z"):
                df[f"{a}.{k}.{axis}"] = float(len(a + k + axis)) + (a == "m2")
    p = _save(df, tmp_path, "three.parquet")
    t = read_wide(p, pattern="{animal}.{keypoint}.{axis}", axes=("X", "Y", "Z"), fps=60)
    assert t.animals == ("m1", "m2") and t.keypoints == ("nose", "tail") and t.n_dims == 3
    assert t.coords[0, 1, 0].tolist() == [8.0, 8.0, 8.0]
    one = read_wide(p, pattern="{animal}.{keypoint}.{axis}", axes=("X", "Y"), animal="m2", fps=60)
    assert one.animals == ("m2",) and one.n_dims == 2
    sel = read_wide(p, "{animal}.{keypoint}.{axis}", fps=60, axes=("X", "Y"), keypoints=["tail"])
    assert sel.keypoints == ("tail",)
    text = read_wide(
        p, "{animal}.{keypoint}.{axis}", fps=60, axes=("X", "Y"), keypoints="tail,nose"
    )
    assert text.keypoints == ("tail", "nose")


def test_read_pose_with_wide_format(tmp_path):
    t = read_pose(_save(_wide(), tmp_path), format="wide", fps=30, frame_column="frame")
    assert t.meta["source_format"] == "wide" and t.meta["first_frame"] == 50


def test_pattern_regex():
    rx = pattern_regex("{animal}-{keypoint}:{axis}", ("x", "y"), "score")
    assert rx.fullmatch("a-b.c:score").groupdict() == {
        "animal": "a",
        "keypoint": "b.c",
        "axis": "score",
    }
    assert rx.fullmatch("a-b:z") is None


# --- bad input --------------------------------------------------------------------------------
def test_nothing_matches(tmp_path):
    p = _save(_wide(name="{keypoint}.{axis}"), tmp_path)
    with pytest.raises(InputError) as info:
        read_wide(p, fps=30)
    msg = str(info.value)
    assert "no column matches the pattern '{keypoint}_{axis}'" in msg
    assert "'nose.x'" in msg and "Columns found" in msg and "pattern=" in msg


@pytest.mark.parametrize("pattern", ["{keypoint}", "{keypoint}_{axis}_{axis}", "{kp}_{axis}"])
def test_bad_pattern(tmp_path, pattern):
    with pytest.raises(InputError, match=r"must contain \{keypoint\} and \{axis\} once each"):
        read_wide(_save(_wide(), tmp_path), pattern=pattern, fps=30)


def test_keypoint_without_y_or_with_z_only_sometimes(tmp_path):
    df = _wide().drop(columns=["tail_base_y"])
    with pytest.raises(InputError, match="keypoint 'tail_base' has no 'y' column"):
        read_wide(_save(df, tmp_path), fps=30)
    df = _wide()
    df["nose_z"] = 1.0
    with pytest.raises(InputError, match=r"'left_ear' has no 'z' column.*2-D or 3-D throughout"):
        read_wide(_save(df, tmp_path), fps=30)


def test_non_increasing_frames_and_times(tmp_path):
    df = _wide()
    df.loc[3, "frame"] = 51
    with pytest.raises(InputError, match=r"'frame' must increase.*line 5 has 51 after 52"):
        read_wide(_save(df, tmp_path), fps=30, frame_column="frame")
    df = _wide()
    df["time"] = [0.0, 0.1, 0.2, 0.2, 0.4]
    with pytest.raises(InputError, match="'time' must increase from row to row"):
        read_wide(_save(df, tmp_path), time_column="time")


def test_irregular_time(tmp_path):
    df = _wide(n=6)
    df["time"] = [0.0, 0.1, 0.2, 0.35, 0.4, 0.5]
    with pytest.raises(InputError, match=r"'time' is not on a steady frame rate: time 0\.35"):
        read_wide(_save(df, tmp_path), time_column="time")


def test_fps_missing_or_bad(tmp_path):
    p = _save(_wide(), tmp_path)
    with pytest.raises(InputError, match=r"frame rate is unknown; pass fps="):
        read_wide(p)
    with pytest.raises(InputError, match="fps must be a positive number"):
        read_wide(p, fps=-1)


def test_missing_timing_column(tmp_path):
    with pytest.raises(InputError, match=r"missing column\(s\) \['time'\] needed for frame timing"):
        read_wide(_save(_wide(), tmp_path), time_column="time")


def test_non_numeric_cell_and_bad_confidence(tmp_path):
    df = _wide()
    df["nose_y"] = df["nose_y"].astype(str)
    df.loc[2, "nose_y"] = "lost"
    with pytest.raises(
        InputError, match="column 'nose_y' must hold numbers, but line 4 has 'lost'"
    ):
        read_wide(_save(df, tmp_path), fps=30)
    df = _wide().drop(columns="frame")
    df.loc[1, "left_ear_confidence"] = 1.5
    with pytest.raises(InputError, match=r"'left_ear_confidence' must lie in \[0, 1\]; line 3"):
        read_wide(_save(df, tmp_path), fps=30)


def test_confidence_in_percent_is_read_on_one_scale_for_every_keypoint(tmp_path):
    # Percent in every confidence column, one of them never above 40: the rule is read from
    # the file, so that keypoint is read as percent too. Reference: numpy's division by 100.
    df = _wide().drop(columns="frame")
    df["nose_confidence"], df["left_ear_confidence"] = 90.0, 35.0
    df["tail_base_confidence"] = [70.0, 80.0, np.nan, 99.0, 60.0]
    with pytest.warns(InputWarning, match="read as percent"):
        t = read_wide(_save(df, tmp_path), fps=30)
    expected = df[[f"{k}_confidence" for k in ("nose", "left_ear", "tail_base")]] / 100
    np.testing.assert_allclose(t.confidence[:, 0, :], expected.to_numpy())


@pytest.mark.parametrize(
    "scale, top", [("a little above 1", 1.08), ("percent", 97.0)], ids=["overshoot", "percent"]
)
def test_confidence_columns_under_another_word_are_named_on_every_scale_the_readers_read(
    tmp_path, scale, top
):
    # '.p' columns with values up to 1.08 (a heatmap peak passing 1), or in percent: the
    # readers read both, so the look-alike check must name them too; it only took [0, 1] and
    # the columns were dropped without a word (seed 0).
    rng = np.random.default_rng(0)
    df = _wide(n=40, name="{keypoint}.{axis}", conf=False).drop(columns="frame")
    for k in ("nose", "left_ear", "tail_base"):
        values = rng.uniform(0.3, 1.0, 40) * (100 if top > 1.2 else 1)
        values[0] = top
        df[f"{k}.p"] = values
    path = _save(df, tmp_path)
    with pytest.warns(InputWarning, match=r"no confidence column was read, but column\(s\) "
                      r"\['nose\.p'\] hold numbers like a tracker's confidence.*"
                      r"confidence_axis='p'"):  # fmt: skip
        t = read_wide(path, pattern="{keypoint}.{axis}", fps=30)
    assert np.all(t.confidence == 1)  # read without it
    # The fix it names reads the columns, on the unit scale.
    with pytest.warns(InputWarning, match=scale):
        t = read_wide(path, pattern="{keypoint}.{axis}", fps=30, columns={"confidence": "p"})
    expected = df[["nose.p", "left_ear.p", "tail_base.p"]].to_numpy()
    expected = expected / 100 if top > 1.2 else np.minimum(expected, 1.0)
    np.testing.assert_allclose(t.confidence[:, 0, :], expected)
    # Values no reader reads (a largest value of 7) are not taken for a confidence.
    df[["nose.p", "left_ear.p", "tail_base.p"]] *= 7 / top
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        read_wide(_save(df, tmp_path), pattern="{keypoint}.{axis}", fps=30)


def test_keypoints_of_a_wide_table_are_renamed_when_read(tmp_path):
    # The names the column pattern gives are renamed before keypoints= picks them; an
    # ignored confidence under another word is still named (the file's names find it).
    df = _wide(n=6).drop(columns="frame")
    t = read_wide(_save(df, tmp_path), fps=30, rename_keypoints="left_ear=ear_L",
                  keypoints=["ear_L", "nose"])  # fmt: skip
    assert t.keypoints == ("ear_L", "nose")
    np.testing.assert_array_equal(t.coords[:, 0, 0, 0], df["left_ear_x"])
    df = df.rename(columns=lambda c: c.replace("_confidence", "_p"))
    df[["nose_p", "left_ear_p", "tail_base_p"]] = np.linspace(0.1, 0.9, 18).reshape(6, 3)
    with pytest.warns(InputWarning, match=r"\['nose_p'\].*confidence_axis='p'"):
        t = read_wide(_save(df, tmp_path), fps=30, rename_keypoints={"nose": "snout"})
    assert t.keypoints == ("snout", "left_ear", "tail_base")


def test_empty_header_only_and_single_frame(tmp_path):
    p = tmp_path / "empty.csv"
    p.write_bytes(b"")
    with pytest.raises(InputError, match="empty"):
        read_wide(p, fps=30)
    with pytest.raises(InputError, match="column names but no rows"):
        read_wide(_save(_wide().iloc[:0], tmp_path), fps=30)
    with pytest.raises(InputError, match="single frame"):
        read_wide(_save(_wide(n=1), tmp_path), fps=30)


def test_duplicate_column_names(tmp_path):
    p = tmp_path / "dup.csv"
    p.write_text("nose_x,nose_y,nose_x\n1,2,3\n4,5,6\n")
    with pytest.raises(InputError, match=r"column names must be unique; repeated: \['nose_x'\]"):
        read_wide(p, fps=30)


def test_an_ignored_column_of_frame_numbers_with_gaps_is_named(tmp_path):
    # A tracker's own numbering (from 500, frames 503-505 dropped) in a column the reader was
    # not told about: rows are consecutive frames, so the gap would close up unseen.
    df = _wide(n=10, conf=False).rename(columns={"frame": "frame_idx"})
    df["frame_idx"] = [500, 501, 502, 506, 507, 508, 509, 510, 511, 512]
    p = _save(df, tmp_path)
    with pytest.warns(InputWarning, match=r"'frame_idx'.*500 to 512, 3 skipped.*--frame-column"):
        assert read_wide(p, fps=30).n_frames == 10
    t = read_wide(p, fps=30, frame_column="frame_idx")
    assert t.n_frames == 13 and t.meta["first_frame"] == 500
    assert np.isnan(t.coords[3:6]).all()  # the dropped frames are gaps
    # Numbers equal to the row order change nothing: no warning.
    df["frame_idx"] = np.arange(10)
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("error")
        read_wide(_save(df, tmp_path, "same.csv"), fps=30)


def test_rows_repeated_with_the_same_values_are_read_once(tmp_path):
    # Two exports joined with an overlap: frames 53-54 written twice, with the same values.
    df = _wide()
    joined = pd.concat([df, df.iloc[3:]], ignore_index=True)
    with pytest.warns(InputWarning, match=r"2 row\(s\) repeat a 'frame' value.*line 7, as line 5"):
        tracks = read_wide(_save(joined, tmp_path), fps=30, frame_column="frame")
    expected = read_wide(_save(df, tmp_path, "once.csv"), fps=30, frame_column="frame")
    np.testing.assert_array_equal(tracks.coords, expected.coords)
    np.testing.assert_array_equal(tracks.confidence, expected.confidence)
    # A repeated frame with other values is still refused (which one is right is unknown).
    joined.loc[5, "nose_x"] += 1.0
    with pytest.raises(InputError, match=r"'frame' must increase"):
        read_wide(_save(joined, tmp_path, "other.csv"), fps=30, frame_column="frame")
