"""Safe model files: a folder with ``model.json`` (parameters, versions) and ``arrays.npz``.

No pickle: arrays are loaded with ``allow_pickle=False`` and the JSON is parsed strictly, so a model
file from a colleague cannot run code. Both files are written atomically; ``model.json`` is written
last and names a digest of the arrays, so a folder whose save was interrupted is detected.
"""

from __future__ import annotations

import hashlib
import json
import zipfile
from pathlib import Path
from typing import Any

import numpy as np

from ethoscribe.errors import InputError, UnsafeFileError
from ethoscribe.io._atomic import atomic_write, atomic_write_json

META_FILE = "model.json"
ARRAYS_FILE = "arrays.npz"
MAX_META_BYTES = 50_000_000


def _digest(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def write_bundle(folder: str | Path, meta: dict[str, Any], arrays: dict[str, np.ndarray]) -> Path:
    """Write ``meta`` as JSON and ``arrays`` as an npz into ``folder`` (created if needed).

    Examples
    --------
    >>> import tempfile
    >>> d = write_bundle(tempfile.mkdtemp(), {"kind": "demo"}, {"a": np.arange(3)})
    >>> read_bundle(d)[1]["a"].tolist()
    [0, 1, 2]
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    for name, a in arrays.items():
        if np.asarray(a).dtype == object:
            raise InputError(
                f"array '{name}' has object dtype; only numeric/string arrays are saved"
            )
    with atomic_write(folder / ARRAYS_FILE, "wb") as fh:
        np.savez(fh, **{k: np.asarray(v) for k, v in arrays.items()})
    atomic_write_json(folder / META_FILE, {**meta, "arrays_sha256": _digest(folder / ARRAYS_FILE)})
    return folder


def read_bundle(folder: str | Path) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
    """Read a folder written by :func:`write_bundle`; refuse anything that would need pickle."""
    folder = Path(folder)
    meta_path, arrays_path = folder / META_FILE, folder / ARRAYS_FILE
    for p in (meta_path, arrays_path):
        if not p.is_file():
            raise InputError(f"{folder}: not a saved model folder ({p.name} is missing)")
        if p.is_symlink():
            raise UnsafeFileError(f"{p}: is a symbolic link; model files must be plain files")
    if meta_path.stat().st_size > MAX_META_BYTES:
        raise UnsafeFileError(f"{meta_path}: implausibly large ({meta_path.stat().st_size} bytes)")
    try:
        meta = json.loads(meta_path.read_text(encoding="utf-8"), parse_constant=_no_constant)
    except (ValueError, UnicodeDecodeError) as exc:
        raise InputError(f"{meta_path}: not valid JSON ({exc}); the file is damaged") from None
    if not isinstance(meta, dict):
        raise InputError(f"{meta_path}: expected a JSON object at the top level")
    expected = meta.get("arrays_sha256")
    if expected is not None and expected != _digest(arrays_path):
        raise InputError(
            f"{arrays_path}: does not match {meta_path.name} (digest differs): the save was "
            "interrupted or the files come from different saves. Save the model again."
        )
    try:
        with np.load(arrays_path, allow_pickle=False) as npz:
            arrays = {k: npz[k] for k in npz.files}
    except ValueError as exc:
        raise UnsafeFileError(
            f"{arrays_path}: holds object arrays, which would need pickle to load; refused ({exc})"
        ) from None
    except (OSError, zipfile.BadZipFile, EOFError) as exc:
        raise InputError(f"{arrays_path}: cannot be read as an npz archive ({exc})") from None
    return meta, arrays


def _no_constant(name: str) -> float:
    raise ValueError(f"non-standard JSON constant {name}")
