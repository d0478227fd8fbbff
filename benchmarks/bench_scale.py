"""A study too large to hold in memory: discovery on 20 million frames, peak memory reported.

Usage::

    python benchmarks/bench_scale.py                         # 20,000,000 frames, 40 sessions
    python benchmarks/bench_scale.py --frames 10000000 --sessions 20
    python benchmarks/bench_scale.py --keep /tmp/big-study   # keep the simulated files
    python benchmarks/bench_scale.py --keep /tmp/big-study --generate-only

The sessions are simulated one at a time (invented dune voles with two extra keypoints, 12 in
all, see ``bench_discover.add_keypoints``) and written as tidy Parquet with their true
behaviour, so generating them never holds the study in memory. Then ``discover`` runs in a
fresh child process, as the command line runs it (one worker process per CPU, automatic state
count, stability report); the child reports its wall and CPU time and its peak resident
memory, and this process samples the resident memory of the child and its workers together
(psutil, every 0.2 s) for the peak of the whole run. Last, the labels are compared with the
simulated truth one session at a time (adjusted Rand index, scikit-learn).

The claim it checks: peak memory grows with the largest session plus the fitting sample, not
with the study. Run it at two study sizes with the same session length to see the peak stay.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent


def write_study(folder: Path, frames: int, n_sessions: int) -> int:
    """Simulate and write ``n_sessions`` sessions, one at a time; returns the frame count."""
    sys.path.insert(0, str(HERE))
    from bench_discover import add_keypoints

    from ethoscribe.io import write_tidy
    from ethoscribe.simulate import simulate_session

    (folder / "truth").mkdir(parents=True, exist_ok=True)
    per, rows, total = frames // n_sessions, [], 0
    for i in range(n_sessions):
        name, group = f"s{i:03d}", ("standard", "enriched")[i % 2]
        tracks, truth = simulate_session(
            duration_s=per / 30, fps=30, group=group, seed=1000 + i, session=name
        )
        tracks = add_keypoints(tracks, np.random.default_rng(i))
        write_tidy(tracks, folder / f"{name}.parquet")
        truth[["frame", "state"]].astype(np.int32).to_parquet(folder / "truth" / f"{name}.parquet")
        rows.append(f"{name},{name}.parquet,30,{group},{tracks.meta['px_per_unit']},mm")
        total += tracks.n_frames
        del tracks, truth
    header = "session,path,fps,group,px_per_unit,units\n"
    (folder / "manifest.csv").write_text(header + "\n".join(rows) + "\n")
    return total


def child(study: str, out: str, jobs: int) -> None:
    """Run discover here and print one JSON line of measurements."""
    from ethoscribe.workspace import discover

    wall, cpu = time.perf_counter(), time.process_time()
    ws = discover([study], out, manifest=Path(study) / "manifest.csv", progress=False, jobs=jobs)
    me = resource.getrusage(resource.RUSAGE_SELF)
    workers = resource.getrusage(resource.RUSAGE_CHILDREN)
    print(
        json.dumps(
            {
                "frames": int(ws.summary["n_frames"]),
                "sessions": int(ws.summary["n_sessions"]),
                "n_states": int(ws.summary["n_states"]),
                "n_training_frames": int(ws.summary["n_training_frames"]),
                "wall_s": time.perf_counter() - wall,
                "cpu_s_main": time.process_time() - cpu,
                "cpu_s_workers": workers.ru_utime + workers.ru_stime,
                "peak_rss_main_mb": me.ru_maxrss / 1024,
                "peak_rss_largest_worker_mb": workers.ru_maxrss / 1024,
            }
        )
    )


def agreement(study: Path, out: Path) -> float:
    """ARI of the labels with the simulated truth on valid frames, read session by session."""
    import pandas as pd
    import pyarrow.parquet as pq
    from sklearn.metrics import adjusted_rand_score

    labels = pq.ParquetFile(out / "labels.parquet")
    found, true = [], []
    for g in range(labels.num_row_groups):  # one row group per session
        part = labels.read_row_group(g, columns=["session", "frame", "state"]).to_pandas()
        name = str(part["session"].iloc[0])
        truth = pd.read_parquet(study / "truth" / f"{name}.parquet")
        merged = part.merge(truth, on="frame", suffixes=("", "_true"))
        merged = merged[merged["state"] >= 0]
        found.append(merged["state"].to_numpy(np.int8))
        true.append(merged["state_true"].to_numpy(np.int8))
    return float(adjusted_rand_score(np.concatenate(true), np.concatenate(found)))


def _watch_memory(proc: subprocess.Popen, every_s: float = 0.2) -> float:
    """Largest sum of resident memory over the child and its workers, sampled until it ends.

    (``ru_maxrss`` of the workers is not enough: a worker started by fork + exec inherits the
    parent's resident size as its own peak.)
    """
    import psutil

    top, me = 0.0, psutil.Process(proc.pid)
    while proc.poll() is None:
        try:
            tree = [me, *me.children(recursive=True)]
            total = 0
            for p in tree:
                with contextlib.suppress(psutil.Error):
                    total += p.memory_info().rss
            top = max(top, total / 2**20)
        except psutil.Error:
            pass
        time.sleep(every_s)
    return top


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--frames", type=int, default=20_000_000)
    parser.add_argument("--sessions", type=int, default=40)
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--keep", type=Path, help="folder for the study (kept, reused if there)")
    parser.add_argument(
        "--generate-only", action="store_true", help="only simulate the study (with --keep)"
    )
    parser.add_argument("--child", nargs=3, help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.child:
        child(args.child[0], args.child[1], int(args.child[2]))
        return 0
    root = args.keep or Path(tempfile.mkdtemp(prefix="ethoscribe-scale-"))
    study, out = root / "study", root / "workspace"
    try:
        if not (study / "manifest.csv").exists():
            t = time.perf_counter()
            n = write_study(study, args.frames, args.sessions)
            print(f"simulated {n:,d} frames in {args.sessions} sessions: "
                  f"{time.perf_counter() - t:.0f} s (not measured below)", flush=True)  # fmt: skip
        if args.generate_only:
            return 0
        shutil.rmtree(out, ignore_errors=True)
        cmd = [sys.executable, __file__, "--child", str(study), str(out), str(args.jobs)]
        proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        peak_tree = _watch_memory(proc)
        stdout, stderr = proc.communicate()
        if proc.returncode:
            print(stderr[-3000:])
            return 1
        row = json.loads(stdout.strip().splitlines()[-1])
        row["peak_rss_all_processes_mb"] = peak_tree
        row["ari_vs_truth"] = agreement(study, out)
        row["frames_per_session"] = row["frames"] // row["sessions"]
        for key, value in row.items():
            print(
                f"  {key:28s} {value:,.3f}"
                if isinstance(value, float)
                else f"  {key:28s} {value:,}"
            )
        results = HERE / "results"
        results.mkdir(exist_ok=True)
        (results / f"scale-{row['frames']}.json").write_text(json.dumps(row, indent=2))
    finally:
        if args.keep is None:
            shutil.rmtree(root, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
