"""Running per-session work: in this process, in a local process pool, or on a Dask cluster.

Sessions are independent for reading, cleaning, features and decoding, so they are mapped over
an existing engine (``concurrent.futures`` locally, ``dask.distributed`` on a cluster) — there is
no scheduler of our own. Results come back in input order, so a parallel run writes exactly what
a serial run writes; a progress bar counts finished sessions.
"""

from __future__ import annotations

import contextlib
import signal
import threading
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from multiprocessing import get_context
from typing import Any, TypeVar

from tqdm.auto import tqdm

from ethoscribe.errors import InputError
from ethoscribe.system import available_cpus

T = TypeVar("T")


def default_jobs() -> int:
    """Worker processes to use by default: the CPUs this process may run on."""
    return available_cpus()


def connect(scheduler: Any) -> Any:
    """A ``dask.distributed.Client`` for ``scheduler`` (an address or a client), or None."""
    if scheduler is None:
        return None
    try:
        from dask.distributed import Client
    except ImportError:
        raise InputError(
            "a Dask scheduler was given but dask.distributed is not installed; install it with "
            'pip install "ethoscribe[distributed]"'
        ) from None
    return scheduler if isinstance(scheduler, Client) else Client(scheduler)


def map_sessions(
    func: Callable[..., T],
    items: Sequence[Any],
    jobs: int | None = 1,
    client: Any = None,
    progress: bool = True,
    desc: str = "sessions",
) -> list[T]:
    """``[func(item) for item in items]`` over sessions, serially or in parallel, in order.

    Parameters
    ----------
    func : picklable callable
        A module-level function (it is sent to worker processes).
    items : sequence
        One argument per session (small: paths and parameters, not arrays).
    jobs : int or None
        Local worker processes; 1 runs in this process, None uses every CPU.
    client : dask.distributed.Client, optional
        Run on this Dask cluster instead of locally.

    Examples
    --------
    >>> map_sessions(abs, [-1, -2], progress=False)
    [1, 2]
    """
    items = list(items)
    bar = tqdm(total=len(items), desc=desc, unit="session", disable=not progress)
    try:
        if client is not None:
            return _on_dask(func, items, client, bar)
        jobs = default_jobs() if jobs is None else int(jobs)
        if jobs < 1:
            raise InputError(f"jobs must be at least 1; got {jobs}")
        if jobs == 1 or len(items) <= 1:
            out = []
            for item in items:
                out.append(func(item))
                bar.update()
            return out
        return _on_processes(func, items, min(jobs, len(items)), bar)
    finally:
        bar.close()


def _on_processes(func: Callable[..., T], items: list[Any], jobs: int, bar: Any) -> list[T]:
    """``func`` over ``items`` in ``jobs`` spawned processes that leave Ctrl-C to this one.

    Workers ignore SIGINT (a Ctrl-C reaches the whole process group): the interrupt is this
    process's to handle, and it stops the workers, instead of every worker printing its own
    traceback while it starts.
    """
    # "spawn": a forked child would inherit BLAS/numba thread state and can deadlock.
    pool = ProcessPoolExecutor(jobs, mp_context=get_context("spawn"), initializer=_no_interrupts)
    try:
        with _interrupts_ignored():  # workers start now, and keep ignoring from their first line
            futures = {pool.submit(func, item): i for i, item in enumerate(items)}
        results: list[Any] = [None] * len(items)
        for future in as_completed(futures):
            results[futures[future]] = future.result()
            bar.update()
    except BaseException:
        # Stop the workers first (shutdown forgets them), so that nothing waits for their work.
        processes = list((getattr(pool, "_processes", None) or {}).values())
        for process in processes:
            process.terminate()
        for process in processes:
            process.join(5)
            if process.is_alive():
                process.kill()
        # Work still queued for the dead workers must not hold the exit: the queue's feeder
        # thread is joined when the interpreter exits, and nobody will read what it holds.
        queue = getattr(pool, "_call_queue", None)
        if queue is not None:
            queue.cancel_join_thread()
        pool.shutdown(wait=False, cancel_futures=True)
        raise
    pool.shutdown()
    return results


def _no_interrupts() -> None:
    signal.signal(signal.SIGINT, signal.SIG_IGN)


@contextlib.contextmanager
def _interrupts_ignored() -> Iterator[None]:
    """Block SIGINT in this (main) thread for the block: a child started meanwhile inherits the
    blocked mask (and ignores SIGINT from its initializer on), and a Ctrl-C that arrives
    during the block is not lost: it stays pending and is raised when the block ends, or is
    raised at once when another thread of this process (BLAS, progress bars) takes it.
    Ignoring it instead (as before) lost a Ctrl-C pressed while a slow worker was still
    starting: the run went on."""
    if threading.current_thread() is not threading.main_thread() or not hasattr(
        signal, "pthread_sigmask"
    ):
        yield
        return
    previous = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT})
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, previous)


def _on_dask(func: Callable[..., T], items: list[Any], client: Any, bar: Any) -> list[T]:
    from dask.distributed import as_completed as dask_completed

    futures = client.map(func, items, pure=False)
    index = {f.key: i for i, f in enumerate(futures)}
    results: list[Any] = [None] * len(items)
    for future in dask_completed(futures):
        results[index[future.key]] = future.result()
        bar.update()
    return results
