"""Speed and memory of the simulator.

Usage::

    python benchmarks/bench_simulate.py                     # 1e6 frames in memory, then streamed
    python benchmarks/bench_simulate.py --frames 20000000 --only chunks

Each measurement runs in its own process so that its peak resident memory is its own. Prints
wall time, CPU time and peak RSS; the machine is shared, so compare ratios within one run.
"""

from __future__ import annotations

import argparse
import resource
import subprocess
import sys
import time


def measure(mode: str, frames: int, chunk: int, body_plan: str) -> None:
    from ethoscribe.simulate import simulate_chunks, simulate_session

    wall, cpu = time.perf_counter(), time.process_time()
    if mode == "session":
        tracks, _truth = simulate_session(body_plan, duration_s=frames / 30, fps=30, seed=0)
        n, shape = tracks.n_frames, tracks.coords.shape
    else:
        n, shape = 0, None
        for tracks, _ in simulate_chunks(
            body_plan, fps=30, seed=0, n_frames=frames, chunk_frames=chunk
        ):
            n += tracks.n_frames
            shape = tracks.coords.shape[1:]
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(
        f"{mode:8s} {body_plan:13s} frames={n:>10,d} shape={shape} wall={wall:6.2f} s "
        f"cpu={cpu:6.2f} s frames/s={n / wall:>12,.0f} peak_rss={peak_mb:7.0f} MB"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--frames", type=int, default=1_000_000)
    parser.add_argument("--chunk", type=int, default=100_000)
    parser.add_argument("--body-plan", default="dune_vole")
    parser.add_argument("--only", choices=["session", "chunks"])
    parser.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        measure(args.only, args.frames, args.chunk, args.body_plan)
        return
    for mode in [args.only] if args.only else ["session", "chunks"]:
        cmd = [
            sys.executable,
            __file__,
            "--child",
            "--only",
            mode,
            "--frames",
            str(args.frames),
            "--chunk",
            str(args.chunk),
            "--body-plan",
            args.body_plan,
        ]
        subprocess.run(cmd, check=True)


if __name__ == "__main__":
    main()
