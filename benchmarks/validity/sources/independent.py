"""A second simulator, designed independently of ethoscribe's (``independent_sim``).

Only its command and its files are used here, never its code:
``python -m benchmarks.validity.independent_sim --out DIR`` writes tidy pose files, a
``manifest.csv`` and ``truth/<session>.csv`` (``frame, behaviour``). The study is written
once into a folder under the bench's output (``independent_sim_data``) and read from there
as ``ethoscribe.workspace.discover`` reads a study (manifest fps and calibration).
"""

from __future__ import annotations

from pathlib import Path

from benchmarks.validity.sources import REPO, Source, read_simulated_study, simulate_once, source

# Where studies are written; the bench sets it under its --out folder.
DATA_DIR: list[Path] = [REPO / "results" / "validity" / "independent_sim_data"]
MODULE = "benchmarks.validity.independent_sim"
# Trimmed for a quick bench: 6 sessions of 2 minutes (the command's default is 8 of 4 minutes).
SESSIONS, DURATION_S = 6, 120


def _args(seed: int) -> list[str]:
    return ["--sessions", str(SESSIONS), "--duration-s", str(DURATION_S), "--seed", str(seed)]


@source(
    "independent_sim",
    "independently designed simulator (another body plan, rhythmic behaviours, tracker failures)",
)
def independent(seed: int = 0) -> Source:
    folder = DATA_DIR[0] / f"seed{seed}_{SESSIONS}x{DURATION_S}s"
    simulate_once(MODULE, folder, _args(seed))
    sessions, truth, behaviours = read_simulated_study(folder, "behaviour")
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
