"""The figure's body: segment lengths drawn per subject, and markers from joint angles.

Coordinates are metres in a room frame: x and y on the floor, z up. The figure's own frame
at each frame has ``forward`` (the heading on the floor), ``left`` and ``up``. Angles are
degrees. Everything works on whole arrays of frames at once.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

MARKERS = [
    "head",
    "neck",
    "shoulder_left",
    "shoulder_right",
    "elbow_left",
    "elbow_right",
    "wrist_left",
    "wrist_right",
    "pelvis",
    "hip_left",
    "hip_right",
    "knee_left",
    "knee_right",
    "ankle_left",
    "ankle_right",
    "toe_left",
    "toe_right",
]
SIDES = {"left": 1.0, "right": -1.0}
# Left/right marker pairs a tracker can exchange.
SWAPPABLE = [("elbow", 2.0), ("wrist", 3.0), ("knee", 2.0), ("ankle", 2.0), ("toe", 3.0)]

# Joint-angle channels (degrees) plus the flight height (metres at 1.75 m).
SIDED = [
    "hip_flex",
    "hip_out",
    "knee_bend",
    "foot_pitch",
    "arm_forward",
    "arm_out",
    "elbow_bend",
    "elbow_side",
]
CHANNELS = [f"{c}_{s}" for c in SIDED for s in SIDES] + [
    "trunk_pitch",
    "trunk_roll",
    "head_pitch",
    "flight",
]
NEUTRAL = {
    **{f"{c}_{s}": 0.0 for c in SIDED for s in SIDES},
    **{f"knee_bend_{s}": 4.0 for s in SIDES},
    **{f"arm_out_{s}": 7.0 for s in SIDES},
    **{f"elbow_bend_{s}": 12.0 for s in SIDES},
    "trunk_pitch": 3.0,
    "trunk_roll": 0.0,
    "head_pitch": 0.0,
    "flight": 0.0,
}


@dataclass(frozen=True)
class Body:
    """Segment lengths (m) of one subject; ratios to height follow the usual anthropometric
    tables (hip joint at ~0.53 of height, shoulders at ~0.82), each scaled by its own factor."""

    height: float
    thigh: float
    shank: float
    ankle_height: float
    foot: float
    hip_half_width: float
    trunk: float
    shoulder_drop: float
    shoulder_half_width: float
    upper_arm: float
    forearm: float
    head: float
    toe_out_deg: float


def draw_body(rng: np.random.Generator, height: float) -> Body:
    """Lengths for a subject of ``height`` metres; each ratio varies by a few percent, so
    limb proportions differ between subjects of the same height."""

    def part(ratio: float, spread: float = 0.04) -> float:
        return float(height * ratio * np.exp(spread * rng.standard_normal()))

    return Body(
        height=height,
        thigh=part(0.245),
        shank=part(0.246),
        ankle_height=part(0.039, 0.02),
        foot=part(0.115),
        hip_half_width=part(0.088, 0.06),
        trunk=part(0.31, 0.03),
        shoulder_drop=part(0.03, 0.1),
        shoulder_half_width=part(0.125, 0.05),
        upper_arm=part(0.186),
        forearm=part(0.146),
        head=part(0.095, 0.05),
        toe_out_deg=float(rng.uniform(4, 14)),
    )


def _unit(v: np.ndarray) -> np.ndarray:
    return v / np.maximum(np.linalg.norm(v, axis=-1, keepdims=True), 1e-12)


def _col(a: np.ndarray) -> np.ndarray:
    return np.asarray(a, dtype=np.float64)[:, None]


def pose_markers(
    body: Body,
    angles: dict[str, np.ndarray],
    heading: np.ndarray,
    anchor: np.ndarray,
) -> np.ndarray:
    """Markers relative to the point on the floor below the figure, feet on the floor.

    ``angles`` maps every name of :data:`CHANNELS` to a (frames,) array; ``heading`` is the
    facing direction (radians); ``anchor`` in [0, 1] is how much the pelvis is kept above
    the feet that carry the weight (1 for movements in place, 0 for walking and running,
    whose feet slide under a steadily moving body instead). Returns (frames, markers, 3).
    """
    rad = {k: np.deg2rad(v) for k, v in angles.items() if k != "flight"}
    n = heading.size
    zeros = np.zeros(n)
    fwd = np.stack([np.cos(heading), np.sin(heading), zeros], 1)
    left = np.stack([-np.sin(heading), np.cos(heading), zeros], 1)
    up = np.tile([0.0, 0.0, 1.0], (n, 1))
    tp, tr = rad["trunk_pitch"], rad["trunk_roll"]
    trunk_dir = _col(np.cos(tp) * np.cos(tr)) * up + _col(np.sin(tp)) * fwd
    trunk_dir += _col(np.cos(tp) * np.sin(tr)) * left
    hp = tp + rad["head_pitch"]
    head_dir = _col(np.cos(hp) * np.cos(tr)) * up + _col(np.sin(hp)) * fwd
    side_tilted = _col(np.cos(tr)) * left - _col(np.sin(tr)) * up

    pelvis = np.zeros((n, 3))
    out: dict[str, np.ndarray] = {}
    out["pelvis"] = pelvis + 0.04 * body.height * trunk_dir - 0.05 * body.height * fwd
    neck = pelvis + body.trunk * trunk_dir
    out["neck"] = neck
    out["head"] = neck + body.head * head_dir
    contact, weight_fwd = [], []
    for side, s in SIDES.items():
        # Arm: direction of the upper arm from its forward and sideways raise (world frame,
        # so a hanging arm hangs however the trunk leans), then the elbow's bend.
        shoulder = (
            neck - body.shoulder_drop * trunk_dir + s * body.shoulder_half_width * side_tilted
        )
        af, ao = rad[f"arm_forward_{side}"], rad[f"arm_out_{side}"]
        upper = _unit(
            _col(np.sin(af) * np.cos(ao)) * fwd
            + _col(s * np.sin(ao)) * left
            - _col(np.cos(af) * np.cos(ao)) * up
        )
        elbow = shoulder + body.upper_arm * upper
        toward = fwd + _col(s * rad[f"elbow_side_{side}"]) * left + 0.2 * up
        bend_dir = _unit(toward - _col(np.sum(toward * upper, 1)) * upper)
        eb = rad[f"elbow_bend_{side}"]
        forearm = _col(np.cos(eb)) * upper + _col(np.sin(eb)) * bend_dir
        out[f"shoulder_{side}"] = shoulder
        out[f"elbow_{side}"] = elbow
        out[f"wrist_{side}"] = elbow + body.forearm * forearm
        # Leg: thigh and shank in the plane of the hip's flexion, tilted out by the abduction.
        hip = pelvis + s * body.hip_half_width * left
        hf, ho, kb = rad[f"hip_flex_{side}"], rad[f"hip_out_{side}"], rad[f"knee_bend_{side}"]
        down = -_col(np.cos(ho)) * up + _col(s * np.sin(ho)) * left
        thigh = _col(np.sin(hf)) * fwd + _col(np.cos(hf)) * down
        shank_angle = hf - kb
        shank = _col(np.sin(shank_angle)) * fwd + _col(np.cos(shank_angle)) * down
        knee = hip + body.thigh * thigh
        ankle = knee + body.shank * shank
        toe_out = np.deg2rad(body.toe_out_deg)
        foot_fwd = np.cos(toe_out) * fwd + s * np.sin(toe_out) * left
        fp = rad[f"foot_pitch_{side}"]
        along = _col(np.cos(fp)) * foot_fwd + _col(np.sin(fp)) * up
        normal = _col(np.cos(fp)) * up - _col(np.sin(fp)) * foot_fwd
        toe = ankle + body.foot * along - 0.5 * body.ankle_height * normal
        out[f"hip_{side}"] = hip
        out[f"knee_{side}"] = knee
        out[f"ankle_{side}"] = ankle
        out[f"toe_{side}"] = toe
        sole = ankle - body.ankle_height * normal
        heel_z = sole[:, 2] - 0.25 * body.foot * along[:, 2]
        tip_z = sole[:, 2] + 1.2 * body.foot * along[:, 2]
        contact.append(np.minimum(heel_z, tip_z))
        weight_fwd.append(np.sum(ankle * fwd, 1))
    contact = np.stack(contact, 1)
    lowest = contact.min(1)
    # The foot nearer the floor carries the weight; the pelvis stays above it when anchored.
    w = np.exp(-(contact - lowest[:, None]) / (0.02 * body.height))
    w /= w.sum(1, keepdims=True)
    shift_fwd = -anchor * np.sum(w * np.stack(weight_fwd, 1), 1)
    lift = -lowest + angles["flight"] * body.height / 1.75
    markers = np.stack([out[m] for m in MARKERS], 1)
    markers += (_col(shift_fwd) * fwd)[:, None, :]
    markers[..., 2] += lift[:, None]
    return markers
