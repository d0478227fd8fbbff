"""Discovery end to end on a simulated study: seconds per stage, peak memory, decoding speed.

Usage::

    python benchmarks/bench_discover.py                      # 100,000 frames
    python benchmarks/bench_discover.py --frames 1000000     # 1e6 frames (~3 min budget)
    python benchmarks/bench_discover.py --frames 1000000 --keypoints 10

The study is simulated (invented dune voles, known behaviour) and written to a temporary
folder as Parquet first (not timed). With ``--keypoints 12`` (default) two invented keypoints
are added to the vole's 10: ``mid_back`` between neck and body centre and ``hip`` between body
centre and tail base, each with its own jitter. Then ``ethoscribe.workspace.discover`` runs
with its defaults (``states="auto"``) and ``stability=False``. Stages are timed by wrapping the
library calls ``discover`` makes (read + clean and features + labels run per session in
worker processes; the fitting sample, the features' fit, the state-count choice, the final
fit and writing run in this one); time outside them is "other".
Decoding a new session is timed on a further simulated session (clean + features + labels,
and labels alone). Each run is one process: ``ru_maxrss`` is its peak resident memory.

The machine may be shared: read CPU time beside wall time, and compare within one run.
"""

from __future__ import annotations

import argparse
import functools
import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

STAGES: dict[str, list[float]] = {}
_ACTIVE: list[str] = []


def _timed(name: str, func):
    """Wrap ``func`` so that its outermost calls add wall and CPU seconds to ``name``."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        if _ACTIVE:  # nested inside another timed stage: counted there
            return func(*args, **kwargs)
        _ACTIVE.append(name)
        wall, cpu = time.perf_counter(), time.process_time()
        try:
            return func(*args, **kwargs)
        finally:
            acc = STAGES.setdefault(name, [0.0, 0.0])
            acc[0] += time.perf_counter() - wall
            acc[1] += time.process_time() - cpu
            _ACTIVE.pop()

    return wrapper


def _instrument() -> None:
    from ethoscribe.features import FeaturePipeline
    from ethoscribe.segment import model as model_module
    from ethoscribe.segment.hmm import GaussianHMM
    from ethoscribe.workspace import runs

    targets = [
        (runs, "_prepare", "read + clean"),  # in worker processes: CPU of children below
        (runs, "_training_sample", "fitting sample"),
        (FeaturePipeline, "fit_transform", "features (fit)"),
        (model_module, "choose_n_states", "state count"),
        (GaussianHMM, "fit", "final fit"),
        (runs, "_decode", "features + labels"),  # in worker processes
        (runs, "_write_workspace", "write"),
    ]
    for owner, attr, name in targets:
        if hasattr(owner, attr):
            setattr(owner, attr, _timed(name, getattr(owner, attr)))


def add_keypoints(tracks, rng: np.random.Generator):
    """The vole's tracks with two invented keypoints (12 in all), jittered like the others."""
    kp = list(tracks.keypoints)
    c = tracks.coords
    neck, centre, tail = (kp.index(n) for n in ("neck", "body_centre", "tail_base"))
    extra = np.stack(
        [(c[:, :, neck] + c[:, :, centre]) / 2, (c[:, :, centre] + c[:, :, tail]) / 2], 2
    )
    extra = extra + rng.normal(0, 1.5, extra.shape)  # 1.5 px, the simulator's body jitter
    conf = tracks.confidence
    extra_conf = np.stack(
        [
            np.fmin(conf[:, :, neck], conf[:, :, centre]),
            np.fmin(conf[:, :, centre], conf[:, :, tail]),
        ],
        2,
    )
    return tracks.replace(
        coords=np.concatenate([c, extra], axis=2),
        confidence=np.concatenate([conf, extra_conf], axis=2),
        keypoints=(*kp, "mid_back", "hip"),
    )


