"""Shared checks for the table readers: opening CSV / Parquet, parsing columns, frame timing.

Every problem is reported as an ``InputError`` naming the file, the column and a row, so a user
never sees a bare pyarrow or numpy traceback for a bad file.
"""

from __future__ import annotations

import csv
import json
import os
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pa_csv
import pyarrow.parquet as pq

from ethoscribe.errors import InputError, InputWarning, listed
from ethoscribe.io._atomic import TABLE_SUFFIXES
from ethoscribe.pose import PoseTracks

METADATA_KEY = b"ethoscribe"
_BLANKS = {"", "nan", "na", "n/a", "null", "none", "-nan", "#n/a"}


@dataclass(frozen=True)
class TableInfo:
    """A table file that opened: its kind, column names and ethoscribe metadata (Parquet)."""

    path: Path
    kind: str
    columns: tuple[str, ...]
    metadata: dict[str, Any] = field(default_factory=dict)
    renamed: dict[str, str] = field(default_factory=dict)  # role -> the file's column name

    def source(self, name: str) -> str:
        """The file's name of column ``name`` (a role given by a column mapping, or itself)."""
        return self.renamed.get(name, name)

    def row(self, i: int) -> str:
        """Human location of data row ``i`` (0-based): a line for CSV, a row for Parquet."""
        return f"line {i + 2}" if self.kind == "csv" else f"row {i + 1}"


def name_list(names: Sequence[str] | str | None) -> list[str] | None:
    """Names as a list; a text is split at commas (``"nose,tail_base"``, as typed in a
    command-line reader option), since a lone string would be read letter by letter.

    Examples
    --------
    >>> name_list("nose, tail_base"), name_list(["nose"]), name_list(None)
    (['nose', 'tail_base'], ['nose'], None)
    """
    if names is None:
        return None
    if isinstance(names, str):
        return [n.strip() for n in names.split(",") if n.strip()]
    return [str(n) for n in names]


def keypoint_renames(rename: Mapping[str, str] | str | None, where: Any) -> dict[str, str]:
    """The reader option ``rename_keypoints`` as ``{old: new}``: a mapping, or a text of
    OLD=NEW pairs separated by commas (as typed in a command-line reader option).

    Examples
    --------
    >>> keypoint_renames("nose=snout, tail_base=tailbase", "a.csv")
    {'nose': 'snout', 'tail_base': 'tailbase'}
    """
    if rename is None:
        return {}
    if isinstance(rename, str):
        pairs = [[t.strip() for t in item.partition("=")] for item in rename.split(",")]
        if not all(old and sep and new for old, sep, new in pairs if old or sep or new):
            raise InputError(
                f"{where}: rename_keypoints takes OLD=NEW pairs separated by commas, the file's "
                f"name first, e.g. 'nose=snout,tail_base=tailbase'; got {rename!r}"
            )
        return {old: new for old, _, new in pairs if old}
    if not isinstance(rename, Mapping):
        raise InputError(
            f"{where}: rename_keypoints maps the file's keypoint names to the study's, e.g. "
            f"{{'nose': 'snout'}} or 'nose=snout'; got {type(rename).__name__}"
        )
    return {str(old): str(new) for old, new in rename.items()}


def renamed_keypoints(names: Sequence[str], rename: Mapping[str, str], where: Any) -> list[str]:
    """``names`` (a file's keypoints) with the new names ``rename`` gives them.

    One option serves every file of a study, so a file may lack a name to rename; an
    ``InputWarning`` says so only when it has neither the old name nor the new one (a name
    misspelt in the option, perhaps). Two keypoints renamed to one name are refused.

    Examples
    --------
    >>> renamed_keypoints(["nose", "tail"], {"nose": "snout"}, "a.csv")
    ['snout', 'tail']
    """
    if not rename:
        return list(names)
    out = [rename.get(k, k) for k in names]
    twice = sorted({k for k in out if out.count(k) > 1})
    if twice:
        raise InputError(
            f"{where}: rename_keypoints gives several keypoints the name(s) {twice} (the file's "
            f"keypoints {list(names)}); each keypoint needs a name of its own"
        )
    absent = [f"'{old}'" for old, new in rename.items() if old not in names and new not in names]
    if absent:
        warnings.warn(
            f"{where}: rename_keypoints names {listed(absent)}, which the file does not have "
            f"(nor the new name); its keypoints are {list(names)}. Check the spelling (the "
            "file's name comes first: OLD=NEW)",
            InputWarning,
            stacklevel=3,
        )
    return out


