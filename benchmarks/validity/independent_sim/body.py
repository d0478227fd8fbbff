"""From control signals to keypoint positions: the body-frame posture, the path in the arena
and the visibility of each point (how exposed it is to the camera)."""

from __future__ import annotations

import numpy as np

from .animal import (
    BEHAVIOURS,
    FEELER_ANGLE,
    FEELER_LENGTH,
    KEYPOINTS,
    KP,
    LEG_ATTACH_S,
    LEG_FOOT,
    NECK_S,
    SPINE_S,
    TAIL_LENGTH,
    Traits,
)
from .bouts import Bouts
from .drivers import DUTY


def _arc(s: np.ndarray, curvature: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Point at arc length ``s`` along a spine bent with constant ``curvature`` through the
    thorax (tangent along +x there): x, y and the tangent angle, each (n_frames,)."""
    a = curvature * s
    x = s * np.sinc(a / np.pi)
    y = s * (a / 2.0) * np.sinc(a / (2.0 * np.pi)) ** 2
    return x, y, a


def _rot(x, y, angle):
    c, s = np.cos(angle), np.sin(angle)
    return c * x - s * y, s * x + c * y


def _gait(phase: np.ndarray, offset: float, excursion: np.ndarray):
    """Foot displacement along and across the body for one leg: backward in stance, forward
    in swing (with a small outward arc)."""
    u = np.mod(phase / (2 * np.pi) + offset, 1.0)
    stance = u < DUTY
    swing_u = (u - DUTY) / (1 - DUTY)
    dx = np.where(stance, 0.5 - u / DUTY, -0.5 + swing_u) * excursion
    dy = np.where(stance, 0.0, 0.15 * np.sin(np.pi * swing_u)) * excursion
    return dx, dy


def posture(d: dict) -> np.ndarray:
    """Body-frame keypoints (n_frames, n_keypoints, 2) in mm for an animal of size 1."""
    n = d["speed"].size
    k = d["curvature"]
    out = np.empty((n, len(KEYPOINTS), 2))
    for name in ("thorax", "abdomen", "tail_base"):
        s = SPINE_S[name] * (d["length"] if SPINE_S[name] < 0 else 1.0)
        out[:, KP[name], 0], out[:, KP[name], 1], a = _arc(s, k)
    # Tail: a stiff segment behind tail_base, swaying about it.
    a_tail = k * SPINE_S["tail_base"] * d["length"] + d["tail_sway"]
    out[:, KP["tail_tip"]] = out[:, KP["tail_base"]] - TAIL_LENGTH * np.stack(
        [np.cos(a_tail), np.sin(a_tail)], axis=1
    )
    # Head: turns about the neck and extends/retracts along its own axis.
    nx, ny, a_neck = _arc(np.full(n, NECK_S), k)
    h = a_neck + d["head_yaw"]
    for name in ("head", "snout"):
        hx, hy = _rot(SPINE_S[name] - NECK_S + d["head_ext"], 0.0, h)
        out[:, KP[name], 0], out[:, KP[name], 1] = nx + hx, ny + hy
    for side, sign in (("left", 1.0), ("right", -1.0)):
        stroke = d["stroke"] * (d["groom_side"] == sign)
        ang = h + sign * (FEELER_ANGLE + d["feeler_fold"] + 0.7 * stroke)
        out[:, KP[f"feeler_{side}"]] = out[:, KP["head"]] + FEELER_LENGTH * np.stack(
            [np.cos(ang), np.sin(ang)], axis=1
        )
    # Legs: tripod gait (front-left, mid-right, hind-left together), grooming, digging.
    tripod = {("front", 1.0): 0.0, ("mid", -1.0): 0.0, ("hind", 1.0): 0.0}
    for row, s_att in LEG_ATTACH_S.items():
        s_att = s_att * (d["length"] if s_att < 0 else 1.0)
        ax, ay, a = _arc(np.broadcast_to(s_att, (n,)).astype(float), k)
        for side, sign in (("left", 1.0), ("right", -1.0)):
            fx0, fy0 = LEG_FOOT[row]
            gx, gy = _gait(d["gait_phase"], tripod.get((row, sign), 0.5), d["excursion"])
            fx = fx0 + gx
            fy = fy0 * d["spread"] + gy
            if row == "front":
                stroke = d["stroke"] * (d["groom_side"] == sign)
                fx = fx + 4.0 * stroke  # the foot reaches the head and feeler base
                fy = fy - 10.0 * stroke
                scrape = (1 - np.cos(d["dig_phase"] + (0.0 if sign > 0 else np.pi))) / 2
                fx = fx - 12.0 * scrape * d["env_dig"]
                fy = fy - 2.0 * scrape * d["env_dig"]
            if row == "hind":
                fy = fy * (1.0 + 0.15 * d["env_dig"])
            rx, ry = _rot(fx, sign * fy, a)
            out[:, KP[f"leg_{row}_{side}"], 0] = ax + rx
            out[:, KP[f"leg_{row}_{side}"], 1] = ay + ry
    return out


def path(
    bouts: Bouts, d: dict, traits: Traits, arena_radius_mm: float, start: np.ndarray, heading0
) -> tuple[np.ndarray, np.ndarray]:
    """Thorax position (n_frames, 2) in mm from the arena centre and heading (n_frames,) in rad.

    Integrated bout by bout. At the start of a walking bout the animal veers (an extra turn
    spread over its first 0.8 s) by the smallest angle that keeps the planned path off the
    wall; if none does, positions are pushed back inside (it slides along the wall).
    """
    fps, n = bouts.fps, d["speed"].size
    omega = d["omega"].copy()
    r_max = arena_radius_mm - 30.0 * traits.size
    pos, heading = np.empty((n, 2)), np.empty(n)
    p, th = np.asarray(start, dtype=float), float(heading0)
    veers = np.deg2rad(np.array([0, 30, -30, 60, -60, 90, -90, 120, -120, 150, -150, 180]))
    walk = bouts.states == BEHAVIOURS.index("walk")
    for a, b, is_walk in zip(bouts.start, bouts.stop, walk, strict=True):
        seg = slice(int(a), int(b))
        m = b - a
        if is_walk:
            k = max(1, min(m // 2, round(0.8 * fps)))
            dens = np.zeros(m)
            dens[:k] = (1 - np.cos(2 * np.pi * np.arange(k) / k)) / k * fps
            th_c = th + np.cumsum(omega[seg] + veers[:, None] * dens, axis=1) / fps
            step = d["speed"][seg] / fps
            px = p[0] + np.cumsum(step * np.cos(th_c), axis=1)
            py = p[1] + np.cumsum(step * np.sin(th_c), axis=1)
            worst = np.hypot(px, py).max(axis=1)
            ok = np.flatnonzero(worst < r_max)
            pick = int(ok[0]) if ok.size else int(np.argmin(worst))
            omega[seg] += veers[pick] * dens
        th_seg = th + np.cumsum(omega[seg]) / fps
        xy = p + np.cumsum(d["speed"][seg, None] / fps * np.c_[np.cos(th_seg), np.sin(th_seg)], 0)
        r = np.hypot(xy[:, 0], xy[:, 1])
        xy *= np.minimum(1.0, r_max / np.maximum(r, 1e-9))[:, None]
        pos[seg], heading[seg] = xy, th_seg
        p, th = xy[-1], th_seg[-1]
    return pos, heading


def visibility(d: dict) -> np.ndarray:
    """How exposed each point is, (n_frames, n_keypoints) in [0, 1]: 1 is fully in view."""
    n = d["speed"].size
    vis = np.ones((n, len(KEYPOINTS)))
    for side, sign in (("left", 1.0), ("right", -1.0)):
        stroke = d["stroke"] * (d["groom_side"] == sign)
        vis[:, KP[f"leg_front_{side}"]] -= 0.6 * stroke + 0.3 * d["env_dig"]
        vis[:, KP[f"feeler_{side}"]] -= 0.4 * stroke
        vis[:, KP[f"leg_mid_{side}"]] -= 0.6 * d["env_rest"]  # tucked under the body
    legs = [KP[k] for k in KEYPOINTS if k.startswith("leg_")]
    vis[:, legs] -= 0.1 * d["env_walk"][:, None]  # motion blur
    vis[:, KP["tail_tip"]] -= 0.4 * d["env_turn"]
    return np.clip(vis, 0.0, 1.0)
