"""Simulated animals with known behaviour: for tests, recovery checks and the bundled examples.

Two invented body plans ship with ethoscribe: the ``dune_vole``, a burrowing rodent filmed from
above (2-D, pixels), and the ``glass_minnow``, a small fish tracked in 3-D (mm). Behaviour follows
a semi-Markov process with known bout-duration distributions; each behaviour has its own posture
and rhythms; groups differ by a planted amount; tracking noise is realistic and configurable.
All of it is simulated: no real animal or laboratory is described.

Examples
--------
>>> from ethoscribe.simulate import simulate_session
>>> tracks, truth = simulate_session("dune_vole", duration_s=5, seed=0)
>>> tracks.keypoints[:3]
('nose', 'left_ear', 'right_ear')
"""

from __future__ import annotations

from ethoscribe.simulate.animals import BODY_PLANS, get_body_plan
from ethoscribe.simulate.examples import main, write_example_sessions, write_study
from ethoscribe.simulate.noise import expected_rates
from ethoscribe.simulate.plan import (
    Behaviour,
    BodyPlan,
    BoutDuration,
    GroupEffect,
    Rhythm,
    TrackingNoise,
    expected_time_budget,
    group_parameters,
)
from ethoscribe.simulate.session import simulate_chunks, simulate_session, simulate_study

__all__ = [
    "BODY_PLANS",
    "Behaviour",
    "BodyPlan",
    "BoutDuration",
    "GroupEffect",
    "Rhythm",
    "TrackingNoise",
    "expected_rates",
    "expected_time_budget",
    "get_body_plan",
    "group_parameters",
    "main",
    "simulate_chunks",
    "simulate_session",
    "simulate_study",
    "write_example_sessions",
    "write_study",
]