def check_file(path: str | os.PathLike[str], fix: str = "export the tracks again") -> Path:
    """The path as a ``Path`` if it is an existing, non-empty file; a clear error otherwise."""
    path = Path(path).expanduser()
    if not path.exists():
        msg = f"{path}: no such file (looked in {path.resolve().parent}); check the name and folder"
        raise InputError(msg)
    if path.is_dir():
        raise InputError(f"{path}: is a folder, not a file; use read_folder() to read every file")
    if path.stat().st_size == 0:
        raise InputError(f"{path}: the file is empty (0 bytes); {fix}")
    return path


def check_fps(fps: Any, where: str | os.PathLike[str]) -> float | None:
    """``None`` or a positive finite frame rate."""
    if fps is None:
        return None
    try:
        value = float(fps)
    except (TypeError, ValueError):
        value = float("nan")
    if not np.isfinite(value) or value <= 0:
        msg = f"{where}: fps must be a positive number of frames per second; got {fps!r}"
        raise InputError(msg)
    return value


def table_info(path: Path) -> TableInfo:
    """Open a CSV or Parquet file far enough to know its columns."""
    kind = TABLE_SUFFIXES.get(path.suffix.lower())
    if kind is None:
        raise InputError(
            f"{path}: cannot read tables with suffix '{path.suffix}'; use .csv, .parquet or .pq"
        )
    metadata: dict[str, Any] = {}
    if kind == "parquet":
        try:
            schema = pq.read_schema(path)
        except (pa.ArrowException, OSError) as exc:
            raise InputError(
                f"{path}: cannot be read as a Parquet file ({exc}). It may be damaged or only "
                "partly copied: export or copy it again (a CSV file needs the .csv suffix)."
            ) from None
        columns = tuple(schema.names)
        raw = (schema.metadata or {}).get(METADATA_KEY)
        if raw:
            try:
                metadata = dict(json.loads(raw))
            except (ValueError, TypeError):
                metadata = {}
    else:
        try:
            with open(path, encoding="utf-8-sig", newline="") as fh:
                columns = tuple(next(csv.reader(fh), []))
        except (UnicodeDecodeError, csv.Error) as exc:
            raise InputError(f"{path}: not a readable UTF-8 CSV file ({exc})") from None
    dup = sorted({c for c in columns if columns.count(c) > 1})
    if dup:
        raise InputError(f"{path}: column names must be unique; repeated: {dup}. Rename them.")
    return TableInfo(path, kind, columns, metadata)


def check_role_mapping(
    path: Any, mapping: Any, roles: Sequence[str], targets: str, note: str = ""
) -> None:
    """Refuse a ``columns`` mapping that is not ``{role: name}`` over the known ``roles``.

    ``targets`` says what the mapping's values name (e.g. "column names"); ``note`` is added
    after the list of roles.
    """
    if not isinstance(mapping, Mapping):
        raise InputError(
            f"{path}: columns must map roles to {targets}, e.g. "
            f"{{'confidence': 'likelihood'}}; got {type(mapping).__name__}"
        )
    unknown = sorted(set(mapping) - set(roles))
    if unknown:
        hint = ""
        if all(str(mapping[k]) in roles for k in unknown):  # column=role: written backwards
            fixed = {str(mapping[k]) if k in unknown else k: k if k in unknown else mapping[k]
                     for k in mapping}  # fmt: skip
            hint = (
                ". Each pair names the role first, then the file's name for it (ROLE=COLUMN); "
                "the pairs naming unknown roles look written the other way round: pass "
                f"{mapping_text(fixed)}"
            )
        raise InputError(
            f"{path}: columns= names unknown role(s) {unknown}; the roles are "
            f"{list(roles)}{note}{hint}"
        )


