"""A simulated upright figure (17 markers in 3-D) performing eight movement types in one
continuous take per subject, with per-frame truth; a source of the validation bench.

``python -m benchmarks.validity.figure_sim --out DIR --seed S`` writes the study; see
README.md in this folder for the design. Only numpy is used.
"""

from __future__ import annotations

import numpy as np
from benchmarks.validity.figure_sim.body import MARKERS
from benchmarks.validity.figure_sim.files import write_study
from benchmarks.validity.figure_sim.movements import MOVEMENTS
from benchmarks.validity.figure_sim.take import FPS_CHOICES, Take, draw_subject, simulate_take

SUBJECTS = 7

__all__ = ["FPS_CHOICES", "MARKERS", "MOVEMENTS", "SUBJECTS", "simulate_study", "write_study"]


def simulate_study(
    seed: int, subjects: int = SUBJECTS, duration_s: float | None = None
) -> list[Take]:
    """Takes of ``subjects`` subjects (each 2-3 min unless ``duration_s`` is given).

    Each subject has its own random stream (``SeedSequence(seed).spawn``), so subject 3 is
    the same whether 3 or 8 subjects are asked for.
    """
    streams = np.random.SeedSequence(seed).spawn(subjects)
    takes = []
    for i, stream in enumerate(streams):
        rng = np.random.default_rng(stream)
        subject = draw_subject(rng, f"subject_{i + 1:02d}", duration_s)
        takes.append(simulate_take(rng, subject))
    return takes
