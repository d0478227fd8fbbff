"""The folder lock: a moment's probe (``holder``) never makes a writer fail."""

from __future__ import annotations

import threading
import time

import pytest
from filelock import FileLock

from ethoscribe.errors import WorkspaceError
from ethoscribe.io import locking


def _hold_unnamed(folder, seconds: float, taken: threading.Event) -> None:
    # what holder() does, slowed down: the lock taken with no owner record, then given back
    lock = FileLock(str(folder / locking.LOCK_FILE), timeout=0)
    lock.acquire()
    taken.set()
    time.sleep(seconds)
    lock.release()


def test_a_writer_waits_for_a_probe_instead_of_failing(tmp_path):
    # Before, a writer starting while another process probed the lock (a CI run polling
    # locking.holder) failed with "in use by another process (it has not recorded its name)".
    taken = threading.Event()
    probe = threading.Thread(target=_hold_unnamed, args=(tmp_path, 0.3, taken))
    probe.start()
    taken.wait(5)
    start = time.perf_counter()
    with locking.hold(tmp_path) as stale:
        waited = time.perf_counter() - start
        assert stale is None and locking.read_owner(tmp_path)["pid"] > 0
    probe.join()
    assert 0.1 < waited < locking.UNNAMED_HOLDER_WAIT_S


def test_an_unnamed_holder_that_stays_is_refused_after_the_wait(tmp_path):
    taken = threading.Event()
    stay = locking.UNNAMED_HOLDER_WAIT_S + 1.0
    probe = threading.Thread(target=_hold_unnamed, args=(tmp_path, stay, taken))
    probe.start()
    taken.wait(5)
    with pytest.raises(WorkspaceError, match="has not recorded its name yet"):
        with locking.hold(tmp_path):
            pass
    probe.join()


def test_a_named_holder_is_refused_at_once(tmp_path):
    with locking.hold(tmp_path):
        start = time.perf_counter()
        with pytest.raises(WorkspaceError, match=r"in use by process \d+"):
            with locking.hold(tmp_path):
                pass
        assert time.perf_counter() - start < 1.0
