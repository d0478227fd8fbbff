"""The workspace's own files, read safely and written crash-safely.

The journal (appended and fsynced, a torn last line never swallows the next record, links
refused), feature files and the model (strict loaders, no pickle, checked shapes), the record
of which journal the ethogram tables reflect, leftovers of killed writers, links leading out of
the folder, and :class:`Staging`, through which whole runs move their files in.
:mod:`ethoscribe.workspace.folder` builds the workspace on these.
"""

from __future__ import annotations

import errno
import hashlib
import json
import os
import shutil
import tempfile
import time
from collections.abc import Callable, Sequence
from contextlib import ExitStack
from pathlib import Path
from typing import Any

import numpy as np

from ethoscribe import __version__
from ethoscribe.errors import EthoscribeError, InputError, UnsafeFileError, WorkspaceError, listed
from ethoscribe.features import FeatureSet
from ethoscribe.io import atomic_write, load_npz, loads_json, locking, sync_folder
from ethoscribe.io.bundle import read_bundle
from ethoscribe.segment.model import BehaviourModel

WORKSPACE_FILE = "workspace.json"
JOURNAL_FILE = "journal.jsonl"
EXPORTS_STATE = ".exports-state.json"
TABLES = ("labels.csv", "bouts.csv", "transitions.csv", "time_budget.csv")
TABLES_STAGING = ".tables-"  # where a table rewrite computes without the lock (old ones swept)
MAX_STATES = 1000  # a summary claiming more states is damaged (names are built per state)


# --- the journal file ---------------------------------------------------------------------
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


def append_journal(path: Path, record: dict[str, Any]) -> None:
    """Append one edit as a JSON line and fsync it before returning (the edit is then safe).

    A line cut short by an earlier crash is closed first, so it cannot swallow this record; a
    journal that is a symbolic link is refused (appending would write wherever it points).
    """
    line = (json.dumps(jsonable(record), sort_keys=True, allow_nan=False) + "\n").encode()
    new = not path.exists()
    flags = os.O_RDWR | os.O_APPEND | os.O_CREAT | getattr(os, "O_NOFOLLOW", 0)
    try:
        fd = os.open(path, flags | getattr(os, "O_BINARY", 0), 0o666)
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            raise UnsafeFileError(f"{path}: is a symbolic link; refusing to append to it") from None
        raise
    try:
        if _last_byte(fd, path) not in (b"", b"\n"):
            line = b"\n" + line
        view = memoryview(line)
        while view:
            view = view[os.write(fd, view) :]
        os.fsync(fd)
    finally:
        os.close(fd)
    if new:
        sync_folder(path.parent)


def _last_byte(fd: int, path: Path) -> bytes:
    size = os.fstat(fd).st_size
    if not size:
        return b""
    if hasattr(os, "pread"):
        return os.pread(fd, 1, size - 1)
    with open(path, "rb") as fh:  # Windows: no pread
        fh.seek(size - 1)
        return fh.read(1)


def read_journal(path: Path) -> tuple[list[dict[str, Any]], list[str]]:
    """Every complete edit of the journal, and a note on each line that could not be read.

    A line cut short by a crash is reported and skipped; all complete edits survive.
    """
    records, problems, _ = read_journal_lines(path)
    return records, problems


def read_journal_lines(path: Path) -> tuple[list[dict[str, Any]], list[str], list[int]]:
    """As :func:`read_journal`, plus the 1-based line number of each record kept."""
    if not path.exists():
        return [], [], []
    if path.is_symlink():
        raise UnsafeFileError(f"{path}: is a symbolic link; a journal must be a plain file")
    records, problems, numbers = [], [], []
    text = path.read_bytes().decode("utf-8", errors="replace")
    for number, line in enumerate(text.splitlines(), start=1):
        if not line.strip():
            continue
        try:
            record = loads_json(line, f"{path}: line {number}")
        except InputError:
            problems.append(f"{path}: line {number} is incomplete or damaged and was skipped")
            continue
        if not isinstance(record, dict) or not isinstance(record.get("op"), str):
            problems.append(f"{path}: line {number} is not an edit record and was skipped")
            continue
        records.append(record)
        numbers.append(number)
    return records, problems, numbers


def journal_fingerprint(path: Path) -> dict[str, Any]:
    """Size and sha256 of the journal file (that of empty content when there is none)."""
    data = path.read_bytes() if path.is_file() else b""
    return {"journal_bytes": len(data), "journal_sha256": hashlib.sha256(data).hexdigest()}


