"""ethoscribe's own simulator: the bundled example sessions (voles, fish, pairs) and their truth.

The files in ``example_sessions/`` were written by ``ethoscribe.simulate`` with a fixed seed;
they are read here exactly as ``ethoscribe.workspace.discover`` reads them (manifest fps and
pixel calibration), and the truth comes from each folder's ``truth/frames.parquet``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from benchmarks.validity.sources import Source, source

from ethoscribe.workspace.reading import read_sessions

ROOT = Path(__file__).resolve().parents[3] / "example_sessions"

# Trimming for a quick bench: six of the sixteen vole sessions (three per housing group),
# 6 x 9,000 = 54,000 frames, the size of the study in the speed target.
VOLE_SESSIONS = ["session_01", "session_02", "session_03", "session_09", "session_10", "session_11"]


def load_folder(folder: Path, name: str, keep: list[str] | None = None) -> Source:
    """Sessions listed in ``folder/manifest.csv`` (optionally only ``keep``) with their truth."""
    manifest = pd.read_csv(folder / "manifest.csv")
    if keep is not None:
        manifest = manifest[manifest["session"].isin(keep)]
    paths = [folder / p for p in manifest["path"]]
    sessions, _ = read_sessions(paths, manifest=folder / "manifest.csv", progress=False)
    frames = pd.read_parquet(folder / "truth" / "frames.parquet")
    behaviours = [str(b) for b in frames["behaviour"].cat.categories]
    code = {b: i for i, b in enumerate(behaviours)}
    truth = {}
    for s in sessions:
        for a in s.animals:
            part = frames[(frames["session"] == s.session) & (frames["animal"] == a)]
            labels = np.full(s.n_frames, -1, dtype=np.int64)
            labels[part["frame"].to_numpy()] = part["behaviour"].astype(str).map(code).to_numpy()
            truth[(s.session, a)] = labels
    details = {
        "origin": f"example_sessions/{folder.relative_to(ROOT)}".rstrip("/."),
        "sessions": [s.session for s in sessions],
        "animals_per_session": sessions[0].n_animals,
        "keypoints": len(sessions[0].keypoints),
        "dims": sessions[0].n_dims,
        "fps": sessions[0].fps,
    }
    return Source(name, "simulated (ethoscribe)", sessions, truth, behaviours, details)


@source("own_voles", "ethoscribe simulator: dune voles, 2-D, 10 keypoints, 30 fps (6 sessions)")
def voles(seed: int = 0) -> Source:
    return load_folder(ROOT, "own_voles", VOLE_SESSIONS)


@source("own_fish", "ethoscribe simulator: glass minnow, 3-D, 9 keypoints, 50 fps (2 sessions)")
def fish(seed: int = 0) -> Source:
    return load_folder(ROOT / "glass_minnow", "own_fish")


@source("own_pairs", "ethoscribe simulator: two voles per arena, 30 fps (2 sessions)")
def pairs(seed: int = 0) -> Source:
    return load_folder(ROOT / "dune_vole_pairs", "own_pairs")
