"""Speed and accuracy of the change-point detectors on long invented series.

Series: ``D`` features, piecewise-constant means (levels N(0, 1) per feature, new level every
150-450 frames, i.e. one change per ~300 frames) plus unit Gaussian noise. Prints wall and CPU
seconds and boundary F1 at a 10-frame margin for each method and length. The pure-Python
searches (pelt, binseg) run on the short series only: they grow roughly as T^2.

Run: ``python benchmarks/bench_changepoint.py`` (about a minute on 2 cores), or
``--sizes 1e5`` for a quicker look.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from ethoscribe.segment.boundaries import boundary_scores
from ethoscribe.segment.changepoint import detect_change_points
from ethoscribe.segment.prediction_error import PredictionErrorBoundaries


def piecewise_series(n: int, d: int, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    lengths = rng.integers(150, 451, n // 150 + 2)
    starts = np.cumsum(lengths)
    bounds = starts[starts < n]
    seg = np.zeros(n, dtype=np.int64)
    seg[bounds] = 1
    levels = rng.normal(0, 1, (len(bounds) + 1, d))
    return levels[np.cumsum(seg)] + rng.normal(size=(n, d)), bounds


def timed(fn):
    wall, cpu = time.perf_counter(), time.process_time()
    out = fn()
    return out, time.perf_counter() - wall, time.process_time() - cpu


def report(method: str, n: int, true: np.ndarray, found: np.ndarray, wall: float, cpu: float):
    s = boundary_scores(true, found, margin=10)
    print(
        f"{method:18s} T={n:>9,d}  {wall:7.2f} s wall {cpu:7.2f} s cpu  "
        f"F1 {s['f1']:.3f} (P {s['precision']:.3f} R {s['recall']:.3f}, "
        f"{len(found)} found / {len(true)} true)",
        flush=True,
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="1e5,1e6", help="long-series lengths for 'kernel'")
    parser.add_argument("--features", type=int, default=12)
    args = parser.parse_args()
    d = args.features
    x, true = piecewise_series(10_000, d)
    for method in ("kernel", "pelt", "binseg"):
        found, wall, cpu = timed(lambda m=method: detect_change_points(x, m, min_size=10))
        report(method, len(x), true, found, wall, cpu)
    x, true = piecewise_series(100_000, d, seed=1)
    pe, wall, cpu = timed(lambda: PredictionErrorBoundaries(memory_s=2.0).fit(x))
    found, wall2, cpu2 = timed(lambda: pe.boundaries(x)[0])
    report("prediction_error", len(x), true, found, wall + wall2, cpu + cpu2)
    for n in (int(float(v)) for v in args.sizes.split(",")):
        x, true = piecewise_series(n, d, seed=2)
        found, wall, cpu = timed(lambda x=x: detect_change_points(x, "kernel", min_size=10))
        report("kernel", n, true, found, wall, cpu)
    # Worst case for pruned search: no change at all (windows keep it linear in T).
    flat = np.random.default_rng(3).normal(size=(100_000, d))
    found, wall, cpu = timed(lambda: detect_change_points(flat, "kernel", min_size=10))
    report("kernel, no changes", len(flat), np.zeros(0), found, wall, cpu)


if __name__ == "__main__":
    main()
