"""Safe model files: a folder with ``model.json`` (parameters, versions) and ``arrays.npz``.

No pickle: the arrays are checked and loaded by :func:`ethoscribe.io._safe.load_npz` (object
arrays are refused) and the JSON is parsed strictly, so a model file from a colleague cannot run
code. ``model.json`` is written last and names a digest of the arrays, so a folder whose save
was interrupted is detected.

Saving over an existing model is crash-safe too: before ``arrays.npz`` is replaced, the old
arrays stay reachable under a hidden name derived from their digest (``.arrays-<digest>.npz``,
a hard link, so nothing is copied). If the process dies between the two files, the old
``model.json`` still finds its arrays there and the previous model loads; the next complete
save removes the hidden copy.
"""

from __future__ import annotations

import os
import re
import shutil
from collections.abc import Callable
from contextlib import suppress
from pathlib import Path
from typing import Any

import numpy as np

from ethoscribe.errors import EthoscribeError, InputError, UnsafeFileError
from ethoscribe.io._atomic import atomic_write, atomic_write_json
from ethoscribe.io._safe import MAX_JSON_BYTES, load_npz, read_json
from ethoscribe.system import file_digest

META_FILE = "model.json"
ARRAYS_FILE = "arrays.npz"
MAX_META_BYTES = MAX_JSON_BYTES
_DIGEST = re.compile(r"^[0-9a-f]{64}$")


def _kept_name(digest: str) -> str:
    return f".arrays-{digest[:32]}.npz"


def _named_digest(folder: Path) -> str | None:
    """The arrays digest the current ``model.json`` names, if it is readable."""
    try:
        meta = read_json(folder / META_FILE, MAX_META_BYTES)
    except (EthoscribeError, OSError):
        return None
    digest = meta.get("arrays_sha256") if isinstance(meta, dict) else None
    return digest if isinstance(digest, str) and _DIGEST.match(digest) else None


def _keep_previous(folder: Path) -> None:
    """Keep the arrays the current ``model.json`` names reachable while they are replaced."""
    digest, arrays = _named_digest(folder), folder / ARRAYS_FILE
    if digest is None or not arrays.is_file() or arrays.is_symlink():
        return
    kept = folder / _kept_name(digest)
    if kept.exists() or file_digest(arrays) != digest:  # already kept by an interrupted save
        return
    try:
        os.link(arrays, kept)
    except OSError:  # no hard links on this file system: copy, atomically
        with atomic_write(kept, "wb") as fh, open(arrays, "rb") as src:
            shutil.copyfileobj(src, fh)


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
        if np.asarray(a).dtype.hasobject:
            raise InputError(
                f"array '{name}' has object dtype; only numeric/string arrays are saved"
            )
    _keep_previous(folder)
    with atomic_write(folder / ARRAYS_FILE, "wb") as fh:
        np.savez(fh, **{k: np.asarray(v) for k, v in arrays.items()})
    atomic_write_json(
        folder / META_FILE, {**meta, "arrays_sha256": file_digest(folder / ARRAYS_FILE)}
    )
    for old in folder.glob(".arrays-*.npz"):
        with suppress(OSError):
            old.unlink()
    return folder


def read_bundle(
    folder: str | Path, max_values: Callable[[dict[str, Any]], Any] | None = None
) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
    """Read a folder written by :func:`write_bundle`; refuse anything that would need pickle.

    ``max_values(meta)`` (optional) gives the most values any array may hold, from the sizes
    ``model.json`` declares; larger members are refused from their headers, before loading.

    Raises ``InputError`` for a damaged or incomplete folder and ``UnsafeFileError`` for links,
    object arrays, archive members with path-like names or implausible sizes.
    """
    folder = Path(folder)
    meta_path, arrays_path = folder / META_FILE, folder / ARRAYS_FILE
    for p in (meta_path, arrays_path):
        if p.is_symlink():
            raise UnsafeFileError(f"{p}: is a symbolic link; model files must be plain files")
        if not p.is_file():
            raise InputError(f"{folder}: not a saved model folder ({p.name} is missing)")
    meta = read_json(meta_path, MAX_META_BYTES)
    if not isinstance(meta, dict):
        raise InputError(f"{meta_path}: expected a JSON object at the top level")
    expected = meta.get("arrays_sha256")
    if expected is not None:
        if not isinstance(expected, str) or not _DIGEST.match(expected):
            raise InputError(f"{meta_path}: 'arrays_sha256' is not a sha256 digest: {expected!r}")
        if expected != file_digest(arrays_path):
            arrays_path = _previous_arrays(folder, expected, arrays_path, meta_path)
    bound = None if max_values is None else max_values(meta)
    return meta, load_npz(arrays_path, bound)


def _previous_arrays(folder: Path, expected: str, arrays_path: Path, meta_path: Path) -> Path:
    kept = folder / _kept_name(expected)
    if kept.is_file() and not kept.is_symlink() and file_digest(kept) == expected:
        return kept  # a save over this model was interrupted: the previous model is intact
    raise InputError(
        f"{arrays_path}: does not match {meta_path.name} (digest differs): the save was "
        "interrupted or the files come from different saves. Save the model again."
    )
