"""Reading files that may come from someone else: strict JSON, npz without pickle, safe names.

A model or workspace shared by a colleague is untrusted input. Nothing here can run code: JSON is
parsed with limits (no NaN or infinity, no numbers of absurd size, bounded nesting), npz archives
are checked member by member before any array is allocated (names that stay inside the archive,
no object or structured dtypes, declared sizes that match the bytes actually stored), and names
used to build paths are refused when they could leave their folder.
"""

from __future__ import annotations

import json
import os
import re
import zipfile
from collections.abc import Callable
from pathlib import Path, PurePosixPath
from typing import Any

import numpy as np

from ethoscribe.errors import InputError, UnsafeFileError, listed
from ethoscribe.pose import check_file_name

MAX_JSON_BYTES = 50_000_000
MAX_INT_DIGITS = 30  # seeds and frame counts fit in 20 digits; longer integers are not ours
MAX_NPZ_MEMBERS = 10_000
MAX_ARRAY_BYTES = 1 << 36  # 64 GiB: far above any real model or feature file
_ARRAY_KINDS = "biufcUS"  # bool, integers, floats, complex, text; never object or structured
_BAD_NAME = re.compile(r"[\x00-\x1f\x7f\\]")


def _parse_int(text: str) -> int:
    if len(text.lstrip("-")) > MAX_INT_DIGITS:
        raise ValueError(f"an integer with {len(text.lstrip('-'))} digits")
    return int(text)


def _parse_float(text: str) -> float:
    value = float(text)
    if not np.isfinite(value):
        raise ValueError(f"the number {text[:40]} is too large to represent")
    return value


def _no_constant(name: str) -> float:
    raise ValueError(f"the non-standard constant {name}")


def loads_json(text: str, where: str) -> Any:
    """Parse JSON text strictly; a damaged or implausible document raises ``InputError``.

    Refused: NaN/Infinity, numbers that overflow to infinity, integers longer than 30 digits,
    nesting deeper than the interpreter allows.

    Examples
    --------
    >>> loads_json('{"a": [1, 2.5]}', "demo")
    {'a': [1, 2.5]}
    """
    try:
        return json.loads(
            text, parse_int=_parse_int, parse_float=_parse_float, parse_constant=_no_constant
        )
    except RecursionError:
        msg = f"{where}: JSON nested too deeply to be a file ethoscribe wrote; refused"
        raise InputError(msg) from None
    except ValueError as exc:
        msg = f"{where}: not valid JSON or not written by ethoscribe ({exc}); the file is damaged"
        raise InputError(msg) from None


def read_json(path: str | os.PathLike[str], max_bytes: int = MAX_JSON_BYTES) -> Any:
    """Read a JSON file with :func:`loads_json`, refusing links and implausibly large files."""
    path = Path(path)
    if path.is_symlink():
        raise UnsafeFileError(f"{path}: is a symbolic link; expected a plain file")
    try:
        size = path.stat().st_size
        if size > max_bytes:
            raise UnsafeFileError(f"{path}: implausibly large for this file ({size} bytes)")
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(f"{path}: not UTF-8 text ({exc}); the file is damaged") from None
    except OSError as exc:
        raise InputError(f"{path}: cannot be read ({exc.strerror or exc})") from None
    return loads_json(text, str(path))


def check_member_name(name: str, where: str) -> str:
    """``name`` if it is a relative path that stays inside its archive or folder.

    Examples
    --------
    >>> check_member_name("features/pca_mean_.npy", "model")
    'features/pca_mean_.npy'
    """
    parts = PurePosixPath(name).parts
    bad = (
        not name
        or bool(_BAD_NAME.search(name))
        or name.startswith("/")
        or re.match(r"^[A-Za-z]:", name) is not None
        or any(p in ("..", ".") for p in parts)
        or "//" in name
    )
    if bad:
        msg = (
            f"{where}: holds an entry named {name!r}, which points outside its folder (absolute "
            "path, '..', a drive letter, a backslash or a control character); refused. A file "
            "written by ethoscribe never has such names: it was changed by hand or is hostile."
        )
        raise UnsafeFileError(msg)
    return name


