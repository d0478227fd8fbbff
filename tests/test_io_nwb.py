"""NWB files with the ndx-pose extension: files written by pynwb itself, and our own round trip."""

from __future__ import annotations

import sys
from datetime import datetime, timezone

import numpy as np
import pytest

from ethoscribe.errors import InputError
from ethoscribe.io import from_arrays, read_nwb, read_pose, write_nwb


def _nwb():
    pynwb = pytest.importorskip("pynwb")
    ndx_pose = pytest.importorskip("ndx_pose")
    return pynwb, ndx_pose


def _external_file(path, timestamps, containers=("PoseEstimation",), unit="pixels", dims=2):
    """An NWB file built with pynwb + ndx-pose directly, as another program would write it."""
    pynwb, ndx_pose = _nwb()
    nwbfile = pynwb.NWBFile(
        session_description="simulated open-field session",
        identifier="demo-0001",
        session_start_time=datetime(2024, 5, 1, 9, 0, tzinfo=timezone.utc),
        subject=pynwb.file.Subject(subject_id="mouse-7", species="Mus musculus"),
    )
    module = nwbfile.create_processing_module(name="behavior", description="pose")
    rng = np.random.default_rng(3)
    truth, skeletons, built = {}, [], []
    for c in containers:
        # Skeleton order differs from alphabetical on purpose.
        skeleton = ndx_pose.Skeleton(name=f"{c}_skeleton", nodes=["tail", "nose"])
        series = []
        for kp in ("tail", "nose"):
            data = rng.normal(size=(len(timestamps), dims))
            conf = rng.uniform(size=len(timestamps))
            truth[c, kp] = (data, conf)
            stamps = timestamps if not series else series[0]  # later series link the first's
            series.append(
                ndx_pose.PoseEstimationSeries(
                    name=kp,
                    data=data,
                    confidence=conf,
                    unit=unit,
                    reference_frame="top-left corner",
                    timestamps=stamps,
                )
            )
        skeletons.append(skeleton)
        built.append(
            ndx_pose.PoseEstimation(
                name=c, pose_estimation_series=series, skeleton=skeleton, description="d"
            )
        )
    module.add(ndx_pose.Skeletons(skeletons=skeletons))
    for pe in built:
        module.add(pe)
    with pynwb.NWBHDF5IO(str(path), "w") as io:
        io.write(nwbfile)
    return truth


def test_reads_a_file_written_by_pynwb(tmp_path):
    times = 100.0 + np.arange(12) / 50.0
    truth = _external_file(tmp_path / "rec.nwb", times)
    t = read_nwb(tmp_path / "rec.nwb")
    assert t.keypoints == ("tail", "nose")  # the skeleton's order
    assert t.fps == 50.0 and t.units == "px" and t.animals == ("animal0",)
    assert t.session == "rec" and t.meta["subject"] == "mouse-7"
    assert t.meta["identifier"] == "demo-0001" and t.meta["first_frame"] == 5000
    np.testing.assert_array_equal(t.coords[:, 0, 1], truth["PoseEstimation", "nose"][0])
    np.testing.assert_array_equal(t.confidence[:, 0, 0], truth["PoseEstimation", "tail"][1])


def test_keypoints_of_an_nwb_file_are_renamed_when_read(tmp_path):
    times = np.arange(12) / 50.0
    truth = _external_file(tmp_path / "rec.nwb", times)
    t = read_nwb(tmp_path / "rec.nwb", rename_keypoints="nose=snout", keypoints="snout")
    assert t.keypoints == ("snout",)
    np.testing.assert_array_equal(t.coords[:, 0, 0], truth["PoseEstimation", "nose"][0])
    assert read_nwb(tmp_path / "rec.nwb", rename_keypoints={"tail": "tail_base"}).keypoints == (
        "tail_base", "nose")  # fmt: skip


