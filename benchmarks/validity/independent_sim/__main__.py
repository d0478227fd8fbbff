"""Write a simulated study: ``python -m benchmarks.validity.independent_sim --out DIR``."""

from __future__ import annotations

import argparse
import sys
import time

from .study import write_study


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        prog="python -m benchmarks.validity.independent_sim",
        description="Simulate sessions of an invented six-legged animal with known behaviour "
        "labels and tracker failures; write poses, truth, manifest.csv and parameters.json.",
    )
    parser.add_argument("--out", required=True, help="folder to write the study into")
    parser.add_argument("--sessions", type=int, default=8, help="number of sessions (8)")
    parser.add_argument("--duration-s", type=float, default=240.0, help="seconds each (240)")
    parser.add_argument("--seed", type=int, default=0, help="random seed (0)")
    parser.add_argument("--format", choices=("parquet", "csv"), default="parquet")
    args = parser.parse_args(argv)
    t0 = time.perf_counter()
    manifest = write_study(args.out, args.sessions, args.duration_s, args.seed, args.format)
    took = time.perf_counter() - t0
    print(f"wrote {len(manifest)} sessions to {args.out} in {took:.1f} s (seed {args.seed})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
