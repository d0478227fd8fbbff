"""Another lab's exports: keypoints in another order, mixed formats and column names,
wide tables given as tidy ones, misspelled keypoints, mixed single- and multi-animal sessions."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from ethoscribe.cli import command_line_message
from ethoscribe.errors import InputError, InputWarning
from ethoscribe.io import load_study, read_folder, read_tidy, write_nwb, write_tidy
from ethoscribe.pose import PoseTracks, check_same_body_plan, match_keypoint_order
from ethoscribe.workspace.reading import plan_sessions

KEYPOINTS = ("nose", "neck", "tail")


def _tracks(seed=0, n=20, keypoints=KEYPOINTS, animals=1):
    rng = np.random.default_rng(seed)  # seeds 0 and 1
    coords = rng.normal(size=(n, animals, len(keypoints), 2))
    return PoseTracks(coords, keypoints=list(keypoints), fps=30, session=f"s{seed}")


def _tidy(tracks, order):
    """Rows frame by frame with the keypoints in ``order`` (as another tool writes them)."""
    rows = []
    for f in range(tracks.n_frames):
        for k in order:
            x, y = tracks.coords[f, 0, tracks.keypoint_index(k)]
            rows.append({"frame": f, "keypoint": k, "x": x, "y": y, "confidence": 0.9})
    return pd.DataFrame(rows)


def test_sessions_with_keypoints_in_another_order_are_read_in_the_first_ones_order(tmp_path):
    a, b = _tracks(0), _tracks(1)
    _tidy(a, KEYPOINTS).to_csv(tmp_path / "a.csv", index=False)
    table = _tidy(b, ("tail", "nose", "neck"))
    table.to_csv(tmp_path / "b.csv", index=False)
    assert read_tidy(tmp_path / "b.csv", fps=30).keypoints == ("tail", "nose", "neck")
    first, second = read_folder(tmp_path, fps=30, progress=False)
    assert first.keypoints == second.keypoints == KEYPOINTS
    # Reference: the file's own rows of each keypoint, pivoted by pandas.
    for k, name in enumerate(KEYPOINTS):
        rows = table[table["keypoint"] == name].sort_values("frame")
        np.testing.assert_allclose(second.coords[:, 0, k, 0], rows["x"].to_numpy())
        np.testing.assert_allclose(second.coords[:, 0, k, 1], rows["y"].to_numpy())
    manifest = tmp_path / "m.csv"
    manifest.write_text("session,path,fps\nm1,a.csv,30\nm2,b.csv,30\n")
    assert [s.keypoints for s in load_study(manifest, progress=False)] == [KEYPOINTS] * 2


def test_match_keypoint_order_leaves_other_keypoint_sets_to_the_check():
    a, c = _tracks(0), _tracks(1, keypoints=("nose", "snout", "neck"))  # one renamed
    assert match_keypoint_order([a, c])[1] is c
    few = _tracks(1, keypoints=("nose",))  # 1 of 3: too little of the body to score
    assert match_keypoint_order([a, few])[1] is few
    with pytest.raises(InputError, match=r"'s1' has 1 of the 3: .* at least 60 % of them"):
        check_same_body_plan([a, few])
    (moved,) = match_keypoint_order([a], keypoints=("tail", "neck", "nose"))
    np.testing.assert_array_equal(moved.coords[:, :, ::-1], a.coords)


@pytest.mark.parametrize("lacking_first", [False, True])
def test_a_session_lacking_a_keypoint_is_read_with_it_never_seen(lacking_first):
    # A keypoint added to the tracker during the study: the earlier sessions lack it.
    full, part = _tracks(0), _tracks(1, keypoints=("tail", "nose"))
    given = [part, full] if lacking_first else [full, part]
    with pytest.warns(InputWarning, match=r"are lacking; read as never seen.*'s1' \(neck\)"):
        out = match_keypoint_order(given)
    for s in out:
        assert s.keypoints == KEYPOINTS
    read = out[0] if lacking_first else out[1]
    assert np.isnan(read.coords[:, :, 1]).all() and (read.confidence[:, :, 1] == 0).all()
    np.testing.assert_array_equal(read.coords[:, :, 0], part.coords[:, :, 1])  # nose
    np.testing.assert_array_equal(read.coords[:, :, 2], part.coords[:, :, 0])  # tail
    check_same_body_plan(out)  # one study now
    # A new cohort labelled with a model's keypoints: the same reading.
    with pytest.warns(InputWarning, match="never seen"):
        (cohort,) = match_keypoint_order([part], keypoints=KEYPOINTS)
    assert cohort.keypoints == KEYPOINTS


def test_a_misspelled_keypoint_names_the_file_and_the_likely_name(tmp_path):
    a, b = _tracks(0), _tracks(1)
    _tidy(a, KEYPOINTS).to_csv(tmp_path / "a.csv", index=False)
    bad = _tidy(b, KEYPOINTS).replace({"keypoint": {"nose": "nsoe"}})
    bad.to_csv(tmp_path / "b.csv", index=False)
    with pytest.raises(
        InputError, match=r"session 'b' .* in \S+b\.csv\..*'nsoe' looks like 'nose'"
    ) as caught:
        read_folder(tmp_path, fps=30, progress=False)
    # The reader option it names reads the study (the advice was "rename it", with no way to).
    text = command_line_message(str(caught.value))
    assert "pass --reader-option rename_keypoints=nsoe=nose to read it so" in text
    _, b_read = read_folder(tmp_path, fps=30, progress=False, rename_keypoints="nsoe=nose")
    assert b_read.keypoints == KEYPOINTS
    np.testing.assert_array_equal(b_read.coords, b.coords)


def test_a_keypoint_one_session_names_otherwise_is_told_the_rename_that_reads_it(tmp_path):
    # One session of three calls 'nose' 'snout' (not a misspelling): the refusal said "rename
    # or drop keypoints when reading", and the command line had no way to rename. It now names
    # the odd session's keypoint and the study's, and that reader option reads the study.
    from ethoscribe.cli import _option

    tracks = [_tracks(s) for s in range(3)]
    for s, t in enumerate(tracks):
        names = ("snout", "neck", "tail") if s == 0 else KEYPOINTS  # the first is the odd one
        _tidy(t.replace(keypoints=names), names).to_csv(tmp_path / f"s{s}.csv", index=False)
    with pytest.raises(InputError, match="must share one keypoint set") as caught:
        read_folder(tmp_path, fps=30, progress=False)
    text = command_line_message(str(caught.value))
    assert (
        "If 'snout' of session 's0' is 'nose' of session 's1', pass --reader-option "
        "rename_keypoints=snout=nose to read it so." in text
    )
    name, value = _option(text.partition("--reader-option ")[2].split(" ")[0])
    sessions = read_folder(tmp_path, fps=30, progress=False, **{name: value})
    assert [s.keypoints for s in sessions] == [KEYPOINTS] * 3
    np.testing.assert_array_equal(sessions[0].coords, tracks[0].coords)
    # Keypoints that differ otherwise are shown the option's form.
    names = ("hip", "paw", "tail")
    _tidy(tracks[2].replace(keypoints=names), names).to_csv(tmp_path / "s2.csv", index=False)
    (tmp_path / "s0.csv").unlink()
    with pytest.raises(InputError, match=r"another name, pass rename_keypoints=\{'OLD': 'NEW'\}"):
        read_folder(tmp_path, fps=30, progress=False)


def test_a_wide_table_read_as_tidy_says_how_to_read_it(tmp_path):
    wide = pd.DataFrame({"Frame": [0, 1], "Nose_x": [1.0, 2], "Nose_y": [3.0, 4],
                         "Tail Base_x": [5.0, 6], "Tail Base_y": [7.0, 8]})  # fmt: skip
    wide.to_csv(tmp_path / "w.csv", index=False)
    with pytest.raises(InputError, match=r"w\.csv: no 'keypoint' column.*format='wide'"):
        read_tidy(tmp_path / "w.csv", fps=30)


def test_a_column_mapping_spares_files_that_already_name_the_column(tmp_path):
    a = _tracks(0)
    _tidy(a, KEYPOINTS).to_csv(tmp_path / "a.csv", index=False)
    other = _tidy(a, KEYPOINTS).rename(columns={"confidence": "likelihood"})
    other["likelihood"] = 0.4
    other.to_csv(tmp_path / "b.csv", index=False)
    mapping = {"confidence": "likelihood"}
    assert np.all(read_tidy(tmp_path / "a.csv", fps=30, columns=mapping).confidence == 0.9)
    assert np.all(read_tidy(tmp_path / "b.csv", fps=30, columns=mapping).confidence == 0.4)


def test_table_options_go_to_the_tables_of_a_study_with_nwb_files(tmp_path):
    pytest.importorskip("ndx_pose")
    a = _tracks(0)
    _tidy(a, KEYPOINTS).to_csv(tmp_path / "a.csv", index=False)
    write_nwb(_tracks(1), tmp_path / "b.nwb")
    options = {"columns": {"confidence": "likelihood"}}
    plan = plan_sessions([tmp_path], fps=30, reader_options=options)
    by_format = {e["format"]: e["options"] for e in plan}
    assert by_format == {"tidy": options, "nwb": {}}
    with pytest.raises(InputError, match="has no option"):  # taken by no reader: refused
        plan_sessions([tmp_path], fps=30, reader_options={"pattern": "{keypoint}_{axis}"})


def test_command_line_messages_name_the_options_that_exist():
    text = "pass social=False or fit single- and multi-animal sessions apart"
    assert command_line_message(text).startswith("pass --no-social or")
    text = "resample them to one rate, e.g. the lowest, with cleaning={'target_fps': 25}"
    assert command_line_message(text).endswith("with --target-fps 25")


def test_discover_without_social_features_fits_single_and_paired_sessions(tmp_path):
    from ethoscribe.workspace import discover

    rng = np.random.default_rng(5)  # seed 5
    body = np.array([[10.0, 0.0], [5.0, 0.0], [0.0, 0.0]])
    for name, animals in (("single", 1), ("pair", 2)):
        coords = np.cumsum(rng.normal(size=(300, animals, 3, 2)), axis=0) + body
        write_tidy(PoseTracks(coords, keypoints=KEYPOINTS, fps=30), tmp_path / f"{name}.csv")
    files = [tmp_path / "single.csv", tmp_path / "pair.csv"]
    # by default the social features are left out (said), as social=False leaves them out
    with pytest.warns(InputWarning, match=r"left out: sessions have 1 or 2 animals.*'single'"):
        discover(files, tmp_path / "ws0", fps=30, states=2, progress=False, stability=False,
                 axis=("tail", "nose"))  # fmt: skip
    discover(files, tmp_path / "ws", fps=30, states=2, progress=False, stability=False,
              axis=("tail", "nose"), social=False)  # fmt: skip
    for ws in ("ws0", "ws"):
        labels = pd.read_parquet(tmp_path / ws / "labels.parquet")
        assert sorted(labels.groupby("session")["animal"].nunique().items()) == [
            ("pair", 2), ("single", 1)
        ]  # fmt: skip
    said = json.loads((tmp_path / "ws0" / "summary.json").read_text())["features"]
    assert not said["social"] and "1 or 2 animals" in said["social_report"]
    assert (
        json.loads((tmp_path / "ws" / "summary.json").read_text())["features"]["social_report"]
        == ""
    )


def test_agreement_maps_the_coding_onto_resampled_labels(tmp_path):
    """Sessions at 30 and 60 fps resampled to 30: a coding made at each file's own frame rate
    is compared on the labels' frames (frame g at 30 fps starts at g / 30 s, inside input
    frame 2g at 60 fps), not on equal frame numbers."""
    from ethoscribe.workspace import discover
    from ethoscribe.workspace.expert import agreement, read_coding

    rng = np.random.default_rng(6)  # seed 6
    body = np.array([[10.0, 0.0], [5.0, 0.0], [0.0, 0.0]])
    rows = []
    for name, fps in (("slow", 30), ("fast", 60)):
        n = 10 * fps  # 10 s each
        coords = np.cumsum(rng.normal(size=(n, 1, 3, 2)), axis=0) + body
        write_tidy(PoseTracks(coords, keypoints=KEYPOINTS, fps=fps), tmp_path / f"{name}.csv")
        half = n // 2
        rows.append(pd.DataFrame({"session": name, "frame": np.arange(n),
                                  "behaviour": ["a"] * half + ["b"] * (n - half)}))  # fmt: skip
    pd.concat(rows).to_csv(tmp_path / "coding.csv", index=False)
    (tmp_path / "m.csv").write_text("session,path,fps\nslow,slow.csv,30\nfast,fast.csv,60\n")
    ws = tmp_path / "ws"
    discover([], ws, manifest=tmp_path / "m.csv", states=2, progress=False, stability=False,
             axis=("tail", "nose"), cleaning={"target_fps": 30})  # fmt: skip
    coded = read_coding(ws, tmp_path / "coding.csv")
    fast = coded[coded["session"] == "fast"]
    assert fast["frame"].tolist() == list(range(300))  # 10 s at 30 fps
    assert (fast["behaviour"] == "a").sum() == 150  # input frames 0-299 of 600: the first 5 s
    result = agreement(ws, tmp_path / "coding.csv", tmp_path / "agreement")
    assert result.summary["frames_compared"] == 600 and result.summary["frames_unscored"] == 0
    assert result.summary["seconds_compared"] == pytest.approx(20.0)


def test_mixed_units_name_the_sessions_in_pixels():
    from ethoscribe.features import FeaturePipeline

    a, b = _tracks(0), _tracks(1)
    a = a.replace(units="mm")
    with pytest.raises(InputError, match=r"mix units \['mm', 'px'\].*sessions 's1' are in pixels"):
        FeaturePipeline().fit([a, b])


def test_the_axis_hint_reads_as_the_command_line_option():
    text = "unreliable automatic body axis: ...; pass axis=(tail_side, head_side)"
    assert command_line_message(text).endswith("pass --axis tail_side,head_side")


def test_manifest_rows_naming_absent_files_are_said_when_a_folder_is_given(tmp_path):
    from ethoscribe.errors import InputWarning

    write_tidy(_tracks(0), tmp_path / "a.csv")
    (tmp_path / "m.csv").write_text("session,path,fps\na,a.csv,30\nb,b.csv,30\n")
    with pytest.warns(InputWarning, match=r"1 row\(s\) name a file that does not exist.*'b'"):
        plan = plan_sessions([tmp_path], manifest=tmp_path / "m.csv")
    assert [e["session"] for e in plan] == ["a"]


def test_manifest_rows_whose_file_is_read_by_session_name_instead_are_said(tmp_path):
    # With a folder and a manifest, a row whose path names a missing file ('s_3.csv'), or the
    # file of another row, was given the folder's file named like its session without a word.
    import warnings

    from ethoscribe.errors import InputWarning

    for name in ("s_01", "s_02", "s_03"):
        write_tidy(_tracks(0), tmp_path / f"{name}.csv")
    rows = "session,path,fps\ns_01,s_01.csv,30\ns_02,{},30\ns_03,s_03.csv,30\n"
    (tmp_path / "m.csv").write_text(rows.format("s_2.csv"))
    with pytest.warns(InputWarning, match=r"m\.csv: 1 row\(s\) do not name a file of their own: "
                      r"row 2 \(session 's_02'\): \S+s_2\.csv does not exist; \S+s_02\.csv, named "
                      r"like the session, is read for it instead"):  # fmt: skip
        plan = plan_sessions([tmp_path], manifest=tmp_path / "m.csv")
    assert [Path(e["path"]).name for e in plan] == ["s_01.csv", "s_02.csv", "s_03.csv"]
    (tmp_path / "m.csv").write_text(rows.format("s_03.csv"))
    with pytest.warns(InputWarning, match=r"row 2 \(session 's_02'\): \S+s_03\.csv is also the "
                      r"path of row 3 \(session 's_03'\); \S+s_02\.csv, named like"):  # fmt: skip
        plan = plan_sessions([tmp_path], manifest=tmp_path / "m.csv")
    assert [(e["session"], Path(e["path"]).name) for e in plan] == [
        ("s_01", "s_01.csv"), ("s_02", "s_02.csv"), ("s_03", "s_03.csv")]  # fmt: skip
    # Without a file named like it, a row naming another's file is said to be left out.
    (tmp_path / "s_02.csv").unlink()
    with pytest.warns(InputWarning, match=r"s_03\.csv is also the path of row 3 .*; the row is "
                      r"left out"):  # fmt: skip
        plan = plan_sessions([tmp_path], manifest=tmp_path / "m.csv")
    assert [e["session"] for e in plan] == ["s_01", "s_03"]
    # Rows naming their own files: nothing to say.
    (tmp_path / "m.csv").write_text("session,path,fps\ns_01,s_01.csv,30\ns_03,s_03.csv,30\n")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        plan_sessions([tmp_path], manifest=tmp_path / "m.csv")


def test_a_session_shorter_than_one_bout_is_said(tmp_path):
    from ethoscribe.errors import InputWarning
    from ethoscribe.workspace import discover

    rng = np.random.default_rng(7)  # seed 7
    body = np.array([[10.0, 0.0], [5.0, 0.0], [0.0, 0.0]])
    for name, n in (("long", 300), ("short", 6)):
        coords = np.cumsum(rng.normal(size=(n, 1, 3, 2)), axis=0) + body
        write_tidy(PoseTracks(coords, keypoints=KEYPOINTS, fps=30), tmp_path / f"{name}.csv")
    files = [tmp_path / "long.csv", tmp_path / "short.csv"]
    with pytest.warns(InputWarning, match=r"'short' \(0\.2 s\) last less than one bout"):
        discover(files, tmp_path / "ws", fps=30, states=2, progress=False, stability=False,
                 axis=("tail", "nose"))  # fmt: skip


def test_capitalised_columns_get_a_ready_column_mapping(tmp_path):
    a = _tidy(_tracks(0), KEYPOINTS).rename(columns={"frame": "Frame", "x": "X", "y": "Y"})
    a.to_csv(tmp_path / "a.csv", index=False)
    with pytest.raises(InputError, match=r"missing column\(s\) \['frame', 'x', 'y'\]") as info:
        read_tidy(tmp_path / "a.csv", fps=30)
    assert "--columns frame=Frame,x=X,y=Y" in command_line_message(str(info.value))
    mapping = {"frame": "Frame", "x": "X", "y": "Y"}
    t = read_tidy(tmp_path / "a.csv", fps=30, columns=mapping)
    np.testing.assert_allclose(t.coords, _tracks(0).coords)  # the tracks written above


def test_boundary_f1_is_said_not_measurable_without_boundaries_inside_coded_stretches():
    from ethoscribe.segment.expert_agreement import expert_agreement
    from ethoscribe.workspace.expert import describe_agreement

    frames = pd.DataFrame({"session": "s", "animal": "a", "fps": 10.0,
                           "frame": [*range(0, 20), *range(30, 50)],
                           "behaviour": ["walk"] * 20 + ["rest"] * 20,
                           "motif": (["m1"] * 10 + ["m2"] * 10) * 2})  # fmt: skip
    result = expert_agreement(frames, 0.2)
    assert result.summary["boundaries_expert"] == 0
    assert "boundary F1 not measurable" in describe_agreement(result, "out")
    frames["frame"] = range(40)  # one stretch: the walk -> rest change is a boundary inside it
    result = expert_agreement(frames, 0.2)
    assert result.summary["boundaries_expert"] == 1
    assert "boundary F1 0." in describe_agreement(result, "out")


def _wide(tracks, word):
    cols = {"frame": np.arange(tracks.n_frames)}
    for k, name in enumerate(tracks.keypoints):
        cols[f"{name}_x"], cols[f"{name}_y"] = tracks.coords[:, 0, k].T
        cols[f"{name}_{word}"] = np.full(tracks.n_frames, 0.7 if word == "likelihood" else 0.3)
    return pd.DataFrame(cols)


def test_a_manifest_format_column_reads_tidy_and_wide_tables_as_one_study(tmp_path):
    from ethoscribe.io import read_wide

    a, b = _tracks(0), _tracks(1)
    _tidy(a, KEYPOINTS).rename(columns={"confidence": "likelihood"}).to_csv(
        tmp_path / "a.csv", index=False
    )
    _wide(b, "confidence").to_csv(tmp_path / "b.csv", index=False)
    (tmp_path / "m.csv").write_text("session,path,fps,format\na,a.csv,30,\nb,b.csv,30,wide\n")
    options = {"columns": {"confidence": "likelihood"}, "frame_column": "frame"}
    plan = plan_sessions([], manifest=tmp_path / "m.csv", reader_options=options)
    assert [e["format"] for e in plan] == ["tidy", "wide"]
    assert plan[0]["options"] == {"columns": {"confidence": "likelihood"}}  # no frame_column
    # The wide file names its confidence 'confidence', not the mapped 'likelihood': read so.
    t = read_wide(tmp_path / "b.csv", fps=30, frame_column="frame", columns=options["columns"])
    np.testing.assert_allclose(t.confidence, 0.3)
    np.testing.assert_allclose(t.coords, b.coords)
    _wide(b, "likelihood").to_csv(tmp_path / "c.csv", index=False)
    t = read_wide(tmp_path / "c.csv", fps=30, frame_column="frame", columns=options["columns"])
    np.testing.assert_allclose(t.confidence, 0.7)
    studied = load_study(tmp_path / "m.csv", progress=False, columns=options["columns"])
    assert [s.meta["source_format"] for s in studied] == ["tidy", "wide"]


def test_mixed_frame_rates_are_refused_before_reading_and_leave_no_folder(tmp_path, monkeypatch):
    from ethoscribe.workspace import discover, runs

    for name, fps in (("slow", 30), ("fast", 60)):
        write_tidy(_tracks(0, n=2 * fps).replace(fps=fps), tmp_path / f"{name}.csv")
    (tmp_path / "m.csv").write_text("session,path,fps\nslow,slow.csv,30\nfast,fast.csv,60\n")
    monkeypatch.setattr(runs, "_prepare", None)  # reading would call it: it must not be reached
    # The sessions at each rate are named (the user saw only the rates before)
    with pytest.raises(
        InputError, match=r"30 fps \('slow'\), 60 fps \('fast'\).*'target_fps': 30\}"
    ):
        discover([], tmp_path / "ws", manifest=tmp_path / "m.csv", progress=False)
    assert not (tmp_path / "ws").exists()


def test_an_expert_coding_with_capitalised_columns_says_which_to_rename(tmp_path):
    from ethoscribe.io.expert import CodedSession, read_expert_coding

    coding = pd.DataFrame({"Session": ["s"], "Behaviour": ["walk"], "start_s": [0.0],
                           "stop_s": [1.0]})  # fmt: skip
    coding.to_csv(tmp_path / "coding.csv", index=False)
    sessions = {"s": CodedSession(30.0, 60, ("animal0",))}
    with pytest.raises(InputError, match=r"Column 'Session' looks like 'session': rename it"):
        read_expert_coding(tmp_path / "coding.csv", sessions)
    coding.columns = [c.lower() for c in coding.columns]
    coding.to_csv(tmp_path / "coding.csv", index=False)
    coded = read_expert_coding(tmp_path / "coding.csv", sessions)
    assert coded["frame"].tolist() == list(range(30))  # 0 to 1 s at 30 fps: frames 0-29


def test_label_reorders_keypoints_and_names_a_misspelled_one(tmp_path):
    from ethoscribe.workspace import discover, label_sessions

    rng = np.random.default_rng(8)  # seed 8
    body = np.array([[10.0, 0.0], [5.0, 0.0], [0.0, 0.0]])
    coords = np.cumsum(rng.normal(size=(300, 1, 3, 2)), axis=0) + body
    tracks = PoseTracks(coords, keypoints=KEYPOINTS, fps=30, session="rec")
    write_tidy(tracks, tmp_path / "rec.csv")
    discover([tmp_path / "rec.csv"], tmp_path / "ws", fps=30, states=2, progress=False,
             stability=False, axis=("tail", "nose"))  # fmt: skip
    new = tmp_path / "new"
    new.mkdir()
    _tidy(tracks, ("tail", "nose", "neck")).to_csv(new / "rec.csv", index=False)
    label_sessions(tmp_path / "ws", [new / "rec.csv"], tmp_path / "out", fps=30, progress=False)
    # The same recording with its keypoints listed in another order: the same labels.
    a = pd.read_parquet(tmp_path / "ws" / "labels.parquet")
    b = pd.read_parquet(tmp_path / "out" / "labels.parquet")
    assert b["state"].tolist() == a["state"].tolist()
    _tidy(tracks, KEYPOINTS).replace({"keypoint": {"nose": "nsoe"}}).to_csv(
        new / "rec.csv", index=False
    )
    with pytest.raises(InputError, match=r"missing \['nose'\], extra \['nsoe'\].*'nsoe' looks "
                       r"like 'nose': pass rename_keypoints=\{'nsoe': 'nose'\}"):  # fmt: skip
        label_sessions(tmp_path / "ws", [new / "rec.csv"], tmp_path / "out2", fps=30,
                       progress=False)  # fmt: skip
    assert not (tmp_path / "out2").exists()
    # That reader option labels it as the recording with the right name.
    rename = {"rename_keypoints": {"nsoe": "nose"}}
    label_sessions(tmp_path / "ws", [new / "rec.csv"], tmp_path / "out2", fps=30,
                   progress=False, reader_options=rename)  # fmt: skip
    c = pd.read_parquet(tmp_path / "out2" / "labels.parquet")
    assert c["state"].tolist() == a["state"].tolist()


def test_manifest_columns_spelt_otherwise_are_named_with_the_fix(tmp_path):
    from ethoscribe.errors import InputWarning
    from ethoscribe.io import read_manifest

    write_tidy(_tracks(0), tmp_path / "a.csv")
    (tmp_path / "m.csv").write_text("Session,Path\na,a.csv\n")
    with pytest.raises(InputError, match=r"Column 'Session' looks like 'session': rename it"):
        read_manifest(tmp_path / "m.csv")
    (tmp_path / "m.csv").write_text("session;path\na;a.csv\n")
    with pytest.raises(InputError, match="separated by ';'"):
        read_manifest(tmp_path / "m.csv")
    (tmp_path / "m.csv").write_text("session,path\na,.\\\\a.csv\n")
    with pytest.raises(InputError, match=r"Write paths with '/'"):
        read_manifest(tmp_path / "m.csv")
    (tmp_path / "m.csv").write_text("session,path,FPS\na,a.csv,30\n")
    with pytest.warns(InputWarning, match=r"'FPS' looks like 'fps'"):
        table = read_manifest(tmp_path / "m.csv")
    assert "fps" not in table.columns and table["FPS"].tolist() == [30]


def test_frame_numbers_going_up_by_two_are_said(tmp_path):
    from ethoscribe.errors import InputWarning

    table = _tidy(_tracks(0), KEYPOINTS)
    table["frame"] *= 2
    table.to_csv(tmp_path / "a.csv", index=False)
    with pytest.warns(InputWarning, match=r"go up by 2 \(only one frame in 2 has rows\)"):
        t = read_tidy(tmp_path / "a.csv", fps=60)
    assert t.n_frames == 39 and np.isnan(t.coords[1::2]).all()  # 20 numbered frames, 19 between


def test_a_keypoint_missing_on_most_frames_is_said():
    import warnings

    from ethoscribe.errors import InputWarning
    from ethoscribe.workspace.runs import _warn_unseen_keypoints

    def quality(session, animal, after):
        return pd.DataFrame({"session": session, "animal": animal, "keypoint": ["nose", "tail"],
                             "frac_missing_after": after})  # fmt: skip

    seen = [quality("a", "m1", [0.0, 0.89]), quality("b", "m1", [0.1, 0.2])]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        _warn_unseen_keypoints(seen)  # below 90 %: nothing said
    lost = [*seen, quality("c", "m1", [0.0, 1.0])]
    with pytest.warns(InputWarning, match=r"'tail' in session 'c' \(100%\) \(quality\.csv\)"):
        _warn_unseen_keypoints(lost)
    pairs = [quality("c", "m1", [0.0, 1.0]), quality("c", "m2", [0.0, 0.0])]
    with pytest.warns(InputWarning, match=r"'tail' in session 'c' \(animal 'm1'\) \(100%\)"):
        _warn_unseen_keypoints(pairs)


def test_a_confidence_threshold_that_removes_much_of_the_tracking_is_said():
    # A tracker whose confidences run lower: with the example sessions' confidences halved,
    # 81 % of the points fell below 0.5 and the run said nothing (filled, not seen).
    import warnings

    from ethoscribe.errors import InputWarning
    from ethoscribe.workspace.runs import _warn_low_confidence

    def quality(low):
        return pd.DataFrame({"session": "a", "animal": "m1", "keypoint": ["nose", "tail"],
                             "frac_low_confidence": low})  # fmt: skip

    with warnings.catch_warnings():
        warnings.simplefilter("error")
        _warn_low_confidence([quality([0.02, 0.4])], 0.5)  # 21 %: nothing said
        _warn_low_confidence([quality([0.9, 0.9])], None)  # no threshold: nothing masked
    with pytest.warns(
        InputWarning, match=r"81% of the keypoint positions .* \(min_confidence=0.5, times"
    ):
        _warn_low_confidence([quality([0.8, 0.82])], 0.5)


def test_a_study_whose_tracker_rates_points_low_is_cleaned_on_its_scale_and_said(tmp_path):
    # Invented animals (the package's simulator) written with their confidences halved, as a
    # tracker rating on 0-0.5 would: the run masks the points it masks in the files as
    # simulated, gives the same labels, and says so in a warning and in the report.
    from ethoscribe.simulate import simulate_session
    from ethoscribe.workspace import Workspace, discover
    from ethoscribe.workspace.report_sections import quality_section

    files = {1.0: [], 0.5: []}
    for seed in (1, 2):
        tracks, _ = simulate_session(duration_s=20, fps=25, seed=seed, session=f"s{seed}")
        for factor, paths in files.items():
            path = tmp_path / f"x{factor}" / f"s{seed}.csv"
            path.parent.mkdir(exist_ok=True)
            write_tidy(tracks.replace(confidence=tracks.confidence * factor), path)
            paths.append(path)
    options = {"fps": 25, "states": 3, "progress": False, "stability": False}
    with pytest.warns(InputWarning, match=r"run low in session\(s\) 's1', 's2' \(90% of the "
                      r"points below 0.5: threshold 0.25\): .* --confidence-scale 1"):  # fmt: skip
        discover(files[0.5], tmp_path / "low", **options)
    discover(files[1.0], tmp_path / "as_simulated", **options)
    used = json.loads((tmp_path / "low" / "summary.json").read_text())["cleaning"]["used"]
    assert (used["confidence_scale"], used["confidence_threshold"]) == (0.5, 0.25)
    text = quality_section(Workspace(tmp_path / "low")).text
    assert "points were masked below 0.25 in 's1', 's2'." in text
    # a scale given, not read from the files: applied, and not said to be read
    import warnings

    with warnings.catch_warnings(record=True) as said:
        warnings.simplefilter("always")
        given = {**options, "cleaning": {"confidence_scale": 0.5}}
        discover(files[1.0], tmp_path / "given", **given)
    assert not any("run low" in str(w.message) for w in said)
    used = json.loads((tmp_path / "given" / "summary.json").read_text())["cleaning"]["used"]
    assert used["confidence_threshold"] == 0.25
    assert "Confidences that run low" not in quality_section(Workspace(tmp_path / "given")).text
    labels = [pd.read_csv(tmp_path / w / "labels.csv") for w in ("low", "as_simulated")]
    pd.testing.assert_frame_equal(labels[0], labels[1])


def test_a_study_whose_tracker_writes_percent_gives_the_labels_of_the_unit_scale(tmp_path):
    # Invented animals (the package's simulator) written with their confidences in percent,
    # as some exports do (0-100): read as percent, said once per file, and the run gives the
    # labels of the files as simulated. Before, every file was refused.
    from ethoscribe.simulate import simulate_session
    from ethoscribe.workspace import discover

    for seed in (1, 2):
        tracks, _ = simulate_session(duration_s=20, fps=25, seed=seed, session=f"s{seed}")
        for folder in ("unit", "percent"):
            (tmp_path / folder).mkdir(exist_ok=True)
            write_tidy(tracks, tmp_path / folder / f"s{seed}.csv")
        table = pd.read_csv(tmp_path / "unit" / f"s{seed}.csv")
        table["confidence"] *= 100
        table.to_csv(tmp_path / "percent" / f"s{seed}.csv", index=False)
    options = {"fps": 25, "states": 3, "progress": False, "stability": False}
    with pytest.warns(InputWarning) as said:
        discover(sorted((tmp_path / "percent").glob("*.csv")), tmp_path / "p", **options)
    percent = sorted(str(w.message) for w in said if "from 0 to 100 is read" in str(w.message))
    assert [text.split(":")[0] for text in percent] == ["s1.csv", "s2.csv"]
    discover(sorted((tmp_path / "unit").glob("*.csv")), tmp_path / "u", **options)
    labels = [pd.read_csv(tmp_path / w / "labels.csv") for w in ("p", "u")]
    pd.testing.assert_frame_equal(labels[0], labels[1])


def test_a_study_filmed_at_a_raised_frame_rate_is_cleaned_and_said(tmp_path):
    # Invented animals (the package's simulator) written as a 25-fps camera would be into
    # 30-fps files: every fifth image shown twice. The run fills the repeats, says so, and
    # the summary and the report's data quality say how many.
    from ethoscribe.simulate import simulate_session
    from ethoscribe.workspace import Workspace, discover
    from ethoscribe.workspace.report_sections import quality_section

    files = []
    for seed in (1, 2):
        tracks, _ = simulate_session(duration_s=20, fps=25, seed=seed, session=f"s{seed}")
        frames = np.arange(tracks.n_frames)
        idx = np.repeat(frames, np.where(frames % 5 == 4, 2, 1))
        raised = tracks.replace(coords=tracks.coords[idx], confidence=tracks.confidence[idx])
        write_tidy(raised.replace(fps=30.0), tmp_path / f"s{seed}.csv")
        files.append(tmp_path / f"s{seed}.csv")
    with pytest.warns(InputWarning, match=r"'s1' \(16%\), 's2' \(16%\) were filled"):
        discover(files, tmp_path / "ws", fps=30, states=2, progress=False, stability=False)
    used = json.loads((tmp_path / "ws" / "summary.json").read_text())["cleaning"]["used"]
    assert used["repeated_frames"] == 99  # 100 repeats; the last ends the file: kept
    text = quality_section(Workspace(tmp_path / "ws")).text
    assert "repeated the frame before exactly" in text and "'s1' (99)" in text


def test_a_study_whose_lost_points_were_written_as_zeros_is_cleaned_and_said(tmp_path):
    # Invented animals (the package's simulator) exported with every lost point (missing, or
    # confidence below 0.5) written as 0, 0 and no confidence column. The run sets them
    # missing, says so, and the summary and the report's data quality count them; the labels
    # equal those of the same files with the lost points left empty.
    from ethoscribe.simulate import simulate_session
    from ethoscribe.workspace import Workspace, discover
    from ethoscribe.workspace.report_sections import quality_section

    zeros, empty = [], []
    for seed in (1, 2):
        tracks, _ = simulate_session(duration_s=20, fps=25, seed=seed, session=f"s{seed}")
        lost = ~np.isfinite(tracks.coords).all(-1) | (tracks.confidence < 0.5)
        lost[100:160, 0, :3] = True  # and three keypoints lost together for a while
        for value, files in ((0.0, zeros), (np.nan, empty)):
            coords = np.where(lost[..., None], value, tracks.coords)
            path = tmp_path / ("zeros" if value == 0 else "empty") / f"s{seed}.csv"
            path.parent.mkdir(exist_ok=True)
            write_tidy(tracks.replace(coords=coords, confidence=None), path)
            files.append(path)
    n = lost.sum()
    options = {"fps": 25, "states": 3, "progress": False, "stability": False}
    with pytest.warns(InputWarning, match=r"points at \(0, 0\), a position .* 's2' \("):
        discover(zeros, tmp_path / "ws", **options)
    discover(empty, tmp_path / "ws_empty", **options)
    used = json.loads((tmp_path / "ws" / "summary.json").read_text())["cleaning"]["used"]
    assert used["placeholders"] == [[0.0, 0.0]] and used["placeholder_points"]["s2"] == n
    text = quality_section(Workspace(tmp_path / "ws")).text
    assert "Points at (0, 0), a placeholder position" in text and f"'s2' ({n:,})" in text
    labels = [pd.read_csv(tmp_path / w / "labels.csv") for w in ("ws", "ws_empty")]
    pd.testing.assert_frame_equal(labels[0], labels[1])


@pytest.mark.parametrize(
    ("filling", "key", "said", "reported"),
    [
        ("ffill", "held_points", "forward-filled",
         "Points held exactly where they were on the frame before"),
        ("interpolate", "interpolated_points", "interpolated",
         "Points on straight lines at an even pace, or on cubic curves, between seen points"),
    ],
)  # fmt: skip
def test_a_study_filled_in_over_its_gaps_is_cleaned_and_said(
    tmp_path, filling, key, said, reported
):
    # Invented animals (the package's simulator) whose lost points were forward-filled, or
    # interpolated (pandas), before export, with a whole animal lost for 4 s: the run sets the
    # filled-in points missing, says so, and the summary and the report's data quality count
    # them.
    from ethoscribe.simulate import simulate_session
    from ethoscribe.workspace import Workspace, discover
    from ethoscribe.workspace.report_sections import quality_section

    files = []
    for seed in (1, 2):
        tracks, _ = simulate_session(duration_s=20, fps=25, seed=seed, session=f"s{seed}")
        lost = ~np.isfinite(tracks.coords).all(-1) | (tracks.confidence < 0.5)
        lost[200:300] = True
        flat = np.where(lost[..., None], np.nan, tracks.coords).reshape(tracks.n_frames, -1)
        filled = getattr(pd.DataFrame(flat), filling)().bfill().to_numpy()
        exported = tracks.replace(coords=filled.reshape(tracks.coords.shape), confidence=None)
        write_tidy(exported, tmp_path / f"s{seed}.csv")
        files.append(tmp_path / f"s{seed}.csv")
    with pytest.warns(InputWarning, match=rf"'s1' \(\d+% of its points\), 's2' .* {said}"):
        discover(files, tmp_path / "ws", fps=25, states=2, progress=False, stability=False)
    used = json.loads((tmp_path / "ws" / "summary.json").read_text())["cleaning"]["used"]
    assert min(used[key].values()) >= 99 * 10  # the 4 s: at least 99 frames x 10 keypoints
    assert reported in quality_section(Workspace(tmp_path / "ws")).text


def test_sessions_with_many_repeated_frames_are_named():
    import warnings

    from ethoscribe.errors import InputWarning
    from ethoscribe.workspace.runs import _warn_repeated_frames

    rows = [{"session": "a", "n_frames": 1000}, {"session": "b", "n_frames": 1000}]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        _warn_repeated_frames(rows, [{"repeated_frames": 10}, None])  # 1 %: nothing said
    with pytest.warns(InputWarning, match=r"session\(s\) 'b' \(17%\) were filled"):
        _warn_repeated_frames(rows, [{"repeated_frames": 3}, {"repeated_frames": 167}])


def test_a_study_of_two_seconds_is_refused_or_labelled_without_its_refits(tmp_path):
    # 60 frames: the automatic count cannot hold out two blocks (said, with the fix); with the
    # count given the run completes, and the stability check that a half of the frames cannot
    # support is skipped with the reason (summary and report) instead of failing the run.
    from ethoscribe.errors import InputWarning
    from ethoscribe.workspace import Workspace, discover
    from ethoscribe.workspace.report_sections import model_section

    rng = np.random.default_rng(3)  # seed 3
    body = np.array([[10.0, 0.0], [5.0, 0.0], [0.0, 0.0]])
    coords = np.cumsum(rng.normal(size=(60, 1, 3, 2)), axis=0) + body
    write_tidy(PoseTracks(coords, keypoints=KEYPOINTS, fps=30), tmp_path / "a.csv")
    run = dict(fps=30, progress=False, axis=("tail", "nose"))
    with pytest.raises(InputError, match=r"too few frames \(60\) for the automatic number"):
        discover([tmp_path / "a.csv"], tmp_path / "auto", **run)
    with pytest.warns(InputWarning, match="stability check was skipped: too little data"):
        discover([tmp_path / "a.csv"], tmp_path / "ws", states=4, **run)
    ws = Workspace(tmp_path / "ws")
    assert "too little data" in ws.summary["stability"]["skipped"]
    assert not (ws.path / "stability.csv").exists()
    assert "No stability check was made: too little data" in model_section(ws).text


def test_a_study_whose_tracker_exchanged_the_animals_is_given_back_and_said(tmp_path):
    # Invented pairs (the package's simulator) whose tracker exchanged the two animals' tracks
    # twice per session where they came closest: the run gives each track its animal back,
    # says so, counts it in the summary and the report's data quality, and labels every
    # animal as it labels the files as simulated (the right tracks, by construction).
    from ethoscribe.simulate import simulate_session
    from ethoscribe.workspace import Workspace, discover
    from ethoscribe.workspace.report_sections import quality_section

    for seed in (1, 2):
        tracks, _ = simulate_session(duration_s=30, n_animals=2, seed=seed, session=f"s{seed}")
        centre = np.nanmean(tracks.coords, axis=2)
        apart = np.linalg.norm(centre[:, 0] - centre[:, 1], axis=-1)
        apart[:50] = apart[-50:] = np.inf
        x, c = tracks.coords.copy(), tracks.confidence.copy()
        for t in sorted(np.argsort(apart)[[0, 200]]):  # the nearest frame, and the 200th
            x[t:], c[t:] = x[t:, ::-1], c[t:, ::-1]
        for folder, made in (("as_made", tracks), ("exchanged", tracks.replace(coords=x))):
            path = tmp_path / folder / f"s{seed}.csv"
            path.parent.mkdir(exist_ok=True)
            write_tidy(made if folder == "as_made" else made.replace(confidence=c), path)
    options = {"fps": 30, "states": 3, "progress": False, "stability": False}
    with pytest.warns(InputWarning, match=r"session\(s\) 's1' \(2 times\), 's2' \(2 times\)"):
        discover(sorted((tmp_path / "exchanged").glob("*.csv")), tmp_path / "ws", **options)
    discover(sorted((tmp_path / "as_made").glob("*.csv")), tmp_path / "ws_made", **options)
    used = json.loads((tmp_path / "ws" / "summary.json").read_text())["cleaning"]["used"]
    assert used["identity_exchanges"] == 2  # one count, the same in every session
    text = quality_section(Workspace(tmp_path / "ws")).text
    assert "a tracker exchanging identities): 's1' (2), 's2' (2)." in text
    labels = [pd.read_csv(tmp_path / w / "labels.csv") for w in ("ws", "ws_made")]
    pd.testing.assert_frame_equal(labels[0], labels[1])
