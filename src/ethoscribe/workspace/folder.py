"""A project folder on disk: sessions, the fitted model, labels, the curation journal, exports.

This is the only module that knows the folder layout::

    workspace.json     kind, format version, creation time, versions, parameters (written last)
    sessions.csv       one row per session: source file, fps and frames as read, fps and
                       frames as labelled (fewer when resampled), manifest columns
    quality.csv        cleaning quality per session, animal and keypoint
    labels.parquet     per-frame labels (state ids, no names: they come from the journal)
    labels.csv         the same with current motif names, for people
    bouts.csv, transitions.csv, time_budget.csv      ethogram tables with current names
    summary.json       run summary: parameters, versions, seed, state count, stability
    model/             the fitted model (model.json + arrays.npz, no pickle)
    features/          per-session features (npz), used to split motifs
    journal.jsonl      every curation edit, appended; names are derived by replaying it
    learned/           an expert's behaviours learned by 'ethoscribe learn' (see
                       ethoscribe.workspace.learned_labels); its labels then fill ``motif``
    .exports-state.json  which journal the ethogram tables reflect (stale after a crash mid-edit)
    .lock, .lock-owner.json  the edit lock and who holds it (see ethoscribe.io.locking)

A ``discover`` run validates every input before it writes anything and moves finished files into
place atomically, with ``workspace.json`` last, so an interrupted run never leaves a folder that
looks complete.

Its files are read safely and written crash-safely by :mod:`ethoscribe.workspace.files`: links
leading outside are refused, JSON and npz are parsed strictly, and tables left behind the journal
by a killed edit are brought up to date by :meth:`Workspace.repair` or the next edit.
"""

from __future__ import annotations

import datetime as _dt
import os
import platform
import shutil
import tempfile
import warnings
from collections.abc import Iterable, Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa

from ethoscribe import __version__
from ethoscribe.curation import Curation, name_list
from ethoscribe.errors import (
    EthoscribeError,
    InputError,
    JournalWarning,
    WorkspaceError,
    counted,
    listed,
)
from ethoscribe.ethogram import bout_table, time_budget, time_budgets_joined, transition_table
from ethoscribe.features import FeatureSet
from ethoscribe.io import atomic_table_writer, atomic_write_json, locking, read_json, write_table
from ethoscribe.label_table import csv_rounded
from ethoscribe.segment.model import BehaviourModel, motif_name
from ethoscribe.workspace.files import (
    EXPORTS_STATE,
    JOURNAL_FILE,
    MAX_STATES,
    OWN_FILES,
    OWN_FOLDERS,
    TABLES,
    TABLES_STAGING,
    append_journal,
    check_links,
    journal_fingerprint,
    load_features,
    load_model,
    read_journal,
    read_journal_lines,
    remove_leftovers,
)
from ethoscribe.workspace.files import WORKSPACE_FILE as WORKSPACE_FILE
from ethoscribe.workspace.files import Staging as Staging
from ethoscribe.workspace.files import jsonable as jsonable
from ethoscribe.workspace.files import save_features as save_features
from ethoscribe.workspace.learned_labels import LEARNED_FOLDER, with_learned

FORMAT_VERSION = 1
CAUTION = (
    "These outputs support, and do not replace, expert review of the behaviour and the local "
    "animal-welfare and ethics rules."
)


