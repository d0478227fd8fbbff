"""The benchmark suite: time and peak memory of every stage at several sizes, and two yardsticks.

Run from the repository root::

    python benchmarks/suite.py                      # sizes 1e5 and 1e6 frames (~10 minutes)
    python benchmarks/suite.py --sizes 1e5 1e6 1e7  # the full table (~1 hour on 2 cores)
    python benchmarks/suite.py --stages decode bouts --sizes 1e6
    python benchmarks/suite.py --markdown           # the recorded results as a table

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
import shutil
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
    """Simulated sessions of ~1e5 frames each (at most 10), written as tidy Parquet + truth.

    Invented dune voles with two extra keypoints (12 in all, ``bench_discover.add_keypoints``).
    """
    sys.path.insert(0, str(HERE))
    from bench_discover import add_keypoints

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
        tracks = add_keypoints(tracks, np.random.default_rng(i))  # 12 keypoints, as targeted
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
    t = time.perf_counter()
    frames = sum(read_pose(f, fps=30).n_frames for f in files)
    return {"frames_read": frames, "seconds_reading": time.perf_counter() - t}


def _sessions(data: Path) -> list[Path]:
    from ethoscribe.io import pose_files

    return [f for f in pose_files([data]) if f.name != "manifest.csv"]


def stage_clean(n: int, data: Path) -> dict:
    """Every session cleaned one after another (as one worker does); reading not counted."""
    from ethoscribe.clean import clean
    from ethoscribe.io import read_pose

    seconds = frames = 0
    for f in _sessions(data):
        tracks = read_pose(f, fps=30)
        t0 = time.perf_counter()
        clean(tracks)
        seconds += time.perf_counter() - t0
        frames += tracks.n_frames
    return {"frames_cleaned": frames, "seconds_cleaning": seconds}


def stage_features(n: int, data: Path) -> dict:
    """Pipeline fitted on the first session, then every session transformed (reading and
    cleaning not counted)."""
    from ethoscribe.clean import clean
    from ethoscribe.features import FeaturePipeline
    from ethoscribe.io import read_pose

    seconds = frames = 0
    pipeline = None
    for f in _sessions(data):
        cleaned, _ = clean(read_pose(f, fps=30))
        t0 = time.perf_counter()
        if pipeline is None:
            pipeline = FeaturePipeline().fit([cleaned])
        feats = pipeline.transform(cleaned)
        seconds += time.perf_counter() - t0
        frames += cleaned.n_frames
    return {
        "frames_featurised": frames,
        "seconds_features": seconds,
        "n_features": feats[0].values.shape[1],
    }


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
    return {"frames_per_s": n / seconds, "seconds_decode": seconds}


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


def stage_stats(n: int, data: Path) -> dict:
    """Per-session metrics and every group test for invented labels of n frames, 16 sessions."""
    import pandas as pd

    sys.path.insert(0, str(HERE))
    from bench_ethogram import FPS, N_SESSIONS, invented_labels

    from ethoscribe.ethogram import bout_table
    from ethoscribe.stats import compare_groups, session_metrics

    labels = invented_labels(n)
    bouts = bout_table(labels, fps=FPS)
    sessions = pd.DataFrame(
        {
            "session": [f"s{i:02d}" for i in range(N_SESSIONS)],
            "group": np.random.default_rng(1).permutation(["a", "b"] * (N_SESSIONS // 2)),
        }
    )
    t = time.perf_counter()
    tests = compare_groups(session_metrics(labels, bouts, sessions, fps=FPS))
    return {"tests": len(tests), "seconds_stats": time.perf_counter() - t}


def stage_widget(n: int, data: Path) -> dict:
    """The workbench on a workspace of about n frames: open it, select a motif, rename one."""
    import statistics

    sys.path.insert(0, str(HERE))
    from bench_workbench import build

    from ethoscribe.widgets import Workbench

    folder = Path(tempfile.mkdtemp(prefix="bench-widget-"))
    path = build(folder, max(2, n // 9000))
    t = time.perf_counter()
    wb = Workbench(path)
    opened = time.perf_counter() - t
    motifs, select, rename = list(wb.state.motifs), [], []
    for i in range(5):
        t = time.perf_counter()
        wb.state.select_motif(motifs[(i + 1) % len(motifs)])
        select.append(time.perf_counter() - t)
        t = time.perf_counter()
        wb.desk.name.value = f"renamed_{i}"
        wb.desk.rename.click()
        rename.append(time.perf_counter() - t)
    wb.state.flush()
    wb.close()
    shutil.rmtree(folder, ignore_errors=True)
    return {
        "seconds_open": opened,
        "ms_select_motif": 1000 * statistics.median(select),
        "ms_rename": 1000 * statistics.median(rename),
    }


def stage_discover(n: int, data: Path, **options) -> dict:
    import pandas as pd
    from sklearn.metrics import adjusted_rand_score

    from ethoscribe.workspace import discover

    out = Path(tempfile.mkdtemp(prefix="bench-discover-"))
    # As the command line runs it: per-session work in one process per CPU.
    wall = time.perf_counter()
    ws = discover(
        [data], out / "ws", manifest=data / "manifest.csv", progress=False, jobs=None, **options
    )
    seconds = time.perf_counter() - wall
    # Peak of discover itself, before the comparison below loads every label and truth row.
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    labels = ws.state_labels()[["session", "frame", "state"]].merge(
        pd.read_parquet(
            data / "truth" / "frames.parquet", columns=["session", "frame", "behaviour"]
        ),
        on=["session", "frame"],
    )
    valid = labels[labels["state"] >= 0]
    n_states = ws.summary["n_states"]
    shutil.rmtree(out, ignore_errors=True)
    return {
        "seconds_discover": seconds,
        "peak_rss_discover_mb": peak,
        "n_states": n_states,
        "ari_vs_truth": adjusted_rand_score(valid["behaviour"].astype(str), valid["state"]),
    }


def stage_discover_k7(n: int, data: Path) -> dict:
    """discover doing what the reference does: 7 states given, no stability refits."""
    return stage_discover(n, data, states=7, stability=False)


def stage_reference(n: int, data: Path) -> dict:
    """The pipeline a user would write by hand: pandas + PCA + hmmlearn on every frame."""
    import pandas as pd
    from hmmlearn.hmm import GaussianHMM as ReferenceHMM
    from sklearn.decomposition import PCA
    from sklearn.metrics import adjusted_rand_score
    from sklearn.preprocessing import StandardScaler

    t = time.perf_counter()
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
    seconds = time.perf_counter() - t
    truth = pd.read_parquet(data / "truth" / "frames.parquet")
    return {
        "seconds_reference": seconds,
        "ari_vs_truth": adjusted_rand_score(truth["behaviour"].astype(str), state),
    }


def stage_matmul(n: int, data: Path) -> dict:
    """Matrix product throughput with every core and with one thread (the EM kernels run
    one thread per fit, so the one-thread figure is their ceiling)."""
    from threadpoolctl import threadpool_limits

    a = np.random.default_rng(0).normal(size=(2000, 2000))

    def rate() -> float:
        a @ a
        t = time.perf_counter()
        for _ in range(5):
            a @ a
        return 2 * 2000**3 / ((time.perf_counter() - t) / 5) / 1e9

    every = rate()
    with threadpool_limits(1):
        one = rate()
    return {"matmul_gflop_per_s": every, "matmul_1thread_gflop_per_s": one}


def stage_label_session(n: int, data: Path) -> dict:
    """Labelling a new session end to end (clean + features + Viterbi + posteriors + minimum
    bout) with a model fitted on another session; n frames (s00 repeated as needed)."""
    from ethoscribe.io import read_pose
    from ethoscribe.segment.model import BehaviourModel

    files = _sessions(data)
    model = BehaviourModel(n_states=7).fit([read_pose(files[0], fps=30)])
    new = read_pose(files[-1], fps=30)
    model.label([new.replace(coords=new.coords[:2000], confidence=new.confidence[:2000])])
    t = time.perf_counter()
    labels = model.label([new])
    seconds = time.perf_counter() - t
    return {"frames_labelled": len(labels), "frames_per_s": len(labels) / seconds,
            "seconds_labelling": seconds}  # fmt: skip


STAGES = {name[6:]: f for name, f in globals().items() if name.startswith("stage_")}
NEEDS_DATA = {"read", "clean", "features", "discover", "discover_k7", "reference", "label_session"}


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
    parser.add_argument(
        "--markdown", action="store_true", help="print results/suite.json as a Markdown table"
    )
    parser.add_argument("--child", nargs=3, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.markdown:
        print(_markdown(json.loads((RESULTS / "suite.json").read_text())))
        return
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
            if stage == "widget" and n > 1_000_000:
                continue  # building 1,100 inflated sessions takes longer than the point
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
    RESULTS.mkdir(exist_ok=True)
    # Rows of earlier runs for other (stage, size) pairs are kept: the table can be built in parts.
    path = RESULTS / "suite.json"
    done = {(r["stage"], r["frames"]) for r in rows}
    old = json.loads(path.read_text()) if path.exists() else []
    rows = [r for r in old if (r["stage"], r["frames"]) not in done] + rows
    _scaling(rows)
    tmp = path.with_suffix(".tmp")
    tmp.write_text(json.dumps(rows, indent=2))
    os.replace(tmp, path)
    print(f"wrote {path}")


def _markdown(rows: list[dict]) -> str:
    """The results as a Markdown table: one row per stage and size."""
    order = {name: i for i, name in enumerate(STAGES)}
    rows = sorted(rows, key=lambda r: (order.get(r["stage"], 99), r["frames"]))
    lines: list[str] = [
        "| stage | frames | wall s | cpu s | peak MB | scaling exponent | figures |",
        "|---|---:|---:|---:|---:|---:|---|",
    ]
    skip = {"stage", "frames", "wall_s", "cpu_s", "peak_rss_mb", "peak_rss_workers_mb"}
    skip.add("scaling_exponent_from_previous")
    for r in rows:
        if "error" in r:
            lines.append(f"| {r['stage']} | {r['frames']:,} | | | | | error: {r['error'][:80]} |")
            continue
        figures = ", ".join(
            f"{k} {v:.3g}" if isinstance(v, float) else f"{k} {v}"
            for k, v in r.items()
            if k not in skip
        )
        exponent = r.get("scaling_exponent_from_previous")
        lines.append(
            f"| {r['stage']} | {r['frames']:,} | {r['wall_s']:.2f} | {r['cpu_s']:.2f} | "
            f"{r['peak_rss_mb']:.0f} | {'' if exponent is None else f'{exponent:.2f}'} | "
            f"{figures} |"
        )
    return "\n".join(lines)


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


def _work_seconds(row: dict) -> float:
    own = [k for k in row if k.startswith("seconds_") and k != "seconds_open"]
    return float(row[own[0]]) if own else float(row["wall_s"])


def _scaling(rows: list[dict]) -> None:
    """Scaling exponent of a stage's time between consecutive sizes: t ~ n^b.

    The stage's own measured seconds (``seconds_*`` or ``seconds_per_iteration``) are used
    where it reports them, so start-up and data loading do not flatten the exponent.
    """
    by_stage: dict[str, list[dict]] = {}
    for r in rows:
        if "error" not in r:
            by_stage.setdefault(r["stage"], []).append(r)
    for stage, rs in by_stage.items():
        rs.sort(key=lambda r: r["frames"])
        for a, b in itertools.pairwise(rs):
            ta, tb = _work_seconds(a), _work_seconds(b)
            if ta > 0 and b["frames"] > a["frames"]:
                exp = math.log(tb / ta) / math.log(b["frames"] / a["frames"])
                b["scaling_exponent_from_previous"] = exp
                print(
                    f"{stage:>12} scaling exponent {a['frames']:,d} -> {b['frames']:,d}: {exp:.2f}"
                )


if __name__ == "__main__":
    main()
