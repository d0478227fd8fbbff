"""Workbench edits confirmed on screen survive a kernel killed right after.

A child process plays the notebook kernel: it opens the workbench state (tables rewritten by its
writer process, as users get it), makes renames one after another and prints ``confirmed NAME``
as soon as each edit returns as done. The test kills it right after a few confirmations -- the
kernel alone (SIGKILL) or its whole process group, as a kernel restart does -- and checks that
every confirmed edit is in ``journal.jsonl``, that the tables are brought up to date afterwards,
and that the writer process does not outlive its kernel.

Data: a workspace discovered on two simulated sessions of the package's invented animals.
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from _reliability_data import run_discover, write_study
from ethoscribe.workspace import Workspace

pytestmark = [
    pytest.mark.skipif(sys.platform == "win32", reason="SIGKILL and process groups"),
    pytest.mark.slow,
]

KERNEL = """
import sys
from ethoscribe.widgets.state import WorkbenchState
state = WorkbenchState(sys.argv[1])
for i in range(40):
    old = state.motifs[0]
    if state.edit("rename", motif=old, name=f"name_{i:02d}"):
        if i == 0:
            print("writer", *state._writer._pool._processes, flush=True)
        print("confirmed", f"name_{i:02d}", flush=True)
    else:
        print("refused", state.message[1], flush=True)
state.close()
print("finished", flush=True)
"""


@pytest.fixture(scope="module")
def base(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("kill")
    return run_discover(write_study(root / "study"), root / "base").path


def _run_and_kill(ws: Path, after: int, group: bool) -> tuple[list[str], list[int]]:
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(sys.path)}
    child = subprocess.Popen(
        [sys.executable, "-c", KERNEL, str(ws)],
        stdout=subprocess.PIPE,
        text=True,
        env=env,
        start_new_session=True,  # its own process group, as a kernel has
    )
    confirmed, writers = [], []
    try:
        for line in child.stdout:
            word, *rest = line.split()
            if word == "writer":
                writers = [int(p) for p in rest]
            elif word == "confirmed":
                confirmed.append(rest[0])
                if len(confirmed) == after:
                    break
            else:
                raise AssertionError(line)
    finally:
        if group:
            os.killpg(child.pid, signal.SIGKILL)
        else:
            child.kill()
        child.wait(30)
    return confirmed, writers


def _gone(pid: int, timeout: float) -> bool:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        try:
            os.kill(pid, 0)
        except ProcessLookupError:
            return True
        time.sleep(0.1)
    return False


@pytest.mark.parametrize("group", [False, True], ids=["kernel", "process_group"])
def test_confirmed_edits_survive_a_killed_kernel(base, tmp_path, group):
    for after in (1, 4):
        ws_path = shutil.copytree(base, tmp_path / f"ws{after}")
        confirmed, writers = _run_and_kill(ws_path, after, group)
        assert len(confirmed) == after and writers
        ws = Workspace(ws_path)
        journaled = [r["name"] for r in ws.journal()]
        assert journaled[: len(confirmed)] == confirmed, (journaled, confirmed)
        for pid in writers:  # the writer ends with its kernel (it was killed, or notices)
            assert _gone(pid, 15), f"writer process {pid} outlived its kernel"
        ws.repair()
        assert ws.exports_current()
        shown = set(pd.read_csv(ws_path / "bouts.csv")["motif"])
        assert journaled[-1] in shown
