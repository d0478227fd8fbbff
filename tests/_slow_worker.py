"""A per-session function for tests of interrupted parallel runs: says it started, then waits."""

from __future__ import annotations

import time
from pathlib import Path


def touch_and_wait(path: str) -> str:
    Path(path).touch()
    time.sleep(60)
    return path