# --- features and the model -------------------------------------------------------------
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
            first_frame=np.array(int(f.meta.get("first_frame", 0)), dtype=np.int64),
        )


def load_features(path: Path) -> FeatureSet:
    """Read a feature set written by :func:`save_features` (no pickle, checked shapes)."""
    z = load_npz(path)
    kinds = {"values": "fiu", "valid": "b", "columns": "U", "session": "U", "animal": "U"}
    bad = [
        k
        for k, kind in {**kinds, "fps": "fiu"}.items()
        if k not in z or z[k].dtype.kind not in kind
    ]
    if not bad:
        n, width = z["values"].shape if z["values"].ndim == 2 else (-1, -1)
        shapes_ok = z["valid"].shape == (n,) and z["columns"].shape == (width,)
        scalars_ok = all(z[k].ndim == 0 for k in ("session", "animal", "fps"))
        bad = [] if shapes_ok and scalars_ok and np.isfinite(z["fps"]) else ["shapes"]
    if bad:
        msg = (
            f"{path}: not a feature file written by ethoscribe (missing or malformed: {bad}); "
            "run discover again to rebuild features/"
        )
        raise WorkspaceError(msg)
    return FeatureSet(
        values=z["values"].astype(np.float64),
        columns=tuple(str(c) for c in z["columns"]),
        valid=z["valid"],
        session=str(z["session"]),
        animal=str(z["animal"]),
        fps=float(z["fps"]),
        meta={"first_frame": _first_frame(z)},
    )


def _first_frame(z: Any) -> int:
    """The input's number of a feature file's first frame (0 in files from before it was kept)."""
    if "first_frame" not in z:
        return 0
    value = z["first_frame"]
    if value.ndim != 0 or value.dtype.kind not in "iu":
        return 0
    return int(value)


def declared_size_bound(meta: dict[str, Any]) -> Callable[[str], int]:
    """The most values each array of a saved model may hold, from the sizes ``model.json``
    declares, checked before the arrays are loaded.

    No parameter array is larger than states x size x size for the largest declared size
    (features, keypoints x dims, components, restarts); the change-point segments and boundaries
    are bounded by the declared training frames.
    """
    sizes: list[int] = [1]
    frames: list[int] = [1]

    def add(value: Any) -> None:
        if isinstance(value, int) and not isinstance(value, bool) and 0 < value < 10**7:
            sizes.append(value)
        elif isinstance(value, (list, tuple)) and len(value) < 10**7:
            sizes.append(len(value))

    def walk(node: Any, depth: int = 0) -> None:
        if depth > 6 or not isinstance(node, dict):
            return
        for key, value in node.items():
            if "frames" in key and isinstance(value, int) and not isinstance(value, bool):
                frames.append(min(max(value, 1), MAX_DECLARED_FRAMES))
            elif key.startswith("n_") or key in ("keypoints", "keypoints_", "columns_"):
                add(value)
            walk(value, depth + 1)

    walk(meta)
    keypoints, dims = meta.get("keypoints"), meta.get("n_dims")
    if isinstance(keypoints, list) and isinstance(dims, int) and 0 < dims < 4:
        sizes.append(len(keypoints) * dims)
    big = max(sizes)
    states = meta.get("n_states")
    states = states if isinstance(states, int) and 0 < states < 10**4 else 1
    structural, per_frame = states * big * big + 64, max(frames) + 64

    def bound(name: str) -> int:
        by_frame = name.startswith(("segmenter/boundaries", "segmenter/segments/"))
        return per_frame if by_frame else structural

    return bound


MAX_DECLARED_FRAMES = 200_000_000  # more training frames than any study: damage, not data


def _other_version(meta: Any) -> str:
    """A hint when the model was saved by another ethoscribe version (whose parameters or
    files this one may not know)."""
    saved = meta.get("ethoscribe_version") if isinstance(meta, dict) else None
    if not isinstance(saved, str) or saved == __version__:
        return ""
    return (
        f" (saved by ethoscribe {saved}; this is {__version__}: open it with that version, "
        "or discover again with this one)"
    )


