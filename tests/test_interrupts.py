"""Ctrl-C during a parallel run: one line from the parent, no traceback from any worker."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

SRC = Path(__file__).resolve().parents[1] / "src"
TESTS = Path(__file__).resolve().parent


@pytest.mark.slow
@pytest.mark.skipif(sys.platform == "win32", reason="process groups and SIGINT are POSIX")
def test_ctrl_c_while_workers_run_leaves_no_worker_tracebacks(tmp_path):
    code = textwrap.dedent(
        f"""
        import sys
        sys.path[:0] = [{str(SRC)!r}, {str(TESTS)!r}]
        from ethoscribe.workspace.executor import map_sessions
        from _slow_worker import touch_and_wait
        try:
            map_sessions(touch_and_wait, [{str(tmp_path / "a")!r}, {str(tmp_path / "b")!r}],
                         jobs=2, progress=False)
        except KeyboardInterrupt:
            print("interrupted", file=sys.stderr)
            sys.exit(130)
        """
    )
    p = subprocess.Popen(
        [sys.executable, "-c", code], stderr=subprocess.PIPE, text=True, start_new_session=True
    )
    deadline = time.monotonic() + 60
    while not (tmp_path / "a").exists() and time.monotonic() < deadline:
        time.sleep(0.05)
    time.sleep(0.2)
    os.killpg(p.pid, signal.SIGINT)  # as a terminal's Ctrl-C: the whole process group
    _, err = p.communicate(timeout=60)
    assert p.returncode == 130, err
    assert err.strip() == "interrupted", err  # before: one traceback per worker


def test_an_interrupted_pool_whose_manager_thread_hangs_does_not_hold_the_exit():
    # The hang once seen under load after a Ctrl-C: the standard library joins a process
    # pool's manager thread at exit without a timeout. A thread that never finishes stands in
    # for it; after the release the interpreter must exit at once, not after 30 s.
    code = textwrap.dedent(
        f"""
        import sys, threading, time
        sys.path[:0] = [{str(SRC)!r}]
        import concurrent.futures.process as cfp
        from ethoscribe.workspace.executor import _release_at_exit
        stuck = threading.Thread(target=time.sleep, args=(30,))
        stuck.start()
        cfp._threads_wakeups[stuck] = None  # as a pool registers its manager thread
        _release_at_exit(stuck, timeout=0.1)
        """
    )
    start = time.monotonic()
    done = subprocess.run([sys.executable, "-c", code], timeout=25, capture_output=True)
    assert done.returncode == 0, done.stderr
    assert time.monotonic() - start < 20
