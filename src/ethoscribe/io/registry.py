"""Pick a reader by format name or file suffix, and read single files or whole folders."""

from __future__ import annotations

import inspect
import os
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from tqdm.auto import tqdm

from ethoscribe.errors import InputError
from ethoscribe.io.nwb import read_nwb
from ethoscribe.io.tidy import read_tidy
from ethoscribe.io.wide import read_wide
from ethoscribe.pose import PoseTracks, check_same_body_plan

Reader = Callable[..., PoseTracks]


@dataclass(frozen=True)
class _Entry:
    func: Reader
    suffixes: tuple[str, ...]


_READERS: dict[str, _Entry] = {}
_BY_SUFFIX: dict[str, str] = {}


def _suffix(s: str) -> str:
    s = s.lower()
    return s if s.startswith(".") else f".{s}"


def register_reader(
    name: str, suffixes: Sequence[str], func: Reader, default_for_suffixes: bool = True
) -> None:
    """Make ``func(path, **options) -> PoseTracks`` available as format ``name``.

    Parameters
    ----------
    name : str
        Format name for ``read_pose(path, format=name)``.
    suffixes : sequence of str
        File suffixes the reader handles (".csv"); ``read_folder`` lists these files.
    func : callable
        The reader; its first argument is the path.
    default_for_suffixes : bool
        Whether files with these suffixes use this reader when no format is given (the latest
        registration wins).

    Examples
    --------
    >>> register_reader("tidy", [".csv", ".parquet", ".pq"], read_tidy)
    """
    if not name or not callable(func):
        raise InputError(f"register_reader needs a format name and a callable; got {name!r}")
    entry = _Entry(func, tuple(_suffix(s) for s in suffixes))
    _READERS[name] = entry
    if default_for_suffixes:
        _BY_SUFFIX.update(dict.fromkeys(entry.suffixes, name))


def available_formats() -> dict[str, tuple[str, ...]]:
    """Format names and the suffixes each reads, e.g. ``{"tidy": (".csv", ...), ...}``."""
    return {name: e.suffixes for name, e in _READERS.items()}


def _format_for(path: Path, format: str | None) -> str:
    if format is not None:
        if format not in _READERS:
            raise InputError(
                f"unknown format {format!r} for {path}; known formats: {sorted(_READERS)}"
            )
        return format
    name = _BY_SUFFIX.get(path.suffix.lower())
    if name is None:
        raise InputError(
            f"{path}: cannot tell the format from the suffix '{path.suffix}'; readable suffixes "
            f"are {sorted(_BY_SUFFIX)}. Rename the file or pass format= one of {sorted(_READERS)}."
        )
    return name


def read_pose(
    path: str | os.PathLike[str], format: str | None = None, **options: Any
) -> PoseTracks:
    """Read one pose file with the reader for ``format`` or for its suffix.

    ``.csv``/``.parquet``/``.pq`` -> ``read_tidy``, ``.nwb`` -> ``read_nwb``; ``format="wide"``
    for one-row-per-frame tables. ``options`` go to the reader (``fps``, ``session``, ...).

    Examples
    --------
    >>> tracks = read_pose("mouse1.parquet", fps=30)  # doctest: +SKIP
    """
    path = Path(path).expanduser()
    if not path.exists():
        raise InputError(f"{path}: no such file (looked in {path.resolve().parent})")
    if path.is_dir():
        raise InputError(f"{path}: is a folder; use read_folder() to read every file in it")
    name = _format_for(path, format)
    func = _READERS[name].func
    params = inspect.signature(func).parameters
    takes_any = any(p.kind is inspect.Parameter.VAR_KEYWORD for p in params.values())
    unknown = sorted(set(options) - set(params)) if not takes_any else []
    if unknown:
        known = [p for p in params if p != next(iter(params))]
        raise InputError(
            f"{path}: the {name} reader has no option(s) {unknown}; its options are {known}"
        )
    return func(path, **options)


def pose_files(
    folder_or_files: str | os.PathLike[str] | Sequence[str | os.PathLike[str]],
    format: str | None = None,
) -> list[Path]:
    """The pose files a folder holds, or the files (and folders) given, as a list of paths.

    A folder contributes its readable files (not sub-folders, not hidden files) sorted by name;
    files given one by one keep their order.

    Examples
    --------
    >>> pose_files("tracks/")  # doctest: +SKIP
    [PosixPath('tracks/mouse1.parquet'), PosixPath('tracks/mouse2.parquet')]
    """
    if isinstance(folder_or_files, (str, os.PathLike)):
        folder_or_files = [folder_or_files]
    if not folder_or_files:
        raise InputError("no pose files given: the list of files and folders is empty")
    files: list[Path] = []
    for item in (Path(p).expanduser() for p in folder_or_files):
        if item.is_dir():
            files.extend(_folder_files(item, format))
        elif item.is_file():
            files.append(item)
        else:
            raise InputError(f"{item}: no such file or folder (looked in {item.resolve().parent})")
    return files


def _folder_files(folder: Path, format: str | None) -> list[Path]:
    suffixes = set(_READERS[_format_for(folder, format)].suffixes if format else _BY_SUFFIX)
    files = sorted(
        p
        for p in folder.iterdir()
        if p.is_file() and not p.name.startswith(".") and p.suffix.lower() in suffixes
    )
    if not files:
        seen = sorted(p.name for p in folder.iterdir())[:20]
        raise InputError(
            f"{folder}: no pose files (suffixes {sorted(suffixes)}) in this folder; it holds {seen}"
        )
    return files


def read_folder(
    folder_or_files: str | os.PathLike[str] | Sequence[str | os.PathLike[str]],
    format: str | None = None,
    fps: float | None = None,
    progress: bool = True,
    **options: Any,
) -> list[PoseTracks]:
    """Read every pose file of a folder (sorted by name), or the files given, as one study.

    The files are those of ``pose_files(folder_or_files, format)``.

    Sessions are named by file stem and must share one body plan (same keypoints, same dims).

    Examples
    --------
    >>> sessions = read_folder("tracks/", fps=30)  # doctest: +SKIP
    """
    files = pose_files(folder_or_files, format)
    if "session" in options:
        raise InputError("read_folder names each session after its file; do not pass session=")
    stems = [f.stem for f in files]
    dup = sorted({s for s in stems if stems.count(s) > 1})
    if dup:
        raise InputError(
            f"several files would give the same session name(s) {dup} (e.g. a .csv and a "
            ".parquet of one recording); keep one file per session"
        )
    if fps is not None:
        options["fps"] = fps
    sessions = [
        read_pose(f, format=format, **options)
        for f in tqdm(files, desc="reading sessions", unit="file", disable=not progress)
    ]
    check_same_body_plan(sessions)
    return sessions


register_reader("tidy", [".csv", ".parquet", ".pq"], read_tidy)
register_reader("wide", [".csv", ".parquet", ".pq"], read_wide, default_for_suffixes=False)
register_reader("nwb", [".nwb"], read_nwb)
