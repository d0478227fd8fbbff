"""Pick a reader by format name or file suffix, and read single files or whole folders."""

from __future__ import annotations

import importlib
import importlib.util
import inspect
import os
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from tqdm.auto import tqdm

from ethoscribe.errors import InputError, listed
from ethoscribe.io.nwb import read_nwb
from ethoscribe.io.tidy import read_tidy
from ethoscribe.io.wide import read_wide
from ethoscribe.pose import PoseTracks, check_same_body_plan, match_keypoint_order

Reader = Callable[..., PoseTracks]


ENTRY_POINT_GROUP = "ethoscribe.readers"


@dataclass(frozen=True)
class _Entry:
    func: Reader
    suffixes: tuple[str, ...]
    origin: str = "run time"  # "built in", "entry point" or "run time"


_READERS: dict[str, _Entry] = {}
_BY_SUFFIX: dict[str, str] = {}
_ENTRY_POINTS_LOADED = False


def _load_entry_points() -> None:
    """Register the readers other packages declare in the ``ethoscribe.readers`` group.

    An entry point ``name = "package.module:reader"`` makes format ``name`` available in every
    process, worker processes included. The reader may carry a ``suffixes`` attribute (e.g.
    ``(".trk",)``); it is never the default for a suffix (choose it with ``format=name``).
    """
    global _ENTRY_POINTS_LOADED
    if _ENTRY_POINTS_LOADED:
        return
    _ENTRY_POINTS_LOADED = True
    from importlib.metadata import entry_points

    for ep in entry_points(group=ENTRY_POINT_GROUP):
        if ep.name in _READERS:
            continue
        try:
            func = ep.load()
        except Exception as exc:  # a broken plug-in must not break the built-in readers
            msg = f"reader {ep.name!r} of entry point {ep.value!r} cannot be loaded ({exc})"
            _BROKEN[ep.name] = msg
            continue
        suffixes = tuple(getattr(func, "suffixes", ()))
        _register(ep.name, suffixes, func, False, "entry point")


_BROKEN: dict[str, str] = {}


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
    _register(name, suffixes, func, default_for_suffixes, "run time")


def _register(name: str, suffixes: Sequence[str], func: Reader, default: bool, origin: str) -> None:
    if not isinstance(name, str) or not name or not callable(func):
        raise InputError(f"register_reader needs a format name and a callable; got {name!r}")
    if isinstance(suffixes, str):
        suffixes = [suffixes]
    entry = _Entry(func, tuple(_suffix(s) for s in suffixes), origin)
    _READERS[name] = entry
    if default:
        _BY_SUFFIX.update(dict.fromkeys(entry.suffixes, name))


def available_formats() -> dict[str, tuple[str, ...]]:
    """Format names and the suffixes each reads, e.g. ``{"tidy": (".csv", ...), ...}``.

    Includes readers of installed packages that declare the ``ethoscribe.readers`` entry point.
    """
    _load_entry_points()
    return {name: e.suffixes for name, e in _READERS.items()}


def _known(format: str, where: Any) -> str:
    if format not in _READERS:
        _load_entry_points()
    if format not in _READERS:
        broken = f" ({_BROKEN[format]})" if format in _BROKEN else ""
        raise InputError(
            f"unknown format {format!r} for {where}{broken}; known formats: {sorted(_READERS)}"
        )
    return format


def format_for(path: str | os.PathLike[str], format: str | None = None) -> str:
    """The format name that reads ``path``: ``format`` if given (checked), else by suffix."""
    return _format_for(Path(path), format)


def reader_function(format: str) -> Reader:
    """The reader registered for ``format``."""
    return _READERS[_known(format, "reader")].func


def reader_options(format: str) -> list[str]:
    """Option names the reader of ``format`` takes (``None`` of them: it takes ``**options``)."""
    params = inspect.signature(_READERS[_known(format, "reader options")].func).parameters
    return [p for i, p in enumerate(params) if i > 0]


def takes_any_option(format: str) -> bool:
    """Whether the reader of ``format`` takes ``**options`` (every option name)."""
    params = inspect.signature(_READERS[_known(format, "reader options")].func).parameters
    return any(p.kind is inspect.Parameter.VAR_KEYWORD for p in params.values())


def takes_option(format: str, name: str) -> bool:
    """Whether the reader of ``format`` takes the option ``name`` (every name when it takes
    ``**options``)."""
    return name in reader_options(format) or takes_any_option(format)


def check_reader_options(format: str, options: Mapping[str, Any], where: Any = "") -> None:
    """Refuse options the reader of ``format`` does not take, before reading any file."""
    func = _READERS[_known(format, where or "reader options")].func
    params = inspect.signature(func).parameters
    if any(p.kind is inspect.Parameter.VAR_KEYWORD for p in params.values()):
        return
    unknown = sorted(set(options) - set(params))
    if unknown:
        known = [p for i, p in enumerate(params) if i > 0]
        at = f"{where}: " if where else ""
        raise InputError(
            f"{at}the {format} reader has no option(s) {unknown}; its options are {known}"
        )


def reader_reference(format: str) -> dict[str, Any]:
    """How a worker process finds the reader of ``format``: its name, origin and import path.

    Built-in readers and entry-point readers are found by name in every process. A reader
    registered at run time travels as ``module:qualname`` when that can be imported in a fresh
    process; otherwise ``importable`` is False and parallel runs must refuse it.
    """
    entry = _READERS[_known(format, "reader")]
    module = getattr(entry.func, "__module__", None)
    qualname = getattr(entry.func, "__qualname__", "")
    importable = entry.origin != "run time" or (
        bool(module) and module != "__main__" and "<" not in qualname and _imports(module)
    )
    return {
        "format": format,
        "origin": entry.origin,
        "target": f"{module}:{qualname}" if module else None,
        "suffixes": list(entry.suffixes),
        "importable": importable,
    }


def _imports(module: str) -> bool:
    spec = importlib.util.find_spec(module) if module else None
    return spec is not None and spec.origin not in (None, "built-in")


def use_reader(reference: Mapping[str, Any]) -> None:
    """Make the reader of :func:`reader_reference` available in this (worker) process."""
    name = reference["format"]
    if name in _READERS:
        return
    _load_entry_points()
    if name in _READERS:
        return
    target = reference.get("target")
    if reference.get("importable") and target:
        module, _, qualname = target.partition(":")
        obj: Any = importlib.import_module(module)
        for part in qualname.split("."):
            obj = getattr(obj, part)
        _register(name, reference.get("suffixes", ()), obj, False, "run time")
        return
    raise InputError(
        f"the reader {name!r} was registered at run time in another process and cannot be found "
        "here; run with jobs=1, define the reader in an importable module, or declare "
        f"it in the {ENTRY_POINT_GROUP!r} entry-point group of a package"
    )


def _format_for(path: Path, format: str | None) -> str:
    if format is not None:
        return _known(format, path)
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
    check_reader_options(name, options, path)
    return _READERS[name].func(path, **options)


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
        seen = listed(sorted(repr(p.name) for p in folder.iterdir()), 20) or "nothing"
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
    sessions = match_keypoint_order(sessions)
    check_same_body_plan(sessions)
    return sessions


_register("tidy", [".csv", ".parquet", ".pq"], read_tidy, True, "built in")
_register("wide", [".csv", ".parquet", ".pq"], read_wide, False, "built in")
_register("nwb", [".nwb"], read_nwb, True, "built in")
