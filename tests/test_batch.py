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
    assert len(cached) == 3
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