def load_model(folder: Path) -> BehaviourModel:
    """The model saved in ``folder``; any malformed content is an ``InputError`` naming it.

    The files are read by :func:`ethoscribe.io.bundle.read_bundle` (no pickle, strict JSON);
    content of the wrong shape or type (a hand-edited or foreign file) is reported here instead
    of surfacing as a bare ``KeyError`` or ``TypeError``.
    """
    meta, arrays = read_bundle(folder, declared_size_bound)
    try:
        model = BehaviourModel.from_state(meta, arrays)
    except EthoscribeError as exc:
        raise InputError(f"{folder}: {exc}{_other_version(meta)}") from None
    except (KeyError, TypeError, ValueError, AttributeError, IndexError, OverflowError) as exc:
        msg = (
            f"{folder}: the model file does not hold what ethoscribe writes "
            f"({type(exc).__name__}: {exc}); it was edited by hand or comes from another "
            "program. Save the model again from its workspace."
        )
        raise InputError(msg) from None
    n_seg = getattr(model.segmenter_, "n_states_", model.n_states_)
    groups = getattr(model, "phase_groups_", None)
    if groups is not None:  # phases of one rhythm joined: fewer labelled states than fitted
        n_seg = max(groups) + 1
    regimes = getattr(model, "regimes_", None)
    if regimes is not None and regimes.used_:  # mixes of the labelled states labelled instead
        n_seg = regimes.n_regimes_
    if model.n_states_ != n_seg or not 1 <= model.n_states_ <= MAX_STATES:
        msg = (
            f"{folder / 'model.json'}: n_states is {model.n_states_!r} but the segmenter has "
            f"{n_seg!r} states; the file is damaged or was edited by hand"
        )
        raise InputError(msg)
    return model


# --- leftovers and links ----------------------------------------------------------------
def _is_partial(p: Path, targets: Sequence[str]) -> bool:
    # Temporary names of the atomic writers: ".{target}.{random}.tmp".
    name = p.name
    return (
        name.startswith(".") and name.endswith(".tmp") and name[1:-4].rsplit(".", 1)[0] in targets
    )


def remove_leftovers(root: Path) -> list[str]:
    """Remove what writers killed mid-save left in ``root``; call only while holding its lock.

    Only files of locked writers are touched: staging folders, replaced folders, and the
    temporary files of the ethogram tables, the exports state, the owner record and the model.
    Returns a note per item removed.
    """
    notes = []
    targets = (*TABLES, EXPORTS_STATE, locking.OWNER_FILE)
    for p in sorted(root.iterdir()):
        stale_dir = p.is_dir() and not p.is_symlink() and p.name.startswith((".incoming-", ".old-"))
        if stale_dir:
            shutil.rmtree(p, ignore_errors=True)
        elif p.is_file() and _is_partial(p, targets):
            p.unlink(missing_ok=True)
        else:
            continue
        notes.append(f"removed {p.name}, left by a save that was interrupted")
    notes += _remove_old_folders(root, TABLES_STAGING)
    notes += _remove_cache_leftovers(root / "cache")
    model = root / "model"
    if model.is_dir() and not model.is_symlink():
        for p in sorted(model.iterdir()):
            if p.is_file() and _is_partial(p, ("model.json", "arrays.npz")):
                p.unlink(missing_ok=True)
                notes.append(f"removed model/{p.name}, left by a save that was interrupted")
    return notes


def _remove_old_folders(root: Path, prefix: str, min_age_s: float = 3600.0) -> list[str]:
    # Table rewrites compute without the lock: only folders no live writer can still own go.
    limit, notes = time.time() - min_age_s, []
    for p in sorted(root.glob(prefix + "*")):
        if p.is_dir() and not p.is_symlink() and p.lstat().st_mtime < limit:
            shutil.rmtree(p, ignore_errors=True)
            notes.append(f"removed {p.name}, left by a table rewrite that was interrupted")
    return notes


def _remove_cache_leftovers(cache: Path, min_age_s: float = 3600.0) -> list[str]:
    # Batch runs write the cache without the edit lock, so only temporary files and staging
    # folders old enough that no live writer can still own them are removed.
    if not cache.is_dir() or cache.is_symlink():
        return []
    notes, limit = [], time.time() - min_age_s
    for sub in sorted(p for p in cache.iterdir() if p.is_dir() and not p.is_symlink()):
        for p in sorted(sub.iterdir()):
            partial = p.is_file() and p.name.startswith(".") and p.name.endswith(".tmp")
            staged = p.is_dir() and not p.is_symlink() and p.name.startswith(".incoming-")
            if (partial or staged) and p.lstat().st_mtime < limit:
                if staged:
                    shutil.rmtree(p, ignore_errors=True)
                else:
                    p.unlink(missing_ok=True)
                notes.append(f"removed cache/{sub.name}/{p.name}, left by an interrupted run")
    return notes