def frames_said(summary: dict[str, Any]) -> str:
    """The run's frame count for a message: as read, and as labelled when resampling made
    them differ (labels.csv then has fewer rows than the files have frames).

    Examples
    --------
    >>> frames_said({"n_frames": 8100, "n_labelled_frames": 8100, "labelled_fps": 30.0})
    '8,100 frames'
    >>> frames_said({"n_frames": 8100, "n_labelled_frames": 4050, "labelled_fps": 15.0})
    '8,100 frames read, 4,050 labelled (resampled to 15 fps)'
    """
    read, labelled = summary.get("n_frames"), summary.get("n_labelled_frames")
    if labelled is None or labelled == read:
        return f"{read:,} frames" if isinstance(read, int) else f"{read} frames"
    fps = summary.get("labelled_fps")
    return f"{read:,} frames read, {labelled:,} labelled (resampled to {fps:g} fps)"


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
def write_ethogram_tables(
    folder: Path,
    labels: pd.DataFrame | Iterable[pd.DataFrame],
    stage: Staging | None = None,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The four ethogram tables, then the record of which journal they reflect.

    ``labels`` is the named label table, or an iterable of its pieces (each holding whole
    recordings, e.g. one session): per-frame rows are then streamed to ``labels.csv`` and only
    the bout tables of the study are held in memory. Returns the bouts and the per-session
    time budgets (for the report).
    """
    path = stage.path if stage is not None else (lambda n: folder / n)
    parts = [labels] if isinstance(labels, pd.DataFrame) else labels
    bouts, budgets, recordings = [], [], []
    with atomic_table_writer(path("labels.csv")) as write_labels:
        for part in parts:
            write_labels(csv_rounded(part))
            bouts.append(bout_table(part))
            budgets.append(time_budget(part))
            recordings.append(part[["session", "animal"]].drop_duplicates())
    bouts_all = pd.concat(bouts, ignore_index=True)
    if len(bouts) > 1:  # in the order bout_table gives a whole table: by recording, then time
        order = ["session", "animal", "start_frame"]
        bouts_all = bouts_all.sort_values(order, kind="stable", ignore_index=True)
    budget = budgets[0]
    if len(budgets) > 1:
        budget = time_budgets_joined(budgets, pd.concat(recordings))
    write_table(csv_rounded(bouts_all), path("bouts.csv"))
    write_table(csv_rounded(transition_table(bouts_all)), path("transitions.csv"))
    write_table(csv_rounded(budget), path("time_budget.csv"))
    atomic_write_json(path(EXPORTS_STATE), journal_fingerprint(path(JOURNAL_FILE)))
    return bouts_all, budget


def features_table(feats: Sequence[FeatureSet]) -> pd.DataFrame:
    """Feature sets as one table: ``session, animal, frame`` + feature columns.

    Frames carry the input's numbers (``meta["first_frame"]`` onwards), as the label tables do.
    """
    parts = []
    for f in feats:
        frame = pd.DataFrame(f.values, columns=list(f.columns))
        first = int(f.meta.get("first_frame", 0))
        frame.insert(0, "frame", np.arange(first, first + len(frame)))
        frame.insert(0, "animal", f.animal)
        frame.insert(0, "session", f.session)
        parts.append(frame)
    return pd.concat(parts, ignore_index=True)


def table_json(table: pd.DataFrame) -> dict[str, list]:
    """A table as JSON-able columns (NaN as null)."""
    return table.astype(object).where(table.notna(), None).to_dict(orient="list")


# --- output folders -------------------------------------------------------------------------
# Names only a run of ethoscribe leaves (its lock, staging folders): proof a folder is ours.
RUN_MARKS = (
    locking.LOCK_FILE,
    locking.OWNER_FILE,
    f".{locking.OWNER_FILE}.",  # its temporary file, while it is being written
    ".incoming-",
    ".old-",
    TABLES_STAGING,
)
COMPARISON_FILE = "metadata.json"
AGREEMENT_FILE = "agreement.json"
MARKER_FILES = {"comparison": COMPARISON_FILE, "agreement": AGREEMENT_FILE}


def check_output_folder(
    out: str | Path, kind: str = "workspace", inputs: Sequence[str | Path] = ()
) -> Path:
    """Refuse an ``--out`` folder that a run would clobber; return it as a Path.

    A run writes only into a new or empty folder, a folder of the same kind it wrote before
    (``kind``: ``"workspace"`` holds ``workspace.json``, ``"comparison"`` holds
    ``metadata.json``, ``"agreement"`` holds ``agreement.json``) or one an interrupted run
    left; never into a folder holding other files, an input folder, or (a comparison or an
    agreement) a workspace.
    """
    out = Path(out)
    option = "--out"
    if out.exists() and not out.is_dir():
        raise InputError(f"{option} {out} is a file; give a folder (a new one is created)")
    real = out.resolve()
    for given in inputs:
        p = Path(given).expanduser().resolve()
        if p == real or (p.is_file() and p.parent == real):
            msg = (
                f"{option} {out} is where the input {given} is; write the results to a folder "
                "of their own (the outputs would mix with, or be read as, pose files)"
            )
            raise InputError(msg)
    if not out.is_dir():
        return out
    names = sorted(p.name for p in out.iterdir())
    marker = WORKSPACE_FILE if kind == "workspace" else MARKER_FILES[kind]
    if kind != "workspace" and WORKSPACE_FILE in names:
        msg = (
            f"{option} {out} is an ethoscribe workspace; {'an' if kind[0] in 'aeiou' else 'a'} "
            f"{kind} goes to a folder of its own "
            f"(e.g. {out / kind}), so the workspace's tables are not replaced"
        )
        raise InputError(msg)
    if marker in names:
        return out
    # A run killed while moving its files in (marker not yet back) leaves only names of its
    # own, beside its lock or staging folder: such a folder is resumed, a user's is not.
    ours = kind == "workspace" and any(n.startswith((*RUN_MARKS, EXPORTS_STATE)) for n in names)
    own = (*RUN_MARKS, "cache", *((*OWN_FILES, *OWN_FOLDERS, "journal-before-") if ours else ()))
    foreign = [n for n in names if not n.startswith(own)]
    if foreign:
        shown = listed(foreign, 3)
        msg = (
            f"{option} {out} holds files ethoscribe did not write ({shown}) and is not an "
            f"ethoscribe {kind} folder; choose a new or empty folder (nothing there is overwritten)"
        )
        raise InputError(msg)
    return out


@contextmanager
def hold_output(out: Path, inputs: Sequence[str | Path] = ()) -> Iterator[bool]:
    """Check ``out`` (:func:`check_output_folder`), create it and hold its lock for a whole run.

    Yields whether this run created the folder. The lock is taken before any work, so a second
    run or an edit meets a clear 'in use by' message at once, not after minutes of reading. If
    the run fails on bad input in a folder it created, the folder is removed: nothing
    half-written is left (an interrupted run keeps its cache, so the next run resumes).
    """
    check_output_folder(out, "workspace", inputs)
    try:
        out.mkdir(parents=True)
        created = True
    except FileExistsError:
        created = False
    what = "workspace" if (out / WORKSPACE_FILE).exists() else "folder"
    with locking.hold(out, what):
        try:
            yield created
        except EthoscribeError:
            if created and not (out / WORKSPACE_FILE).exists():  # a committed run is kept
                shutil.rmtree(out, ignore_errors=True)
            raise


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
        check_links(self.path)
        info = self._read_json(WORKSPACE_FILE)
        if not isinstance(info, dict) or info.get("kind", "ethoscribe.workspace") != (
            "ethoscribe.workspace"
        ):
            raise WorkspaceError(f"{marker}: not an ethoscribe workspace record; it is damaged")
        if info.get("format_version") != FORMAT_VERSION:
            raise WorkspaceError(
                f"{self.path}: workspace format {info.get('format_version')!r} written by "
                f"ethoscribe {info.get('ethoscribe_version')}; this version reads format "
                f"{FORMAT_VERSION}"
            )
        self.info = info
        self.recovery: list[str] = []  # what the last lock() found and cleaned up
        self._stale: dict[str, Any] | None = None

    def _read_json(self, name: str) -> Any:
        try:
            return read_json(self.path / name)
        except InputError as exc:
            raise WorkspaceError(f"{exc}. The workspace is damaged: run discover again.") from None

    # reading
    @property
    def sessions(self) -> pd.DataFrame:
        return pd.read_csv(self.path / "sessions.csv", dtype={"session": str})

    @property
    def summary(self) -> dict[str, Any]:
        summary = self._read_json("summary.json")
        n = summary.get("n_states") if isinstance(summary, dict) else None
        if not isinstance(n, int) or isinstance(n, bool) or not 1 <= n <= MAX_STATES:
            msg = (
                f"{self.path / 'summary.json'}: expected a JSON object whose n_states is a whole "
                f"number from 1 to {MAX_STATES}; found {n!r}. The file is damaged: run discover "
                "again."
            )
            raise WorkspaceError(msg)
        return summary

    def model(self) -> BehaviourModel:
        return load_model(self.path / "model")

    def state_labels(self, columns: Sequence[str] | None = None) -> pd.DataFrame:
        """Per-frame labels with the model's default motif names (``columns``: only these).

        The file holds the model's states only: a ``motif`` column there would go stale at
        the first rename (workspaces written before kept one, the default names)."""
        path = self.path / "labels.parquet"
        named = columns is None or "motif" in columns
        read = None if columns is None else [c for c in columns if c != "motif"]
        if named and read is not None and "state" not in read:
            read.append("state")
        try:
            labels = pd.read_parquet(path, columns=read)
        except (OSError, ValueError, KeyError, pa.ArrowException) as exc:
            msg = f"{path}: cannot be read ({exc}); the workspace is damaged: run discover again"
            raise WorkspaceError(msg) from None
        if named and "motif" not in labels:
            state = labels["state"].to_numpy()
            top = int(state.max(initial=-1)) + 1
            names = np.array([motif_name(k) for k in range(top)] + [""])
            at = labels.columns.get_loc("state") + 1
            labels.insert(at, "motif", names[np.where(state >= 0, state, len(names) - 1)])
        return labels if columns is None else labels[list(columns)]

    def labelled_shares(self) -> pd.Series:
        """Share of the labelled frames each fitted state labels (index: every state of the
        model, 0 for a state that labels no frame: the model visits it only in bouts shorter
        than the minimum bout, which are merged into their neighbours, or not at all)."""
        states = self.state_labels(["state"])["state"].to_numpy()
        states = states[states >= 0]
        counts = np.bincount(states.astype(np.int64), minlength=self.summary["n_states"])
        return pd.Series(counts / max(len(states), 1), name="labelled_share").rename_axis("state")

    def journal(self) -> list[dict[str, Any]]:
        records, _ = read_journal(self.path / JOURNAL_FILE)
        return records

    def curation(self) -> Curation:
        """The current naming, replayed from the journal."""
        path = self.path / JOURNAL_FILE
        records, problems, numbers = read_journal_lines(path)
        for problem in problems:
            # Shown once per process (same text, same place): the edits on the other lines
            # count; this one is lost unless the user restores it.
            warnings.warn(
                f"{problem}; the edits on the other lines are applied (repair or delete that "
                "line to stop this warning)",
                JournalWarning,
                stacklevel=2,
            )
        where = [f"{path}: line {n}" for n in numbers]
        with self._replay_errors():
            return Curation.from_journal(records, self.default_names(), where=where)

    @contextmanager
    def _replay_errors(self) -> Iterator[None]:
        # Journal records are data from disk: a record of the wrong shape is reported, with the
        # file, instead of surfacing as a bare TypeError from deep inside the replay.
        try:
            yield
        except EthoscribeError:
            raise
        except (KeyError, TypeError, ValueError, AttributeError, IndexError) as exc:
            msg = (
                f"{self.path / JOURNAL_FILE}: an edit record cannot be replayed "
                f"({type(exc).__name__}: {exc}); the journal was changed by hand or is damaged. "
                "Remove the offending line, or move the journal aside to start from the model's "
                "names."
            )
            raise WorkspaceError(msg) from None

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
        with self._replay_errors():
            return with_learned(self.path, cur.apply(self.state_labels(), features))

    def exports_current(self) -> bool:
        """Whether the ethogram tables reflect the journal (False after a crash mid-edit)."""
        try:
            state = read_json(self.path / EXPORTS_STATE)
        except (EthoscribeError, OSError):
            state = None
        if state is None:  # a folder older than the exports record: current unless edited
            return journal_fingerprint(self.path / JOURNAL_FILE)["journal_bytes"] == 0
        return state == journal_fingerprint(self.path / JOURNAL_FILE)

    def repair(self) -> list[str]:
        """Finish what an interrupted save left behind; returns a note per thing done.

        Removes temporary files of killed writers, reports an owner record a crashed editor
        left, and rewrites the ethogram tables if they lag behind the journal.
        """
        with self.lock():
            notes = list(self.recovery)
            if not self.exports_current():
                cur = self.curation()
                features = self.features() if self._needs_features(cur) else None
                with self._replay_errors():
                    labels = cur.apply(self.state_labels(), features)
                write_ethogram_tables(self.path, with_learned(self.path, labels))
                notes.append("rewrote the ethogram tables, which lagged behind the journal")
        return notes

    def lock_holder(self) -> dict[str, Any] | None:
        """The owner record of the process editing this workspace (None if nobody is)."""
        return locking.holder(self.path)

    def clear_stale_lock(self) -> dict[str, Any] | None:
        """Remove the owner record a crashed editor left (returned; None if none). Safe: a live
        editor's record is never removed, that raises 'in use by ...' instead."""
        with self.lock():
            stale = self._stale
        return stale

    def journal_problems(self) -> list[str]:
        """Lines of ``journal.jsonl`` that were skipped as incomplete or damaged (one note each)."""
        return read_journal(self.path / JOURNAL_FILE)[1]

    def describe(self) -> str:
        s = self.summary
        skipped = self.journal_problems()
        note = f" {len(skipped)} journal line(s) skipped: {'; '.join(skipped)}." if skipped else ""
        # Motifs as curated (merges count once), not the fitted states; skipped journal
        # lines are said in the note, not warned again
        names: dict[int, str] = {}
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", JournalWarning)
                cur = self.curation()
            n_motifs, names = len(cur.motifs), cur.names
        except WorkspaceError:
            n_motifs = s["n_states"]
        source = s.get("labelled_with")
        labelled = f", labelled with the model of {source}" if source else ""
        labelled += _without_frames(self, names)
        learned = self.path / LEARNED_FOLDER / "evaluation.json"
        if learned.is_file():  # the tables name the expert's behaviours, not the motifs
            n = len(read_json(learned).get("behaviours") or [])
            labelled += f" (labels name {counted(n, 'behaviour')} learned from an expert's coding)"
        return (
            f"workspace {self.path}: {counted(s['n_sessions'], 'session')}, {frames_said(s)}, "
            f"{counted(n_motifs, 'motif')}{labelled}; files: labels.csv, bouts.csv, "
            f"transitions.csv, time_budget.csv, quality.csv, summary.json, model/.{note} {CAUTION}"
        )

    # editing
    @contextmanager
    def lock(self, wait_s: float = 0.0, tidy: bool = True) -> Iterator[None]:
        """Hold the workspace for editing; a second process is told the holder's pid, host and
        start time. A crashed holder does not block; what it left is cleaned up (``tidy``) and
        noted in :attr:`recovery`. ``wait_s``: wait that long for a short-lived holder."""
        with locking.hold(self.path, "workspace", wait_s) as stale:
            self._stale = stale
            self.recovery = remove_leftovers(self.path) if tidy else []
            if stale is not None:
                who = locking.describe_owner(stale)
                self.recovery.insert(0, f"an earlier editor ({who}) ended without closing")
            yield

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
                kwargs.setdefault("min_frames", self.min_bout_frames())
            record = getattr(cur, op)(**kwargs)
            append_journal(self.path / JOURNAL_FILE, record)  # the edit is safe from here on
            with self._replay_errors():
                named = cur.apply(labels, features)
            write_ethogram_tables(self.path, with_learned(self.path, named))
        return record

    def min_bout_frames(self) -> int:
        """The model's minimum bout in frames (at the slowest session's frame rate; 1 if none)."""
        seconds = (self.summary.get("parameters") or {}).get("min_bout_s")
        path = self.path / "sessions.csv"
        if not isinstance(seconds, (int, float)) or seconds <= 0 or not path.is_file():
            return 1
        fps = pd.read_csv(path, usecols=["fps"])["fps"].to_numpy(np.float64)
        fps = fps[np.isfinite(fps) & (fps > 0)]
        return max(1, round(float(seconds) * float(fps.min()))) if len(fps) else 1

    def preview_split(self, motif: str, names: Sequence[str]) -> pd.DataFrame:
        """Bout statistics of the halves a split would make (see
        :meth:`ethoscribe.curation.Curation.preview_split`); nothing is kept."""
        cur = self.curation()
        labels, features = self.state_labels(), self.features()
        return cur.preview_split(
            motif, list(names), labels, features, min_frames=self.min_bout_frames()
        )

    def journal_edit(
        self, op: str, kwargs: dict[str, Any], wait_s: float = 0.0
    ) -> tuple[dict[str, Any], Curation]:
        """Check one edit against the journal on disk and append it (fsynced); tables later.

        The journal is replayed under the lock, so an edit is checked against every edit saved
        before it, by whichever process. Returns the journal record and the naming it leads to.
        The ethogram tables then lag behind: :meth:`update_tables` (or :meth:`repair`, or the
        next :meth:`edit`) brings them up to date. This takes milliseconds (a split: seconds).
        """
        if op not in EDITS:
            raise WorkspaceError(f"unknown edit {op!r}; known edits: {sorted(EDITS)}")
        with self.lock(wait_s, tidy=False):
            cur = self.curation()
            if op == "split":
                kwargs = {"labels": self.state_labels(), "features": self.features(), **kwargs}
                kwargs.setdefault("min_frames", self.min_bout_frames())
            record = getattr(cur, op)(**kwargs)
            append_journal(self.path / JOURNAL_FILE, record)  # the edit is safe from here on
        return record, cur

    def update_tables(self, wait_s: float = 30.0) -> bool:
        """Rewrite the ethogram tables if they lag behind the journal; True if they did.

        The tables are computed and written into a hidden folder without the lock (seconds on
        a large study), then moved in under the lock (milliseconds) only if the journal has not
        changed meanwhile -- else they are computed again. Edits are never held up for long.
        """
        journal = self.path / JOURNAL_FILE
        while not self.exports_current():
            seen = journal_fingerprint(journal)
            cur = self.curation()
            features = self.features() if self._needs_features(cur) else None
            with self._replay_errors():
                named = cur.apply(self.state_labels(), features)
            folder = Path(tempfile.mkdtemp(prefix=TABLES_STAGING, dir=self.path))
            try:
                write_ethogram_tables(folder, named)
                with self.lock(wait_s, tidy=False):
                    if journal_fingerprint(journal) != seen:
                        continue  # an edit came in meanwhile: compute again
                    for name in TABLES:
                        os.replace(folder / name, self.path / name)
                    atomic_write_json(self.path / EXPORTS_STATE, seen)
                    return True
            finally:
                shutil.rmtree(folder, ignore_errors=True)
        return False

    def rename_motif(self, motif: str, name: str) -> dict[str, Any]:
        """Give ``motif`` a new ``name`` (journaled)."""
        return self.edit("rename", motif=motif, name=name)

    def merge_motifs(self, motifs: Sequence[str], into: str) -> dict[str, Any]:
        """Give all ``motifs`` one name ``into`` (journaled)."""
        return self.edit("merge", motifs=name_list(motifs, "motifs", "merge_motifs"), into=into)

    def split_motif(self, motif: str, names: Sequence[str]) -> dict[str, Any]:
        """Split ``motif`` in two by re-clustering its frames' features (journaled)."""
        return self.edit("split", motif=motif, names=name_list(names, "names", "split_motif"))

    def unassign_motif(self, motif: str) -> dict[str, Any]:
        """Mark ``motif`` as unassigned (journaled)."""
        return self.edit("unassign", motif=motif)

    def undo(self) -> dict[str, Any]:
        return self.edit("undo")

    def redo(self) -> dict[str, Any]:
        return self.edit("redo")


EDITS = {"rename", "merge", "split", "unassign", "undo", "redo"}


def _without_frames(ws: Workspace, names: dict[int, str]) -> str:
    """The motifs that label no frame, said beside the count (a model's state whose every bout
    is shorter than the minimum bout keeps no frame after the merge); ``names``: the curated
    motif of each state."""
    try:
        shares = ws.labelled_shares()
    except (WorkspaceError, OSError):
        return ""
    empty = [str(names.get(int(k), k)) for k, v in shares.items() if v == 0]
    labelled = {str(names.get(int(k), k)) for k, v in shares.items() if v > 0}
    empty = sorted(set(empty) - labelled)  # a merged motif with frames from another state
    if not empty:
        return ""
    bout = (ws.summary.get("parameters") or {}).get("min_bout_s")
    why = f"shorter than the minimum bout ({bout:g} s)" if bout else "too short"
    return (
        f" ({listed(map(repr, empty))} {'labels' if len(empty) == 1 else 'label'} no frame: "
        f"bouts {why} are merged into their neighbours)"
    )
