"""Session manifests, whole studies, the reader registry and reading folders."""

from __future__ import annotations

import sys

import numpy as np
import pandas as pd
import pytest

from ethoscribe.errors import InputError, InputWarning
from ethoscribe.io import (
    available_formats,
    load_study,
    pose_files,
    read_folder,
    read_manifest,
    read_pose,
    register_reader,
    write_tidy,
)
from ethoscribe.io import registry as reg
from ethoscribe.pose import PoseTracks


def _tracks(keypoints=("nose", "neck", "tail"), dims=2, n=6, fps=30.0):
    coords = np.arange(n * len(keypoints) * dims, dtype=float).reshape(n, 1, len(keypoints), dims)
    return PoseTracks(coords, keypoints=list(keypoints), fps=fps)


def _manifest(folder, text):
    p = folder / "study.csv"
    p.write_text(text)
    return p


@pytest.fixture
def study(tmp_path):
    data = tmp_path / "data"
    data.mkdir()
    write_tidy(_tracks(), data / "a.csv")
    write_tidy(_tracks(), data / "b.parquet")
    return tmp_path


def test_read_manifest_resolves_and_types(study):
    p = _manifest(
        study,
        "session,path,fps,group,subject,px_per_unit,units,video,age_days,cage\n"
        "m1,data/a.csv,30,control,s01,4.2,mm,vid/a.mp4,61,A\n"
        "m2, data/b.parquet ,,treated,s02,,,,70,7\n",
    )
    m = read_manifest(p)
    assert m["session"].tolist() == ["m1", "m2"]
    assert m["path"].tolist() == [str(study / "data/a.csv"), str(study / "data/b.parquet")]
    assert m["fps"].iloc[0] == 30 and np.isnan(m["fps"].iloc[1])
    assert m["px_per_unit"].iloc[0] == 4.2 and m["video"].iloc[0] == str(study / "vid/a.mp4")
    assert m["age_days"].tolist() == [61, 70]  # all numbers: kept as numbers
    assert m["cage"].tolist() == ["A", "7"]  # mixed: kept as text


def test_load_study_puts_manifest_columns_into_meta(study):
    p = _manifest(
        study,
        "session,path,fps,group,subject,condition,px_per_unit,units,video,litter\n"
        "m1,data/a.csv,25,control,s01,light,4.2,mm,a.mp4,L1\n"
        "m2,data/b.parquet,,treated,s02,dark,,,,\n",
    )
    a, b = load_study(p, progress=False)
    assert (a.session, a.fps, b.session, b.fps) == ("m1", 25.0, "m2", 30.0)  # b: from the file
    assert a.meta["group"] == "control" and a.meta["subject"] == "s01"
    assert a.meta["condition"] == "light" and a.meta["px_per_unit"] == 4.2
    assert a.meta["calibration_units"] == "mm" and a.units == "px"
    assert a.meta["video"] == str(study / "a.mp4") and a.meta["litter"] == "L1"
    assert a.meta["manifest_row"] == 1 and b.meta["manifest"] == str(p)
    assert "px_per_unit" not in b.meta and "litter" not in b.meta


def test_load_study_from_table_fps_argument_and_units(study):
    table = pd.DataFrame({"session": ["x"], "path": [str(study / "data/a.csv")], "units": ["cm"]})
    (t,) = load_study(table, fps=12.0, progress=False)
    assert t.fps == 12.0 and t.units == "cm"  # no calibration: the file is in cm already


def test_load_study_progress_bar(study, capsys):
    _manifest(study, "session,path\nm1,data/a.csv\nm2,data/b.parquet\n")
    load_study(study / "study.csv", progress=True)
    assert "2/2" in capsys.readouterr().err


