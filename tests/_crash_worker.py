"""Work done in child processes of the crash and concurrency tests.

The children come from a multiprocessing fork server that has imported ethoscribe once, so each
starts in milliseconds instead of seconds. A child can be armed to send itself SIGKILL just
before its N-th file-system call (``os.open``, ``os.write``, ``os.fsync``, ``os.replace``,
``os.rename``, ``os.link``, ``os.unlink``, ``os.mkdir``, ``os.rmdir``): every such call is a
point where a real crash can happen. Progress goes to an acknowledgement file, one line per
finished step, written with the built-in file object (not through the counted calls).
"""

from __future__ import annotations

import os
import signal
import sys
import threading
import time
from pathlib import Path

from tqdm.auto import tqdm

from ethoscribe.errors import WorkspaceError
from ethoscribe.io.bundle import write_bundle
from ethoscribe.workspace import Workspace, discover

# tqdm's default lock is a named multiprocessing semaphore, which a killed child would leak.
tqdm.set_lock(threading.RLock())

COUNTED = ("open", "write", "fsync", "replace", "rename", "link", "unlink", "mkdir", "rmdir")

# The edit session: each step is acknowledged once it has returned to its caller.
STEPS = (
    ("rename_motif", {"motif": "motif_01", "name": "resting"}),
    ("rename_motif", {"motif": "motif_02", "name": "walking"}),
    ("save_model", {"min_bout_s": 0.25}),
    ("merge_motifs", {"motifs": ["walking", "motif_03"], "into": "moving"}),
    ("undo", {}),
    ("unassign_motif", {"motif": "resting"}),
    ("rename_motif", {"motif": "motif_03", "name": "grooming"}),
)
JOURNAL_OPS = tuple(
    {"rename_motif": "rename", "merge_motifs": "merge", "unassign_motif": "unassign"}.get(op, op)
    for op, _ in STEPS
    if op != "save_model"
)


class Counter:
    """Counts the file-system calls and SIGKILLs this process just before call ``kill_at``;
    or, when ``kill_after`` names a call (e.g. ``"unlink workspace.json"``), just before it
    (``offset`` -1), just after it (0) or just before the ``offset``-th call following it."""

    def __init__(self, kill_at: int, log: Path | None, kill_after: str = "", offset: int = 0):
        self.n, self.kill_at, self.log = 0, kill_at, log
        self.kill_after, self.offset, self.since = kill_after, offset, None
        self.names: list[str] = []
        for name in COUNTED:
            setattr(os, name, self._wrap(name, getattr(os, name)))

    def _wrap(self, name, func):
        def counted(*args, **kwargs):
            self.n += 1
            called = f"{name} {os.path.basename(str(args[0] if args else ''))}"
            if self.log is not None:
                self.names.append(called)
            if self.since is not None:
                self.since += 1
            before = self.offset < 0 and called == self.kill_after
            if self.n == self.kill_at or before or self.since == self.offset:
                os.kill(os.getpid(), signal.SIGKILL)
            try:
                return func(*args, **kwargs)
            finally:  # also when the call fails (unlinking a file that is already gone)
                if self.kill_after and self.since is None and called == self.kill_after:
                    self.since = 0
                    if self.offset == 0:
                        os.kill(os.getpid(), signal.SIGKILL)

        return counted


def _ack(path: Path, text: str) -> None:
    with open(path, "a", encoding="utf-8") as fh:  # builtin file object: not counted
        fh.write(text + "\n")


def edit_session(ws_path: str, ack: str, kill_at: int = 0) -> None:
    """Run :data:`STEPS` on the workspace, acknowledging each; optionally die at a call."""
    ack_path = Path(ack)
    ws = Workspace(ws_path)
    counter = Counter(kill_at, None)
    _ack(ack_path, "ready")
    for i, (op, kwargs) in enumerate(STEPS):
        if op == "save_model":
            with ws.lock():
                model = ws.model()
                model.min_bout_s = kwargs["min_bout_s"]
                write_bundle(ws.path / "model", *model.to_state())
        else:
            getattr(ws, op)(**kwargs)
        _ack(ack_path, f"step {i}")
    _ack(ack_path, f"done {counter.n}")


def discover_run(
    study: str,
    out: str,
    ack: str,
    kill_at: int = 0,
    log: str = "",
    kill_after: str = "",
    offset: int = 0,
) -> None:
    """One discover run (as in the tests' ``run_discover``, allowed to replace a curation);
    optionally die at a call (see :class:`Counter`)."""
    ack_path = Path(ack)
    counter = Counter(kill_at, Path(log) if log else None, kill_after, offset)
    _ack(ack_path, "ready")
    discover(
        [Path(study)], Path(out), states=3, stability=False, progress=False, replace_curation=True
    )
    if log:
        Path(log).write_text("\n".join(counter.names))
    _ack(ack_path, f"done {counter.n}")


def hold_lock(ws_path: str, ack: str, seconds: float) -> None:
    """Hold the workspace lock (as an editor does) for ``seconds``, then release it."""
    with Workspace(ws_path).lock():
        _ack(Path(ack), f"locked {os.getpid()}")
        time.sleep(seconds)
    _ack(Path(ack), "released")


def try_edit(ws_path: str, ack: str) -> None:
    """Attempt one edit; acknowledge the outcome (the error message when refused)."""
    try:
        Workspace(ws_path).rename_motif("motif_01", "resting")
    except Exception as exc:  # reported to the test, which checks type and message
        _ack(Path(ack), f"refused {type(exc).__name__}: {exc}")
        sys.exit(1)
    _ack(Path(ack), "edited")


def edit_with_retry(ws_path: str, ack: str, motif: str, prefix: str, n_edits: int) -> None:
    """Rename ``motif`` ``n_edits`` times, waiting whenever the other editor holds the lock."""
    ws, current = Workspace(ws_path), motif
    for i in range(n_edits):
        while True:
            try:
                ws.rename_motif(current, f"{prefix}{i}")
                break
            except WorkspaceError as exc:
                if "in use by" not in str(exc):
                    raise
                time.sleep(0.005)
        current = f"{prefix}{i}"
        _ack(Path(ack), f"edit {i}")
