"""A writer process that applies journaled edits to one workspace, in order.

The workbench shows an edit at once and leaves the disk work -- the journal line and the
rewritten ethogram tables, seconds of pandas work on a million frames -- to this process, so the
notebook kernel stays free to redraw. It reads one JSON object per line on standard input,
``{"id": 1, "op": "rename", "kwargs": {"motif": "motif_01", "name": "walking"}}``, calls
:meth:`Workspace.edit` and answers one line per edit on standard output,
``{"id": 1, "ok": true}`` or ``{"id": 1, "ok": false, "error": "..."}``. It stops when its
input closes, after the edits already sent.

:class:`EditWriter` starts it and talks to it (JSON only, nothing pickled).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import tempfile
import threading
from pathlib import Path
from typing import Any

from ethoscribe.workspace.folder import Workspace


def serve(path: str, stdin=None, stdout=None) -> None:
    """Apply the edits read from ``stdin`` to the workspace at ``path`` until input ends."""
    stdin, stdout = stdin or sys.stdin, stdout or sys.stdout
    if hasattr(os, "nice"):
        os.nice(10)  # the notebook kernel redrawing comes first; the disk can wait a moment
    ws = Workspace(path)
    for line in stdin:
        if not line.strip():
            continue
        request = json.loads(line)
        answer: dict[str, Any] = {"id": request.get("id"), "ok": True}
        try:
            ws.edit(request["op"], **request.get("kwargs", {}))
        except Exception as exc:  # every failure goes back to the workbench as text
            answer = {"id": request.get("id"), "ok": False, "error": f"{exc}"}
        stdout.write(json.dumps(answer) + "\n")
        stdout.flush()


class EditWriter:
    """Sends edits to an :func:`serve` process and keeps track of their answers.

    Examples
    --------
    >>> writer = EditWriter("study_ws")  # doctest: +SKIP
    >>> writer.submit("rename", {"motif": "motif_01", "name": "walking"})  # doctest: +SKIP
    >>> writer.wait(); writer.failures()  # doctest: +SKIP
    []
    """

    def __init__(self, path: str | Path) -> None:
        self.path = str(Path(path).resolve())
        self._proc: subprocess.Popen | None = None
        self._sent = self._answered = 0
        self._errors: list[str] = []
        self._ops: dict[int, str] = {}
        self._done = threading.Condition()
        self._log = tempfile.TemporaryFile(mode="w+")

    def _start(self) -> subprocess.Popen:
        if self._proc is not None and self._proc.poll() is not None:
            self._proc = None  # it stopped (its failure was reported): start a new one
        if self._proc is None:
            command = [sys.executable, "-m", "ethoscribe.workspace.edit_worker", self.path]
            self._proc = subprocess.Popen(
                command,
                stdin=subprocess.PIPE,
                stdout=subprocess.PIPE,
                stderr=self._log,
                text=True,
                bufsize=1,
            )
            threading.Thread(target=self._read, args=(self._proc,), daemon=True).start()
        return self._proc

    def submit(self, op: str, kwargs: dict[str, Any]) -> None:
        """Queue one edit (returns at once)."""
        proc = self._start()
        with self._done:
            self._sent += 1
            self._ops[self._sent] = op
            line = json.dumps({"id": self._sent, "op": op, "kwargs": kwargs}) + "\n"
        try:
            proc.stdin.write(line)
            proc.stdin.flush()
        except (BrokenPipeError, OSError):
            self._stopped()

    def _read(self, proc: subprocess.Popen) -> None:
        for line in proc.stdout:
            answer = json.loads(line)
            with self._done:
                self._answered += 1
                if not answer.get("ok"):
                    op = self._ops.get(answer.get("id"), "edit")
                    self._errors.append(f"{op}: {answer.get('error')}")
                self._done.notify_all()
        self._stopped()

    def _stopped(self) -> None:
        with self._done:
            lost = self._sent - self._answered
            if lost > 0:
                self._log.seek(0)
                tail = self._log.read()[-500:].strip()
                self._errors.append(f"the edit writer stopped with {lost} edit(s) unsaved: {tail}")
                self._answered = self._sent
            self._done.notify_all()

    def wait(self) -> None:
        """Block until every submitted edit has been answered."""
        with self._done:
            self._done.wait_for(lambda: self._answered >= self._sent)

    def failures(self) -> list[str]:
        """Messages of failed edits since the last call."""
        with self._done:
            out, self._errors = self._errors, []
        return out

    def close(self) -> None:
        """Let the process finish the queued edits and stop."""
        if self._proc is not None:
            self._proc.stdin.close()
            self._proc.wait(timeout=120)
            self._proc = None


if __name__ == "__main__":
    serve(sys.argv[1])
