"""Curation edits of the workbench state: confirmed once their journal line is on disk.

An edit is checked against the journal on disk and appended to it, fsynced, under the workspace
lock (:meth:`Workspace.journal_edit`, milliseconds) before the workbench shows it as done: an
edit seen on screen survives a kernel that dies a moment later. Checking against the disk, not a
copy in memory, also means an edit always follows the ones saved before it (from this
workbench, another one, or a script). The ethogram tables that follow from the journal are
rewritten behind, by a worker process (:class:`~ethoscribe.workspace.edit_worker.TableWriter`).
"""

from __future__ import annotations

from typing import Any

from ethoscribe.errors import EthoscribeError

EDIT_OPS = ("rename", "merge", "split", "unassign", "undo", "redo")


class CurationEdits:
    """Editing methods of :class:`~ethoscribe.widgets.state.WorkbenchState` (a mixin)."""

    #: How long an edit waits for the workspace lock (the table writer holds it for
    #: milliseconds; a discover run or another editor holds it longer: the edit is refused).
    lock_wait_s = 5.0

    # --- editing --------------------------------------------------------------------------
    def edit(self, op: str, **kwargs: Any) -> bool:
        """Apply one curation edit (``rename``, ``merge``, ``split``, ``unassign``, ``undo``,
        ``redo``); it is on disk when this returns True. A bad or refused one leaves a message
        and changes nothing."""
        self._check_writes()
        if op not in EDIT_OPS:
            self.say("error", f"unknown edit {op!r}; use {', '.join(EDIT_OPS)}")
            return False
        try:
            record, self.curation = self.ws.journal_edit(op, kwargs, wait_s=self.lock_wait_s)
        except EthoscribeError as exc:
            self.curation = self.ws.curation()  # what is on disk is what is shown
            self._after_edit(None, {})
            self.say("error", _refused(op, exc))
            return False
        kwargs = {**kwargs, **{k: record[k] for k in ("undid", "redid") if k in record}}
        at = kwargs.get("undid", kwargs.get("redid"))
        if isinstance(at, int):  # say which edit was undone or redone, not just that one was
            history = self.curation.history  # position 0: the start record
            kwargs["edit"] = history[at] if 0 <= at < len(history) else None
        self._write_tables()
        self._after_edit(op, kwargs)
        return True

    def _after_edit(self, op: str | None, kwargs: dict[str, Any]) -> None:
        self._prepare_states()
        renamed = {"rename": kwargs.get("name"), "merge": kwargs.get("into")}.get(op or "")
        if op == "split":
            renamed = (kwargs.get("names") or [None])[0]
        self._keep_selection(renamed)
        if op is not None:
            self.say("ok", _describe(op, kwargs))
        self._emit("names", "motif")

    def _keep_selection(self, prefer: str | None) -> None:
        """After an edit the selected motif may be gone: take ``prefer`` or the first one."""
        if self.motif not in self.motifs:
            self.motif = prefer if prefer in self.motifs else (self.motifs or [None])[0]

    def _write_tables(self) -> None:
        if self._writer is not None:
            self._writer.request()
        else:
            self.ws.update_tables()

    def _check_writes(self) -> bool:
        """Report a table rewrite that failed (the edits themselves are saved); True if one did."""
        failures = self._writer.failures() if self._writer is not None else []
        if not failures:
            return False
        self.say(
            "error",
            f"the edits are saved in journal.jsonl, but the ethogram tables could not be "
            f"rewritten ({'; '.join(failures)}); they are rewritten by the next edit or by "
            "Save ethogram",
        )
        return True

    def flush(self, quiet: bool = False) -> None:
        """Wait until the ethogram tables follow every edit (the edits are on disk already)."""
        if self._writer is not None:
            self._writer.wait()
        if not quiet:
            self._check_writes()

    def close(self) -> None:
        """Finish rewriting the tables and stop the writer process."""
        if self._writer is not None:
            self._writer.close()


def _refused(op: str, exc: EthoscribeError) -> str:
    text = str(exc)
    if " is in use by " in text:
        return f"the {op} was not saved: {text}"
    return text


def _describe(op: str, kw: dict[str, Any]) -> str:
    if op == "rename":
        return f"Renamed {kw['motif']!r} to {kw['name']!r}."
    if op == "merge":
        return f"Merged {', '.join(repr(m) for m in kw['motifs'])} into {kw['into']!r}."
    if op == "split":
        return f"Split {kw['motif']!r} into {kw['names'][0]!r} and {kw['names'][1]!r}."
    if op == "unassign":
        return f"Set {kw['motif']!r} aside as unassigned."
    edit = kw.get("edit")
    if isinstance(edit, dict) and edit.get("op") in ("rename", "merge", "split", "unassign"):
        done = _describe(edit["op"], edit)
        return f"Undid: {done}" if op == "undo" else f"Redid: {done}"
    return "Undid the last edit." if op == "undo" else "Redid the edit."
