"""Atomic saving: a file either appears complete or not at all.

Every writer in ethoscribe saves through these helpers. Data go to a temporary file in the target's
own folder (so the final rename never crosses file systems), are flushed and synced to disk, and
only then replace the target with ``os.replace``. If anything fails, the temporary file is removed
and an existing target is left untouched.
"""

from __future__ import annotations

import csv
import io
import json
import os
import tempfile
from collections.abc import Callable, Iterator
from contextlib import contextmanager, suppress
from pathlib import Path
from typing import IO, Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pa_csv
import pyarrow.parquet as pq

from ethoscribe.errors import InputError

TABLE_SUFFIXES = {".csv": "csv", ".parquet": "parquet", ".pq": "parquet"}


def _umask() -> int:
    # os.umask can only be read by setting it; done once at import, before any threads write.
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


_FILE_MODE = 0o666 & ~_umask()


def _target(path: str | os.PathLike[str]) -> Path:
    path = Path(path)
    if path.is_dir():
        raise InputError(f"{path}: is a folder; give a file name to save to")
    if not path.parent.is_dir():
        raise InputError(
            f"{path}: cannot save, the folder {path.parent} does not exist; create it first"
        )
    return path


@contextmanager
def atomic_path(path: str | os.PathLike[str]) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; move it onto ``path`` when the block succeeds.

    For libraries that insist on opening the file themselves (HDF5, NWB).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> target = pathlib.Path(tempfile.mkdtemp()) / "out.txt"
    >>> with atomic_path(target) as tmp:
    ...     _ = tmp.write_text("hello")
    >>> target.read_text()
    'hello'
    """
    path = _target(path)
    # Keep the suffix: some libraries check it (NWB warns about names not ending in .nwb).
    fd, tmp_name = tempfile.mkstemp(
        prefix=f".{path.stem}.", suffix=f".tmp{path.suffix}", dir=path.parent
    )
    os.close(fd)
    tmp = Path(tmp_name)
    try:
        yield tmp
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        os.chmod(tmp, _FILE_MODE)
        os.replace(tmp, path)
    except BaseException:
        with suppress(FileNotFoundError):
            tmp.unlink()
        raise
    sync_folder(path.parent)


@contextmanager
def atomic_write(
    path: str | os.PathLike[str], mode: str = "wb", encoding: str | None = None
) -> Iterator[IO[Any]]:
    """Open a temporary file for writing; it replaces ``path`` only if the block succeeds.

    Parameters
    ----------
    path : str or Path
        Final file name. Its folder must exist.
    mode : {"wb", "w", "wt"}
        Binary or text mode. Text defaults to UTF-8 with ``\\n`` line endings.
    encoding : str, optional
        Text encoding (text mode only).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> target = pathlib.Path(tempfile.mkdtemp()) / "out.bin"
    >>> with atomic_write(target) as fh:
    ...     _ = fh.write(b"data")
    >>> target.read_bytes()
    b'data'
    """
    if mode not in ("wb", "w", "wt"):
        raise InputError(f"atomic_write: mode must be 'wb', 'w' or 'wt'; got {mode!r}")
    path = _target(path)
    text = "b" not in mode
    fd, tmp_name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        if text:
            fh = os.fdopen(fd, "w", encoding=encoding or "utf-8", newline="\n")
        else:
            fh = os.fdopen(fd, "wb")
        with fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp_name, _FILE_MODE)
        os.replace(tmp_name, path)
    except BaseException:
        with suppress(FileNotFoundError):
            os.unlink(tmp_name)
        raise
    sync_folder(path.parent)


def sync_folder(folder: Path) -> None:
    # Makes the rename itself durable on POSIX; not possible (nor needed) on Windows.
    with suppress(OSError, AttributeError):
        fd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def atomic_write_text(path: str | os.PathLike[str], text: str, encoding: str = "utf-8") -> Path:
    """Write ``text`` to ``path`` atomically and return the path."""
    with atomic_write(path, "w", encoding=encoding) as fh:
        fh.write(text)
    return Path(path)


def atomic_write_bytes(path: str | os.PathLike[str], data: bytes) -> Path:
    """Write ``data`` to ``path`` atomically and return the path."""
    with atomic_write(path, "wb") as fh:
        fh.write(data)
    return Path(path)


def _json_default(obj: Any) -> Any:
    # numpy scalars and arrays and paths are common in metadata; anything else is refused.
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    raise TypeError(f"values of type {type(obj).__name__} cannot be saved as JSON")


def atomic_write_json(path: str | os.PathLike[str], obj: Any) -> Path:
    """Save ``obj`` as JSON (sorted keys, indent 2) atomically.

    NaN and infinity are refused (they are not JSON): replace them with ``None`` first. numpy
    scalars, arrays and paths are converted.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = atomic_write_json(pathlib.Path(tempfile.mkdtemp()) / "m.json", {"b": 1, "a": [1.5]})
    >>> print(p.read_text(), end="")
    {
      "a": [
        1.5
      ],
      "b": 1
    }
    """
    try:
        text = json.dumps(obj, sort_keys=True, indent=2, allow_nan=False, default=_json_default)
    except ValueError as exc:
        msg = (
            f"{path}: cannot save as JSON: {exc}. JSON has no NaN or infinity; replace those "
            "values with None (saved as null) before saving."
        )
        raise InputError(msg) from None
    except TypeError as exc:
        msg = f"{path}: cannot save as JSON: {exc}; convert it to numbers, strings or lists first"
        raise InputError(msg) from None
    return atomic_write_text(path, text + "\n")


def _to_arrow(table: pd.DataFrame | pa.Table, index: bool) -> pa.Table:
    if isinstance(table, pa.Table):
        return table
    if not isinstance(table, pd.DataFrame):
        raise InputError(
            f"write_table expects a pandas DataFrame or a pyarrow Table; got {type(table).__name__}"
        )
    try:
        return pa.Table.from_pandas(table, preserve_index=index)
    except (pa.ArrowException, TypeError, ValueError) as exc:
        msg = f"cannot save the table: a column mixes types ({exc}); make each column one type"
        raise InputError(msg) from None


def write_table(
    table: pd.DataFrame | pa.Table, path: str | os.PathLike[str], index: bool = False
) -> Path:
    """Save a table as CSV (``.csv``) or Parquet (``.parquet``, ``.pq``), atomically.

    Parameters
    ----------
    table : pandas.DataFrame or pyarrow.Table
        The table. Missing values are written as empty CSV cells.
    path : str or Path
        Target; the suffix picks the format.
    index : bool
        Keep a pandas index as a column.

    Returns
    -------
    Path
        ``path``.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "t.csv"
    >>> _ = write_table(pd.DataFrame({"a": [1, 2], "b": ["x", "y"]}), p)
    >>> print(p.read_text(), end="")
    a,b
    1,x
    2,y
    """
    path = Path(path)
    arrow = _to_arrow(table, index)
    with atomic_table_writer(path) as write:
        write(arrow)
    return path


def _table_kind(path: Path) -> str:
    kind = TABLE_SUFFIXES.get(path.suffix.lower())
    if kind is None:
        raise InputError(
            f"{path}: cannot tell the table format from the suffix '{path.suffix}'; "
            f"use one of {sorted(TABLE_SUFFIXES)}"
        )
    return kind


def _is_text(kind: pa.DataType) -> bool:
    types = pa.types
    return types.is_dictionary(kind) or types.is_string(kind) or types.is_large_string(kind)


def _write_csv(arrow: pa.Table, fh: IO[bytes], header: bool = True) -> None:
    # pyarrow quotes every header name and every text value; unquoted CSV is easier to read,
    # so quote only where a value needs it (commas, quotes, line breaks). Each call writes
    # whole lines, so a table can be written piece by piece (see atomic_table_writer).
    if header:
        line = io.StringIO()
        csv.writer(line, lineterminator="\n").writerow(arrow.column_names)
        fh.write(line.getvalue().encode("utf-8"))
    body = io.BytesIO()
    try:
        options = pa_csv.WriteOptions(include_header=False, quoting_style="none")
        pa_csv.write_csv(arrow, body, write_options=options)
    except pa.ArrowInvalid:
        body = io.BytesIO()
        pa_csv.write_csv(arrow, body, write_options=pa_csv.WriteOptions(include_header=False))
    fh.write(body.getbuffer())


@contextmanager
def atomic_table_writer(path: str | os.PathLike[str]) -> Iterator[Callable[[Any], None]]:
    """Write a table piece by piece (CSV or Parquet); it appears only when every piece is in.

    Yields a function taking one piece (a DataFrame or pyarrow Table with the same columns each
    time). Memory then grows with the largest piece, not with the table: batch runs write the
    per-frame tables of a whole study one session at a time. A Parquet file gets one row group
    per piece.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "t.csv"
    >>> with atomic_table_writer(p) as write:
    ...     write(pd.DataFrame({"a": [1], "b": ["x"]}))
    ...     write(pd.DataFrame({"a": [2], "b": ["y"]}))
    >>> print(p.read_text(), end="")
    a,b
    1,x
    2,y
    """
    path = Path(path)
    kind = _table_kind(path)
    state: dict[str, Any] = {}

    def write(piece: pd.DataFrame | pa.Table) -> None:
        arrow = _to_arrow(piece, False)
        schema = state.setdefault("schema", arrow.schema)
        if not arrow.schema.equals(schema):
            try:
                arrow = arrow.select(schema.names).cast(schema)
            except (pa.ArrowException, KeyError, ValueError) as exc:
                msg = f"{path}: a piece does not match the columns of the first ({exc})"
                raise InputError(msg) from None
        if kind == "csv":
            _write_csv(arrow, fh, header="written" not in state)
        else:
            if "writer" not in state:
                # Dictionary pages pay off for names, not for measurements: encoding only text
                # columns halves both write and read time of large pose tables.
                text = [f.name for f in schema if _is_text(f.type)]
                state["writer"] = pq.ParquetWriter(fh, schema, use_dictionary=text)
            state["writer"].write_table(arrow)
        state["written"] = True

    with atomic_write(path, "wb") as fh:
        try:
            yield write
        finally:
            if "writer" in state:
                state["writer"].close()
        if "written" not in state:
            raise InputError(f"{path}: no rows to write")