# What a workspace holds that ethoscribe reads or writes; links among these are checked. Other
# entries (a user's own "raw -> /data" link, notes) are never opened, so they are left alone.
OWN_FILES = {
    "workspace.json", "summary.json", "sessions.csv", "quality.csv", "labels.parquet",
    "stability.csv", "report.html", JOURNAL_FILE, EXPORTS_STATE, *TABLES,
    locking.LOCK_FILE, locking.OWNER_FILE,
}  # fmt: skip
OWN_FOLDERS = {"model", "features", "cache", "exports", "postures"}


def outside_links(root: Path) -> list[tuple[Path, str]]:
    """Links among the workspace's own files and folders that lead outside ``root``."""
    real = root.resolve()
    own = [root / n for n in sorted(OWN_FILES | OWN_FOLDERS)]
    candidates = [p for p in own if p.is_symlink()]
    for folder in (root / n for n in sorted(OWN_FOLDERS)):
        if folder.is_dir() and not folder.is_symlink():
            for base, dirs, files in os.walk(folder):  # links to folders are listed, not entered
                candidates += [Path(base) / n for n in (*dirs, *files)]
    found = []
    for p in candidates:
        if not p.is_symlink():
            continue
        try:
            target = p.resolve()
        except (OSError, RuntimeError):  # a loop of links
            found.append((p, "a loop of links"))
            continue
        if not target.is_relative_to(real):
            found.append((p, str(target)))
    return found


def check_links(root: Path) -> None:
    """Refuse a folder holding links that lead outside it (``UnsafeFileError``)."""
    bad = outside_links(root)
    if bad:
        shown = listed((f"{p.relative_to(root)} -> {t}" for p, t in bad), sep="; ")
        msg = (
            f"{root}: holds {len(bad)} symbolic link(s) leading outside the workspace ({shown}). "
            "A workspace must hold its own files: through such a link an edit could read or "
            "change files elsewhere. Replace each link with a copy of the file it points to."
        )
        raise UnsafeFileError(msg)


# --- staging: files written beside the target and moved in ---------------------------------
class Staging:
    """Files are written into a hidden folder beside the target and moved in one by one."""

    def __init__(self, out: Path, held: bool = False):
        out.mkdir(parents=True, exist_ok=True)
        self.out = out
        self._retired: list[tuple[str, str]] = []
        # A folder already holding a workspace (or a killed run's leftovers) is locked until
        # commit or abort: its editor and this run exclude each other. A new folder is not.
        # ``held``: the caller holds the lock already (a whole run, from its start).
        self._held = ExitStack()
        ours = (WORKSPACE_FILE, locking.LOCK_FILE, ".incoming-", ".old-")
        locked = held or any(p.name.startswith(ours) for p in out.iterdir())
        if locked and not held:
            what = "workspace" if (out / WORKSPACE_FILE).exists() else "folder"
            self._held.enter_context(locking.hold(out, what))
        try:
            if locked:
                remove_leftovers(out)  # of earlier runs that were killed (the lock proves it)
            self.dir = Path(tempfile.mkdtemp(prefix=".incoming-", dir=out))
        except BaseException:
            self._held.close()
            raise

    def path(self, name: str) -> Path:
        p = self.dir / name
        p.parent.mkdir(parents=True, exist_ok=True)
        return p

    def retire(self, name: str, new_name: str) -> None:
        """At commit, once the old marker is gone, rename ``out/name`` to ``out/new_name``.

        For files the new contents replace without a successor (an old journal kept aside):
        until the commit starts, the old workspace stays complete and usable.
        """
        self._retired.append((name, new_name))

    def commit(self, last: str) -> None:
        # The old marker goes first and the new one last: while files are being swapped, the
        # folder does not claim to be a complete workspace.
        (self.out / last).unlink(missing_ok=True)
        for name, new_name in self._retired:
            if (self.out / name).exists():
                os.replace(self.out / name, self.out / new_name)
        for item in sorted(self.dir.iterdir()):
            if item.name != last:
                _replace(item, self.out / item.name)
        _replace(self.dir / last, self.out / last)
        shutil.rmtree(self.dir, ignore_errors=True)
        self._held.close()

    def abort(self) -> None:
        shutil.rmtree(self.dir, ignore_errors=True)
        self._held.close()


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