def mapping_text(mapping: Mapping[str, str]) -> str:
    """A column mapping as a Python argument and as its command-line option, in the form the
    command line's messages rewrite (``pass columns={...} (command line: --columns ...)``).

    Examples
    --------
    >>> mapping_text({"keypoint": "bodypart", "x": "px"})
    "columns={'keypoint': 'bodypart', 'x': 'px'} (command line: --columns keypoint=bodypart,x=px)"
    """
    cli = ",".join(f"{role}={name}" for role, name in mapping.items())
    return f"columns={dict(mapping)} (command line: --columns {cli})"


def map_columns(
    info: TableInfo, mapping: Mapping[str, str] | None, roles: Sequence[str]
) -> TableInfo:
    """``info`` with the file's columns known by the roles ``mapping`` gives them.

    ``mapping`` is ``{role: column}``, e.g. ``{"confidence": "likelihood", "x": "pos_x"}``; a
    column already named like a mapped role is then ignored.
    """
    if not mapping:
        return info
    check_role_mapping(info.path, mapping, roles, "column names")
    # A study's files may differ: a file that already names a role's column by the role
    # (``confidence``) reads it so, whatever the mapping says for the others.
    mapping = {r: c for r, c in mapping.items() if c in info.columns or r not in info.columns}
    if not mapping:
        return info
    missing = sorted(c for c in mapping.values() if c not in info.columns)
    if missing:
        raise InputError(
            f"{info.path}: columns= names column(s) {missing} that the file does not have; "
            f"its columns are {listed(map(repr, info.columns), 30)}"
        )
    by_column = {str(c): str(r) for r, c in mapping.items()}
    if len(by_column) != len(mapping):
        raise InputError(f"{info.path}: columns= gives one column several roles: {dict(mapping)}")
    shadowed = set(mapping) - set(mapping.values())
    renamed = [by_column.get(c, f"{c} (not used)" if c in shadowed else c) for c in info.columns]
    return replace(info, columns=tuple(renamed), renamed={**info.renamed, **dict(mapping)})


def similar_columns(columns: Sequence[Any], wanted: Sequence[str]) -> dict[str, str]:
    """Columns named like a wanted column that is absent but for case and spaces
    (``Session`` for ``session``): found name -> wanted name.

    Examples
    --------
    >>> similar_columns(["Session", "x"], ["session", "x"])
    {'Session': 'session'}
    """
    present = {str(c) for c in columns}
    return {
        str(c): w
        for w in wanted
        if w not in present
        for c in columns
        if str(c) != w and str(c).strip().lower() == w
    }


def rename_hints(similar: Mapping[str, str]) -> str:
    """`` Column 'Session' looks like 'session': rename it.`` for each pair of
    :func:`similar_columns`."""
    return "".join(f" Column '{f}' looks like '{w}': rename it." for f, w in similar.items())


def separator_hint(columns: Sequence[Any]) -> str:
    """A sentence when a table's one column looks like a header separated by another sign."""
    if len(columns) == 1 and any(s in str(columns[0]) for s in ";\t|"):
        return " The header looks separated by ';', tab or '|': save it comma-separated."
    return ""


def manifest_hint(info: TableInfo) -> str:
    """A sentence when the table is a session manifest given as a pose file (a folder read
    with the manifest.csv that lies beside its pose files)."""
    if {"session", "path"} <= {str(c) for c in info.columns}:
        return (
            " It looks like a session manifest (columns session and path), not a pose table: "
            f"pass manifest='{info.path}' (command line: --manifest {info.path})."
        )
    return ""


UNNAMED = "COLUMN"
"""Stands for a column the user must name in a suggested mapping (``keypoint=COLUMN``)."""


def require_columns(
    info: TableInfo, needed: list[str], purpose: str, suggest: Mapping[str, str] | None = None
) -> None:
    """Raise listing the missing columns, the columns found and near misses.

    ``suggest`` (role -> column, or ``UNNAMED`` for a role whose column is not evident), when
    given, is shown as a column mapping to pass, after the columns that differ only in case.
    """
    missing = [c for c in needed if c not in info.columns]
    if not missing:
        return
    near = similar_columns(info.columns, missing)
    hints = rename_hints(near)
    mapping = {w: f for f, w in near.items()}
    if suggest:
        taken = set(mapping.values())
        mapping |= {r: c for r, c in suggest.items() if r not in mapping and c not in taken}
    other = separator_hint(info.columns) + manifest_hint(info)
    if mapping and not other:  # last, with no full stop after the command to copy
        lead = "Or" if near else "Its columns look named for these roles:"
        if UNNAMED in mapping.values():
            lead = (
                f"{'Or say' if near else 'Say'} which of its columns holds each role (ROLE="
                f"{UNNAMED}, with the file's column name for {UNNAMED}):"
            )
        hints += f" {lead} pass {mapping_text(mapping)}"
    hints += other
    raise InputError(
        f"{info.path}: missing column(s) {missing} needed for {purpose}; found columns "
        f"{list(info.columns)}.{hints}"
    )