def test_time_stamps_with_a_gap_and_3d_in_mm(tmp_path):
    times = np.delete(np.arange(10) / 20.0, 4)
    truth = _external_file(tmp_path / "gap.nwb", times, unit="millimeters", dims=3)
    t = read_pose(tmp_path / "gap.nwb")
    assert t.n_frames == 10 and t.n_dims == 3 and t.units == "mm"
    assert np.isnan(t.coords[4]).all() and np.isnan(t.confidence[4]).all()
    np.testing.assert_array_equal(t.coords[5, 0, 0], truth["PoseEstimation", "tail"][0][4])


def test_several_containers(tmp_path):
    _external_file(tmp_path / "two.nwb", np.arange(5) / 10.0, containers=("ratB", "ratA"))
    assert read_nwb(tmp_path / "two.nwb").animals == ("ratA", "ratB")  # all by default
    both = read_nwb(tmp_path / "two.nwb", pose_estimation="all")
    assert both.animals == ("ratA", "ratB")
    assert read_nwb(tmp_path / "two.nwb", pose_estimation="ratB").animals == ("ratB",)
    with pytest.raises(InputError, match=r"no PoseEstimation container named \['ratC'\]"):
        read_nwb(tmp_path / "two.nwb", pose_estimation=["ratC"])


def test_write_nwb_round_trip(tmp_path):
    _nwb()
    rng = np.random.default_rng(0)
    coords = rng.normal(size=(30, 2, 3, 2))
    coords[7] = np.nan
    conf = rng.uniform(size=(30, 2, 3))
    tracks = from_arrays(
        coords,
        conf,
        keypoints=["snout", "neck", "tail"],
        animals=["m1", "m2"],
        fps=29.97,
        units="cm",
        session="pair",
        meta={"first_frame": 120},
    )
    p = write_nwb(tracks, tmp_path / "pair.nwb")
    assert sorted(x.name for x in tmp_path.iterdir()) == ["pair.nwb"]  # no temporary left
    back = read_nwb(p, pose_estimation="all")
    np.testing.assert_array_equal(back.coords, tracks.coords)
    np.testing.assert_array_equal(back.confidence, tracks.confidence)
    assert back.keypoints == tracks.keypoints and back.animals == tracks.animals
    assert back.fps == 29.97 and back.units == "cm" and back.meta["first_frame"] == 120
    assert back.meta["session_id"] == "pair"


def test_write_nwb_refuses_slashes(tmp_path):
    _nwb()
    tracks = from_arrays(np.zeros((3, 1, 2)), keypoints=["a/b"], fps=30)
    with pytest.raises(InputError, match="cannot contain '/'"):
        write_nwb(tracks, tmp_path / "x.nwb")
    assert list(tmp_path.iterdir()) == []


def test_damaged_and_empty_nwb_files(tmp_path):
    pynwb, _ = _nwb()
    p = tmp_path / "junk.nwb"
    p.write_bytes(np.random.default_rng(1).bytes(4096))
    with pytest.raises(InputError, match=r"junk\.nwb: cannot be read as an NWB file") as info:
        read_nwb(p)
    assert info.value.__suppress_context__
    nwbfile = pynwb.NWBFile(
        session_description="no pose", identifier="x", session_start_time=datetime.now(timezone.utc)
    )
    with pynwb.NWBHDF5IO(str(tmp_path / "bare.nwb"), "w") as io:
        io.write(nwbfile)
    with pytest.raises(InputError, match="holds no PoseEstimation container"):
        read_nwb(tmp_path / "bare.nwb")


def test_missing_packages_give_the_install_command(tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "ndx_pose", None)
    tracks = from_arrays(np.zeros((3, 1, 2)), keypoints=["a"], fps=30)
    with pytest.raises(InputError, match=r'pip install "ethoscribe\[nwb\]"'):
        write_nwb(tracks, tmp_path / "x.nwb")
    assert list(tmp_path.iterdir()) == []
