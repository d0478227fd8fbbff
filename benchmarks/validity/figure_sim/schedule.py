"""The order and timing of bouts, the blend between them, and the path across the room.

A take is a list of bouts. The first eight are the eight movements in a random order (every
take holds each of them), then movements are drawn at random, never the same twice in a row.
Bout lengths are log-normal around 7 s, kept within 3-20 s. Each bout starts with a
transition of 0.3-1 s in which the previous movement's angles fade into the new one's
(raised cosine); the truth gives transition frames the label of the bout they lead into.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from benchmarks.validity.figure_sim.movements import MOVEMENTS

BOUT_S = (3.0, 20.0)
TRANSITION_S = (0.3, 1.0)
ROOM_M = (9.0, 7.0)  # the room's floor: x from 0 to 9 m, y from 0 to 7 m


@dataclass(frozen=True)
class Bouts:
    """Bouts of one take: movement code, first frame, transition frames, and per-bout values."""

    code: np.ndarray  # (bouts,) index into MOVEMENTS
    start: np.ndarray  # (bouts,) first frame
    ramp: np.ndarray  # (bouts,) transition length in frames (0 for the first bout)
    pace: np.ndarray  # (bouts,) cadence factor of the bout
    vigour: np.ndarray  # (bouts,) amplitude factor of the bout
    style: np.ndarray  # (bouts,) in [0, 1]: kick height, squat vs bend, waves per arm, ...
    n_frames: int


def draw_bouts(rng: np.random.Generator, duration_s: float, fps: float) -> Bouts:
    """Bouts filling ``duration_s`` seconds (the last one is cut at the end of the take)."""
    k = len(MOVEMENTS)
    codes = list(rng.permutation(k))
    lengths = list(np.clip(rng.lognormal(np.log(7.0), 0.55, size=k), *BOUT_S))
    # Every movement appears: shorten the first eight if they would not fit.
    room = duration_s - BOUT_S[0]
    if sum(lengths) > room:
        spare = np.array(lengths) - BOUT_S[0]
        need = sum(lengths) - room
        lengths = list(np.array(lengths) - spare * min(1.0, need / spare.sum()))
    while sum(lengths) < duration_s:
        nxt = int(rng.integers(k - 1))
        codes.append(nxt + (nxt >= codes[-1]))
        lengths.append(float(np.clip(rng.lognormal(np.log(7.0), 0.55), *BOUT_S)))
    bounds = np.rint(np.cumsum([0.0, *lengths]) * fps).astype(np.int64)
    n_frames = round(duration_s * fps)
    start = bounds[:-1]
    keep = start < n_frames - int(fps)  # a last bout of under a second is dropped
    n = int(keep.sum())
    ramp = np.rint(rng.uniform(*TRANSITION_S, size=n) * fps).astype(np.int64)
    ramp[0] = 0
    return Bouts(
        code=np.asarray(codes[:n]),
        start=start[keep],
        ramp=ramp,
        pace=rng.uniform(0.9, 1.1, size=n),
        vigour=rng.uniform(0.8, 1.2, size=n),
        style=rng.uniform(0, 1, size=n),
        n_frames=n_frames,
    )


def bout_of_frame(bouts: Bouts) -> tuple[np.ndarray, np.ndarray]:
    """Per frame: the bout it belongs to and the share (0-1) of that bout in the blend."""
    frame = np.arange(bouts.n_frames)
    index = np.searchsorted(bouts.start, frame, side="right") - 1
    into = frame - bouts.start[index]
    ramp = bouts.ramp[index]
    progress = np.where(ramp > 0, np.clip((into + 0.5) / np.maximum(ramp, 1), 0, 1), 1.0)
    return index, 0.5 - 0.5 * np.cos(np.pi * progress)


def blend(bouts: Bouts, values: np.ndarray, index: np.ndarray, share: np.ndarray) -> np.ndarray:
    """Per-frame value of a per-bout quantity, crossfaded over each transition."""
    before = values[np.maximum(index - 1, 0)]
    return share * values[index] + (1 - share) * before


def movement_weights(bouts: Bouts, index: np.ndarray, share: np.ndarray) -> np.ndarray:
    """(frames, movements) weights summing to 1: the current bout's movement and, during a
    transition, the previous one's."""
    w = np.zeros((bouts.n_frames, len(MOVEMENTS)))
    rows = np.arange(bouts.n_frames)
    w[rows, bouts.code[index]] += share
    w[rows, bouts.code[np.maximum(index - 1, 0)]] += 1 - share
    return w


