"""Joint-angle patterns of the eight movement types, as functions of a cycle phase.

Each pattern takes the phase (radians, growing by 2 pi per cycle), the vigour (1 = typical;
it scales amplitudes) and a per-bout style value in [0, 1], all (frames,) arrays, and returns
the channels it moves (the others stay at :data:`body.NEUTRAL`). The same pattern is
evaluated on every frame of a take; the schedule weights them in and out.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from benchmarks.validity.figure_sim.body import NEUTRAL

Pattern = Callable[[np.ndarray, np.ndarray, np.ndarray], dict[str, np.ndarray]]

MOVEMENTS = [
    "standing",
    "walking",
    "running",
    "jumping",
    "kicking",
    "turning",
    "waving",
    "squatting",
]
# Typical cycle length (s) of each movement at 1.75 m and average cadence; standing's
# "cycle" is its slow postural sway.
CYCLE_S = {
    "standing": 4.0,
    "walking": 1.1,
    "running": 0.7,
    "jumping": 0.6,
    "kicking": 1.0,  # one kick; left and right alternate, so a full cycle is two kicks
    "turning": 0.7,
    "waving": 0.5,
    "squatting": 1.5,
}
# Ground speed (m/s per m of height per cycle/s) of the movements that travel.
STRIDE_PER_HEIGHT = {"walking": 0.78, "running": 1.05}


def _pos(a: np.ndarray) -> np.ndarray:
    return np.maximum(a, 0.0)


def standing(ph, g, style):
    return {
        "trunk_pitch": NEUTRAL["trunk_pitch"] + 1.5 * np.sin(ph),
        "trunk_roll": 1.2 * np.sin(0.7 * ph + 1.0),
        "head_pitch": 4.0 * np.sin(0.4 * ph) + 6 * style - 3,
        **{f"hip_out_{s}": 2.0 + 1.0 * np.sin(0.7 * ph + 1.0) * k for s, k in SIGN.items()},
    }


def walking(ph, g, style):
    out = {"trunk_pitch": 4.0 + 2 * style, "trunk_roll": 2.0 * np.sin(ph)}
    for s, off in OFFSET.items():
        p = ph + off
        out[f"hip_flex_{s}"] = 4 + 22 * g * np.sin(p)
        out[f"knee_bend_{s}"] = 6 + 8 * _pos(np.sin(p - 1.2)) + 52 * g * _pos(np.cos(p - 0.5)) ** 3
        out[f"foot_pitch_{s}"] = -22 * g * _pos(np.cos(p + 0.7)) ** 6 + 8 * _pos(np.sin(p)) ** 2
        out[f"arm_forward_{s}"] = -18 * g * np.sin(p) + 3
        out[f"elbow_bend_{s}"] = 18 + 14 * g * _pos(-np.sin(p))
        out[f"arm_out_{s}"] = 8.0 + 0 * p
    return out


def running(ph, g, style):
    out = {
        "trunk_pitch": 9.0 + 4 * style,
        "trunk_roll": 3.0 * np.sin(ph),
        "flight": 0.05 * g * _pos(np.sin(2 * ph - 0.6)) ** 1.5,
    }
    for s, off in OFFSET.items():
        p = ph + off
        out[f"hip_flex_{s}"] = 12 + 36 * g * np.sin(p)
        out[f"knee_bend_{s}"] = 18 + 90 * g * _pos(np.cos(p - 0.6)) ** 2
        out[f"foot_pitch_{s}"] = -30 * g * _pos(np.cos(p + 0.6)) ** 4 + 10 * _pos(np.sin(p))
        out[f"arm_forward_{s}"] = -38 * g * np.sin(p) + 10
        out[f"elbow_bend_{s}"] = 85 + 10 * np.sin(p)
        out[f"arm_out_{s}"] = 12.0 + 0 * p
    return out


def jumping(ph, g, style):
    air = _pos(np.sin(ph))
    crouch = _pos(-np.sin(ph))
    out = {
        "trunk_pitch": 4 + 18 * g * crouch,
        "flight": (0.12 + 0.1 * style) * g * air**1.3,
        "head_pitch": -8 * crouch,
    }
    for s in SIGN:
        out[f"hip_flex_{s}"] = 40 * g * crouch + 5 * air
        out[f"knee_bend_{s}"] = 8 + 75 * g * crouch
        out[f"foot_pitch_{s}"] = -35 * g * air
        out[f"hip_out_{s}"] = 4 + 3 * air
        # Arms swing back in the crouch and up on the way up.
        out[f"arm_forward_{s}"] = -25 * crouch + 70 * g * _pos(np.sin(ph + 0.5))
        out[f"elbow_bend_{s}"] = 20 + 15 * air
    return out


def kicking(ph, g, style):
    """One kick per cycle, alternating legs: even cycles the left leg, odd the right."""
    local = np.mod(ph, 2 * np.pi)
    lift = 0.5 - 0.5 * np.cos(local)  # 0 at the start and end of a kick, 1 at its top
    snap = lift**1.5
    left_turn = (np.floor(ph / (2 * np.pi)) % 2) == 0
    height = 55 + 30 * style
    out = {"trunk_pitch": 2 - 12 * snap * g, "head_pitch": 5 * snap}
    for s, mine in (("left", left_turn), ("right", ~left_turn)):
        m = mine.astype(float)
        out[f"hip_flex_{s}"] = m * height * g * snap
        out[f"knee_bend_{s}"] = 6 + m * 260 * g * lift * (1 - lift) ** 1.5 + (1 - m) * 10 * snap
        out[f"foot_pitch_{s}"] = m * (-25 * snap) + 0 * ph
        out[f"arm_out_{s}"] = 18 + 25 * snap * g
        out[f"arm_forward_{s}"] = -10 * m * snap + 20 * (1 - m) * snap
        out[f"elbow_bend_{s}"] = 30 + 20 * snap
    return out


def turning(ph, g, style):
    out = {"trunk_pitch": 4.0 + 0 * ph, "trunk_roll": 1.5 * np.sin(ph)}
    for s, off in OFFSET.items():
        step = _pos(np.sin(ph + off))
        out[f"hip_flex_{s}"] = 12 * g * step
        out[f"knee_bend_{s}"] = 6 + 28 * g * step
        out[f"hip_out_{s}"] = 3 + 6 * g * step
        out[f"foot_pitch_{s}"] = -6 * step
        out[f"arm_out_{s}"] = 14 + 4 * np.sin(ph + off)
        out[f"elbow_bend_{s}"] = 25 + 0 * ph
    return out


def waving(ph, g, style):
    """One arm raised and waving side to side; the arm changes every 3-6 waves (``style``)."""
    waves_per_arm = 3 + np.round(3 * style)
    # Smoothed square wave: 1 while the left arm waves, 0 while the right does.
    left_share = 0.5 + 0.5 * np.clip(3 * np.sin(ph / (2 * waves_per_arm)), -1, 1)
    out = {"trunk_roll": -4 * (2 * left_share - 1), "head_pitch": -10.0 + 0 * ph}
    for s, share in (("left", left_share), ("right", 1 - left_share)):
        wave = np.sin(ph)
        out[f"arm_out_{s}"] = 8 + share * (135 + 10 * g)
        out[f"arm_forward_{s}"] = share * 15 + 0 * ph
        out[f"elbow_bend_{s}"] = 12 + share * (35 + 28 * g * wave)
        out[f"elbow_side_{s}"] = share * (60 * wave)
    return out


def squatting(ph, g, style):
    """Repeated squats; ``style`` moves them towards bending down with straighter legs."""
    depth = (0.5 - 0.5 * np.cos(ph)) * np.clip(g, 0.6, 1.3)
    out = {
        "trunk_pitch": 4 + depth * (30 * (1 - style) + 80 * style),
        "head_pitch": -depth * 15,
    }
    for s in SIGN:
        out[f"hip_flex_{s}"] = depth * (95 * (1 - style) + 55 * style)
        out[f"knee_bend_{s}"] = 4 + depth * (115 * (1 - style) + 18 * style)
        out[f"hip_out_{s}"] = 4 + 8 * depth * (1 - style)
        out[f"arm_forward_{s}"] = depth * (80 * (1 - style) + 10 * style)
        out[f"elbow_bend_{s}"] = 12 + 0 * ph
    return out


SIGN = {"left": 1.0, "right": -1.0}
OFFSET = {"left": 0.0, "right": np.pi}
PATTERNS: dict[str, Pattern] = {
    "standing": standing,
    "walking": walking,
    "running": running,
    "jumping": jumping,
    "kicking": kicking,
    "turning": turning,
    "waving": waving,
    "squatting": squatting,
}
