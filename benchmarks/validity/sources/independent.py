"""A second simulator, designed independently of ethoscribe's (``independent_sim``).

Only its command and its files are used here, never its code:
``python -m benchmarks.validity.independent_sim --out DIR`` writes tidy pose files, a
``manifest.csv`` and ``truth/<session>.csv`` (``frame, behaviour``). The study is written
once into a folder under the bench's output (``independent_sim_data``) and read from there
as ``ethoscribe.workspace.discover`` reads a study (manifest fps and calibration).
"""

from __future__ import annotations

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
DATA_DIR: list[Path] = [REPO / "results" / "validity" / "independent_sim_data"]
# Trimmed for a quick bench: 6 sessions of 2 minutes (the command's default is 8 of 4 minutes).
SESSIONS, DURATION_S = 6, 120


def _args(seed: int) -> list[str]:
    return ["--sessions", str(SESSIONS), "--duration-s", str(DURATION_S), "--seed", str(seed)]


def generate(folder: Path, seed: int) -> None:
    """Run the independent simulator's command into ``folder`` (once; kept for reruns)."""
    if (folder / "manifest.csv").exists():
        return
    folder.parent.mkdir(parents=True, exist_ok=True)
    if importlib_missing():
        raise RuntimeError(
            "benchmarks.validity.independent_sim is not in this checkout yet: "
            "update the branch (git rebase main) and rerun"
        )
    cmd = [
        sys.executable,
        "-m",
        "benchmarks.validity.independent_sim",
        "--out",
        str(folder),
        *_args(seed),
    ]
    env = {
        **os.environ,
        "PYTHONPATH": os.pathsep.join(
            filter(None, [str(REPO), str(REPO / "src"), os.environ.get("PYTHONPATH", "")])
        ),
    }
    done = subprocess.run(cmd, cwd=REPO, env=env, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise RuntimeError(f"{' '.join(cmd)} failed: {done.stderr.strip()[-800:]}")


def importlib_missing() -> bool:
    import importlib.util

    return importlib.util.find_spec("benchmarks.validity.independent_sim") is None


@source(
    "independent_sim",
    "independently designed simulator (another body plan, rhythmic behaviours, tracker failures)",
)
def independent(seed: int = 0) -> Source:
    folder = DATA_DIR[0] / f"seed{seed}_{SESSIONS}x{DURATION_S}s"
    generate(folder, seed)
    manifest = folder / "manifest.csv"
    table = pd.read_csv(manifest)
    paths = [folder / p for p in table["path"]]
    sessions, _ = read_sessions(paths, manifest=manifest, progress=False)
    truth_tables = {s.session: pd.read_csv(folder / "truth" / f"{s.session}.csv") for s in sessions}
    behaviours = sorted({str(b) for t in truth_tables.values() for b in t["behaviour"].unique()})
    code = {b: i for i, b in enumerate(behaviours)}
    truth = {}
    for s in sessions:
        t = truth_tables[s.session]
        for a in s.animals:
            part = t if "animal" not in t.columns or s.n_animals == 1 else t[t["animal"] == a]
            labels = np.full(s.n_frames, -1, dtype=np.int64)
            frames = part["frame"].to_numpy()
            ok = (frames >= 0) & (frames < s.n_frames)
            labels[frames[ok]] = part["behaviour"].astype(str).map(code).to_numpy()[ok]
            truth[(s.session, a)] = labels
    details = {
        "command": "python -m benchmarks.validity.independent_sim --out DIR "
        + " ".join(_args(seed)),
        "sessions": [s.session for s in sessions],
        "fps": sorted({s.fps for s in sessions}),
        "keypoints": len(sessions[0].keypoints),
        "dims": sessions[0].n_dims,
    }
    return Source(
        "independent_sim", "simulated (independent)", sessions, truth, behaviours, details
    )
