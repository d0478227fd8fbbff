"""The invented animal: body plan, behaviours, bout statistics and per-animal traits.

The ridged sand-strider (invented, no real species) is a long-bodied six-legged desert
arthropod about 6 cm long with two feelers on its head and a jointed tail. Body-frame
coordinates are millimetres with x pointing forward, y to the animal's left, origin at the
thorax, for an animal of size factor 1.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

KEYPOINTS = (
    "snout",
    "head",
    "feeler_left",
    "feeler_right",
    "thorax",
    "leg_front_left",
    "leg_front_right",
    "leg_mid_left",
    "leg_mid_right",
    "leg_hind_left",
    "leg_hind_right",
    "abdomen",
    "tail_base",
    "tail_tip",
)
KP = {name: i for i, name in enumerate(KEYPOINTS)}
LEFT_RIGHT_PAIRS = (
    ("feeler_left", "feeler_right"),
    ("leg_front_left", "leg_front_right"),
    ("leg_mid_left", "leg_mid_right"),
    ("leg_hind_left", "leg_hind_right"),
)
LEG_PAIRS = LEFT_RIGHT_PAIRS[1:]

# Spine: arc position (mm along the body axis from the thorax) of each midline point.
SPINE_S = {"snout": 22.0, "head": 15.0, "thorax": 0.0, "abdomen": -11.0, "tail_base": -22.0}
NECK_S = 9.0  # the head turns about this point
TAIL_LENGTH = 18.0  # tail_base -> tail_tip
FEELER_LENGTH = 13.0  # from the head point
FEELER_ANGLE = 0.55  # rad from the forward axis, outward
# Legs: where the leg joins the spine (arc position) and the resting foot offset from there.
LEG_ATTACH_S = {"front": 7.0, "mid": 2.0, "hind": -4.0}
LEG_FOOT = {"front": (8.0, 13.0), "mid": (0.0, 16.0), "hind": (-9.0, 15.0)}

BEHAVIOURS = ("rest", "walk", "groom", "scan", "turn", "dig")

# Rows: from; columns: to (order of BEHAVIOURS). No self-transitions: each bout is one visit.
TRANSITIONS = np.array(
    [
        # rest  walk  groom scan  turn  dig
        [0.00, 0.35, 0.25, 0.30, 0.05, 0.05],  # rest
        [0.15, 0.00, 0.10, 0.30, 0.35, 0.10],  # walk
        [0.35, 0.25, 0.00, 0.20, 0.10, 0.10],  # groom
        [0.10, 0.45, 0.15, 0.00, 0.25, 0.05],  # scan
        [0.05, 0.60, 0.05, 0.25, 0.00, 0.05],  # turn
        [0.20, 0.30, 0.25, 0.15, 0.10, 0.00],  # dig
    ]
)

# Bout durations in seconds: a family, its parameters, and the range kept (draws outside it
# are drawn again, so the distribution is truncated, not clipped).
DURATIONS = {
    "rest": {"family": "lognormal", "median": 6.0, "sigma": 0.7, "low": 1.0, "high": 60.0},
    "walk": {"family": "gamma", "mean": 4.0, "shape": 2.5, "low": 0.5, "high": 40.0},
    "groom": {"family": "gamma", "mean": 5.0, "shape": 3.0, "low": 1.0, "high": 30.0},
    "scan": {"family": "lognormal", "median": 2.0, "sigma": 0.5, "low": 0.6, "high": 15.0},
    "turn": {"family": "uniform", "low": 0.3, "high": 1.0},
    "dig": {"family": "gamma", "mean": 3.0, "shape": 3.0, "low": 0.8, "high": 20.0},
}

# Group "B" grooms more often and walks more slowly: a known group effect for the bench.
GROUP_EFFECT = {"B": {"transition_weight": {"groom": 2.0}, "speed_factor": 0.85}}


@dataclass(frozen=True)
class Traits:
    """Individual differences of one animal (fixed across its sessions)."""

    size: float  # body size factor, 0.8-1.2
    walk_speed_mm_s: float  # mean walking speed
    stride_mm: float  # stride length at the mean speed
    groom_hz: float  # stroke rate, 3-8 Hz
    scan_hz: float  # head sweep rate
    dig_hz: float  # scrape rate

    def as_dict(self) -> dict:
        return {k: round(float(v), 6) for k, v in asdict(self).items()}


def draw_traits(rng: np.random.Generator, group: str) -> Traits:
    """Draw one animal: size +-20 %, speed and rhythm factors, the group's speed effect."""
    size = rng.uniform(0.8, 1.2)
    speed_factor = float(np.clip(rng.lognormal(0.0, 0.15), 0.7, 1.4))
    speed_factor *= GROUP_EFFECT.get(group, {}).get("speed_factor", 1.0)
    rhythm = rng.uniform(0.8, 1.25)
    return Traits(
        size=size,
        walk_speed_mm_s=45.0 * size * speed_factor,
        stride_mm=20.0 * size * rng.uniform(0.9, 1.1),
        groom_hz=5.0 * rhythm,
        scan_hz=2.0 * rhythm,
        dig_hz=3.0 * rhythm,
    )


def transition_matrix(group: str) -> np.ndarray:
    """The group's transition matrix (rows sum to 1)."""
    m = TRANSITIONS.copy()
    for name, weight in GROUP_EFFECT.get(group, {}).get("transition_weight", {}).items():
        m[:, BEHAVIOURS.index(name)] *= weight
    return m / m.sum(axis=1, keepdims=True)
