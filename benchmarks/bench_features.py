"""Time the feature pipeline on one long simulated 2-D recording and print seconds per stage
and peak resident memory.

Usage: python benchmarks/bench_features.py [n_frames] [n_keypoints]   (default 200000 12)

The animal is invented: a smooth random walk whose body (keypoints on a bending line) points
where it goes, plus tracking noise and a few missing points.
"""

from __future__ import annotations

import resource
import sys
import time

import numpy as np

from ethoscribe.features import FeaturePipeline
from ethoscribe.pose import PoseTracks


def peak_rss_gb() -> float:
    """Peak resident set size of this process so far (Linux reports kB)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1e6


def simulated_tracks(n_frames: int, n_keypoints: int, fps: float = 30.0) -> PoseTracks:
    rng = np.random.default_rng(0)
    steps = np.convolve(rng.normal(0, 0.05, n_frames), np.ones(15) / 15, mode="same")
    heading = np.cumsum(steps)
    speed = np.abs(np.convolve(rng.normal(0, 1, n_frames), np.ones(30) / 30, "same")) * 60
    c, s = np.cos(heading), np.sin(heading)
    pos = np.cumsum(speed[:, None] * np.c_[c, s], 0) / fps
    along = np.linspace(-4.0, 4.5, n_keypoints)
    bend = np.convolve(rng.normal(0, 1, n_frames), np.ones(20) / 20, "same")
    side = bend[:, None] * along**2 / 40  # (F, K)
    coords = np.empty((n_frames, 1, n_keypoints, 2))
    coords[:, 0, :, 0] = pos[:, :1] + c[:, None] * along - s[:, None] * side
    coords[:, 0, :, 1] = pos[:, 1:] + s[:, None] * along + c[:, None] * side
    coords += rng.normal(0, 0.05, coords.shape)
    coords[rng.integers(0, n_frames, n_frames // 1000), 0, rng.integers(0, n_keypoints)] = np.nan
    names = [f"point{k:02d}" for k in range(n_keypoints)]
    return PoseTracks(coords, keypoints=names, fps=fps, units="cm", session="bench")


def timed(label: str, func, *args):
    wall, cpu = time.perf_counter(), time.process_time()
    out = func(*args)
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    print(f"{label:<34s} {wall:7.2f} s wall {cpu:7.2f} s cpu   peak RSS {peak_rss_gb():5.2f} GB")
    return out


def main() -> None:
    n_frames = int(sys.argv[1]) if len(sys.argv) > 1 else 200_000
    n_keypoints = int(sys.argv[2]) if len(sys.argv) > 2 else 12
    print(f"{n_frames} frames x {n_keypoints} keypoints, 2-D, 1 animal, 30 fps")
    tracks = timed("simulate tracks", simulated_tracks, n_frames, n_keypoints)
    offline = FeaturePipeline()
    features = timed("fit_transform (offline)", offline.fit_transform, [tracks])[0]
    print(f"  -> {features.n_features} features, {int(features.valid.sum())} valid frames")
    del features
    timed("fit (offline)", offline.fit, [tracks])
    timed("transform (offline)", offline.transform, tracks)
    causal = timed("fit (causal)", FeaturePipeline(causal=True).fit, [tracks])
    timed("transform (causal)", causal.transform, tracks)
    timed("fit_transform (procrustes)", FeaturePipeline(align="procrustes").fit_transform, [tracks])
    windows = {"posture_window_s": 1.0, "speed_window_s": 1.0}  # windowed means (options)
    windowed = timed("fit (offline, windowed)", FeaturePipeline(**windows).fit, [tracks])
    timed("transform (offline, windowed)", windowed.transform, tracks)
    causal_windowed = FeaturePipeline(causal=True, **windows).fit([tracks])
    timed("transform (causal, windowed)", causal_windowed.transform, tracks)
    stream = causal.stream(1)
    frames = tracks.coords[:1000]
    wall = time.perf_counter()
    for frame in frames:
        stream.push(frame)
    per_frame = (time.perf_counter() - wall) / len(frames) * 1e3
    print(f"stream push                        {per_frame:7.3f} ms per frame")


if __name__ == "__main__":
    main()