def exact_repeats(
    key: np.ndarray, values: Mapping[str, np.ndarray]
) -> tuple[np.ndarray, np.ndarray] | None:
    """Rows whose ``key`` an earlier row already holds, and that earlier row, when every one of
    them repeats it in every column of ``values`` (NaN equal to NaN): one row said twice, as
    when exports are joined with an overlap. Empty arrays when no key repeats; None when some
    repeat has other values (which one is right is unknown).

    Examples
    --------
    >>> exact_repeats(np.array([0, 1, 1]), {"x": np.array([5.0, 6.0, 6.0])})
    (array([2]), array([1]))
    >>> exact_repeats(np.array([0, 1, 1]), {"x": np.array([5.0, 6.0, 7.0])}) is None
    True
    """
    _, first, inverse = np.unique(key, return_index=True, return_inverse=True)
    first_row = first[inverse.ravel()]
    repeat = np.flatnonzero(first_row != np.arange(len(key)))
    for v in values.values():
        a, b = v[repeat], v[first_row[repeat]]
        same = a == b
        if a.dtype.kind == "f":
            same |= np.isnan(a) & np.isnan(b)
        if not same.all():
            return None
    return repeat, first_row[repeat]


def read_columns(
    info: TableInfo, numbers: list[str], texts: list[str], whole: tuple[str, ...] = ()
) -> tuple[dict[str, np.ndarray], dict[str, pa.ChunkedArray]]:
    """Read the named columns: numbers as float64 arrays (NaN for empty), texts as dictionaries.

    Columns in ``whole`` stored as integers without gaps come back as int64 instead.
    """
    if info.renamed:  # a column mapping: read the file's columns, hand them back by role
        src = info.source
        values, text_cols = read_columns(
            replace(info, renamed={}, columns=tuple(src(c) for c in info.columns)),
            [src(c) for c in numbers],
            [src(c) for c in texts],
            whole=tuple(src(c) for c in whole),
        )
        return (
            {c: values[src(c)] for c in numbers},
            {c: text_cols[src(c)] for c in texts},
        )
    if info.kind == "csv":
        table = _read_csv(info, numbers, texts)
        n_rows, read = table.num_rows, table.select
    else:
        n_rows, read = _parquet_reader(info, texts)
    if n_rows == 0:
        raise InputError(
            f"{info.path}: the table has column names but no rows; export the tracks again"
        )
    values = {}
    for c in numbers:
        col = read([c]).column(0)
        if c in whole and pa.types.is_integer(col.type) and col.null_count == 0:
            values[c] = col.to_numpy().astype(np.int64, copy=False)
        else:
            values[c] = to_numbers(col, c, info)
        del col
    text_table = read(texts)
    return values, {c: text_table.column(c) for c in texts}


def _parquet_reader(info: TableInfo, texts: list[str]) -> tuple[int, Any]:
    """Row count and a column reader. Reading one column at a time keeps the peak memory near
    one column plus the arrays already made, instead of the whole table at once."""

    def damaged(exc: Exception) -> InputError:
        return InputError(
            f"{info.path}: the Parquet file is damaged and cannot be read ({exc}); "
            "export or copy it again"
        )

    try:
        schema = pq.read_schema(info.path)
        as_dict = [c for c in texts if pa.types.is_string(schema.field(c).type)]
        source = pq.ParquetFile(info.path, read_dictionary=as_dict)
    except (pa.ArrowException, OSError) as exc:
        raise damaged(exc) from None

    def read(names: list[str]) -> pa.Table:
        try:
            return source.read(columns=names)
        except (pa.ArrowException, OSError) as exc:
            raise damaged(exc) from None

    return source.metadata.num_rows, read


