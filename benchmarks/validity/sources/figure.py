"""A third simulator, designed independently of the other two (``figure_sim``): an upright
figure of 17 markers in 3-D, eight movement types in one take per subject.

As for ``independent_sim``, only its command and files are used: ``python -m
benchmarks.validity.figure_sim --out DIR --seed S`` writes tidy pose files, a
``manifest.csv`` (per-subject fps 60, 100 or 120, units mm) and ``truth/<session>.csv``
(``frame, label``). The study is written once into a folder under the bench's output
(``figure_sim_data``) and read from there as ``ethoscribe.workspace.discover`` reads a study.
"""

from __future__ import annotations

from pathlib import Path

from benchmarks.validity.sources import REPO, Source, read_simulated_study, simulate_once, source

# Where studies are written; the bench sets it under its --out folder.
DATA_DIR: list[Path] = [REPO / "results" / "validity" / "figure_sim_data"]
MODULE = "benchmarks.validity.figure_sim"


@source(
    "figure_sim",
    "third independent simulator (upright 3-D figure, 17 markers, 8 movement types, mixed fps)",
)
def figure(seed: int = 0) -> Source:
    folder = DATA_DIR[0] / f"seed{seed}"
    simulate_once(MODULE, folder, ["--seed", str(seed)])
    sessions, truth, names = read_simulated_study(folder, "label")
    details = {
        "command": f"python -m {MODULE} --out DIR --seed {seed}",
        "sessions": [s.session for s in sessions],
        "fps": sorted({s.fps for s in sessions}),
        "keypoints": len(sessions[0].keypoints),
        "dims": sessions[0].n_dims,
    }
    return Source("figure_sim", "simulated (independent, figure)", sessions, truth, names, details)
