"""Reading and writing pose tracks and tables.

Readers: ``read_tidy`` (long tables), ``read_wide`` (one row per frame), ``read_nwb`` (NWB with
ndx-pose), ``from_arrays``; ``read_pose`` picks one by format name or suffix, ``read_folder`` and
``load_study`` (from a session manifest) read whole studies. Every save goes through the atomic
writers (``atomic_write``, ``write_table``, ...): a file appears complete or not at all; every
read of a JSON or npz file a user may share goes through the safe readers (``read_json``,
``load_npz``, ``safe_child`` for member names).
"""

from __future__ import annotations

from ethoscribe.io._atomic import (
    atomic_path,
    atomic_table_writer,
    atomic_write,
    atomic_write_bytes,
    atomic_write_json,
    atomic_write_text,
    sync_folder,
    write_table,
)
from ethoscribe.io._safe import load_npz, loads_json, read_json, safe_child
from ethoscribe.io.arrays import from_arrays
from ethoscribe.io.manifest import load_study, read_manifest, validate_manifest
from ethoscribe.io.nwb import read_nwb, write_nwb
from ethoscribe.io.nwb_bouts import read_bouts_nwb, write_bouts_nwb
from ethoscribe.io.registry import (
    available_formats,
    pose_files,
    read_folder,
    read_pose,
    register_reader,
)
from ethoscribe.io.tidy import read_tidy, write_tidy
from ethoscribe.io.wide import read_wide

__all__ = [
    "atomic_path",
    "atomic_table_writer",
    "atomic_write",
    "atomic_write_bytes",
    "atomic_write_json",
    "atomic_write_text",
    "available_formats",
    "from_arrays",
    "load_npz",
    "load_study",
    "loads_json",
    "pose_files",
    "read_bouts_nwb",
    "read_folder",
    "read_json",
    "read_manifest",
    "read_nwb",
    "read_pose",
    "read_tidy",
    "read_wide",
    "register_reader",
    "safe_child",
    "sync_folder",
    "validate_manifest",
    "write_bouts_nwb",
    "write_nwb",
    "write_table",
    "write_tidy",
]
