"""Tracker failures added to the true positions: jitter, confidence that falls with
occlusion, long losses (NaN or a low-confidence point stuck on the background), jumps of a
point for 1-3 frames, and left/right identity swaps of a leg pair.

Every failure episode is logged (keypoint, kind, start_frame, stop_frame; stop exclusive).
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field

import numpy as np
import pandas as pd

from .animal import KEYPOINTS, KP, LEG_PAIRS

BODY_POINTS = ("snout", "head", "thorax", "abdomen", "tail_base")


def _default_loss() -> dict:
    return {
        "leg_front_left": 0.12,
        "leg_front_right": 0.12,
        "leg_mid_left": 0.18,
        "leg_mid_right": 0.18,
        "leg_hind_left": 0.14,
        "leg_hind_right": 0.14,
        "tail_tip": 0.16,
        "feeler_left": 0.05,
        "feeler_right": 0.05,
    }


@dataclass(frozen=True)
class FaultConfig:
    """How badly the tracker does. Rates are per keypoint (jumps) or per leg pair (swaps)."""

    jitter_px_body: float = 0.8
    jitter_px_limbs: float = 1.5
    loss_fraction: dict = field(default_factory=_default_loss)  # share of frames lost
    loss_seconds: tuple = (1.0, 4.0)
    loss_missing_share: float = 0.6  # lost episodes reported as NaN; the rest as low confidence
    jumps_per_minute: float = 1.5
    jump_frames: tuple = (1, 3)
    jump_px: tuple = (15.0, 60.0)
    swaps_per_minute: float = 0.5
    swap_seconds: tuple = (0.2, 2.0)

    def as_dict(self) -> dict:
        return asdict(self)


def place_episodes(
    rng: np.random.Generator, n_frames: int, total: int, lo: int, hi: int
) -> tuple[np.ndarray, np.ndarray]:
    """Non-touching episodes covering exactly ``total`` frames, lengths about ``lo``-``hi``
    (rescaled a little so they sum to ``total``). Returns start and stop (exclusive)."""
    if total <= 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    n_ep = int(min(max(1, round(total / ((lo + hi) / 2))), total, n_frames - total + 1))
    d = rng.uniform(lo, hi, n_ep)
    d = d * total / d.sum()
    lengths = np.floor(d).astype(np.int64)
    short = total - lengths.sum()
    lengths[np.argsort(lengths - d)[:short]] += 1  # largest remainders first
    free = n_frames - total - (n_ep - 1)
    gaps = rng.multinomial(free, rng.dirichlet(np.ones(n_ep + 1)))
    gaps[1:n_ep] += 1
    starts = np.cumsum(gaps[:n_ep]) + np.concatenate([[0], np.cumsum(lengths)[:-1]])
    return starts, starts + lengths


def _mask(n: int, starts, stops) -> np.ndarray:
    edges = np.zeros(n + 1, np.int64)
    np.add.at(edges, starts, 1)
    np.add.at(edges, stops, -1)
    return np.cumsum(edges[:-1]) > 0


def add_failures(
    rng: np.random.Generator, xy: np.ndarray, vis: np.ndarray, fps: float, cfg: FaultConfig
) -> tuple[np.ndarray, np.ndarray, pd.DataFrame]:
    """Tracked coordinates (n_frames, n_keypoints, 2) px, confidence (n_frames, n_keypoints)
    and the failure log, from true pixel coordinates ``xy`` and visibility ``vis``."""
    n, k = vis.shape
    log: list[tuple[str, str, int, int]] = []
    body = np.isin(np.array(KEYPOINTS), BODY_POINTS)
    sd = np.where(body, cfg.jitter_px_body, cfg.jitter_px_limbs) * (1.0 + 2.0 * (1.0 - vis))
    out = xy + rng.standard_normal(xy.shape) * sd[..., None]
    conf = vis * (1.0 - rng.exponential(np.where(body, 0.02, 0.05), (n, k)))
    conf = np.clip(conf, 0.0, 1.0)

    # Identity swaps of a leg pair (non-overlapping within a pair).
    for left, right in LEG_PAIRS:
        m = rng.poisson(cfg.swaps_per_minute * n / fps / 60.0)
        starts = np.sort(rng.integers(0, n, m))
        lengths = np.round(rng.uniform(*cfg.swap_seconds, m) * fps).astype(np.int64)
        last = -1
        for a, length in zip(starts, lengths, strict=True):
            b = int(min(n, a + max(1, length)))
            if a <= last:
                continue
            i, j = KP[left], KP[right]
            out[a:b, [i, j]] = out[a:b, [j, i]]
            conf[a:b, [i, j]] = conf[a:b, [j, i]]
            log += [(left, "swap", int(a), b), (right, "swap", int(a), b)]
            last = b

    # Long losses, placed first so that jumps avoid them.
    lost = np.zeros((n, k), bool)
    lo, hi = (max(1, round(s * fps)) for s in cfg.loss_seconds)
    losses = []
    for name, frac in cfg.loss_fraction.items():
        starts, stops = place_episodes(rng, n, round(frac * n), lo, hi)
        lost[:, KP[name]] = _mask(n, starts, stops)
        losses += [(KP[name], name, int(a), int(b)) for a, b in zip(starts, stops, strict=True)]

    # Jumps: a point teleports for 1-3 frames, often with believable confidence.
    for c, name in enumerate(KEYPOINTS):
        m = rng.poisson(cfg.jumps_per_minute * n / fps / 60.0)
        for a in np.sort(rng.integers(0, n, m)):
            b = int(min(n, a + rng.integers(cfg.jump_frames[0], cfg.jump_frames[1] + 1)))
            if lost[a:b, c].any():
                continue
            ang, dist = rng.uniform(0, 2 * np.pi), rng.uniform(*cfg.jump_px)
            out[a:b, c] += dist * np.array([np.cos(ang), np.sin(ang)])
            conf[a:b, c] = rng.uniform(0.3, 0.95)
            log.append((name, "jump", int(a), b))

    for c, name, a, b in losses:
        if rng.random() < cfg.loss_missing_share:
            out[a:b, c] = np.nan
            conf[a:b, c] = 0.0
            log.append((name, "lost_missing", a, b))
        else:  # stuck on a background spot near where it was last seen, drifting slowly
            walk = np.cumsum(rng.standard_normal((b - a, 2)) * 2.0 / np.sqrt(fps), axis=0)
            out[a:b, c] = out[max(a - 1, 0), c] + walk
            conf[a:b, c] = rng.uniform(0.01, 0.2, b - a)
            log.append((name, "lost_low_confidence", a, b))

    faults = pd.DataFrame(log, columns=["keypoint", "kind", "start_frame", "stop_frame"])
    return out, conf, faults.sort_values(["start_frame", "keypoint"], kind="stable")
