"""Command: ``python -m benchmarks.validity.figure_sim --out DIR --seed S``; see README.md."""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from benchmarks.validity.figure_sim import SUBJECTS, simulate_study, write_study


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        description="Simulate takes of an upright figure (17 markers, 3-D) with per-frame truth"
    )
    parser.add_argument("--out", type=Path, required=True, help="folder to write the study into")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--subjects", type=int, default=SUBJECTS, help="one take per subject")
    parser.add_argument(
        "--duration-s", type=float, default=None, help="length of every take (default 120-180 s)"
    )
    args = parser.parse_args(argv)
    if args.subjects < 1:
        parser.error("--subjects must be at least 1")
    if args.duration_s is not None and args.duration_s < 40:
        parser.error("--duration-s must be at least 40 (every take holds all eight movements)")
    t = time.perf_counter()
    takes = simulate_study(args.seed, args.subjects, args.duration_s)
    simulated = time.perf_counter() - t
    write_study(args.out, takes, args.seed)
    frames = sum(k.truth.size for k in takes)
    print(
        f"{len(takes)} takes, {frames} frames: simulated in {simulated:.1f} s, "
        f"written in {time.perf_counter() - t - simulated:.1f} s to {args.out}"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
