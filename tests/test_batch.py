"""Batch runs at scale: the cache, a process pool and a Dask cluster give the same files.

Data: trimmed simulated example sessions (invented animals).
"""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from _example_study import trimmed_study
from ethoscribe.workspace import discover

OUTPUTS = ["labels.csv", "bouts.csv", "transitions.csv", "time_budget.csv", "quality.csv"]


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    return trimmed_study(
        tmp_path_factory.mktemp("batch_study"), ["session_04", "session_05", "session_12"], 1500
    )


def _run(study: Path, out: Path, **kw):
    return discover(
        [study],
        out,
        manifest=study / "manifest.csv",
        states=3,
        stability=False,
        progress=False,
        **kw,
    )


@pytest.fixture(scope="module")
def serial(study, tmp_path_factory) -> Path:
    return _run(study, tmp_path_factory.mktemp("serial") / "ws", jobs=1).path


def _same(a: Path, b: Path) -> None:
    for name in OUTPUTS:
        assert (a / name).read_bytes() == (b / name).read_bytes(), name


def test_a_rerun_reuses_the_cache_and_resumes(study, serial, tmp_path):
    ws = Path(shutil.copytree(serial, tmp_path / "ws"))
    cached = sorted((ws / "cache" / "cleaned").glob("*.npz"))
    cached += sorted((ws / "cache" / "labelled").glob("*.npz"))
    assert len(cached) == 6
    stamps = [p.stat().st_mtime_ns for p in cached]
    # An interrupted run: the cache is there but the workspace was never completed.
    (ws / "workspace.json").unlink()
    (ws / "labels.csv").unlink()
    _run(study, ws)
    assert [p.stat().st_mtime_ns for p in cached] == stamps, "finished sessions were redone"
    _same(serial, ws)
    _run(study, ws, force=True)
    assert [p.stat().st_mtime_ns for p in cached] != stamps, "--force did not recompute"
    _same(serial, ws)


def test_decoding_is_redone_only_for_a_new_model(study, serial, tmp_path):
    ws = Path(shutil.copytree(serial, tmp_path / "ws"))
    _run(study, ws, seed=1)  # same cleaned sessions, another model
    assert len(list((ws / "cache" / "cleaned").glob("*.npz"))) == 3
    assert len(list((ws / "cache" / "labelled").glob("*.json"))) == 6
    assert len(list((ws / "cache" / "models").iterdir())) == 2


def test_fitting_on_a_sample_bounds_the_training_frames_and_labels_every_frame(study, tmp_path):
    ws = _run(study, tmp_path / "sample", fit_frames=1200)
    summary = ws.summary
    assert summary["n_training_frames"] <= 1200  # valid frames of the sampled blocks
    model = ws.model()
    # One block from each session, each named after the frames it spans.
    assert len(model.training_sessions_) == 3
    assert all("[" in name for name in model.training_sessions_)
    labels = ws.state_labels()
    assert len(labels) == 3 * 1500
    assert set(labels["state"].unique()) <= {-1, 0, 1, 2}
    assert (labels["state"] >= 0).mean() > 0.5


def test_a_changed_parameter_is_not_served_from_the_cache(study, serial, tmp_path):
    ws = Path(shutil.copytree(serial, tmp_path / "ws"))
    _run(study, ws, min_confidence=0.8)
    assert len(list((ws / "cache" / "cleaned").glob("*.npz"))) == 6


def test_a_process_pool_gives_the_serial_files(study, serial, tmp_path):
    _same(serial, _run(study, tmp_path / "pool", jobs=2).path)


@pytest.mark.slow
def test_a_dask_cluster_gives_the_serial_files(study, serial, tmp_path):
    distributed = pytest.importorskip("dask.distributed")
    with (
        distributed.LocalCluster(
            n_workers=2, threads_per_worker=1, host="127.0.0.1", dashboard_address=None
        ) as cluster,
        distributed.Client(cluster) as client,
    ):
        ws = _run(study, tmp_path / "dask", scheduler=client)
    _same(serial, ws.path)
