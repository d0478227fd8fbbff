"""Tracking noise: jitter, thrown points, whole-frame glitches, occlusions and left/right swaps.

Every kind of noise draws from its own random stream, in frame order, and runs (occlusions,
swaps) come from renewal processes that remember a run crossing a chunk's end, so a session cut
into chunks gets exactly the noise it would get in one piece.
"""

from __future__ import annotations

import numpy as np
from scipy import special

from ethoscribe.simulate.plan import BodyPlan, TrackingNoise

STREAMS = ("jitter", "good", "low", "thrown", "thrown_offset", "glitch", "glitch_offset")


class RunProcess:
    """Alternating renewal process in frames: gaps ~ geometric(mean ``1 / p_start``), runs ~
    geometric(mean ``mean_frames``); the long-run share of frames inside runs is
    ``mean_frames / (1 / p_start + mean_frames)``. Each run carries a uniform draw."""

    def __init__(self, rng: np.random.Generator, p_start: float, mean_frames: float) -> None:
        self.rng, self.p_start = rng, min(p_start, 1.0)
        self.p_end = 1.0 / max(mean_frames, 1.0)
        self.starts = np.zeros(0, dtype=np.int64)
        self.ends = np.zeros(0, dtype=np.int64)
        self.draws = np.zeros(0)
        self.time = 0  # end of the last generated run

    def runs(self, f0: int, f1: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Runs overlapping frames ``f0 .. f1 - 1`` as (starts, ends (exclusive), draws)."""
        if self.p_start <= 0:
            empty = np.zeros(0, dtype=np.int64)
            return empty, empty, np.zeros(0)
        while self.time < f1:
            gaps = self.rng.geometric(self.p_start, 32)
            lengths = self.rng.geometric(self.p_end, 32)
            ends = self.time + np.cumsum(gaps + lengths)
            self.starts = np.concatenate([self.starts, ends - lengths])
            self.ends = np.concatenate([self.ends, ends])
            self.draws = np.concatenate([self.draws, self.rng.random(32)])
            self.time = int(ends[-1])
        hit = (self.ends > f0) & (self.starts < f1)
        out = self.starts[hit], self.ends[hit], self.draws[hit]
        keep = self.ends > f1
        self.starts, self.ends, self.draws = self.starts[keep], self.ends[keep], self.draws[keep]
        return out


def run_mask(starts: np.ndarray, ends: np.ndarray, f0: int, n: int) -> np.ndarray:
    """Boolean mask (n,) of frames ``f0 .. f0 + n - 1`` inside the given runs."""
    d = np.zeros(n + 1, dtype=np.int64)
    np.add.at(d, np.clip(starts - f0, 0, n), 1)
    np.add.at(d, np.clip(ends - f0, 0, n), -1)
    return np.cumsum(d[:-1]) > 0


class Tracker:
    """Adds configured tracking noise to true image coordinates of one session.

    Parameters
    ----------
    plan : BodyPlan
    config : TrackingNoise
    fps : float
    n_animals : int
    seed : numpy SeedSequence
        Spawns one stream per kind of noise, per run process and per keypoint's guesses.
    """

    def __init__(
        self,
        plan: BodyPlan,
        config: TrackingNoise,
        fps: float,
        n_animals: int,
        seed: np.random.SeedSequence,
    ) -> None:
        self.plan, self.cfg, self.dims = plan, config, plan.dims
        K = len(plan.keypoints)
        self.pairs = [tuple(plan.keypoints.index(k) for k in p) for p in plan.swap_pairs]
        children = seed.spawn(len(STREAMS) + n_animals * (2 * K + len(self.pairs)))
        gens = [np.random.Generator(np.random.PCG64(c)) for c in children]
        self.rng = dict(zip(STREAMS, gens[: len(STREAMS)], strict=True))
        rest = iter(gens[len(STREAMS) :])
        self.sd = config.jitter * np.array(
            [config.jitter_scale.get(k, 1.0) for k in plan.keypoints]
        )
        occ = [
            config.occlusion_rate_per_s * config.occlusion_scale.get(k, 1.0) / fps
            for k in plan.keypoints
        ]
        self.occlusions = [
            [RunProcess(next(rest), occ[k], config.occlusion_mean_s * fps) for k in range(K)]
            for _ in range(n_animals)
        ]
        # guessed points draw per keypoint: a shared stream would depend on the chunking
        self.guess = [[next(rest) for _ in range(K)] for _ in range(n_animals)]
        self.swaps = [
            [
                RunProcess(next(rest), config.swap_rate_per_s / fps, config.swap_mean_s * fps)
                for _ in self.pairs
            ]
            for _ in range(n_animals)
        ]

    def __call__(self, clean: np.ndarray, f0: int) -> tuple[np.ndarray, np.ndarray]:
        """Noisy coordinates (n, A, K, D) and confidence (n, A, K) for frames from ``f0``."""
        cfg, rng = self.cfg, self.rng
        n, A, K, D = clean.shape
        xyz = clean.copy()
        for a in range(A):
            for (i, j), proc in zip(self.pairs, self.swaps[a], strict=True):
                starts, ends, _ = proc.runs(f0, f0 + n)
                m = run_mask(starts, ends, f0, n)
                xyz[m, a, i], xyz[m, a, j] = clean[m, a, j], clean[m, a, i]
        f4 = np.float32  # single-precision draws: twice as fast, far finer than the noise itself
        xyz += rng["jitter"].standard_normal((n, A, K, D), dtype=f4) * self.sd[:, None]
        glo, ghi = cfg.good_confidence
        g = rng["good"].random((n, A, K), dtype=f4) ** 2
        conf = ghi - (ghi - glo) * g * g
        thrown = rng["thrown"].random((n, A, K), dtype=f4) < cfg.outlier_rate
        xyz[thrown] += self._offsets(rng["thrown_offset"], int(thrown.sum()), cfg.outlier_distance)
        glitch = rng["glitch"].random((n, A)) < cfg.glitch_rate
        jump = self._offsets(rng["glitch_offset"], int(glitch.sum()), cfg.outlier_distance)
        xyz[glitch] += jump[:, None, :]
        bad = thrown | glitch[:, :, None]
        missing = np.zeros((n, A, K), dtype=bool)
        for a in range(A):
            for k in range(K):
                starts, ends, draws = self.occlusions[a][k].runs(f0, f0 + n)
                gone = draws < cfg.occlusion_missing_share
                missing[:, a, k] = run_mask(starts[gone], ends[gone], f0, n)
                guessed = run_mask(starts[~gone], ends[~gone], f0, n)
                m = int(guessed.sum())
                if m:
                    spread = cfg.guess_spread * self.guess[a][k].standard_normal((m, D))
                    xyz[guessed, a, k] = clean[guessed, a, k] + spread
                bad[:, a, k] |= guessed
        llo, lhi = cfg.low_confidence
        conf[bad] = llo + (lhi - llo) * rng["low"].random(int(bad.sum()))
        xyz[missing] = np.nan
        conf[missing] = np.nan
        if self.plan.coordinate_units == "px":
            np.maximum(xyz, 0.0, out=xyz)  # an image has no negative pixels
        return xyz, conf

    def _offsets(self, rng: np.random.Generator, m: int, dist: tuple[float, float]) -> np.ndarray:
        """``m`` random offsets (m, dims) in random directions, lengths uniform in ``dist``."""
        v = rng.standard_normal((m, self.dims + 1))  # one draw per call keeps chunking exact
        unit = v[:, :-1] / np.linalg.norm(v[:, :-1], axis=1, keepdims=True).clip(1e-12)
        return unit * (dist[0] + (dist[1] - dist[0]) * special.ndtr(v[:, -1]))[:, None]


def expected_rates(plan: BodyPlan, config: TrackingNoise) -> dict[str, float]:
    """Long-run shares of points that are missing (NaN), low-confidence but present, and swapped
    (per pair), averaged over keypoints; for checking the noise against its configuration."""
    rates = [
        config.occlusion_rate_per_s * config.occlusion_scale.get(k, 1.0) for k in plan.keypoints
    ]
    occluded = np.array(
        [r * config.occlusion_mean_s / (1 + r * config.occlusion_mean_s) for r in rates]
    )
    share = config.occlusion_missing_share
    thrown = 1 - (1 - config.outlier_rate) * (1 - config.glitch_rate)
    sw = config.swap_rate_per_s * config.swap_mean_s
    return {
        "missing": float(np.mean(occluded * share)),
        "low_confidence": float(np.mean(occluded * (1 - share) + (1 - occluded) * thrown)),
        "swapped": sw / (1 + sw),
    }
