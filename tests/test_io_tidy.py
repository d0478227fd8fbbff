"""Tidy (long) pose tables: reading, writing, round trips and every kind of bad file."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from ethoscribe.errors import InputError, InputWarning
from ethoscribe.io import read_tidy, write_tidy
from ethoscribe.pose import UNITS, PoseTracks


def _table(n_frames=4, keypoints=("nose", "neck", "tail"), first=0, **extra):
    rows = [
        {"frame": first + f, "keypoint": k, "x": 10.0 * f + i, "y": -1.0 * f - i}
        for f in range(n_frames)
        for i, k in enumerate(keypoints)
    ]
    df = pd.DataFrame(rows)
    for name, values in extra.items():
        df[name] = values
    return df


def _save(df, folder, name="s.csv"):
    p = folder / name
    if p.suffix == ".csv":
        df.to_csv(p, index=False)
    else:
        df.to_parquet(p, index=False)
    return p


def _clean_error(info):
    # The message is ours alone: no library traceback chained to it.
    assert info.value.__cause__ is None
    assert info.value.__context__ is None or info.value.__suppress_context__


@pytest.mark.parametrize("name", ["m1.csv", "m1.parquet", "m1.pq"])
def test_reads_csv_and_parquet(tmp_path, name):
    p = _save(_table(first=100), tmp_path, name)
    t = read_tidy(p, fps=30)
    assert t.coords.shape == (4, 1, 3, 2)
    assert t.keypoints == ("nose", "neck", "tail")  # order of first appearance
    assert t.session == "m1" and t.fps == 30 and t.units == "px"
    assert t.meta["first_frame"] == 100 and t.meta["source"] == str(p)
    assert t.coords[2, 0, 1].tolist() == [21.0, -3.0]
    assert np.all(t.confidence == 1)


def test_row_order_does_not_matter(tmp_path):
    df = _table(n_frames=6)
    a = read_tidy(_save(df, tmp_path, "a.csv"), fps=30)
    b = read_tidy(_save(df.sample(frac=1, random_state=0), tmp_path, "b.csv"), fps=30)
    assert a.keypoints == ("nose", "neck", "tail")
    assert set(b.keypoints) == set(a.keypoints)
    order = [b.keypoints.index(k) for k in a.keypoints]
    np.testing.assert_array_equal(b.coords[:, :, order], a.coords)


def test_missing_points_gaps_confidence_and_z(tmp_path):
    df = _table(n_frames=4, first=5)
    df = df[df["frame"] != 7].copy()  # frame 7 absent for every keypoint: a gap
    df.loc[df.index[1], ["x", "y"]] = np.nan  # a point the tracker missed
    df["confidence"] = 0.5
    df["z"] = 2.0
    t = read_tidy(_save(df, tmp_path), fps=25, session="given")
    assert t.n_frames == 4 and t.n_dims == 3 and t.session == "given"
    assert np.isnan(t.coords[2]).all() and np.isnan(t.confidence[2]).all()
    assert np.isnan(t.coords[0, 0, 1, :2]).all() and t.confidence[0, 0, 1] == 0.5
    assert t.coords[3, 0, 0].tolist() == [30.0, -3.0, 2.0]


def test_animals_and_keypoint_selection(tmp_path):
    a = _table(n_frames=3, animal="mouseA")
    b = _table(n_frames=3, animal="mouseB")
    b[["x", "y"]] += 1000
    p = _save(pd.concat([b, a]), tmp_path, "pair.parquet")
    t = read_tidy(p, fps=30, keypoints=["tail", "nose"])
    assert t.animals == ("mouseB", "mouseA") and t.keypoints == ("tail", "nose")
    assert t.coords[1, 1, 0].tolist() == [12.0, -3.0]
    assert t.coords[1, 0, 0].tolist() == [1012.0, 997.0]
    with pytest.raises(InputError, match=r"\['paw'\] asked for.*'nose', 'neck', 'tail'"):
        read_tidy(p, fps=30, keypoints=["paw"])


def test_time_column_gives_frames_and_fps(tmp_path):
    df = _table(n_frames=5)
    df["time"] = 10.0 + df.pop("frame") / 29.97  # a recording starting at 10 s
    df = df[df["time"] != df["time"].unique()[2]]  # one whole frame missing
    t = read_tidy(_save(df, tmp_path))
    assert t.fps == 29.97  # derived from the time step, recovered exactly
    assert t.n_frames == 5 and np.isnan(t.coords[2]).all()
    assert t.meta["first_frame"] == round(10 * 29.97) and t.meta["start_time_s"] == 10.0
    assert read_tidy(_save(df, tmp_path), fps=30).fps == 30.0


def test_frame_and_time_columns_give_fps(tmp_path):
    df = _table(n_frames=6)
    df["time"] = df["frame"] / 12.5
    assert read_tidy(_save(df, tmp_path)).fps == 12.5


def test_write_tidy_layout(tmp_path):
    coords = np.arange(2 * 1 * 2 * 2, dtype=float).reshape(2, 1, 2, 2)
    coords[1, 0, 1] = np.nan
    t = PoseTracks(coords, keypoints=["nose", "tail"], fps=4, meta={"first_frame": 3})
    p = write_tidy(t, tmp_path / "out.csv")
    lines = p.read_text().splitlines()
    assert lines[0] == "frame,time,animal,keypoint,x,y,confidence"
    assert lines[1:] == [
        "3,0,animal0,nose,0,1,1",
        "3,0,animal0,tail,2,3,1",
        "4,0.25,animal0,nose,4,5,1",
        "4,0.25,animal0,tail,,,",
    ]
    assert sorted(x.name for x in tmp_path.iterdir()) == ["out.csv"]


def test_write_tidy_into_missing_folder_writes_nothing(tmp_path):
    t = PoseTracks(np.zeros((2, 1, 1, 2)), keypoints=["nose"], fps=30)
    with pytest.raises(InputError, match="does not exist"):
        write_tidy(t, tmp_path / "no" / "out.parquet")
    assert list(tmp_path.iterdir()) == []


# --- round trip -----------------------------------------------------------------------------
_names = st.text(
    st.characters(codec="utf-8", exclude_categories=("Cc", "Cs", "Zl", "Zp")),
    min_size=1,
    max_size=6,
).filter(lambda s: s.strip() == s and s != "")


def _fold(name: str) -> str:
    return name.strip().casefold()


@st.composite
def _tracks(draw):
    shape = (
        draw(st.integers(2, 6)),
        draw(st.integers(1, 2)),
        draw(st.integers(1, 3)),
        draw(st.sampled_from([2, 3])),
    )
    values = st.floats(-1e9, 1e9, allow_nan=False, width=64)
    coords = draw(hnp.arrays(np.float64, shape, elements=values))
    coords[draw(hnp.arrays(bool, shape[:3]))] = np.nan
    conf = draw(hnp.arrays(np.float64, shape[:3], elements=st.floats(0, 1) | st.just(np.nan)))
    return PoseTracks(
        coords,
        confidence=conf,
        # names that differ only in case are read as one (documented): distinct when folded
        keypoints=draw(st.lists(_names, min_size=shape[2], max_size=shape[2], unique_by=_fold)),
        animals=draw(st.lists(_names, min_size=shape[1], max_size=shape[1], unique_by=_fold)),
        # rates of up to 15 significant digits survive CSV text exactly
        fps=draw(st.sampled_from([25.0, 29.97, 30.0, 30000 / 1001, 59.94, 120.0, 7.5])),
        units=draw(st.sampled_from(UNITS)),
        session="roundtrip",
        meta={"first_frame": draw(st.integers(-1000, 10**6))},
    )


def _cli_columns(message: str) -> dict[str, str]:
    """The --columns mapping a refusal suggests, parsed as the command line parses it."""
    import re

    from ethoscribe.cli import _mapping, command_line_message

    text = command_line_message(message)
    return _mapping("--columns")(re.findall(r"--columns (\S+=\S+)", text)[-1])


def test_a_tidy_table_with_other_column_names_is_told_the_mapping(tmp_path):
    # frame_idx, bodypart, px, py, likelihood and no --columns: the refusal listed the
    # columns but not the mapping; the one it suggests now, as parsed by the command line,
    # reads the file as its standard-named twin.
    df = _table(confidence=[0.9, 0.5, 0.7] * 4)
    plain = read_tidy(_save(df, tmp_path, "plain.csv"), fps=30)
    renamed = {"frame": "frame_idx", "keypoint": "bodypart", "x": "px", "y": "py"}
    p = _save(df.rename(columns={**renamed, "confidence": "likelihood"}), tmp_path)
    with pytest.raises(InputError, match=r"missing column\(s\) \['frame', 'keypoint', 'x', "
                       r"'y'\].*look named for these roles") as caught:  # fmt: skip
        read_tidy(p, fps=30)
    mapping = _cli_columns(str(caught.value))
    assert mapping == {**renamed, "confidence": "likelihood"}
    got = read_tidy(p, fps=30, columns=mapping)
    np.testing.assert_array_equal(got.coords, plain.coords)
    np.testing.assert_array_equal(got.confidence, plain.confidence)


def test_a_tidy_table_whose_names_make_no_role_evident_is_shown_the_syntax(tmp_path):
    # Names of no known role ('a' ...), or two columns a role would take ('px' and 'x_mm'):
    # nothing is guessed for those roles, the syntax is shown with them to fill in.
    df = _table().rename(columns={"frame": "a", "keypoint": "b", "x": "c", "y": "d"})
    with pytest.raises(InputError, match=r"holds each role \(ROLE=COLUMN, ") as caught:
        read_tidy(_save(df, tmp_path), fps=30)
    assert _cli_columns(str(caught.value)) == dict.fromkeys(["frame", "keypoint", "x", "y"],
                                                             "COLUMN")  # fmt: skip
    assert "with the file's column name for COLUMN" in str(caught.value)
    df = _table().rename(columns={"frame": "frame_idx", "x": "px", "y": "py"})
    df["x_mm"] = df["px"] / 2
    with pytest.raises(InputError, match="ROLE=COLUMN") as caught:
        read_tidy(_save(df, tmp_path), fps=30)
    assert _cli_columns(str(caught.value)) == {"frame": "frame_idx", "x": "COLUMN", "y": "py"}


def test_a_column_mapping_written_backwards_is_shown_the_right_way_round(tmp_path):
    # --columns frame_idx=frame,bodypart=keypoint,...: it was refused as naming unknown roles,
    # without a word of the syntax. The mapping it suggests, parsed as the command line
    # does, reads the file.
    df = _table(confidence=0.8)
    plain = read_tidy(_save(df, tmp_path, "plain.csv"), fps=30)
    names = {"frame": "frame_idx", "keypoint": "bodypart", "x": "px", "confidence": "likelihood"}
    p = _save(df.rename(columns=names), tmp_path)
    backwards = {"frame_idx": "frame", "bodypart": "keypoint", "x": "px", "likelihood":
                 "confidence"}  # fmt: skip
    with pytest.raises(InputError, match=r"unknown role\(s\) \['bodypart', 'frame_idx', "
                       r"'likelihood'\].*role first.*\(ROLE=COLUMN\)") as caught:  # fmt: skip
        read_tidy(p, fps=30, columns=backwards)
    mapping = _cli_columns(str(caught.value))
    assert mapping == names  # the pair written the right way round kept as it was
    got = read_tidy(p, fps=30, columns=mapping)
    np.testing.assert_array_equal(got.coords, plain.coords)
    # Unknown roles that are not reversed roles get no such advice.
    with pytest.raises(InputError, match=r"unknown role\(s\) \['bodypart'\]") as caught:
        read_tidy(p, fps=30, columns={"bodypart": "bodypart"})
    assert "ROLE=COLUMN" not in str(caught.value)


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
@settings(
    max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(tracks=_tracks())
def test_round_trip(tmp_path, suffix, tracks):
    p = write_tidy(tracks, tmp_path / f"roundtrip{suffix}")
    # CSV keeps no units: say them; Parquet records fps and units itself.
    back = read_tidy(p, units=tracks.units if suffix == ".csv" else None)
    np.testing.assert_array_equal(back.coords, tracks.coords)
    np.testing.assert_array_equal(back.confidence, tracks.confidence)
    assert back.keypoints == tracks.keypoints and back.animals == tracks.animals
    assert back.fps == tracks.fps and back.units == tracks.units
    assert back.meta["first_frame"] == tracks.meta["first_frame"]


# --- bad input: each raises InputError naming the file, the column and the fix ---------------
def test_missing_required_columns(tmp_path):
    p = _save(_table().drop(columns=["y"]), tmp_path)
    with pytest.raises(InputError, match=r"s\.csv: missing column\(s\) \['y'\].*found columns"):
        read_tidy(p, fps=30)
    p = _save(_table().rename(columns={"x": " X "}), tmp_path, "t.csv")
    with pytest.raises(InputError, match="Column ' X ' looks like 'x'"):
        read_tidy(p, fps=30)
    p = tmp_path / "semi.csv"
    p.write_text("frame;keypoint;x;y\n0;nose;1;2\n")
    with pytest.raises(InputError, match="separated by ';'"):
        read_tidy(p, fps=30)


@pytest.mark.parametrize("suffix", [".csv", ".parquet"])
def test_non_numeric_coordinates(tmp_path, suffix):
    df = _table()
    df["x"] = df["x"].astype(str)  # a text column, as a spreadsheet export can give
    df.loc[4, "x"] = "12,5px"
    df.loc[7, "x"] = "n/a?"
    with pytest.raises(InputError) as info:
        read_tidy(_save(df, tmp_path, f"s{suffix}"), fps=30)
    where = "line 6" if suffix == ".csv" else "row 5"
    assert f"column 'x' must hold numbers, but {where} has '12,5px' (2 such" in str(info.value)
    _clean_error(info)


def test_infinite_coordinates(tmp_path):
    df = _table()
    df.loc[2, "y"] = np.inf
    with pytest.raises(InputError, match=r"column 'y' has an infinite value \(inf\) at line 4"):
        read_tidy(_save(df, tmp_path), fps=30)


def test_confidence_outside_unit_interval(tmp_path):
    df = _table(confidence=0.9)
    df.loc[3, "confidence"] = 97.0
    with pytest.raises(InputError, match=r"'confidence' must lie in \[0, 1\]; line 5 has 97"):
        read_tidy(_save(df, tmp_path), fps=30)


def test_confidence_in_percent_or_a_little_above_one_is_read_on_the_unit_scale(tmp_path):
    # A tracker writing percent (0-100), and one whose peaks pass 1 a little: read on [0, 1]
    # and said, naming the file. Reference: the values divided by 100 / clipped with numpy.
    df = _table(confidence=[97.0, 64.0, 88.5] * 4)
    with pytest.warns(InputWarning, match=r"s.csv: confidence written from 0 to 100 is read "
                      r"as percent \(divided by 100\)"):  # fmt: skip
        t = read_tidy(_save(df, tmp_path), fps=30)
    np.testing.assert_allclose(t.confidence[:, 0, :], [[0.97, 0.64, 0.885]] * 4)
    df = _table(confidence=[1.08, 0.64, 0.885] * 4)
    with pytest.warns(InputWarning, match=r"above 1 \(at most 1.08, 4 value\(s\)\) are read as 1"):
        t = read_tidy(_save(df, tmp_path), fps=30)
    np.testing.assert_allclose(t.confidence[:, 0, :], [[1.0, 0.64, 0.885]] * 4)
    df = _table(confidence=[0.97, 0.64, 0.885] * 4)
    df.loc[[3, 4], "confidence"] = 64.0  # most values fractions: a slip, not a scale
    with pytest.raises(InputError, match=r"line 5 has 64 .*a 0-100 scale is read as percent"):
        read_tidy(_save(df, tmp_path), fps=30)


def test_duplicated_rows(tmp_path):
    df = _table(first=10)
    df = pd.concat([df, df.iloc[[4]]])
    df.iloc[-1, df.columns.get_loc("x")] += 1.0
    with pytest.raises(InputError) as info:
        read_tidy(_save(df, tmp_path), fps=30)
    msg = str(info.value)
    assert "1 row(s) repeat" in msg and "frame 11, keypoint 'neck' appears 2 times" in msg
    assert "with different values" in msg and "remove the repeats" in msg
    both = pd.concat([_table(animal="a"), _table(animal="b"), _table(animal="b").iloc[:1]])
    both.iloc[-1, both.columns.get_loc("y")] = np.nan
    with pytest.raises(InputError, match="keypoint 'nose', animal 'b' appears 2 times"):
        read_tidy(_save(both, tmp_path, "b.csv"), fps=30)


def test_rows_repeated_with_the_same_values_are_read_once(tmp_path):
    # Overlapping exports joined into one file: the repeats say nothing new.
    df = _table(first=10, confidence=0.9)
    df.loc[5, ["x", "y"]] = np.nan  # a missed point repeated as missed is the same too
    plain = read_tidy(_save(df, tmp_path, "plain.csv"), fps=30)
    twice = pd.concat([df, df.iloc[3:9]]).sample(frac=1.0, random_state=0)
    with pytest.warns(InputWarning, match=r"6 row\(s\) repeat .* same values .* read once"):
        got = read_tidy(_save(twice, tmp_path), fps=30, keypoints=list(plain.keypoints))
    np.testing.assert_array_equal(got.coords, plain.coords)
    np.testing.assert_array_equal(got.confidence, plain.confidence)


def test_irregular_time(tmp_path):
    df = _table(n_frames=6).astype({"frame": float})
    df["time"] = df.pop("frame") / 30
    df.loc[df["time"] == 3 / 30, "time"] = 3.5 / 30
    with pytest.raises(InputError, match=r"column 'time' is not on a steady frame rate.*off"):
        read_tidy(_save(df, tmp_path))
    df.loc[df["time"] == 3.5 / 30, "time"] = 2.2 / 30
    with pytest.raises(InputError, match="fall within one frame at 30 fps"):
        read_tidy(_save(df, tmp_path), fps=30)


def test_frame_and_time_disagree(tmp_path):
    df = _table(n_frames=6)
    df["time"] = df["frame"] / 30
    df.loc[df["frame"] == 4, "time"] = 0.5
    with pytest.raises(InputError, match="'frame' and 'time' disagree"):
        read_tidy(_save(df, tmp_path))


def test_keypoint_missing_in_some_frames(tmp_path):
    # Trackers that leave out the points they missed: no row is read as a row with empty x/y
    # (refused before, though nothing else could be meant), with a warning naming them.
    full = _table(n_frames=8, first=100, confidence=0.9)
    lost = (full["keypoint"] == "tail") & full["frame"].isin([102, 105])
    with pytest.warns(InputWarning) as said:
        got = read_tidy(_save(full[~lost], tmp_path), fps=30)
    msg = str(said[0].message)
    assert "keypoint 'tail' has no row in 2 frame(s)" in msg and "frames [102, 105]" in msg
    assert "read as not tracked" in msg
    empty = full.copy()
    empty.loc[lost, ["x", "y", "confidence"]] = np.nan
    same = read_tidy(_save(empty, tmp_path, "empty.csv"), fps=30)
    np.testing.assert_array_equal(got.coords, same.coords)
    np.testing.assert_array_equal(got.confidence, same.confidence)


def test_empty_files(tmp_path):
    for name in ("zero.csv", "zero.parquet"):
        (tmp_path / name).write_bytes(b"")
        with pytest.raises(InputError, match=r"is empty \(0 bytes\)"):
            read_tidy(tmp_path / name, fps=30)
    head = tmp_path / "head.csv"
    head.write_text("frame,keypoint,x,y\n")
    with pytest.raises(InputError, match="column names but no rows"):
        read_tidy(head, fps=30)
    p = _save(_table().iloc[:0], tmp_path, "head.parquet")
    with pytest.raises(InputError, match="column names but no rows"):
        read_tidy(p, fps=30)


def test_single_frame(tmp_path):
    with pytest.raises(InputError, match=r"s\.csv: holds a single frame"):
        read_tidy(_save(_table(n_frames=1), tmp_path), fps=30)
    df = _table(n_frames=1)
    df["time"] = df.pop("frame") * 0.0
    with pytest.raises(InputError, match="single frame"):
        read_tidy(_save(df, tmp_path, "t.csv"))


@pytest.mark.parametrize("fps", [0, -30, float("nan"), "fast"])
def test_bad_fps(tmp_path, fps):
    with pytest.raises(InputError, match="fps must be a positive number"):
        read_tidy(_save(_table(), tmp_path), fps=fps)


def test_fps_missing(tmp_path):
    with pytest.raises(InputError, match=r"frame rate is unknown.*Pass fps="):
        read_tidy(_save(_table(), tmp_path))


def test_corrupt_parquet(tmp_path):
    p = tmp_path / "broken.parquet"
    p.write_bytes(np.random.default_rng(0).bytes(2000))
    with pytest.raises(InputError, match=r"broken\.parquet: cannot be read as a Parquet") as info:
        read_tidy(p, fps=30)
    _clean_error(info)


def test_path_missing_folder_and_unknown_suffix(tmp_path):
    with pytest.raises(InputError, match="no such file"):
        read_tidy(tmp_path / "nope.csv", fps=30)
    with pytest.raises(InputError, match="is a folder"):
        read_tidy(tmp_path, fps=30)
    p = tmp_path / "s.txt"
    p.write_text("frame,keypoint,x,y\n")
    with pytest.raises(InputError, match=r"suffix '\.txt'; use \.csv, \.parquet or \.pq"):
        read_tidy(p, fps=30)


def test_bad_frame_and_keypoint_cells(tmp_path):
    df = _table().astype({"frame": float})
    df.loc[1, "frame"] = 0.5
    with pytest.raises(InputError, match=r"whole frame numbers; line 3 has 0\.5"):
        read_tidy(_save(df, tmp_path), fps=30)
    df = _table().astype({"frame": float})
    df.loc[2, "frame"] = np.nan
    with pytest.raises(InputError, match="column 'frame' is empty at line 4"):
        read_tidy(_save(df, tmp_path), fps=30)
    df = _table()
    df.loc[3, "keypoint"] = ""
    with pytest.raises(InputError, match="column 'keypoint' has a blank name at line 5"):
        read_tidy(_save(df, tmp_path), fps=30)
    df = _table()
    df.loc[3, "keypoint"] = None
    with pytest.raises(InputError, match="column 'keypoint' is empty at row 4"):
        read_tidy(_save(df, tmp_path, "k.parquet"), fps=30)


def test_absurd_frame_numbers(tmp_path):
    df = _table(n_frames=2)
    df.loc[df["frame"] == 1, "frame"] = 10**12
    with pytest.raises(InputError, match="span 1000000000001 frames from frame 0"):
        read_tidy(_save(df, tmp_path), fps=30)
    df = _table(n_frames=2)
    df["time"] = df.pop("frame") * 1e6  # microseconds taken for seconds
    with pytest.raises(InputError, match="check the 'time' column"):
        read_tidy(_save(df, tmp_path), fps=30)


def test_keypoint_named_like_a_missing_value(tmp_path):
    t = read_tidy(_save(_table(keypoints=("NA", "nan", "1")), tmp_path), fps=30)
    assert t.keypoints == ("NA", "nan", "1")


def test_column_types_changing_late_in_a_csv(tmp_path):
    # Whole numbers for many rows, then decimals: the reader must not lock onto integers.
    df = _table(n_frames=20_000, keypoints=("nose",))
    df["x"] = df["x"].astype("int64").astype(object)
    df.loc[df.index[-1], "x"] = 1.5
    t = read_tidy(_save(df, tmp_path), fps=30)
    assert t.coords[-1, 0, 0, 0] == 1.5


def test_a_manifest_read_as_a_pose_table_says_to_give_it_as_the_manifest(tmp_path):
    """A folder given with its manifest.csv beside the pose files (as 'ethoscribe simulate'
    writes it), without --manifest: the manifest was read as a pose table and the user was told
    only that it lacked 'frame', 'keypoint', 'x' and 'y'."""
    path = tmp_path / "manifest.csv"
    path.write_text("session,path,fps,group\nmouse1,mouse1.csv,30,a\n")
    with pytest.raises(InputError, match=r"manifest\.csv: .*looks like a session manifest.*"
                       r"--manifest .*manifest\.csv"):  # fmt: skip
        read_tidy(path, fps=30)


def _wide_table(frame, first, n, keypoints, names, high=1.0):
    """A wide table of ``n`` frames numbered from ``first`` in column ``frame``: per keypoint
    the three columns ``names(k)`` (x, y: normal; confidence: uniform 0.2 to ``high``), seed 0."""
    rng = np.random.default_rng(0)
    table = pd.DataFrame({frame: np.arange(n) + first})
    for k in keypoints:
        x, y, confidence = names(k)
        table[x], table[y] = rng.normal(size=(2, n))
        table[confidence] = rng.uniform(0.2, high, n)
    return table


def test_a_wide_table_read_as_tidy_is_told_every_option_it_needs(tmp_path):
    # A tracker's wide export (frame_idx, nose_x, nose_y, nose_likelihood, ...): the refusal
    # names the pattern, the confidence word and the frame column in one go, and reading with
    # them works (seed 0).
    from ethoscribe.cli import command_line_message
    from ethoscribe.io import read_wide

    table = _wide_table(
        "frame_idx", 7, 20, ("nose", "tail_base"), lambda k: (f"{k}_x", f"{k}_y", f"{k}_likelihood")
    )
    path = tmp_path / "export.csv"
    table.to_csv(path, index=False)
    with pytest.raises(InputError, match="look like a wide table") as caught:
        read_tidy(path, fps=30)
    text = command_line_message(str(caught.value))
    assert (
        "pass --format wide --pattern '{keypoint}_{axis}' --columns confidence=likelihood "
        "--frame-column frame_idx;" in text
    )
    t = read_wide(path, fps=30, confidence_axis="likelihood", frame_column="frame_idx")
    assert t.meta["first_frame"] == 7
    np.testing.assert_allclose(t.confidence[:, 0, 0], table["nose_likelihood"])
    # Without such columns the plain advice stays.
    plain = table.drop(columns=["frame_idx", "nose_likelihood", "tail_base_likelihood"])
    plain.to_csv(path, index=False)
    with pytest.raises(InputError, match=r"--pattern '\{keypoint\}_\{axis\}'\); the tables"):
        read_tidy(path, fps=30)


@pytest.mark.parametrize(
    "sep, axes", [(".", "xy"), ("_", "xy"), ("-", "xy"), (" ", "xy"), (".", "XY")],
    ids=["dot", "underscore", "hyphen", "space", "capitals"],
)  # fmt: skip
def test_the_wide_options_suggested_read_the_file_when_followed_literally(tmp_path, sep, axes):
    # Columns 'snout.x', 'ear_L.x', 'snout.p': the refusal suggested the pattern
    # '{keypoint}_{axis}' whatever the separator, which then matched no column, and said
    # nothing of the '.p' confidence columns (values up to 1.08). Its command-line text, given
    # to the command's parser as it stands, must read the file (seed 0).
    import shlex
    import warnings

    from ethoscribe.cli import _reader_options, build_parser, command_line_message
    from ethoscribe.io import read_pose

    keypoints = ("snout", "ear_L", "tail_base")
    table = _wide_table(
        "frame_no", 3, 30, keypoints,
        lambda k: (f"{k}{sep}{axes[0]}", f"{k}{sep}{axes[1]}", f"{k}{sep}p"), high=1.08,
    )  # fmt: skip
    path = tmp_path / "wide.csv"
    table.to_csv(path, index=False)
    with pytest.raises(InputError, match="look like a wide table") as caught:
        read_tidy(path, fps=30)
    text = command_line_message(str(caught.value))
    suggested = text.partition("; pass ")[2].partition("; the tables")[0]
    assert f"--pattern '{{keypoint}}{sep}{{axis}}'" in suggested and "confidence=p" in suggested
    argv = ["discover", str(path), "--fps", "30", "--out", str(tmp_path / "out")]
    args = build_parser().parse_args([*argv, *shlex.split(suggested)])
    with warnings.catch_warnings():
        warnings.filterwarnings("error")
        warnings.filterwarnings("ignore", ".*confidence values a little above 1")
        t = read_pose(path, format=args.format, fps=args.fps, **_reader_options(args))
    assert t.keypoints == keypoints and t.meta["first_frame"] == 3
    np.testing.assert_array_equal(t.coords[:, 0, 1, 0], table[f"ear_L{sep}{axes[0]}"])
    np.testing.assert_allclose(t.confidence[:, 0, 2], np.minimum(table[f"tail_base{sep}p"], 1))


def test_keypoints_to_keep_may_be_one_text_of_names(tmp_path):
    # "--reader-option keypoints=nose,tail" reaches the reader as one text; read letter by
    # letter it asked for keypoints 'n', 'o', 's', 'e' ...
    p = _save(_table(), tmp_path)
    got = read_tidy(p, fps=30, keypoints="tail, nose")
    assert got.keypoints == ("tail", "nose")
    np.testing.assert_array_equal(
        got.coords, read_tidy(p, fps=30, keypoints=["tail", "nose"]).coords
    )


def test_keypoints_are_renamed_when_read(tmp_path):
    # One option for every file of a study: OLD=NEW as typed on the command line, or a
    # mapping; keypoints= then takes the new names.
    p = _save(_table(confidence=0.8), tmp_path)
    plain = read_tidy(p, fps=30)
    got = read_tidy(p, fps=30, rename_keypoints="nose=snout, tail=tail_base")
    assert got.keypoints == ("snout", "neck", "tail_base")
    np.testing.assert_array_equal(got.coords, plain.coords)
    picked = read_tidy(p, fps=30, rename_keypoints={"nose": "snout"}, keypoints="neck,snout")
    assert picked.keypoints == ("neck", "snout")
    np.testing.assert_array_equal(picked.coords, plain.coords[:, :, [1, 0]])
    # A file that already has the new name is read as it is, without a word (the other
    # files of the study); one with neither name is said, as a misspelt option may be.
    assert read_tidy(p, fps=30, rename_keypoints="snout=nose").keypoints == plain.keypoints
    with pytest.warns(InputWarning, match=r"rename_keypoints names 'noes', which the file does "
                      r"not have \(nor the new name\); its keypoints are \['nose'"):  # fmt: skip
        read_tidy(p, fps=30, rename_keypoints="noes=snout")
    with pytest.raises(InputError, match=r"several keypoints the name\(s\) \['neck'\]"):
        read_tidy(p, fps=30, rename_keypoints="nose=neck")
    with pytest.raises(InputError, match=r"OLD=NEW pairs .*got 'nose:snout'"):
        read_tidy(p, fps=30, rename_keypoints="nose:snout")


def test_names_differing_only_in_case_or_spaces_are_one_keypoint(tmp_path):
    # 'Nose ' on every other frame beside 'nose': kept apart, each was missing wherever the
    # other was written, and the study's keypoint sets differed from the other sessions'.
    df = _table(n_frames=6, confidence=0.8)
    plain = read_tidy(_save(df, tmp_path, "plain.csv"), fps=30)
    odd = (df["keypoint"] == "nose") & (df["frame"] % 2 == 1)
    df.loc[odd, "keypoint"] = "Nose "
    with pytest.warns(InputWarning, match=r"differ only in case or spaces.*'Nose ' as 'nose'"):
        got = read_tidy(_save(df, tmp_path), fps=30)
    assert got.keypoints == plain.keypoints
    np.testing.assert_array_equal(got.coords, plain.coords)


def test_times_of_a_jittered_camera_clock_give_the_frames(tmp_path):
    # 5 min at 30 fps, 2 % of frames dropped, each time stamp off by ~2 ms (a camera clock):
    # the rate fitted over the times (not the median step rounded over the whole span, which
    # gave 29.95 fps on such times and a refusal) puts every time on its frame.
    from ethoscribe.io._timing import frames_from_times

    rng = np.random.default_rng(1)
    true = np.sort(rng.choice(9000, 8820, replace=False))
    times = 3.0 + true / 30.0 + rng.normal(0, 0.002, true.size)
    frames, fps, t0 = frames_from_times(times, None, "clock.csv")
    np.testing.assert_array_equal(frames, true - true[0])
    assert fps == 30.0 and t0 == times[0]
    # a rate that changes halfway (30 then 25 fps) is still refused
    changing = np.r_[np.arange(300) / 30.0, 10.0 + np.arange(1, 251) / 25.0]
    with pytest.raises(InputError, match="not on a steady frame rate"):
        frames_from_times(changing, None, "changing.csv")
