"""A writer process that keeps a workspace's ethogram tables up to date behind the workbench.

An edit is saved when its journal line is on disk: the workbench appends it itself, under the
workspace lock, before it shows the edit as done (:meth:`Workspace.journal_edit`, milliseconds).
Rewriting the ethogram tables that follow from the journal (``labels.csv``, ``bouts.csv``, ...:
seconds of pandas work on a million frames) is left to one worker process, so the notebook
kernel stays free to redraw. The worker runs :meth:`Workspace.update_tables`, which reads the
journal when it starts: one queued rewrite serves every edit saved before it, so a burst of
edits costs at most two rewrites. If the kernel dies, no edit is lost: the tables are brought up
to date by the next rewrite, edit, save or :meth:`Workspace.repair`.

The worker is a ``concurrent.futures.ProcessPoolExecutor`` of one spawned process (only a
folder path goes to it; nothing a user shares is pickled). Its only hand-written addition is a
watchdog: a spawned worker whose parent is killed otherwise waits for work forever (seen with
SIGKILL on Python 3.11), so it ends itself once its parent is gone.
"""

from __future__ import annotations

import multiprocessing
import os
import threading
import time
from concurrent.futures import Future, ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from pathlib import Path

from ethoscribe.workspace.folder import Workspace


def update_tables(path: str) -> bool:
    """Bring the tables of the workspace at ``path`` up to its journal (run in the worker)."""
    return Workspace(path).update_tables()


def _start_worker(parent: int) -> None:
    if hasattr(os, "nice"):
        os.nice(10)  # the notebook kernel redrawing comes first; the disk can wait a moment

    def watch() -> None:
        while os.getppid() == parent:
            time.sleep(1.0)
        os._exit(0)  # the kernel is gone: nothing is left to serve (the journal is on disk)

    threading.Thread(target=watch, daemon=True).start()


class TableWriter:
    """Rewrites a workspace's ethogram tables in a worker process, on request.

    Examples
    --------
    >>> writer = TableWriter("study_ws")  # doctest: +SKIP
    >>> writer.request()  # after a journal_edit  # doctest: +SKIP
    >>> writer.wait(); writer.failures()  # doctest: +SKIP
    []
    """

    def __init__(self, path: str | Path) -> None:
        self.path = str(Path(path).resolve())
        self._pool: ProcessPoolExecutor | None = None
        self._queued: Future | None = None
        self._futures: list[Future] = []
        self._errors: list[str] = []
        self._guard = threading.Lock()

    def _executor(self) -> ProcessPoolExecutor:
        if self._pool is None:
            self._pool = ProcessPoolExecutor(
                max_workers=1,
                mp_context=multiprocessing.get_context("spawn"),
                initializer=_start_worker,
                initargs=(os.getpid(),),
            )
        return self._pool

    def request(self) -> None:
        """Ask for the tables to follow the journal as it is now (returns at once)."""
        with self._guard:
            queued = self._queued
            if queued is not None and not queued.running() and not queued.done():
                return  # it has not started: it will read the journal with this edit in it
            try:
                future = self._executor().submit(update_tables, self.path)
            except (BrokenProcessPool, RuntimeError):
                self._pool = None  # the worker died (killed, out of memory): start a new one
                future = self._executor().submit(update_tables, self.path)
            self._queued = future
            self._futures.append(future)

    def wait(self) -> None:
        """Block until every requested rewrite has finished; failures are kept for
        :meth:`failures`."""
        with self._guard:
            futures, self._futures = self._futures, []
        for future in futures:
            self._collect(future)

    def failures(self) -> list[str]:
        """Messages of failed rewrites since the last call (finished ones only)."""
        with self._guard:
            done = [f for f in self._futures if f.done()]
            self._futures = [f for f in self._futures if not f.done()]
        for future in done:
            self._collect(future)
        out, self._errors = self._errors, []
        return out

    def _collect(self, future: Future) -> None:
        try:
            future.result()
        except BrokenProcessPool:
            with self._guard:
                self._pool = None  # the next request starts a new worker
            self._errors.append("the table writer process stopped unexpectedly")
        except Exception as exc:  # every failure goes back to the workbench as text
            self._errors.append(f"{exc}")

    def close(self) -> None:
        """Finish the requested rewrites and stop the worker."""
        self.wait()
        pool, self._pool = self._pool, None
        if pool is not None:
            try:
                pool.shutdown(wait=True)
            except OSError:
                # At interpreter exit the executor's own exit hook has already shut it and
                # closed its pipes (a workbench closed by garbage collection then).
                pass