# --- bad manifests ------------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("text", "match"),
    [
        ("session,file\nm1,data/a.csv\n", r"missing column\(s\) \['path'\]; found \['session', "),
        ("session,path\nm1,data/a.csv\nm1,data/b.parquet\n", r"'m1' is used in rows \[1, 2\]"),
        ("session,path\n,data/a.csv\n", r"row\(s\) \[1\] have no session name"),
        ("session,path,fps\nm1,data/a.csv,0\n", "row 1, column 'fps' must be positive; got 0"),
        ("session,path,fps\nm1,data/a.csv,-5\n", "column 'fps' must be positive"),
        ("session,path,fps\nm1,data/a.csv,fast\n", "row 1, column 'fps': 'fast' is not a number"),
        ("session,path,px_per_unit,units\nm1,data/a.csv,4.2px,mm\n", "'4.2px' is not a number"),
        ("session,path,px_per_unit\nm1,data/a.csv,4.2\n", "px_per_unit is given but not the unit"),
        ("session,path,units\nm1,data/a.csv,inch\n", "units must be one of"),
        ("session,path\n", "has column names but no sessions"),
    ],
)
def test_bad_manifest(study, text, match):
    with pytest.raises(InputError, match=match):
        read_manifest(_manifest(study, text))


def test_manifest_pointing_to_missing_files(study):
    p = _manifest(study, "session,path\nm1,data/a.csv\nm2,data/gone.csv\nm3,\n")
    with pytest.raises(InputError) as info:
        read_manifest(p)
    msg = str(info.value)
    assert "2 listed file(s) do not exist" in msg
    assert f"row 2 (session 'm2'): {study / 'data' / 'gone.csv'}" in msg
    assert "row 3 (session 'm3'): (empty path)" in msg and f"manifest's folder {study}" in msg


def test_empty_or_missing_manifest(tmp_path):
    (tmp_path / "m.csv").write_bytes(b"")
    with pytest.raises(InputError, match=r"empty \(0 bytes\); write one row per session"):
        read_manifest(tmp_path / "m.csv")
    with pytest.raises(InputError, match="no such file"):
        read_manifest(tmp_path / "absent.csv")


def test_study_mixing_2d_and_3d(study):
    write_tidy(_tracks(dims=3), study / "data" / "c.csv")
    p = _manifest(study, "session,path\nm1,data/a.csv\nm3,data/c.csv\n")
    with pytest.raises(InputError, match="session 'm3' is 3-D but session 'm1' is 2-D"):
        load_study(p, progress=False)


def test_study_with_differing_keypoints(study):
    write_tidy(_tracks(keypoints=("nose", "snout", "neck")), study / "data" / "d.csv")
    p = _manifest(study, "session,path\nm1,data/a.csv\nm4,data/d.csv\n")
    with pytest.raises(InputError, match=r"'m4' has different keypoints.*missing \['tail'\]"):
        load_study(p, progress=False)
    # the refusal gives the option that reads both; typed on the command line it is one text
    with pytest.raises(InputError, match="--reader-option keypoints=nose,neck"):
        load_study(p, progress=False)
    sessions = load_study(p, progress=False, keypoints="nose,neck")
    assert [s.keypoints for s in sessions] == [("nose", "neck")] * 2


def test_study_with_a_session_lacking_a_keypoint(study):
    # 2 of the study's 3 keypoints: read with 'tail' never seen there, and said so
    write_tidy(_tracks(keypoints=("nose", "neck")), study / "data" / "d.csv")
    p = _manifest(study, "session,path\nm1,data/a.csv\nm4,data/d.csv\n")
    with pytest.warns(InputWarning, match=r"are lacking.*'m4' \(tail\)"):
        sessions = load_study(p, progress=False)
    assert [s.keypoints for s in sessions] == [("nose", "neck", "tail")] * 2
    assert np.isnan(sessions[1].coords[:, :, 2]).all()


def test_study_with_keypoints_in_another_case_reads_them_as_one(study):
    # 'Tail ' and 'NECK' in one export, 'tail' and 'neck' in the others: refused before as
    # another keypoint set; the coordinates are those of the same points
    write_tidy(_tracks(keypoints=("Tail ", "nose", "NECK")), study / "data" / "e.csv")
    p = _manifest(study, "session,path\nm1,data/a.csv\nm5,data/e.csv\n")
    with pytest.warns(InputWarning, match=r"'m5' write keypoint names in another case"):
        first, other = load_study(p, progress=False)
    assert other.keypoints == first.keypoints == ("nose", "neck", "tail")
    raw = _tracks(keypoints=("Tail ", "nose", "NECK")).coords
    np.testing.assert_array_equal(other.coords, raw[:, :, [1, 2, 0]])


