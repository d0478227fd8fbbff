"""One subject's continuous take: who the subject is, what they do, and the recorded markers."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from benchmarks.validity.figure_sim.body import (
    CHANNELS,
    MARKERS,
    NEUTRAL,
    Body,
    draw_body,
    pose_markers,
)
from benchmarks.validity.figure_sim.movements import CYCLE_S, MOVEMENTS, PATTERNS, STRIDE_PER_HEIGHT
from benchmarks.validity.figure_sim.recording import record
from benchmarks.validity.figure_sim.schedule import (
    ROOM_M,
    Bouts,
    blend,
    bout_of_frame,
    draw_bouts,
    labels,
    movement_weights,
    path,
    slow_wobble,
)

FPS_CHOICES = (60.0, 100.0, 120.0)
HEIGHT_M = (1.5, 1.95)
DURATION_S = (120.0, 180.0)


@dataclass(frozen=True)
class Subject:
    """Traits of one subject: body, frame rate of their take, cadence, vigour, noise."""

    name: str
    body: Body
    fps: float
    cadence: float  # cycle rate factor (taller subjects are a little slower)
    vigour: float  # amplitude factor
    noise_mm: float
    duration_s: float


def draw_subject(rng: np.random.Generator, name: str, duration_s: float | None = None) -> Subject:
    height = float(rng.uniform(*HEIGHT_M))
    return Subject(
        name=name,
        body=draw_body(rng, height),
        fps=float(rng.choice(FPS_CHOICES)),
        cadence=float(np.sqrt(1.75 / height) * rng.uniform(0.88, 1.12)),
        vigour=float(rng.uniform(0.75, 1.25)),
        noise_mm=float(rng.uniform(1.5, 4.0)),
        duration_s=float(duration_s if duration_s is not None else rng.uniform(*DURATION_S)),
    )


@dataclass
class Take:
    """A recorded take: coordinates (frames, markers, 3) in mm with NaN where lost,
    confidence (frames, markers), per-frame truth (movement codes) and facts about it."""

    subject: Subject
    coords: np.ndarray
    confidence: np.ndarray
    truth: np.ndarray
    bouts: Bouts
    facts: dict = field(default_factory=dict)


def joint_angles(rng, subject: Subject, bouts: Bouts) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Blended joint-angle channels and the (frames, movements) weights of one take."""
    n, fps = bouts.n_frames, subject.fps
    t = np.arange(n) / fps
    index, share = bout_of_frame(bouts)
    weights = movement_weights(bouts, index, share)
    pace = blend(bouts, bouts.pace, index, share)
    vigour = subject.vigour * blend(bouts, bouts.vigour, index, share)
    style = blend(bouts, bouts.style, index, share)
    angles = {c: np.zeros(n) for c in CHANNELS}
    for m, name in enumerate(MOVEMENTS):
        rate = subject.cadence * pace * (1 + 0.04 * slow_wobble(rng, t)) / CYCLE_S[name]
        phase = rng.uniform(0, 2 * np.pi) + 2 * np.pi * np.cumsum(rate) / fps
        moved = PATTERNS[name](phase, vigour, style)
        w = weights[:, m]
        for c in CHANNELS:
            angles[c] += w * moved.get(c, NEUTRAL[c])
    # Everyone sways a little and breathes, whatever they do.
    angles["trunk_pitch"] += 0.8 * slow_wobble(rng, t, (3.0, 9.0))
    angles["trunk_roll"] += 0.6 * slow_wobble(rng, t, (3.0, 9.0))
    angles["head_pitch"] += 3.0 * slow_wobble(rng, t, (2.0, 8.0))
    return angles, weights


def simulate_take(rng: np.random.Generator, subject: Subject) -> Take:
    """Simulate and record one subject's take (vectorised over frames; one loop step per
    movement type, per bout of the path and per marker of the recording)."""
    fps = subject.fps
    bouts = draw_bouts(rng, subject.duration_s, fps)
    angles, weights = joint_angles(rng, subject, bouts)
    walk, run, turn = (MOVEMENTS.index(m) for m in ("walking", "running", "turning"))
    h = subject.body.height
    n_bouts = len(bouts.code)
    speed = np.zeros(n_bouts)
    bend = np.zeros(n_bouts)
    turn_rate = np.zeros(n_bouts)
    for code, r_range in ((walk, (1.2, 2.5)), (run, (2.0, 3.2))):
        sel = bouts.code == code
        cycles_per_s = subject.cadence * bouts.pace[sel] / CYCLE_S[MOVEMENTS[code]]
        stride = (
            STRIDE_PER_HEIGHT[MOVEMENTS[code]] * h * np.sqrt(subject.vigour * bouts.vigour[sel])
        )
        speed[sel] = stride * cycles_per_s
        # A curve of 1.2-3.2 m radius, bending left or right.
        side = rng.choice([-1.0, 1.0], size=sel.sum())
        bend[sel] = side * speed[sel] / rng.uniform(*r_range, size=sel.sum())
    sel = bouts.code == turn
    turn_rate[sel] = rng.choice([-1.0, 1.0], size=sel.sum()) * rng.uniform(0.8, 1.6, sel.sum())
    t = np.arange(bouts.n_frames) / fps
    # A slow drift across the room: 1-3 cm/s in a slowly wandering direction.
    drift_dir = rng.uniform(0, 2 * np.pi) + 0.8 * slow_wobble(rng, t, (20.0, 60.0))
    drift = rng.uniform(0.01, 0.03) * np.stack([np.cos(drift_dir), np.sin(drift_dir)], 1)
    start = np.array(ROOM_M) * rng.uniform(0.35, 0.65, size=2)
    heading, xy = path(
        rng, bouts, speed, turn_rate, bend, fps, start, rng.uniform(0, 2 * np.pi), drift
    )
    anchor = 1.0 - weights[:, walk] - weights[:, run]
    markers = pose_markers(subject.body, angles, heading, anchor)
    markers[..., :2] += xy[:, None, :]
    coords, confidence, facts = record(rng, markers * 1000.0, fps, subject.noise_mm)
    facts.update(
        path_extent_m=[float(np.ptp(xy[:, 0])), float(np.ptp(xy[:, 1]))],
        markers=len(MARKERS),
    )
    return Take(subject, coords, confidence, labels(bouts), bouts, facts)