def _read_csv(info: TableInfo, numbers: list[str], texts: list[str]) -> pa.Table:
    kinds = {c: pa.float64() for c in numbers} | {
        c: pa.dictionary(pa.int32(), pa.string()) for c in texts
    }
    try:
        try:
            return _csv(info.path, kinds, [*numbers, *texts])
        except pa.ArrowInvalid as exc:
            if "conversion error" not in str(exc):
                raise
        # Some cell is not a number: read those columns as text so to_numbers can point at it.
        return _csv(info.path, kinds | {c: pa.string() for c in numbers}, [*numbers, *texts])
    except (pa.ArrowException, OSError) as exc:
        raise InputError(f"{info.path}: cannot be read as CSV ({exc})") from None


def _csv(path: Path, kinds: dict[str, pa.DataType], columns: list[str]) -> pa.Table:
    # Text cells are never read as missing: a keypoint may well be called "NA".
    options = pa_csv.ConvertOptions(
        column_types=kinds, include_columns=columns, strings_can_be_null=False
    )
    return pa_csv.read_csv(path, convert_options=options)


def to_numbers(col: pa.ChunkedArray, name: str, info: TableInfo) -> np.ndarray:
    """A numeric column as float64 with NaN for empty cells; errors name a bad cell."""
    kind = col.type
    if pa.types.is_dictionary(kind):
        col, kind = col.cast(kind.value_type), kind.value_type
    types = pa.types
    if types.is_integer(kind) or types.is_floating(kind) or types.is_decimal(kind):
        out = pc.cast(col, pa.float64()).to_numpy()
    elif types.is_null(kind):  # a column with every cell empty
        out = np.full(len(col), np.nan)
    elif pa.types.is_string(kind) or pa.types.is_large_string(kind):
        out = _parse_text_numbers(col, name, info)
    else:
        raise InputError(f"{info.path}: column '{name}' must hold numbers; it holds {kind} values")
    out = np.asarray(out, dtype=np.float64)
    if np.isinf(out).any():
        i = int(np.flatnonzero(np.isinf(out))[0])
        raise InputError(
            f"{info.path}: column '{name}' has an infinite value ({out[i]}) at {info.row(i)}; "
            "use an empty cell for a missing value"
        )
    return out


def _parse_text_numbers(col: pa.ChunkedArray, name: str, info: TableInfo) -> np.ndarray:
    text = col.to_pandas().astype(object)
    parsed = pd.to_numeric(text, errors="coerce")
    blank = text.isna() | text.str.strip().str.lower().isin(_BLANKS)
    bad = np.flatnonzero((parsed.isna() & ~blank).to_numpy())
    if bad.size:
        i = int(bad[0])
        raise InputError(
            f"{info.path}: column '{name}' must hold numbers, but {info.row(i)} has "
            f"{text.iloc[i]!r} ({bad.size} such cell(s) in all). Correct those cells or leave "
            "them empty (an empty cell marks a missing value)."
        )
    return parsed.to_numpy(dtype=np.float64, na_value=np.nan)


def text_codes(col: pa.ChunkedArray, name: str, info: TableInfo) -> tuple[np.ndarray, list[str]]:
    """Integer codes (rows,) and names of a text column, names in order of first appearance."""
    if not pa.types.is_dictionary(col.type):
        if not (pa.types.is_string(col.type) or pa.types.is_large_string(col.type)):
            col = pc.cast(col, pa.string())
        col = pc.dictionary_encode(col)
    col = pa.table({name: col}).unify_dictionaries().column(0)
    if col.null_count:
        i = int(np.flatnonzero(col.is_null().to_numpy(zero_copy_only=False))[0])
        raise InputError(
            f"{info.path}: column '{name}' is empty at {info.row(i)} ({col.null_count} empty "
            f"cell(s)); every row needs a {name} name"
        )
    names = [str(v) for v in col.chunk(0).dictionary.to_pylist()] if col.num_chunks else []
    codes = np.concatenate(
        [c.indices.to_numpy(zero_copy_only=False) for c in col.chunks] or [np.zeros(0, np.int32)]
    )
    used = np.bincount(codes, minlength=len(names)) > 0
    blank = [j for j, n in enumerate(names) if used[j] and not n.strip()]
    if blank:
        i = int(np.argmax(codes == blank[0]))
        raise InputError(
            f"{info.path}: column '{name}' has a blank name at {info.row(i)}; name every {name}"
        )
    order = _first_seen(codes, len(names), used)
    remap = np.full(len(names), -1, dtype=np.int32)
    remap[order] = np.arange(order.size)
    return remap[codes], [names[j] for j in order]