def test_study_reader_error_names_the_row(study):
    (study / "data" / "bad.csv").write_text("frame,keypoint,x,y\n0,nose,1,2\n")
    p = _manifest(study, "session,path,fps\nm1,data/a.csv,30\nm9,data/bad.csv,30\n")
    with pytest.raises(InputError, match=r"study\.csv: row 2 \(session 'm9'\): .*single frame"):
        load_study(p, progress=False)


# --- registry and folders -------------------------------------------------------------------
def test_read_pose_by_suffix_and_name(study):
    assert read_pose(study / "data" / "b.parquet").meta["source_format"] == "tidy"
    assert read_pose(study / "data" / "a.csv", format="tidy", session="s").session == "s"
    assert set(available_formats()) >= {"tidy", "wide", "nwb"}


def test_read_pose_bad_requests(study):
    with pytest.raises(InputError, match="no such file"):
        read_pose(study / "missing.csv")
    with pytest.raises(InputError, match="is a folder"):
        read_pose(study)
    (study / "x.h5").write_bytes(b"x")
    with pytest.raises(InputError, match=r"suffix '\.h5'.*pass format="):
        read_pose(study / "x.h5")
    with pytest.raises(InputError, match="unknown format 'excel'"):
        read_pose(study / "data" / "a.csv", format="excel")
    with pytest.raises(InputError, match=r"no option\(s\) \['pattern'\]"):
        read_pose(study / "data" / "a.csv", pattern="{keypoint}")


def test_nwb_without_pynwb_says_how_to_install(study, monkeypatch):
    monkeypatch.setitem(sys.modules, "pynwb", None)  # import now fails as if not installed
    (study / "s.nwb").write_bytes(b"not really")
    with pytest.raises(InputError, match=r'pip install "ethoscribe\[nwb\]"'):
        read_pose(study / "s.nwb")


def test_register_reader(study, monkeypatch):
    monkeypatch.setattr(reg, "_READERS", dict(reg._READERS))
    monkeypatch.setattr(reg, "_BY_SUFFIX", dict(reg._BY_SUFFIX))

    def read_numbers(path, fps=10.0):
        values = np.loadtxt(path, ndmin=2)
        return PoseTracks(values[:, None, None, :], keypoints=["dot"], fps=fps, session=path.stem)

    register_reader("numbers", ["TXT"], read_numbers)
    (study / "n.txt").write_text("1 2\n3 4\n5 6\n")
    assert read_pose(study / "n.txt").coords.shape == (3, 1, 1, 2)
    assert available_formats()["numbers"] == (".txt",)


def test_read_folder(study):
    folder = study / "data"
    (folder / ".hidden.csv").write_text("junk")
    (folder / "notes.md").write_text("not a pose file")
    sessions = read_folder(folder, progress=False)
    assert [s.session for s in sessions] == ["a", "b"]
    (one,) = read_folder([folder / "b.parquet"], progress=False, fps=60)
    assert one.fps == 60
    listed = pose_files([folder / "b.parquet", folder])
    assert listed == [folder / "b.parquet", folder / "a.csv", folder / "b.parquet"]


def test_read_folder_problems(study):
    empty = study / "empty"
    empty.mkdir()
    (empty / "readme.txt").write_text("x")
    with pytest.raises(InputError, match=r"no pose files .* it holds 'readme.txt'"):
        read_folder(empty)
    write_tidy(_tracks(), study / "data" / "a.parquet")
    with pytest.raises(InputError, match=r"same session name\(s\) \['a'\]"):
        read_folder(study / "data", progress=False)
    with pytest.raises(InputError, match="no such file or folder"):
        read_folder(study / "nope")
    with pytest.raises(InputError, match="list of files and folders is empty"):
        read_folder([])
