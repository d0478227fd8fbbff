"""One writer at a time per folder: an operating-system lock plus a record of who holds it.

The lock itself is ``fcntl.flock`` (``msvcrt`` on Windows) on ``FOLDER/.lock`` through
``filelock``: the system releases it when its holder ends, however it ends, so a crashed process
never blocks anyone. Beside it, the holder writes ``FOLDER/.lock-owner.json`` (process id, host,
start time, program) so that a second process can say who is in the way. A holder killed
mid-edit leaves that record behind; the next holder finds it (a *stale* record: its lock was
released by the system), reports it and replaces it.
"""

from __future__ import annotations

import datetime as _dt
import os
import socket
import sys
from collections.abc import Iterator
from contextlib import contextmanager, suppress
from pathlib import Path
from typing import Any

from filelock import FileLock, Timeout

from ethoscribe.errors import EthoscribeError, WorkspaceError
from ethoscribe.io._atomic import atomic_write_json
from ethoscribe.io._safe import read_json

LOCK_FILE = ".lock"
OWNER_FILE = ".lock-owner.json"
# A holder that has recorded no owner is either a probe (``holder``: the lock taken and given
# back at once) or a holder that writes its record right after taking the lock; either is
# gone or named within this time, so a writer waits that long before saying who is in the way.
UNNAMED_HOLDER_WAIT_S = 2.0


def owner_record() -> dict[str, Any]:
    """Who this process is: ``pid``, ``host``, ``since`` (UTC, ISO 8601) and ``program``."""
    program = " ".join(os.path.basename(a) if i == 0 else a for i, a in enumerate(sys.argv[:3]))
    return {
        "pid": os.getpid(),
        "host": socket.gethostname(),
        "since": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "program": program[:200],
    }


def read_owner(folder: str | os.PathLike[str]) -> dict[str, Any] | None:
    """The owner record in ``folder`` (None if there is none; ``{}`` if it is unreadable)."""
    path = Path(folder) / OWNER_FILE
    if not path.exists() and not path.is_symlink():
        return None
    try:
        record = read_json(path, max_bytes=100_000)
    except (EthoscribeError, OSError):
        return {}
    return record if isinstance(record, dict) else {}


def process_alive(pid: Any, host: Any) -> bool | None:
    """Whether process ``pid`` on ``host`` runs; None when that cannot be told from here."""
    if not isinstance(pid, int) or isinstance(pid, bool) or pid <= 0:
        return None
    if host != socket.gethostname() or sys.platform == "win32":  # os.kill would end it there
        return None
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # it runs, as another user
        return True
    except OSError:
        return None
    return True


def describe_owner(owner: dict[str, Any] | None) -> str:
    """``process 123 on host 'lab-pc' since 2024-05-01T10:00:00+00:00 (python notebook.py)``."""
    if not owner:
        return "another process (it has not recorded its name yet, or its record is damaged)"
    text = (
        f"process {owner.get('pid', '?')} on host {owner.get('host', '?')!r} since "
        f"{owner.get('since', '?')}"
    )
    return text + (f" ({owner['program']})" if owner.get("program") else "")


def _in_use(folder: Path, what: str) -> WorkspaceError:
    owner = read_owner(folder)
    msg = f"{what} {folder} is in use by {describe_owner(owner)}"
    alive = process_alive((owner or {}).get("pid"), (owner or {}).get("host"))
    if alive is False:
        msg += (
            ". That process no longer runs, yet the lock is still held, most likely by a "
            "process it started (a worker or a notebook kernel): end that one. The system "
            "releases the lock as soon as its holder ends; do not delete the .lock file."
        )
    else:
        msg += ". Close it there (or let it finish), then try again."
    return WorkspaceError(msg)


@contextmanager
def hold(
    folder: str | os.PathLike[str], what: str = "workspace", wait_s: float = 0.0
) -> Iterator[dict | None]:
    """Hold the lock of ``folder`` for writing; a second holder gets a clear ``WorkspaceError``.

    Yields the owner record a previous holder left behind when it ended without releasing
    (it crashed or was killed), or None. ``wait_s``: how long to wait for a holder that is
    expected to finish soon (the workbench's table writer holds it for milliseconds).

    Examples
    --------
    >>> import tempfile
    >>> with hold(tempfile.mkdtemp()) as stale:
    ...     print(stale)
    None
    """
    folder = Path(folder)
    lock = FileLock(str(folder / LOCK_FILE), timeout=max(0.0, wait_s), poll_interval=0.02)
    try:
        try:
            lock.acquire()
        except Timeout:
            if read_owner(folder):
                raise
            # no record: a probe or a holder still starting (see UNNAMED_HOLDER_WAIT_S)
            lock.acquire(timeout=max(wait_s, UNNAMED_HOLDER_WAIT_S))
    except Timeout:
        raise _in_use(folder, what) from None
    except OSError as exc:
        msg = f"{what} {folder}: cannot take its lock file {LOCK_FILE} ({exc}); check permissions"
        raise WorkspaceError(msg) from None
    owner_file = folder / OWNER_FILE
    try:
        stale = read_owner(folder)
        atomic_write_json(owner_file, owner_record())
        yield stale
    finally:
        with suppress(OSError):
            owner_file.unlink(missing_ok=True)
        lock.release()


def holder(folder: str | os.PathLike[str]) -> dict[str, Any] | None:
    """Who holds the lock of ``folder`` now: their owner record, or None if it is free.

    It takes the lock for a moment to tell; a writer starting meanwhile waits for it
    (``UNNAMED_HOLDER_WAIT_S``) instead of failing."""
    folder = Path(folder)
    lock = FileLock(str(folder / LOCK_FILE), timeout=0)
    try:
        lock.acquire()
    except Timeout:
        return read_owner(folder) or {}
    lock.release()
    return None


def clear_stale_lock(folder: str | os.PathLike[str], what: str = "workspace") -> dict | None:
    """Remove the owner record a crashed holder left behind; return it (None if there was none).

    Safe: the lock is taken first, so a record of a live holder is never removed (that raises
    the usual 'in use by' error instead).
    """
    with hold(folder, what) as stale:
        return stale