def _first_seen(codes: np.ndarray, n_codes: int, used: np.ndarray) -> np.ndarray:
    # Names nearly always all appear in the first rows; scan everything only if they do not.
    first = np.full(n_codes, codes.size, dtype=np.int64)
    head = codes[: 1 << 16]
    u, idx = np.unique(head, return_index=True)
    first[u] = idx
    late = np.flatnonzero(used & (first == codes.size))
    if late.size:
        rows = np.flatnonzero(np.isin(codes, late))
        np.minimum.at(first, codes[rows], rows)
    return np.flatnonzero(used)[np.argsort(first[used], kind="stable")]


def integer_frames(values: np.ndarray, name: str, info: TableInfo) -> np.ndarray:
    """Frame numbers as int64; empty, fractional or absurdly large cells are errors."""
    bad = ~np.isfinite(values) if values.dtype.kind == "f" else np.zeros(values.shape, bool)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        msg = f"{info.path}: column '{name}' is empty at {info.row(i)}; number every row"
        raise InputError(msg)
    # Beyond 2**53 floats are not exact whole numbers, and differences of int64 overflow.
    huge = (values >= 2**53) | (values <= -(2**53))
    if huge.any():
        i = int(np.flatnonzero(huge)[0])
        raise InputError(
            f"{info.path}: column '{name}' has the frame number {values[i]:.6g} at "
            f"{info.row(i)}, beyond 2**53; frame numbers count frames from the recording's "
            "start: check the column (a time stamp in another unit?)"
        )
    if values.dtype.kind in "iu":
        return values.astype(np.int64, copy=False)
    frac = values != np.rint(values)
    if frac.any():
        i = int(np.flatnonzero(frac)[0])
        raise InputError(
            f"{info.path}: column '{name}' must hold whole frame numbers; {info.row(i)} has "
            f"{values[i]:g}. If these are times in seconds, name the column 'time'."
        )
    return values.astype(np.int64)


def confidence_lookalikes(info: TableInfo, known: Sequence[str], limit: int = 6) -> list[str]:
    """Numeric columns outside ``known`` whose filled values the readers would read as a
    confidence (:func:`confidence_rule`): a tracker's confidence under another name, perhaps
    (``likelihood``, ``score``, ``p``), on [0, 1], a little above 1 or in percent."""
    found = []
    for column in [c for c in info.columns if c not in known][:limit]:
        try:
            values, _ = read_columns(info, [column], [])
        except InputError:  # text, or unreadable: not a confidence
            continue
        v = values[column]
        v = v[np.isfinite(v)]
        # More than two values: a column of 0s and 1s is a flag, not a confidence.
        if v.size and confidence_rule(v) is not None and np.unique(v[:10_000]).size > 2:
            found.append(column)
    return found


LOOKS_LIKE_CONFIDENCE = (
    "hold numbers like a tracker's confidence (0 to 1; values up to "
    "1.2 and a 0-100 scale in percent are read too)"
)
"""How a message says that columns look like a confidence: the scales the readers read."""


def warn_unmapped_confidence(info: TableInfo, columns: list[str], fix: str) -> None:
    """Say that columns looking like a confidence are not read as one, and how to use them."""
    if not columns:
        return
    msg = (
        f"{info.path}: no confidence column was read, but column(s) {columns} "
        f"{LOOKS_LIKE_CONFIDENCE}; they are ignored. To use one: {fix}"
    )
    warnings.warn(msg, InputWarning, stacklevel=3)


CONFIDENCE_OVERSHOOT = 1.2
"""Confidences whose largest value lies in (1, this] are read with the values above 1 as 1:
some trackers' heatmap peaks pass 1 a little (by up to a tenth or so, from memory), and such
a point is as sure as one at 1. Beyond it, a value is more likely a slip, and is refused."""

