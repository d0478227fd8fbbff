"""A third simulator, designed independently of the other two (``figure_sim``): an upright
figure of 17 markers in 3-D, eight movement types in one take per subject.

As for ``independent_sim``, only its command and files are used: ``python -m
benchmarks.validity.figure_sim --out DIR --seed S`` writes tidy pose files, a
``manifest.csv`` (per-subject fps 60, 100 or 120, units mm) and ``truth/<session>.csv``
(``frame, label``). The study is written once into a folder under the bench's output
(``figure_sim_data``) and read from there as ``ethoscribe.workspace.discover`` reads a study.
"""

from __future__ import annotations

import importlib.util
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
from benchmarks.validity.sources import Source, source

from ethoscribe.workspace.reading import read_sessions

REPO = Path(__file__).resolve().parents[3]
# Where studies are written; the bench sets it under its --out folder.
DATA_DIR: list[Path] = [REPO / "results" / "validity" / "figure_sim_data"]
MODULE = "benchmarks.validity.figure_sim"


def generate(folder: Path, seed: int) -> None:
    """Run the simulator's command into ``folder`` (once; kept for reruns)."""
    if (folder / "manifest.csv").exists():
        return
    folder.parent.mkdir(parents=True, exist_ok=True)
    if importlib.util.find_spec(MODULE) is None:
        raise RuntimeError(f"{MODULE} is not in this checkout: update it (git rebase main)")
    cmd = [sys.executable, "-m", MODULE, "--out", str(folder), "--seed", str(seed)]
    env = {
        **os.environ,
        "PYTHONPATH": os.pathsep.join(
            filter(None, [str(REPO), str(REPO / "src"), os.environ.get("PYTHONPATH", "")])
        ),
    }
    done = subprocess.run(cmd, cwd=REPO, env=env, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise RuntimeError(f"{' '.join(cmd)} failed: {done.stderr.strip()[-800:]}")


def load_study(folder: Path) -> tuple[list, dict[tuple[str, str], np.ndarray], list[str]]:
    """Tracks, per-frame truth codes (-1 where the truth says nothing) and movement names."""
    manifest = folder / "manifest.csv"
    table = pd.read_csv(manifest)
    sessions, _ = read_sessions(
        [folder / p for p in table["path"]], manifest=manifest, progress=False
    )
    tables = {s.session: pd.read_csv(folder / "truth" / f"{s.session}.csv") for s in sessions}
    names = sorted({str(b) for t in tables.values() for b in t["label"].unique()})
    code = {b: i for i, b in enumerate(names)}
    truth = {}
    for s in sessions:
        t = tables[s.session]
        labels = np.full(s.n_frames, -1, dtype=np.int64)
        frames = t["frame"].to_numpy()
        ok = (frames >= 0) & (frames < s.n_frames)
        labels[frames[ok]] = t["label"].astype(str).map(code).to_numpy()[ok]
        truth[(s.session, s.animals[0])] = labels
    return sessions, truth, names


@source(
    "figure_sim",
    "third independent simulator (upright 3-D figure, 17 markers, 8 movement types, mixed fps)",
)
def figure(seed: int = 0) -> Source:
    folder = DATA_DIR[0] / f"seed{seed}"
    generate(folder, seed)
    sessions, truth, names = load_study(folder)
    details = {
        "command": f"python -m {MODULE} --out DIR --seed {seed}",
        "sessions": [s.session for s in sessions],
        "fps": sorted({s.fps for s in sessions}),
        "keypoints": len(sessions[0].keypoints),
        "dims": sessions[0].n_dims,
    }
    return Source("figure_sim", "simulated (independent, figure)", sessions, truth, names, details)
