"""A project folder on disk: sessions, the fitted model, labels, the curation journal, exports.

This is the only module that knows the folder layout::

    workspace.json     kind, format version, creation time, versions, parameters (written last)
    sessions.csv       one row per session: source file, fps, frames, manifest columns
    quality.csv        cleaning quality per session, animal and keypoint
    labels.parquet     per-frame labels (state ids; names come from the journal)
    labels.csv         the same with current motif names, for people
    bouts.csv, transitions.csv, time_budget.csv      ethogram tables with current names
    summary.json       run summary: parameters, versions, seed, state count, stability
    model/             the fitted model (model.json + arrays.npz, no pickle)
    features/          per-session features (npz), used to split motifs
    journal.jsonl      every curation edit, appended; names are derived by replaying it

A ``discover`` run validates every input before it writes anything and moves finished files into
place atomically, with ``workspace.json`` last, so an interrupted run never leaves a folder that
looks complete.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import platform
import shutil
import socket
import tempfile
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from filelock import FileLock, Timeout

from ethoscribe import __version__
from ethoscribe.curation import Curation
from ethoscribe.errors import WorkspaceError
from ethoscribe.ethogram import bout_table, time_budget, transition_table
from ethoscribe.features import FeatureSet
from ethoscribe.io._atomic import atomic_write, atomic_write_json, write_table
from ethoscribe.io.bundle import read_bundle
from ethoscribe.segment.model import BehaviourModel, motif_name

WORKSPACE_FILE = "workspace.json"
JOURNAL_FILE = "journal.jsonl"
FORMAT_VERSION = 1
CAUTION = (
    "These outputs support, and do not replace, expert review of the behaviour and the local "
    "animal-welfare and ethics rules."
)


def versions() -> dict[str, str]:
    """Versions of ethoscribe and the libraries whose numbers shape its results."""
    import hmmlearn
    import ruptures
    import scipy
    import sklearn

    return {
        "ethoscribe": __version__,
        "python": platform.python_version(),
        "numpy": np.__version__,
        "pandas": pd.__version__,
        "scipy": scipy.__version__,
        "scikit-learn": sklearn.__version__,
        "hmmlearn": hmmlearn.__version__,
        "ruptures": ruptures.__version__,
    }


def now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


# --- writing a workspace ------------------------------------------------------------------
class Staging:
    """Files are written into a hidden folder beside the target and moved in one by one."""

    def __init__(self, out: Path):
        out.mkdir(parents=True, exist_ok=True)
        self.out = out
        self.dir = Path(tempfile.mkdtemp(prefix=".incoming-", dir=out))

    def path(self, name: str) -> Path:
        p = self.dir / name
        p.parent.mkdir(parents=True, exist_ok=True)
        return p

    def commit(self, last: str) -> None:
        # The old marker goes first and the new one last: while files are being swapped, the
        # folder does not claim to be a complete workspace.
        (self.out / last).unlink(missing_ok=True)
        for item in sorted(self.dir.iterdir()):
            if item.name != last:
                _replace(item, self.out / item.name)
        _replace(self.dir / last, self.out / last)
        shutil.rmtree(self.dir, ignore_errors=True)

    def abort(self) -> None:
        shutil.rmtree(self.dir, ignore_errors=True)


def _replace(src: Path, dst: Path) -> None:
    if src.is_dir():
        old = None
        if dst.exists():
            old = dst.with_name(f".old-{dst.name}-{os.getpid()}")
            os.replace(dst, old)
        os.replace(src, dst)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
    else:
        os.replace(src, dst)


def write_ethogram_tables(folder: Path, labels: pd.DataFrame, stage: Staging | None = None) -> None:
    path = stage.path if stage is not None else (lambda n: folder / n)
    bouts = bout_table(labels)
    write_table(labels, path("labels.csv"))
    write_table(bouts, path("bouts.csv"))
    write_table(transition_table(bouts), path("transitions.csv"))
    write_table(time_budget(labels), path("time_budget.csv"))


def save_features(path: Path, f: FeatureSet) -> None:
    """One feature set as an npz (float32 values: half the size, ample precision for splits)."""
    with atomic_write(path, "wb") as fh:
        np.savez(
            fh,
            values=f.values.astype(np.float32),
            valid=f.valid,
            columns=np.array(f.columns),
            session=np.array(f.session),
            animal=np.array(f.animal),
            fps=np.array(f.fps),
        )


def load_features(path: Path) -> FeatureSet:
    """Read a feature set written by :func:`save_features` (no pickle)."""
    with np.load(path, allow_pickle=False) as z:
        return FeatureSet(
            values=z["values"].astype(np.float64),
            columns=tuple(str(c) for c in z["columns"]),
            valid=z["valid"],
            session=str(z["session"]),
            animal=str(z["animal"]),
            fps=float(z["fps"]),
            meta={},
        )


def features_table(feats: Sequence[FeatureSet]) -> pd.DataFrame:
    """Feature sets as one table: ``session, animal, frame`` + feature columns."""
    parts = []
    for f in feats:
        frame = pd.DataFrame(f.values, columns=list(f.columns))
        frame.insert(0, "frame", np.arange(len(frame)))
        frame.insert(0, "animal", f.animal)
        frame.insert(0, "session", f.session)
        parts.append(frame)
    return pd.concat(parts, ignore_index=True)


def table_json(table: pd.DataFrame) -> dict[str, list]:
    """A table as JSON-able columns (NaN as null)."""
    return table.astype(object).where(table.notna(), None).to_dict(orient="list")


def jsonable(obj: Any) -> Any:
    """``obj`` with numpy scalars as Python numbers and non-finite floats as None."""
    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, float) and not np.isfinite(obj):
        return None
    return obj


# --- an existing workspace ----------------------------------------------------------------
class Workspace:
    """An ethoscribe workspace folder (see the module docstring for its layout)."""

    def __init__(self, path: str | Path):
        self.path = Path(path)
        marker = self.path / WORKSPACE_FILE
        if not marker.is_file():
            raise WorkspaceError(
                f"{self.path}: not an ethoscribe workspace ({WORKSPACE_FILE} missing); run "
                "'ethoscribe discover ... --out FOLDER' first, or an earlier run was interrupted"
            )
        info = json.loads(marker.read_text())
        if info.get("format_version") != FORMAT_VERSION:
            raise WorkspaceError(
                f"{self.path}: workspace format {info.get('format_version')!r} written by "
                f"ethoscribe {info.get('ethoscribe_version')}; this version reads format "
                f"{FORMAT_VERSION}"
            )
        self.info = info

    # reading
    @property
    def sessions(self) -> pd.DataFrame:
        return pd.read_csv(self.path / "sessions.csv", dtype={"session": str})

    @property
    def summary(self) -> dict[str, Any]:
        return json.loads((self.path / "summary.json").read_text())

    def model(self) -> BehaviourModel:
        return BehaviourModel.from_state(*read_bundle(self.path / "model"))

    def state_labels(self) -> pd.DataFrame:
        """Per-frame labels with the model's default motif names."""
        return pd.read_parquet(self.path / "labels.parquet")

    def journal(self) -> list[dict[str, Any]]:
        records, _ = read_journal(self.path / JOURNAL_FILE)
        return records

    def curation(self) -> Curation:
        """The current naming, replayed from the journal."""
        return Curation.from_journal(self.journal(), self.default_names())

    def default_names(self) -> dict[int, str]:
        """``state -> name`` as the model left them (before any edit)."""
        return {k: motif_name(k) for k in range(int(self.summary["n_states"]))}

    def features(self) -> pd.DataFrame:
        """Per-frame features of every session (``session, animal, frame`` + feature columns)."""
        files = sorted((self.path / "features").glob("*.npz"))
        if not files:
            raise WorkspaceError(f"{self.path}: no saved features (features/ is empty)")
        return features_table([load_features(p) for p in files])

    def _needs_features(self, cur: Curation) -> bool:
        return any(r.get("op") == "split" for r in cur.history)

    def labels(self) -> pd.DataFrame:
        """Per-frame labels with the current (curated) motif names."""
        cur = self.curation()
        features = self.features() if self._needs_features(cur) else None
        return cur.apply(self.state_labels(), features)

    def describe(self) -> str:
        s = self.summary
        return (
            f"workspace {self.path}: {s['n_sessions']} sessions, {s['n_frames']} frames, "
            f"{s['n_states']} motifs; files: labels.csv, bouts.csv, transitions.csv, "
            f"time_budget.csv, quality.csv, summary.json, model/. {CAUTION}"
        )

    # editing
    @contextmanager
    def lock(self) -> Iterator[None]:
        """Hold the workspace for editing; a second process gets a clear message."""
        owner_file = self.path / ".lock-owner.json"
        lock = FileLock(str(self.path / ".lock"), timeout=0)
        try:
            lock.acquire()
        except Timeout:
            try:
                owner = json.loads(owner_file.read_text())
            except (OSError, ValueError):
                owner = {}
            raise WorkspaceError(
                f"workspace {self.path} is in use by process {owner.get('pid', '?')} on "
                f"{owner.get('host', '?')} since {owner.get('since', '?')}; close it there first"
            ) from None
        try:
            atomic_write_json(
                owner_file, {"pid": os.getpid(), "host": socket.gethostname(), "since": now()}
            )
            yield
        finally:
            owner_file.unlink(missing_ok=True)
            lock.release()

    def edit(self, op: str, **kwargs: Any) -> dict[str, Any]:
        """Apply one curation edit and journal it; the ethogram tables are rewritten.

        ``op`` is ``"rename"`` (motif, name), ``"merge"`` (motifs, into), ``"split"`` (motif,
        names), ``"unassign"`` (motif), ``"undo"`` or ``"redo"``. The edit is on disk (fsync)
        before this returns.
        """
        if op not in EDITS:
            raise WorkspaceError(f"unknown edit {op!r}; known edits: {sorted(EDITS)}")
        with self.lock():
            cur = self.curation()
            labels = self.state_labels()
            features = None
            if op == "split" or self._needs_features(cur):
                features = self.features()
            if op == "split":
                kwargs = {"labels": labels, "features": features, **kwargs}
            record = getattr(cur, op)(**kwargs)
            append_journal(self.path / JOURNAL_FILE, record)
            write_ethogram_tables(self.path, cur.apply(labels, features))
        return record

    def rename_motif(self, motif: str, name: str) -> dict[str, Any]:
        """Give ``motif`` a new ``name`` (journaled)."""
        return self.edit("rename", motif=motif, name=name)

    def merge_motifs(self, motifs: Sequence[str], into: str) -> dict[str, Any]:
        """Give all ``motifs`` one name ``into`` (journaled)."""
        return self.edit("merge", motifs=list(motifs), into=into)

    def split_motif(self, motif: str, names: Sequence[str]) -> dict[str, Any]:
        """Split ``motif`` in two by re-clustering its frames' features (journaled)."""
        return self.edit("split", motif=motif, names=list(names))

    def unassign_motif(self, motif: str) -> dict[str, Any]:
        """Mark ``motif`` as unassigned (journaled)."""
        return self.edit("unassign", motif=motif)

    def undo(self) -> dict[str, Any]:
        return self.edit("undo")

    def redo(self) -> dict[str, Any]:
        return self.edit("redo")


EDITS = {"rename", "merge", "split", "unassign", "undo", "redo"}


# --- the journal file ---------------------------------------------------------------------
def append_journal(path: Path, record: dict[str, Any]) -> None:
    """Append one edit as a JSON line and fsync it before returning (the edit is then safe)."""
    line = json.dumps(jsonable(record), sort_keys=True, allow_nan=False) + "\n"
    with open(path, "a", encoding="utf-8") as fh:
        fh.write(line)
        fh.flush()
        os.fsync(fh.fileno())


def read_journal(path: Path) -> tuple[list[dict[str, Any]], list[str]]:
    """Every complete edit of the journal, and a note on each line that could not be read.

    A line cut short by a crash is reported and skipped; all complete edits survive.
    """
    if not path.exists():
        return [], []
    records, problems = [], []
    for number, line in enumerate(path.read_text(encoding="utf-8").splitlines(), start=1):
        if not line.strip():
            continue
        try:
            record = json.loads(line)
        except ValueError:
            problems.append(f"{path}: line {number} is incomplete or damaged and was skipped")
            continue
        if not isinstance(record, dict) or "op" not in record:
            problems.append(f"{path}: line {number} is not an edit record and was skipped")
            continue
        records.append(record)
    return records, problems
