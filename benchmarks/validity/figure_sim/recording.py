"""What the motion-capture recording does to clean markers: noise, left/right exchanges,
dropouts. Marker coordinates are millimetres here.

- Each marker sits a few millimetres off its joint (placement, fixed per take) and jitters
  with white noise of ``noise_mm`` per axis.
- Exchanges: a left marker and its right partner (elbows, wrists, knees, ankles, toes) trade
  places for 0.1-0.8 s, about once every 25 s; confidence inside is 0.35-0.8.
- Dropouts: a marker is lost for 0.1-2 s (log-uniform), about once every 12-40 s per
  marker (hands and feet most often). Half the losses are empty (no coordinates,
  confidence 0), half hold the last seen position with confidence 0-0.05. Confidence
  falls over the 0.1 s before a loss.
- Elsewhere confidence is 0.9-1.
"""

from __future__ import annotations

import numpy as np
from benchmarks.validity.figure_sim.body import MARKERS, SWAPPABLE

LOSS_EVERY_S = {"wrist": 12.0, "toe": 15.0, "elbow": 25.0, "ankle": 25.0, "knee": 35.0}
LOSS_DEFAULT_S = 40.0
SWAP_EVERY_S = 25.0


def _episodes(rng, n_frames, fps, every_s, dur_s):
    """Start and stop frames of episodes arriving at random (Poisson) with log-uniform
    lengths within ``dur_s``."""
    count = rng.poisson(n_frames / fps / every_s)
    start = rng.integers(0, n_frames, size=count)
    length = np.exp(rng.uniform(np.log(dur_s[0]), np.log(dur_s[1]), size=count))
    stop = np.minimum(start + np.maximum(np.rint(length * fps), 1).astype(np.int64), n_frames)
    return start, stop


def _mask(n_frames, start, stop):
    """Frames covered by any of the episodes [start, stop)."""
    edge = np.zeros(n_frames + 1, dtype=np.int64)
    np.add.at(edge, start, 1)
    np.add.at(edge, stop, -1)
    return np.cumsum(edge[:-1]) > 0


def record(rng: np.random.Generator, markers_mm: np.ndarray, fps: float, noise_mm: float):
    """Coordinates (frames, markers, 3) with NaN where lost, and confidence (frames, markers).

    Returns also the count of exchanges and of lost marker-frames (for the README's facts).
    """
    n, k, _ = markers_mm.shape
    coords = markers_mm + rng.normal(0, 4.0, size=(1, k, 3))
    coords = coords + rng.normal(0, noise_mm, size=coords.shape)
    confidence = 1 - 0.1 * rng.beta(1.0, 4.0, size=(n, k))
    index = {m: i for i, m in enumerate(MARKERS)}
    # Exchanges of left and right partners.
    start, stop = _episodes(rng, n, fps, SWAP_EVERY_S, (0.1, 0.8))
    weights = np.array([w for _, w in SWAPPABLE])
    pairs = rng.choice(len(SWAPPABLE), size=start.size, p=weights / weights.sum())
    for p in range(len(SWAPPABLE)):
        sel = pairs == p
        mask = _mask(n, start[sel], stop[sel])
        left, right = index[f"{SWAPPABLE[p][0]}_left"], index[f"{SWAPPABLE[p][0]}_right"]
        coords[mask, left], coords[mask, right] = coords[mask, right], coords[mask, left].copy()
        confidence[mask, left] = rng.uniform(0.35, 0.8, size=mask.sum())
        confidence[mask, right] = rng.uniform(0.35, 0.8, size=mask.sum())
    # Dropouts, marker by marker.
    lost_frames = 0
    warn = max(1, round(0.1 * fps))
    for m, name in enumerate(MARKERS):
        every = LOSS_EVERY_S.get(name.rsplit("_", 1)[0], LOSS_DEFAULT_S)
        start, stop = _episodes(rng, n, fps, every, (0.1, 2.0))
        if start.size == 0:
            continue
        empty = rng.random(start.size) < 0.5
        fading = _mask(n, np.maximum(start - warn, 0), start)
        confidence[fading, m] *= rng.uniform(0.3, 0.7, size=fading.sum())
        held = _mask(n, start[~empty], stop[~empty])
        gone = _mask(n, start[empty], stop[empty])
        last_seen = np.maximum.accumulate(np.where(held, 0, np.arange(n)))
        coords[held, m] = coords[last_seen[held], m]
        confidence[held, m] = rng.uniform(0, 0.05, size=held.sum())
        coords[gone, m] = np.nan
        confidence[gone, m] = 0.0
        lost_frames += int((held | gone).sum())
    return coords, confidence, {"exchanges": int(pairs.size), "lost_marker_frames": lost_frames}
