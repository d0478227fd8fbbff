"""A trimmed copy of bundled example sessions (simulated animals) for fast end-to-end tests."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import pandas as pd

from ethoscribe.io import read_tidy, write_tidy

EXAMPLES = Path(__file__).resolve().parents[1] / "example_sessions"


def trimmed_study(folder: Path, sessions: Sequence[str], n_frames: int) -> Path:
    """Write the first ``n_frames`` of each example session and their manifest rows."""
    manifest = pd.read_csv(EXAMPLES / "manifest.csv")
    rows = manifest[manifest["session"].isin(list(sessions))]
    for name in rows["session"]:
        t = read_tidy(EXAMPLES / f"{name}.parquet", fps=30.0)
        trimmed = t.replace(coords=t.coords[:n_frames], confidence=t.confidence[:n_frames])
        write_tidy(trimmed, folder / f"{name}.parquet")
    rows.to_csv(folder / "manifest.csv", index=False)
    return folder
