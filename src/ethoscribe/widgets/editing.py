"""Curation edits of the workbench state: checked in memory at once, written to disk behind.

An edit is applied to the in-memory :class:`~ethoscribe.curation.Curation` (the same rules the
workspace uses, so a bad edit is refused with the same message) and then written through
:meth:`Workspace.edit` by a writer process (:class:`~ethoscribe.workspace.edit_worker.
EditWriter`), in order. If a write fails, the names are reloaded from disk and the message says
so. Splits need the features and are written before the click returns.
"""

from __future__ import annotations

from typing import Any

from ethoscribe.errors import EthoscribeError, InputError


class CurationEdits:
    """Editing methods of :class:`~ethoscribe.widgets.state.WorkbenchState` (a mixin)."""

    # --- editing --------------------------------------------------------------------------
    def edit(self, op: str, **kwargs: Any) -> bool:
        """Apply one curation edit (``rename``, ``merge``, ``split``, ``unassign``, ``undo``,
        ``redo``); a bad one leaves a message and changes nothing. Returns success."""
        if self._check_writes():
            return False  # an earlier edit failed on disk: the user sees that first
        try:
            if op == "split":
                self.flush(quiet=True)
                self.ws.edit("split", **kwargs)
                self.curation = self.ws.curation()
            elif op in ("rename", "merge", "unassign", "undo", "redo"):
                record = getattr(self.curation, op)(**kwargs)
                self._write(op, kwargs)
            else:
                raise InputError(
                    f"unknown edit {op!r}; use rename, merge, split, unassign, undo or redo"
                )
        except EthoscribeError as exc:
            self.say("error", str(exc))
            return False
        if op != "split":
            kwargs = {**kwargs, **{k: record[k] for k in ("undid", "redid") if k in record}}
        self._after_edit(op, kwargs)
        return True

    def _after_edit(self, op: str, kwargs: dict[str, Any]) -> None:
        self._prepare_states()
        renamed = {"rename": kwargs.get("name"), "merge": kwargs.get("into")}.get(op)
        if op == "split":
            renamed = (kwargs.get("names") or [None])[0]
        self._keep_selection(renamed)
        self.say("ok", _describe(op, kwargs))
        self._emit("names", "motif")

    def _keep_selection(self, prefer: str | None) -> None:
        """After an edit the selected motif may be gone: take ``prefer`` or the first one."""
        if self.motif not in self.motifs:
            self.motif = prefer if prefer in self.motifs else (self.motifs or [None])[0]

    def _write(self, op: str, kwargs: dict[str, Any]) -> None:
        if self._writer is not None:
            self._writer.submit(op, kwargs)
            return
        try:
            self.ws.edit(op, **kwargs)
        except EthoscribeError:
            self.curation = self.ws.curation()  # the memory must not run ahead of the disk
            raise

    def _check_writes(self) -> bool:
        """Reload the names from disk if a queued edit failed there; True if one did."""
        failures = self._writer.failures() if self._writer is not None else []
        if not failures:
            return False
        problems = "; ".join(failures)
        self.curation = self.ws.curation()
        self._prepare_states()
        self._keep_selection(None)
        self.say(
            "error",
            f"an edit could not be saved ({problems}); the names saved on disk are shown again",
        )
        self._emit("names", "motif")
        return True

    def flush(self, quiet: bool = False) -> None:
        """Wait until every edit is on disk (journal and tables)."""
        if self._writer is not None:
            self._writer.wait()
        if not quiet:
            self._check_writes()

    def close(self) -> None:
        """Finish writing the edits and stop the writer process."""
        if self._writer is not None:
            self._writer.wait()
            self._writer.close()


def _describe(op: str, kw: dict[str, Any]) -> str:
    if op == "rename":
        return f"Renamed {kw['motif']!r} to {kw['name']!r}."
    if op == "merge":
        return f"Merged {', '.join(repr(m) for m in kw['motifs'])} into {kw['into']!r}."
    if op == "split":
        return f"Split {kw['motif']!r} into {kw['names'][0]!r} and {kw['names'][1]!r}."
    if op == "unassign":
        return f"Set {kw['motif']!r} aside as unassigned."
    return "Undid the last edit." if op == "undo" else "Redid the edit."
