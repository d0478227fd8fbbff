"""Speed and memory of ``ethoscribe.clean.clean`` on a long invented recording.

Usage: ``python benchmarks/bench_clean.py [n_frames] [--causal] [--rounded] [--zeros]
[--no-placeholders] [--two-animals] [--keep-identities]`` (default 200000 frames). One animal,
12 keypoints in 2-D, one left/right pair; the track carries jitter, swaps, short and long gaps,
low-confidence points and jumps. ``--rounded``: coordinates in whole units (positions recur,
the placeholder search's slow case); ``--zeros``: the gaps written as 0, 0;
``--no-placeholders``: no placeholder search; ``--two-animals``: a second, larger animal
(another such track, 1.2 times the size) whose track and the first's exchange animals every
10,000 frames; ``--keep-identities``: no identity repair.
Prints wall and CPU seconds of the cleaning call and the peak resident memory of the process
(``resource.getrusage``).
"""

from __future__ import annotations

import resource
import sys
import time

import numpy as np

from ethoscribe.clean import CleanParams, clean
from ethoscribe.pose import PoseTracks

N_KP, FPS = 12, 30.0


def invented_recording(n: int, seed: int = 0) -> PoseTracks:
    """Built in chunks so that making the data does not dominate the peak memory."""
    rng = np.random.default_rng(seed)
    angle = np.linspace(0, 2 * np.pi, N_KP, endpoint=False)
    body = 20 * np.stack([np.cos(angle), np.sin(angle)], axis=-1)
    x = np.empty((n, 1, N_KP, 2))
    conf = np.empty((n, 1, N_KP))
    for lo in range(0, n, 100_000):
        hi = min(n, lo + 100_000)
        t = np.arange(lo, hi) / FPS
        centre = np.stack([200 * np.sin(0.05 * t), 150 * np.cos(0.07 * t)], axis=-1)
        x[lo:hi] = centre[:, None, None, :] + body + rng.normal(0, 0.5, (hi - lo, 1, N_KP, 2))
        conf[lo:hi] = rng.uniform(0.6, 1.0, (hi - lo, 1, N_KP))
    swap = np.flatnonzero(rng.random(n) < 0.01)
    x[swap, 0, 1], x[swap, 0, 2] = x[swap, 0, 2].copy(), x[swap, 0, 1].copy()
    low = rng.integers(0, n, n * N_KP // 50), rng.integers(0, N_KP, n * N_KP // 50)
    conf[low[0], 0, low[1]] = 0.1
    jumps = rng.integers(0, n, n * N_KP // 1000), rng.integers(0, N_KP, n * N_KP // 1000)
    x[jumps[0], 0, jumps[1]] += 80.0
    for start in rng.integers(0, n - 100, n // 2000):  # short and long gaps
        x[start : start + rng.integers(2, 60), 0, rng.integers(0, N_KP)] = np.nan
    return PoseTracks(x, conf, keypoints=[f"kp{i}" for i in range(N_KP)], fps=FPS, units="mm")


def main() -> None:
    args = [a for a in sys.argv[1:] if not a.startswith("--")]
    n = int(args[0]) if args else 200_000
    causal = "--causal" in sys.argv
    tracks = invented_recording(n)
    if "--rounded" in sys.argv:
        tracks = tracks.replace(coords=np.round(tracks.coords))
    if "--zeros" in sys.argv:
        tracks = tracks.replace(coords=np.nan_to_num(tracks.coords, nan=0.0))
    if "--two-animals" in sys.argv:
        other = invented_recording(n, seed=1)
        x = np.concatenate([tracks.coords, 1.2 * other.coords + 30.0], axis=1)
        c = np.concatenate([tracks.confidence, other.confidence], axis=1)
        for t in range(10_000, n, 10_000):
            x[t:], c[t:] = x[t:, ::-1], c[t:, ::-1]
        tracks = tracks.replace(coords=x, confidence=c, animals=("a", "b"))
    search = None if "--no-placeholders" in sys.argv else "auto"
    repair = "--keep-identities" not in sys.argv
    params = CleanParams(swap_pairs=[("kp1", "kp2")], placeholders=search, repair_identities=repair)
    clean(invented_recording(300), params, causal=causal)  # compile / load numba kernels
    rss_before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    wall, cpu = time.perf_counter(), time.process_time()
    cleaned, report = clean(tracks, params, causal=causal)
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    s = report.summary()
    print(f"frames {n}, animals {tracks.n_animals}, keypoints {N_KP}, causal {causal}")
    print(f"clean(): {wall:.2f} s wall, {cpu:.2f} s CPU")
    size = (tracks.coords.nbytes + tracks.confidence.nbytes) / 2**20
    print(f"peak RSS {peak:.0f} MB (before cleaning {rss_before:.0f} MB; input {size:.0f} MB)")
    print(
        f"max_speed {s['max_speed']:.1f} mm/s, swaps repaired {s['swaps_repaired']}, "
        f"invalid frames {s['frac_invalid']:.3f}, filled {s['frac_filled']:.4f}, "
        f"placeholder points {report.params['placeholder_points']}, "
        f"identity exchanges {report.params['identity_exchanges']}"
    )
    assert cleaned.coords.shape == tracks.coords.shape


if __name__ == "__main__":
    main()
