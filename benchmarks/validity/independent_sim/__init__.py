"""An independent test-data generator for the validation bench: an invented six-legged animal
with known behaviour labels, tracked by an imperfect tracker. See README.md in this folder."""

from .animal import BEHAVIOURS, KEYPOINTS
from .study import FPS_CHOICES, Session, plan_study, simulate_session, write_study
from .tracking import FaultConfig

__all__ = [
    "BEHAVIOURS",
    "FPS_CHOICES",
    "KEYPOINTS",
    "FaultConfig",
    "Session",
    "plan_study",
    "simulate_session",
    "write_study",
]