def write_study(folder: Path, frames: int, n_sessions: int, keypoints: int, seed: int = 0):
    from ethoscribe.simulate import simulate_study
    from ethoscribe.simulate.examples import write_study as write

    per = frames // n_sessions
    sessions, truths, manifest = simulate_study(
        n_per_group=n_sessions // 2, duration_s=per / 30.0, fps=30.0, seed=seed
    )
    if keypoints == 12:
        rng = np.random.default_rng(seed)
        sessions = [add_keypoints(s, rng) for s in sessions]
    write(folder, sessions, truths, manifest)
    return sum(s.n_frames for s in sessions)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--frames", type=int, default=100_000)
    parser.add_argument("--sessions", type=int, default=0, help="default: frames / 50,000")
    parser.add_argument("--keypoints", type=int, choices=(10, 12), default=12)
    args = parser.parse_args(argv)
    n_sessions = args.sessions or max(2, 2 * round(args.frames / 100_000))
    from ethoscribe.workspace import discover

    _instrument()
    with tempfile.TemporaryDirectory() as tmp:
        study, out = Path(tmp) / "study", Path(tmp) / "workspace"
        t = time.perf_counter()
        n = write_study(study, args.frames, n_sessions, args.keypoints)
        print(
            f"simulated and wrote {n:,d} frames x {args.keypoints} keypoints in "
            f"{n_sessions} sessions: {time.perf_counter() - t:.1f} s (not timed below)"
        )
        wall, cpu = time.perf_counter(), time.process_time()
        ws = discover([study], out, manifest=study / "manifest.csv", progress=False,
                      stability=False)  # fmt: skip
        wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
        children = resource.getrusage(resource.RUSAGE_CHILDREN)
        for name, (w, c) in STAGES.items():
            print(f"  {name:18s} wall {w:7.2f} s  cpu {c:7.2f} s")
        other = wall - sum(w for w, _ in STAGES.values())
        print(f"  {'other':18s} wall {other:7.2f} s")
        print(
            f"discover: {n:,d} frames, wall {wall:.1f} s, cpu {cpu:.1f} s "
            f"(+ {children.ru_utime + children.ru_stime:.1f} s in worker processes), "
            f"{ws.summary['n_states']} states chosen"
        )
        _agreement(ws, study)
        _decode_speed(ws, args.keypoints)
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    workers = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
    print(f"peak RSS {peak:,.0f} MB (largest worker process {workers:,.0f} MB)")
    return 0


def _agreement(ws, study: Path) -> None:
    """Adjusted Rand index with the simulated truth on valid frames (scikit-learn), and
    boundary F1 within 0.2 s over every true boundary."""
    import pandas as pd
    from sklearn.metrics import adjusted_rand_score

    from ethoscribe.segment.agreement import boundary_f1, label_boundaries

    truth = pd.read_parquet(study / "truth" / "frames.parquet")
    merged = ws.state_labels().merge(truth, on=["session", "frame"], suffixes=("", "_true"))
    valid = merged[merged["state"] >= 0]
    counts = np.zeros(3)
    for _, part in merged.groupby("session", observed=True):
        state = part["state"].to_numpy()
        found = label_boundaries(state)
        found = found[(state[found] >= 0) & (state[found - 1] >= 0)]
        score = boundary_f1(label_boundaries(part["state_true"].to_numpy()), found, 6)
        counts += (score.n_true, score.n_predicted, score.n_matched)
    precision, recall = counts[2] / counts[1], counts[2] / counts[0]
    f1 = 2 * precision * recall / (precision + recall)
    ari = adjusted_rand_score(valid["state_true"], valid["state"])
    print(f"agreement with the simulated truth: ARI {ari:.3f} on {len(valid):,d} valid frames "
          f"({len(valid) / len(merged):.0%}), boundary F1 (0.2 s) {f1:.3f}")  # fmt: skip


def _decode_speed(ws, keypoints: int) -> None:
    """Label a new simulated session of 100,000 frames with the fitted model."""
    from ethoscribe.clean import calibrate
    from ethoscribe.simulate import simulate_session

    model = ws.model()
    tracks, _ = simulate_session(duration_s=100_000 / 30, seed=99, session="new")
    if keypoints == 12:
        tracks = add_keypoints(tracks, np.random.default_rng(99))
    tracks = calibrate(tracks, float(tracks.meta["px_per_unit"]), "mm")
    STAGES.clear()
    n, best = tracks.n_frames, [np.inf, np.inf]
    for _ in range(2):  # the first call also loads compiled kernels: keep the faster run
        wall = time.perf_counter()
        feats, _ = model.transform_features([tracks])
        mid = time.perf_counter()
        model.label_features(feats)
        end = time.perf_counter()
        best = [min(best[0], end - wall), min(best[1], end - mid)]
    print(
        f"new session of {n:,d} frames: clean + features + labels {n / best[0]:,.0f} frames/s; "
        f"labels alone (Viterbi, posteriors, min bout) {n / best[1]:,.0f} frames/s"
    )


if __name__ == "__main__":
    sys.exit(main())
