"""Per-session work gives the same results serially, in a local process pool and on Dask."""

from __future__ import annotations

import math

import pytest

from ethoscribe.errors import InputError
from ethoscribe.workspace.executor import default_jobs, map_sessions


def test_serial_and_pool_agree_and_keep_order():
    items = list(range(12))
    serial = map_sessions(math.factorial, items, jobs=1, progress=False)
    pooled = map_sessions(math.factorial, items, jobs=2, progress=False)
    assert serial == pooled == [math.factorial(i) for i in items]
    assert default_jobs() >= 1


def test_bad_job_count_is_refused():
    with pytest.raises(InputError, match="jobs must be at least 1"):
        map_sessions(abs, [1, 2], jobs=0, progress=False)


@pytest.mark.slow
def test_dask_local_cluster_agrees():
    distributed = pytest.importorskip("dask.distributed")
    with (
        distributed.LocalCluster(
            n_workers=2,
            threads_per_worker=1,
            host="127.0.0.1",
            dashboard_address=None,
            processes=True,
        ) as cluster,
        distributed.Client(cluster) as client,
    ):
        got = map_sessions(math.factorial, list(range(10)), client=client, progress=False)
    assert got == [math.factorial(i) for i in range(10)]