def labels(bouts: Bouts) -> np.ndarray:
    """Per-frame truth: the movement of the bout each frame belongs to (transitions
    included, labelled with the bout they lead into)."""
    index, _ = bout_of_frame(bouts)
    return bouts.code[index]


def slow_wobble(rng: np.random.Generator, t: np.ndarray, periods_s=(7.0, 30.0), n=3):
    """Sum of ``n`` sinusoids with random periods within ``periods_s``, scaled to unit sd."""
    period = rng.uniform(*periods_s, size=n)
    phase = rng.uniform(0, 2 * np.pi, size=n)
    wave = np.sin(2 * np.pi * t[:, None] / period + phase).sum(1)
    return wave / np.sqrt(n / 2)


def path(
    rng: np.random.Generator,
    bouts: Bouts,
    speed: np.ndarray,
    turn_rate: np.ndarray,
    bend: np.ndarray,
    fps: float,
    start_xy: np.ndarray,
    start_heading: float,
    drift: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Heading (frames,) and floor position (frames, 2) of the figure.

    Per bout: ``speed`` (m/s) moves the figure along its heading, ``bend`` (rad/s) curves its
    path, wobbling so that the curve tightens, loosens and sometimes reverses, and
    ``turn_rate`` (rad/s) turns it on the spot. ``drift`` (frames, 2; m/s) is added to every
    step. A travelling figure is steered back towards the middle of the room as it nears a
    wall (more the nearer it is), and the drift is pulled gently towards the middle, so the
    figure stays within a room of about :data:`ROOM_M`. Steering is decided every quarter
    second from the position reached; the frames in between are integrated at once.
    """
    index, share = bout_of_frame(bouts)
    n = bouts.n_frames
    t = np.arange(n) / fps
    v = blend(bouts, speed, index, share)
    curve = blend(bouts, bend, index, share) * (1 + 0.6 * slow_wobble(rng, t, (4.0, 12.0)))
    rate = blend(bouts, turn_rate, index, share) + curve
    heading = np.empty(n)
    xy = np.empty((n, 2))
    here, facing = np.asarray(start_xy, dtype=float), float(start_heading)
    centre = np.array(ROOM_M) / 2
    reach = 0.35 * min(ROOM_M)  # distance from the middle at which steering is at its full
    chunk = max(1, round(0.25 * fps))
    for first in range(0, n, chunk):
        sl = slice(first, min(first + chunk, n))
        to_mid = centre - here
        off = np.arctan2(to_mid[1], to_mid[0]) - facing
        # Turn towards the middle: by the sine of the angle off it when facing it roughly,
        # fully (on the nearer side) when facing away.
        toward = np.sin(off) if np.cos(off) > 0 else (1.0 if np.sin(off) >= 0 else -1.0)
        urge = min(1.0, (np.hypot(*to_mid) / reach) ** 2)
        steer = 2.5 * v[sl] * urge * toward
        h = facing + np.cumsum(rate[sl] + steer) / fps
        pull = 0.01 * to_mid
        step = np.stack([np.cos(h), np.sin(h)], 1) * (v[sl] / fps)[:, None]
        p = here + np.cumsum(step + (drift[sl] + pull) / fps, 0)
        heading[sl], xy[sl] = h, p
        here, facing = p[-1], float(h[-1])
    return heading, xy
