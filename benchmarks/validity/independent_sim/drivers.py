"""Per-frame control signals of the body, built behaviour by behaviour from the bouts.

Every signal is a numpy array over frames. Each behaviour's contribution is multiplied by a
smooth envelope that is 0 at its bout's edges, so the posture is continuous across bouts.
Lengths are in millimetres of an animal of size 1 (the body scales them later); speeds are
world mm/s.
"""

from __future__ import annotations

import numpy as np
from scipy.ndimage import gaussian_filter1d

from .animal import BEHAVIOURS, Traits
from .bouts import Bouts

DUTY = 0.6  # stance share of a step cycle in the walking gait


def smooth_noise(rng: np.random.Generator, n: int, fps: float, timescale_s: float) -> np.ndarray:
    """Gaussian-filtered white noise with unit standard deviation, shape (n,)."""
    w = gaussian_filter1d(rng.standard_normal(n), timescale_s * fps, mode="wrap")
    return w / max(float(w.std()), 1e-12)


def envelope(t_in: np.ndarray, t_left: np.ndarray, ramp: np.ndarray) -> np.ndarray:
    """Smoothstep rise over ``ramp`` seconds after a bout starts and fall before it ends."""
    x = np.clip(np.minimum(t_in, t_left) / ramp, 0.0, 1.0)
    return x * x * (3.0 - 2.0 * x)


def _groom_blocks(rng, bouts: Bouts, traits: Traits):
    """Side (+1 left, -1 right), time since the side block began, and stroke rate per frame.

    Inside one grooming bout the animal strokes 2-6 times with one front leg, then switches
    to the other side; each block is a whole number of strokes.
    """
    n = bouts.labels.size
    side, tau, hz = np.zeros(n), np.zeros(n), np.full(n, traits.groom_hz)
    g = BEHAVIOURS.index("groom")
    for a, b in zip(bouts.start[bouts.states == g], bouts.stop[bouts.states == g], strict=True):
        s, i = float(rng.choice([-1.0, 1.0])), int(a)
        while i < b:
            f = traits.groom_hz * rng.uniform(0.9, 1.1)
            j = min(int(b), i + max(1, round(int(rng.integers(2, 7)) / f * bouts.fps)))
            side[i:j], tau[i:j], hz[i:j] = s, np.arange(j - i) / bouts.fps, f
            s, i = -s, j
    return side, tau, hz


def build_drivers(rng: np.random.Generator, bouts: Bouts, traits: Traits) -> dict:
    """All control signals of one session; a dict of (n_frames,) arrays (see the keys)."""
    fps, n = bouts.fps, bouts.labels.size
    index, t_in, t_left = bouts.per_frame()
    dur = ((bouts.stop - bouts.start) / fps)[index]
    env = envelope(t_in, t_left, np.minimum(0.15, dur / 3.0))
    on = {b: (bouts.labels == k).astype(float) for k, b in enumerate(BEHAVIOURS)}
    e = {b: env * on[b] for b in BEHAVIOURS}
    e["walk"] = envelope(t_in, t_left, np.minimum(0.3, dur / 3.0)) * on["walk"]
    n_b = bouts.states.size

    # Locomotion: speed wanders around the animal's mean; stride lengthens with speed.
    v_walk = traits.walk_speed_mm_s * np.exp(0.25 * smooth_noise(rng, n, fps, 1.0))
    stride = traits.stride_mm * (0.7 + 0.3 * v_walk / traits.walk_speed_mm_s)
    step_hz = np.where(on["walk"] > 0, v_walk / stride, 0.0) + 6.0 * on["turn"]
    gait_phase = 2 * np.pi * np.cumsum(step_hz) / fps
    excursion = (v_walk * DUTY / np.maximum(step_hz, 1e-9)) / traits.size * e["walk"]
    excursion += 4.0 * e["turn"]
    speed = v_walk * e["walk"] + 8.0 * traits.size * e["turn"]
    omega = 0.7 * smooth_noise(rng, n, fps, 1.5) * e["walk"]

    # Fast turn: 90-180 degrees, raised-cosine angular speed whose sum over the bout is the angle.
    angle = rng.uniform(np.pi / 2, np.pi, n_b) * rng.choice([-1.0, 1.0], n_b)
    u = t_in / dur
    bump = (1.0 - np.cos(2 * np.pi * u)) * on["turn"]
    omega += angle[index] * bump / dur
    curvature = 0.02 * np.sign(angle[index]) * bump / 2.0
    curvature += 0.003 * np.sin(gait_phase) * e["walk"]  # body sway with the steps

    # Grooming strokes, alternating sides in blocks.
    side, tau, groom_hz = _groom_blocks(rng, bouts, traits)
    stroke = (1.0 - np.cos(2 * np.pi * groom_hz * tau)) / 2.0 * e["groom"]

    # Scanning: the head sweeps side to side and bobs forward and back, body still.
    scan_hz = (traits.scan_hz * rng.uniform(0.9, 1.1, n_b))[index]
    scan_phase = 2 * np.pi * scan_hz * t_in + rng.uniform(0, 2 * np.pi, n_b)[index]
    head_yaw = 0.45 * np.sin(scan_phase) * e["scan"] + 0.12 * side * stroke
    head_yaw += 0.05 * smooth_noise(rng, n, fps, 1.0)
    head_ext = 1.5 * np.sin(2 * scan_phase) * e["scan"] - 3.0 * e["dig"]

    # Digging: front legs scrape backward in turn, body contracts, hind legs spread.
    dig_hz = (traits.dig_hz * rng.uniform(0.9, 1.1, n_b))[index]
    dig_phase = 2 * np.pi * dig_hz * t_in

    # Resting: legs tucked, feelers folded back, slow breathing, tail curled to one side.
    curl = rng.uniform(-0.6, 0.6, n_b)[index]
    return {
        "speed": speed,
        "omega": omega,
        "gait_phase": gait_phase,
        "excursion": excursion,
        "curvature": curvature,
        "groom_side": side,
        "stroke": stroke,
        "head_yaw": head_yaw,
        "head_ext": head_ext,
        "dig_phase": dig_phase,
        "length": 1.0 - 0.14 * e["dig"] + 0.012 * np.sin(2 * np.pi * 0.35 * t_in) * e["rest"],
        "spread": 1.0 - 0.22 * e["rest"],
        "feeler_fold": 0.9 * e["rest"] - 0.2 * e["scan"],
        "tail_sway": curl * e["rest"] + 0.15 * smooth_noise(rng, n, fps, 2.0),
        "rock": 0.8 * np.sin(dig_phase) * e["dig"],
        **{f"env_{b}": e[b] for b in BEHAVIOURS},
    }
