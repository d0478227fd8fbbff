"""Speed and memory of writing and reading a tidy Parquet pose table.

Usage: ``python benchmarks/bench_io.py [n_frames] [n_keypoints] [suffix]``
(defaults 1_000_000 frames, 12 keypoints, ``.parquet``; ``.csv`` also works).

Each step runs in a fresh child process so its peak resident memory is its own; the figures are
wall and CPU seconds and peak RSS above the process's size after imports. The machine is shared:
repeat a run before trusting a difference.
"""

from __future__ import annotations

import json
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path


def _rss_mb() -> float:
    # ru_maxrss is in kilobytes on Linux.
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def _step(stage: str, path: str, n_frames: int, n_keypoints: int) -> dict[str, float]:
    import numpy as np

    from ethoscribe.io import read_tidy, write_tidy
    from ethoscribe.pose import PoseTracks

    tracks = None
    if stage == "write":
        rng = np.random.default_rng(0)
        coords = rng.normal(size=(n_frames, 1, n_keypoints, 2)).cumsum(axis=0)
        coords[rng.random(coords.shape[:3]) < 0.01] = np.nan
        names = [f"point{i:02d}" for i in range(n_keypoints)]
        tracks = PoseTracks(coords, keypoints=names, fps=30.0)
    base = _rss_mb()
    wall, cpu = time.perf_counter(), time.process_time()
    if stage == "write":
        write_tidy(tracks, path)
    else:
        tracks = read_tidy(path)
    out = {
        "wall_s": time.perf_counter() - wall,
        "cpu_s": time.process_time() - cpu,
        "peak_rss_above_start_mb": _rss_mb() - base,
        "peak_rss_mb": _rss_mb(),
        "file_mb": Path(path).stat().st_size / 2**20,
    }
    if stage == "read":
        out["frames_read"] = tracks.n_frames
    return out


def main() -> None:
    n_frames = int(float(sys.argv[1])) if len(sys.argv) > 1 else 1_000_000
    n_keypoints = int(sys.argv[2]) if len(sys.argv) > 2 else 12
    suffix = sys.argv[3] if len(sys.argv) > 3 else ".parquet"
    print(
        f"tidy {suffix}: {n_frames} frames x {n_keypoints} keypoints = "
        f"{n_frames * n_keypoints:,} rows"
    )
    with tempfile.TemporaryDirectory() as folder:
        path = str(Path(folder) / f"bench{suffix}")
        for stage in ("write", "read"):
            args = [
                sys.executable,
                __file__,
                "--child",
                stage,
                path,
                str(n_frames),
                str(n_keypoints),
            ]
            result = json.loads(
                subprocess.run(args, check=True, capture_output=True, text=True).stdout
            )
            figures = ", ".join(
                f"{k} {v:.2f}" if isinstance(v, float) else f"{k} {v}" for k, v in result.items()
            )
            print(f"{stage:>5}: {figures}")


if __name__ == "__main__":
    if len(sys.argv) > 1 and sys.argv[1] == "--child":
        stage, path, n_frames, n_keypoints = sys.argv[2:6]
        print(json.dumps(_step(stage, path, int(n_frames), int(n_keypoints))))
    else:
        main()