def safe_child(folder: str | os.PathLike[str], name: str, what: str = "file") -> Path:
    """``folder / name`` after checking ``name`` with :func:`ethoscribe.pose.check_file_name`.

    Use it whenever a user-given name (session, group, motif) becomes part of an output path.

    Examples
    --------
    >>> safe_child("ws/postures", "session_01.npz", "session").as_posix()
    'ws/postures/session_01.npz'
    """
    return Path(folder) / check_file_name(name, what)


def _member_header(zf: zipfile.ZipFile, info: zipfile.ZipInfo, where: str) -> tuple:
    with zf.open(info) as fh:
        version = np.lib.format.read_magic(fh)
        if version == (1, 0):
            shape, fortran, dtype = np.lib.format.read_array_header_1_0(fh)
        elif version == (2, 0):
            shape, fortran, dtype = np.lib.format.read_array_header_2_0(fh)
        else:
            raise ValueError(f"npy format version {version}")
        return shape, fortran, dtype, fh.tell()


def _check_member(
    zf: zipfile.ZipFile, info: zipfile.ZipInfo, where: str, max_values: Any = None
) -> None:
    name = info.filename
    if info.file_size > MAX_ARRAY_BYTES:
        raise UnsafeFileError(f"{where}: member {name!r} claims {info.file_size} bytes; refused")
    try:
        shape, _, dtype, header = _member_header(zf, info, where)
    except (ValueError, OSError, EOFError, zipfile.BadZipFile, RuntimeError) as exc:
        msg = f"{where}: member {name!r} is not a readable array ({exc}); the file is damaged"
        raise InputError(msg) from None
    if dtype.hasobject or dtype.kind not in _ARRAY_KINDS or dtype.fields is not None:
        msg = (
            f"{where}: member {name!r} holds {dtype} values, which would need pickle or are not "
            "plain numbers or text; refused (ethoscribe files hold only numbers and text)"
        )
        raise UnsafeFileError(msg)
    count = int(np.prod(shape, dtype=object))
    if callable(max_values):
        max_values = max_values(name[:-4])
    if max_values is not None and count > max_values:
        msg = (
            f"{where}: member {name!r} declares shape {shape} ({count} values), more than the "
            f"sizes its description declares allow ({max_values}); refused before reading it"
        )
        raise UnsafeFileError(msg)
    expected = count * dtype.itemsize
    if header + expected != info.file_size:
        msg = (
            f"{where}: member {name!r} declares shape {shape} of {dtype} ({expected} bytes) but "
            f"stores {info.file_size - header} bytes; the file is damaged or hostile"
        )
        raise UnsafeFileError(msg)


def load_npz(
    path: str | os.PathLike[str], max_values: int | Callable[[str], int] | None = None
) -> dict[str, np.ndarray]:
    """Every array of an ``.npz`` archive, checked before loading (see the module docstring).

    ``max_values`` (a number, or a function of the member name) bounds the number of values of
    each member, from its header, before any memory is allocated (a small archive may declare
    gigabytes of zeros).

    Returns
    -------
    dict of str to ndarray
        Member names without the ``.npy`` suffix.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "a.npz"
    >>> np.savez(p, x=np.arange(3))
    >>> load_npz(p)["x"].tolist()
    [0, 1, 2]
    """
    path = Path(path)
    where = str(path)
    if path.is_symlink():
        raise UnsafeFileError(f"{path}: is a symbolic link; expected a plain file")
    try:
        with zipfile.ZipFile(path) as zf:
            members = zf.infolist()
            if len(members) > MAX_NPZ_MEMBERS:
                raise UnsafeFileError(f"{where}: holds {len(members)} members; refused")
            names = [check_member_name(m.filename, where) for m in members]
            if len(set(names)) != len(names) or not all(n.endswith(".npy") for n in names):
                shown = listed(map(repr, names), 10)
                msg = f"{where}: not an array archive (repeated or non-.npy members {shown})"
                raise InputError(msg)
            for info in members:  # every header first: nothing is allocated for a hostile one
                _check_member(zf, info, where, max_values)
            arrays = {}
            for info in members:
                with zf.open(info) as fh:
                    arrays[info.filename[:-4]] = np.lib.format.read_array(fh, allow_pickle=False)
            return arrays
    except (zipfile.BadZipFile, OSError, EOFError, NotImplementedError, ValueError) as exc:
        if isinstance(exc, InputError):
            raise
        msg = f"{where}: cannot be read as an npz array archive ({exc}); the file is damaged"
        raise InputError(msg) from None