PERCENT_FROM = 50.0
"""Confidences whose largest value lies in (this, 100], with most values above 1, are read as
percent (divided by 100). A tracker writing percent rates its best points near 100; a largest
value of 2-50 names no scale, and a few values above 1 among fractions are slips: refused."""


def confidence_rule(finite: np.ndarray) -> str | None:
    """How the readers read these finite confidence values: ``"unit"`` (within [0, 1]),
    ``"overshoot"`` (largest in (1, ``CONFIDENCE_OVERSHOOT``], read as 1), ``"percent"``
    (largest in (``PERCENT_FROM``, 100] with most values above 1, divided by 100), or None
    (refused: negative values, or a largest value that names no scale).

    Examples
    --------
    >>> [confidence_rule(np.array(v)) for v in ([0, 1.0], [0, 1.08], [64.0, 97], [0, 0.3, 64])]
    ['unit', 'overshoot', 'percent', None]
    """
    if not finite.size or (finite.min() >= 0 and finite.max() <= 1):
        return "unit"
    top = finite.max()
    if finite.min() < 0:
        return None
    if top <= CONFIDENCE_OVERSHOOT:
        return "overshoot"
    if PERCENT_FROM < top <= 100 and np.median(finite) > 1:
        return "percent"
    return None


def confidence_on_unit_scale(
    columns: Mapping[str, np.ndarray], info: TableInfo
) -> dict[str, np.ndarray]:
    """A file's confidence columns on [0, 1]: values a little above 1 read as 1
    (``CONFIDENCE_OVERSHOOT``), a 0-100 scale read as percent (``PERCENT_FROM``), each said in
    a warning; other values outside [0, 1] are refused, naming the column and the first row.
    (A scale that only runs low, 0-0.5 say, is cleaning's to read:
    ``CleanParams.confidence_scale``.)
    The rule (:func:`confidence_rule`) is read from all the file's confidence columns together,
    so every keypoint is read on the same scale.

    Examples
    --------
    >>> info = TableInfo(Path("a.csv"), "csv", ("nose_c",))
    >>> confidence_on_unit_scale({"nose_c": np.array([0.5, 1.0])}, info)["nose_c"].tolist()
    [0.5, 1.0]
    """
    out = dict(columns)
    finite = np.concatenate([v[np.isfinite(v)] for v in out.values()] or [np.empty(0)])
    rule = confidence_rule(finite)
    head = f"{info.path.name}: confidence"
    if rule == "overshoot":
        out = {c: np.minimum(v, 1.0) for c, v in out.items()}  # NaN stays NaN
        msg = (
            f"{head} values a little above 1 (at most {finite.max():.3g}, "
            f"{int((finite > 1).sum())} value(s)) are read as 1, as sure as a point can be"
        )
        warnings.warn(msg, InputWarning, stacklevel=3)
    elif rule == "percent":
        out = {c: v / 100.0 for c, v in out.items()}
        msg = f"{head} written from 0 to 100 is read as percent (divided by 100)"
        warnings.warn(msg, InputWarning, stacklevel=3)
    for name, values in out.items():
        check_confidence(values, name, info)
    return out


def check_confidence(values: np.ndarray, name: str, info: TableInfo) -> None:
    """Raise if finite confidence values fall outside [0, 1], naming the first offending row."""
    outside = (values < 0) | (values > 1)
    if outside.any():
        rows = np.flatnonzero(outside)
        finite = values[np.isfinite(values)]
        raise InputError(
            f"{info.path}: column '{name}' must lie in [0, 1]; {info.row(int(rows[0]))} has "
            f"{values[rows[0]]:g} ({rows.size} value(s) outside, range {finite.min():g} to "
            f"{finite.max():g}). Rescale it to [0, 1] (e.g. divide by the maximum) or drop it "
            f"(a 0-100 scale is read as percent, values up to {CONFIDENCE_OVERSHOOT:g} as 1)."
        )


def make_tracks(where: str | os.PathLike[str], **fields: Any) -> PoseTracks:
    """Build ``PoseTracks``; a validation error is prefixed with the file it came from."""
    try:
        return PoseTracks(**fields)
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from None
