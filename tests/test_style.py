"""The code stays ruff-clean (lint and format), as the project's standards require."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def _ruff() -> list[str]:
    exe = shutil.which("ruff", path=str(Path(sys.executable).parent)) or shutil.which("ruff")
    if exe is None:
        pytest.skip("ruff is not installed (it is part of the test extra)")
    return [exe]


@pytest.mark.parametrize("args", [["check"], ["format", "--check"]])
def test_ruff_is_clean(args):
    done = subprocess.run(
        [*_ruff(), *args, "src", "tests", "benchmarks"], cwd=ROOT, capture_output=True, text=True
    )
    assert done.returncode == 0, done.stdout + done.stderr
