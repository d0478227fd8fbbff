"""The benchmark suite: time and peak memory of every stage at several sizes, and two yardsticks.

Run from the repository root::

    python benchmarks/suite.py                      # sizes 1e5 and 1e6 frames (~10 minutes)
    python benchmarks/suite.py --sizes 1e5 1e6 1e7  # the full table (~1 hour on 2 cores)
    python benchmarks/suite.py --stages decode bouts --sizes 1e6

Each (stage, size) runs in a fresh subprocess so that its peak resident memory is its own. The
suite prints a table and writes ``benchmarks/results/suite.json``. Alongside ethoscribe's stages
it runs (a) a plain reference pipeline written directly against the general libraries (pandas,
scikit-learn PCA, hmmlearn fitted on all frames with full covariance), the baseline a user would
otherwise write, and (b) the hand-counted FLOP estimate of one HMM EM iteration against this
machine's measured matmul throughput. Data come from the package's simulator (invented animals).
"""

from __future__ import annotations

import argparse
import itertools
import json
import math
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
RESULTS = HERE / "results"
K, D = 20, 12  # HMM size for the per-iteration and decode stages (as in the targets)


# --- data -----------------------------------------------------------------------------------
def _study(folder: Path, n_frames: int) -> Path:
    """Simulated sessions of ~1e5 frames each (at most 10), written as tidy Parquet + truth."""
    from ethoscribe.io import write_tidy
    from ethoscribe.simulate import simulate_session

    folder.mkdir(parents=True, exist_ok=True)
    marker = folder / "done.json"
    if marker.exists():
        return folder
    n_sessions = max(1, min(10, n_frames // 100_000))
    per = n_frames // n_sessions
    rows, truths = [], []
    for i in range(n_sessions):
        group = "standard" if i % 2 == 0 else "enriched"
        tracks, truth = simulate_session(
            duration_s=per / 30, fps=30, group=group, seed=100 + i, session=f"s{i:02d}"
        )
        write_tidy(tracks, folder / f"s{i:02d}.parquet")
        truths.append(truth.assign(session=f"s{i:02d}"))
        rows.append(f"s{i:02d},s{i:02d}.parquet,30,{group}")
    (folder / "manifest.csv").write_text("session,path,fps,group\n" + "\n".join(rows) + "\n")
    import pandas as pd

    (folder / "truth").mkdir(exist_ok=True)
    pd.concat(truths).to_parquet(folder / "truth" / "frames.parquet")
    marker.write_text(json.dumps({"frames": n_frames, "sessions": n_sessions}))
    return folder


def _features_matrix(n: int, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """A sticky K-state Gaussian series (invented) of n frames x D features, and its lengths."""
    rng = np.random.default_rng(seed)
    states = np.repeat(rng.integers(0, K, size=n // 60 + 1), 60)[:n]
    means = rng.normal(0, 3, size=(K, D))
    return means[states] + rng.normal(size=(n, D)), np.array([n])


# --- stages (each returns a dict of extra figures) --------------------------------------------
def stage_read(n: int, data: Path) -> dict:
    from ethoscribe.io import pose_files, read_pose

    files = [f for f in pose_files([data]) if f.name != "manifest.csv"]
    frames = sum(read_pose(f, fps=30).n_frames for f in files)
    return {"frames_read": frames}


def stage_clean(n: int, data: Path) -> dict:
    from ethoscribe.clean import clean
    from ethoscribe.io import read_pose

    tracks = read_pose(data / "s00.parquet", fps=30)
    t0 = time.process_time()
    clean(tracks)
    return {"frames": tracks.n_frames, "cpu_s_first_session": time.process_time() - t0}


def stage_features(n: int, data: Path) -> dict:
    from ethoscribe.clean import clean
    from ethoscribe.features import FeaturePipeline
    from ethoscribe.io import read_pose

    cleaned, _ = clean(read_pose(data / "s00.parquet", fps=30))
    feats = FeaturePipeline().fit_transform([cleaned])
    return {"frames": cleaned.n_frames, "n_features": feats[0].values.shape[1]}


def stage_em_iteration(n: int, data: Path) -> dict:
    """One E + M step at K=20, D=12 (the kernels bench_hmm.py measures), FLOPs counted by hand."""
    sys.path.insert(0, str(HERE))
    from bench_hmm import e_step_buffers, em_iteration, flops, one_thread, random_model, sample

    params = random_model(K, D)
    X = sample(n, params[2], params[3])
    lengths = np.array([n])
    with one_thread():
        em_iteration(X[:2000], np.array([2000]), params)  # numba cache and BLAS warm-up
        work = e_step_buffers(n, K)
        em_iteration(X, lengths, params, work)  # pages the buffers in
        t = time.perf_counter()
        em_iteration(X, lengths, params, work)
        seconds = time.perf_counter() - t
    total = sum(flops(n, K, D).values())
    return {
        "seconds_per_iteration": seconds,
        "gflop_per_iteration": total / 1e9,
        "gflop_per_s": total / 1e9 / seconds,
    }


def stage_decode(n: int, data: Path) -> dict:
    from ethoscribe.segment.hmm import GaussianHMM

    X, lengths = _features_matrix(min(n, 200_000), seed=1)
    model = GaussianHMM(n_states=K, n_restarts=1, n_iter=10).fit(X, lengths)
    Xn, ln = _features_matrix(n, seed=2)
    t = time.perf_counter()
    model.predict(Xn, ln)
    seconds = time.perf_counter() - t
    return {"frames_per_s": n / seconds}


def stage_bouts(n: int, data: Path) -> dict:
    import pandas as pd

    from ethoscribe.ethogram import bout_table, time_budget, transition_table

    rng = np.random.default_rng(0)
    state = np.repeat(rng.integers(0, 10, size=n // 30 + 1), 30)[:n]
    labels = pd.DataFrame(
        {
            "session": "s",
            "animal": "a",
            "frame": np.arange(n),
            "time_s": np.arange(n) / 30,
            "state": state,
            "motif": np.array([f"motif_{k + 1:02d}" for k in range(10)])[state],
            "probability": 1.0,
        }
    )
    t = time.perf_counter()
    bouts = bout_table(labels)
    transition_table(bouts)
    time_budget(labels)
    return {"bouts": len(bouts), "seconds_tables": time.perf_counter() - t}


def stage_discover(n: int, data: Path) -> dict:
    import pandas as pd
    from sklearn.metrics import adjusted_rand_score

    from ethoscribe.workspace import discover

    out = Path(tempfile.mkdtemp(prefix="bench-discover-"))
    # As the command line runs it: per-session work in one process per CPU.
    ws = discover([data], out / "ws", manifest=data / "manifest.csv", progress=False, jobs=None)
    labels = ws.state_labels().merge(
        pd.read_parquet(data / "truth" / "frames.parquet"),
        on=["session", "frame"],
        suffixes=("", "_true"),
    )
    valid = labels[labels["state"] >= 0]
    return {
        "n_states": ws.summary["n_states"],
        "ari_vs_truth": adjusted_rand_score(valid["behaviour"].astype(str), valid["state"]),
    }


def stage_reference(n: int, data: Path) -> dict:
    """The pipeline a user would write by hand: pandas + PCA + hmmlearn on every frame."""
    import pandas as pd
    from hmmlearn.hmm import GaussianHMM as ReferenceHMM
    from sklearn.decomposition import PCA
    from sklearn.metrics import adjusted_rand_score
    from sklearn.preprocessing import StandardScaler

    parts, lengths = [], []
    manifest = pd.read_csv(data / "manifest.csv")
    for name in manifest["session"]:
        t = pd.read_parquet(data / f"{name}.parquet")
        wide = t.pivot_table(index="frame", columns="keypoint", values=["x", "y"])
        xy = wide.interpolate(limit_direction="both").to_numpy()
        xs, ys = xy[:, : xy.shape[1] // 2], xy[:, xy.shape[1] // 2 :]
        ego = np.hstack([xs - xs.mean(1, keepdims=True), ys - ys.mean(1, keepdims=True)])
        speed = np.r_[0, np.hypot(np.diff(xs.mean(1)), np.diff(ys.mean(1)))][:, None]
        parts.append(np.hstack([PCA(8).fit_transform(ego), speed]))
        lengths.append(len(ego))
    X = StandardScaler().fit_transform(np.vstack(parts))
    model = ReferenceHMM(n_components=7, covariance_type="full", n_iter=50, random_state=0)
    model.fit(X, lengths)
    state = model.predict(X, lengths)
    truth = pd.read_parquet(data / "truth" / "frames.parquet")
    return {"ari_vs_truth": adjusted_rand_score(truth["behaviour"].astype(str), state)}


def stage_matmul(n: int, data: Path) -> dict:
    a = np.random.default_rng(0).normal(size=(2000, 2000))
    a @ a
    t = time.perf_counter()
    for _ in range(5):
        a @ a
    seconds = (time.perf_counter() - t) / 5
    return {"matmul_gflop_per_s": 2 * 2000**3 / seconds / 1e9}


STAGES = {name[6:]: f for name, f in globals().items() if name.startswith("stage_")}
NEEDS_DATA = {"read", "clean", "features", "discover", "reference"}


# --- running ----------------------------------------------------------------------------------
def _child(stage: str, n: int, data: str) -> None:
    t0, c0 = time.perf_counter(), time.process_time()
    extra = STAGES[stage](n, Path(data))
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    # Worker processes (discover's per-session pool): the largest of their peaks.
    workers = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
    print(
        json.dumps(
            {
                "stage": stage,
                "frames": n,
                "wall_s": time.perf_counter() - t0,
                "cpu_s": time.process_time() - c0,
                "peak_rss_mb": rss,
                "peak_rss_workers_mb": workers,
                **extra,
            }
        )
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", nargs="+", type=float, default=[1e5, 1e6])
    parser.add_argument("--stages", nargs="+", default=list(STAGES), choices=list(STAGES))
    parser.add_argument(
        "--data", type=Path, default=Path(tempfile.gettempdir()) / "ethoscribe-bench"
    )
    parser.add_argument("--timeout", type=float, default=3600)
    parser.add_argument("--child", nargs=3, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        _child(args.child[0], int(args.child[1]), args.child[2])
        return
    rows = []
    for size in args.sizes:
        n = int(size)
        data = _study(args.data / f"n{n}", n) if NEEDS_DATA & set(args.stages) else args.data
        for stage in args.stages:
            if stage in ("matmul",) and size != args.sizes[0]:
                continue
            if stage == "reference" and n > 1_000_000:
                continue  # hours at 1e7 frames; the ratio is measured at 1e5 and 1e6
            cmd = [sys.executable, __file__, "--child", stage, str(n), str(data)]
            try:
                done = subprocess.run(
                    cmd,
                    capture_output=True,
                    text=True,
                    timeout=args.timeout,
                    env={**os.environ, "PYTHONWARNINGS": "ignore"},
                )
                row = (
                    json.loads(done.stdout.strip().splitlines()[-1])
                    if done.returncode == 0
                    else {"stage": stage, "frames": n, "error": done.stderr.strip()[-300:]}
                )
            except subprocess.TimeoutExpired:
                row = {"stage": stage, "frames": n, "error": f"timed out after {args.timeout} s"}
            rows.append(row)
            print(_line(row), flush=True)
    _scaling(rows)
    RESULTS.mkdir(exist_ok=True)
    (RESULTS / "suite.json").write_text(json.dumps(rows, indent=2))
    print(f"wrote {RESULTS / 'suite.json'}")


def _line(row: dict) -> str:
    if "error" in row:
        return f"{row['stage']:>12} {row['frames']:>10,d}  ERROR {row['error']}"
    extra = {
        k: v
        for k, v in row.items()
        if k not in ("stage", "frames", "wall_s", "cpu_s", "peak_rss_mb", "peak_rss_workers_mb")
    }
    shown = ", ".join(
        f"{k}={v:.4g}" if isinstance(v, float) else f"{k}={v}" for k, v in extra.items()
    )
    return (
        f"{row['stage']:>12} {row['frames']:>10,d}  wall {row['wall_s']:8.2f} s  "
        f"cpu {row['cpu_s']:8.2f} s  peak {row['peak_rss_mb']:7.0f} MB  {shown}"
    )


def _scaling(rows: list[dict]) -> None:
    """Scaling exponent of wall time between consecutive sizes: t ~ n^b."""
    by_stage: dict[str, list[dict]] = {}
    for r in rows:
        if "error" not in r:
            by_stage.setdefault(r["stage"], []).append(r)
    for stage, rs in by_stage.items():
        rs.sort(key=lambda r: r["frames"])
        for a, b in itertools.pairwise(rs):
            if a["wall_s"] > 0 and b["frames"] > a["frames"]:
                exp = math.log(b["wall_s"] / a["wall_s"]) / math.log(b["frames"] / a["frames"])
                b["scaling_exponent_from_previous"] = exp
                print(
                    f"{stage:>12} scaling exponent {a['frames']:,d} -> {b['frames']:,d}: {exp:.2f}"
                )


if __name__ == "__main__":
    main()
