"""Two processes and one workspace: one editor at a time, a clear message for the other.

The lock is an operating-system lock (released by the system when its holder ends) plus an
owner record naming the holder's process id, host and start time. Tested on real processes:
the message a second editor gets, discover refused on a workspace being edited, a holder killed
with SIGKILL (its record is stale: it must not block, and it is reported and can be cleared),
a lock held by someone other than its dead recorded owner, and two editors taking turns.

Data: a workspace discovered on two simulated sessions of the package's invented animals.
"""

from __future__ import annotations

import datetime as dt
import json
import shutil
import socket
import sys
import time
from pathlib import Path

import pytest

import _crash_worker as worker  # tests/ is on sys.path under pytest
from _reliability_data import fork_server, run_discover, write_study
from ethoscribe.errors import WorkspaceError
from ethoscribe.workspace import Workspace, read_journal

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="SIGKILL and fork are POSIX")


@pytest.fixture(scope="module")
def ctx():
    return fork_server()


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    return write_study(tmp_path_factory.mktemp("concurrent") / "study")


@pytest.fixture(scope="module")
def base(study, tmp_path_factory) -> Path:
    return run_discover(study, tmp_path_factory.mktemp("concurrent") / "base").path


@pytest.fixture
def ws(base, tmp_path) -> Workspace:
    return Workspace(shutil.copytree(base, tmp_path / "ws"))


def _wait_for(path: Path, prefix: str, timeout: float = 60.0) -> str:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        lines = path.read_text().splitlines() if path.exists() else []
        found = [line for line in lines if line.startswith(prefix)]
        if found:
            return found[-1]
        time.sleep(0.005)
    raise AssertionError(f"no '{prefix}' in {path} after {timeout} s")


def test_second_editor_is_told_who_holds_the_workspace(ctx, ws, study, tmp_path):
    holder = ctx.Process(target=worker.hold_lock, args=(str(ws.path), str(tmp_path / "a"), 60))
    holder.start()
    try:
        pid = int(_wait_for(tmp_path / "a", "locked").split()[1])
        other = ctx.Process(target=worker.try_edit, args=(str(ws.path), str(tmp_path / "b")))
        other.start()
        other.join(60)
        answer = _wait_for(tmp_path / "b", "refused")
        assert other.exitcode == 1
        host = socket.gethostname()
        assert f"WorkspaceError: workspace {ws.path} is in use by process {pid} " in answer
        assert f"on host {host!r} since " in answer
        since = answer.split(" since ")[1].split(" ")[0]
        age = dt.datetime.now(dt.timezone.utc) - dt.datetime.fromisoformat(since)
        assert dt.timedelta(0) <= age < dt.timedelta(minutes=5)
        assert ws.lock_holder()["pid"] == pid
        # A whole discover run into the folder is refused the same way, before it writes.
        with pytest.raises(WorkspaceError, match=rf"in use by process {pid} "):
            run_discover(study, ws.path)
        assert not list(ws.path.glob(".incoming-*"))
        # So is an export of the curated ethogram, which must not mix names of two journals.
        from ethoscribe.workspace.export import save_ethogram

        with pytest.raises(WorkspaceError, match=rf"in use by process {pid} "):
            save_ethogram(ws.path, report=False)
        assert not (ws.path / "exports").exists()
    finally:
        holder.kill()
        holder.join()


def test_a_killed_holder_does_not_block_and_is_reported(ctx, ws, tmp_path):
    holder = ctx.Process(target=worker.hold_lock, args=(str(ws.path), str(tmp_path / "a"), 60))
    holder.start()
    pid = int(_wait_for(tmp_path / "a", "locked").split()[1])
    holder.kill()  # SIGKILL while holding the lock: no chance to clean up
    holder.join()
    owner = json.loads((ws.path / ".lock-owner.json").read_text())
    assert owner["pid"] == pid  # the stale record is left behind ...
    assert ws.lock_holder() is None  # ... but the system released the lock itself
    ws.rename_motif("motif_01", "resting")  # so the next editor is not blocked
    assert f"process {pid} on host" in ws.recovery[0] and "ended without closing" in ws.recovery[0]
    assert not (ws.path / ".lock-owner.json").exists()
    assert [r["name"] for r in ws.journal()] == ["resting"]


def test_a_stale_record_can_be_cleared_safely(ctx, ws, tmp_path):
    holder = ctx.Process(target=worker.hold_lock, args=(str(ws.path), str(tmp_path / "a"), 60))
    holder.start()
    pid = int(_wait_for(tmp_path / "a", "locked").split()[1])
    with pytest.raises(WorkspaceError, match="in use by"):
        ws.clear_stale_lock()  # a live holder's record is never removed
    assert json.loads((ws.path / ".lock-owner.json").read_text())["pid"] == pid
    holder.kill()
    holder.join()
    assert ws.clear_stale_lock()["pid"] == pid
    assert ws.clear_stale_lock() is None and not (ws.path / ".lock-owner.json").exists()


def test_a_lock_held_by_someone_other_than_its_dead_owner_is_explained(ctx, ws, tmp_path):
    # E.g. a worker process that inherited the lock's descriptor from an editor that crashed
    # (possible with filelock < 4, which did not close it in forked children): the record
    # names a dead process, yet the lock is held. Played here with a plain flock.
    import fcntl

    gone = ctx.Process(target=worker.hold_lock, args=(str(ws.path), str(tmp_path / "a"), 0))
    gone.start()
    gone.join()
    pid = int(_wait_for(tmp_path / "a", "locked").split()[1])
    record = {"pid": pid, "host": socket.gethostname(), "since": "2024-05-01T10:00:00+00:00"}
    (ws.path / ".lock-owner.json").write_text(json.dumps(record))
    with open(ws.path / ".lock", "a") as fh:
        fcntl.flock(fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
        with pytest.raises(WorkspaceError, match=rf"process {pid} .*no longer runs, yet the lock"):
            ws.rename_motif("motif_01", "resting")
    ws.rename_motif("motif_01", "resting")  # released with the descriptor


def test_two_editors_take_turns_and_lose_nothing(ctx, ws, tmp_path):
    n = 8
    editors = [
        ctx.Process(
            target=worker.edit_with_retry,
            args=(str(ws.path), str(tmp_path / f"ack{m}"), f"motif_0{m}", f"name{m}_", n),
        )
        for m in (1, 2)
    ]
    for e in editors:
        e.start()
    for e in editors:
        e.join(120)
    assert [e.exitcode for e in editors] == [0, 0]
    records, problems = read_journal(ws.path / "journal.jsonl")
    assert len(records) == 2 * n and not problems
    names = Workspace(ws.path).curation().names
    assert names[0] == f"name1_{n - 1}" and names[1] == f"name2_{n - 1}"
    assert Workspace(ws.path).exports_current()
