"""Facts about the machine and files that several layers need: usable CPUs, a file's digest."""

from __future__ import annotations

import hashlib
import os


def available_cpus() -> int:
    """CPUs this process may run on (its affinity mask where the system has one).

    Examples
    --------
    >>> available_cpus() >= 1
    True
    """
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


def file_digest(path: str | os.PathLike[str]) -> str:
    """SHA-256 of a file's bytes (hex), read in 1 MiB blocks.

    Examples
    --------
    >>> import tempfile
    >>> from pathlib import Path
    >>> p = Path(tempfile.mkdtemp()) / "empty"
    >>> _ = p.write_bytes(b"")
    >>> file_digest(p)[:12]  # sha256 of empty content (FIPS 180-4 test vector)
    'e3b0c44298fc'
    """
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()
