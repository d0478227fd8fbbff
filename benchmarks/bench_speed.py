"""Speed of ``discover`` with its defaults against the plain reference pipeline, in one run.

Usage (from the repository root)::

    python -m benchmarks.bench_speed                     # 54,000 frames (own_voles) and 1e6
    python -m benchmarks.bench_speed --sizes 54000       # the small study only
    python -m benchmarks.bench_speed --compile           # first-run numba compile cost only
    python -m benchmarks.bench_speed --sizes 54000 --no-compile --no-reference  # stages only
    python -m benchmarks.bench_speed --sizes 54000 --no-reference \
        --segmenter '{"screening": "once"}'   # a variant of the default method's options

Studies: 54,000 frames are the bench's ``own_voles`` source (six example sessions of 9,000
frames); 1,000,000 frames are simulated once by the package's simulator (ten sessions of
100,000 frames, invented voles) into ``--data`` and reused. Both carry per-frame truth.

``discover``: :func:`ethoscribe.workspace.discover` with every default (automatic state
count, stability refits, one process), reading the files and writing the workspace. The
``reference``: the bench's plain pipeline (``benchmarks/validity/pipelines.py``: pandas
gap filling, scikit-learn PCA, hmmlearn ``GaussianHMM`` with full covariance on every frame,
given the true state count), on tracks already in memory. Both are scored by ARI against the
truth over the frames each labels. The ratio is reference seconds / discover seconds of the
same run; the machine may be shared, so CPU seconds are printed beside wall seconds.
The stages inside discover (state count, final fit, stability, labelling) are timed by
wrapping the library calls.

``--segmenter``: options (JSON) added to the default method's own options for this run
(every fit of ``discover`` gets them: the state count's, the final and the stability refits),
to time a variant against the defaults without editing code.

``--compile``: the numba compile cost of a first run: a small discover in a fresh process with
an empty numba cache, then again with the cache it left; the difference is the compile cost.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from benchmarks.bench_discover import STAGES, _timed  # one stage timer for both benchmarks


def _instrument() -> None:
    from ethoscribe.segment import model as model_module
    from ethoscribe.segment.hmm import GaussianHMM
    from ethoscribe.workspace import runs

    for owner, attr, name in [
        (runs, "_prepare", "read + clean"),
        (model_module, "choose_n_states", "state count"),
        (GaussianHMM, "fit", "final fit"),
        (runs, "_stability", "stability"),
        (runs, "_decode", "features + labels"),
        (runs, "_write_workspace", "write"),
    ]:
        setattr(owner, attr, _timed(name, getattr(owner, attr)))


def _with_options(options: dict) -> None:
    """Add ``options`` to the default method's registered options (this process only)."""
    from dataclasses import replace

    from ethoscribe.segment.registry import get_segmenter, register

    spec = get_segmenter("hmm")
    register(replace(spec, options={**spec.options, **options}), replace=True)


def _study(data: Path, n_frames: int) -> Path:
    """The folder of a study of ``n_frames`` (the example voles at 54,000)."""
    if n_frames == 54_000:
        return Path(__file__).resolve().parents[1] / "example_sessions"
    from ethoscribe.simulate import simulate_study
    from ethoscribe.simulate.examples import write_study

    folder = data / f"n{n_frames}"
    if not (folder / "manifest.csv").exists():
        sessions, truths, manifest = simulate_study(
            n_per_group=5, duration_s=n_frames / 10 / 30.0, fps=30.0, seed=0
        )
        write_study(folder, sessions, truths, manifest)
    return folder


def _source(folder: Path, n_frames: int):
    from benchmarks.validity.sources.own_simulator import VOLE_SESSIONS, load_folder

    if n_frames == 54_000:
        return load_folder(folder, "study", VOLE_SESSIONS)
    import benchmarks.validity.sources.own_simulator as own

    root, own.ROOT = own.ROOT, folder.parent  # the simulated study lies outside the examples
    try:
        return load_folder(folder, "study")
    finally:
        own.ROOT = root


def _ari(src, labels: dict) -> tuple[float, float]:
    """ARI over frames with a truth and a label, and the share of truth frames unlabelled."""
    from sklearn.metrics import adjusted_rand_score

    t = np.concatenate([src.truth[k] for k in src.truth])
    f = np.concatenate([labels[k] for k in src.truth])
    keep = (t >= 0) & (f >= 0)
    return float(adjusted_rand_score(t[keep], f[keep])), float(1 - keep.sum() / (t >= 0).sum())


def run_size(n_frames: int, data: Path, seed: int, reference: bool = True) -> dict:
    from benchmarks.validity.pipelines import run_reference

    from ethoscribe.workspace import discover

    folder = _study(data, n_frames)
    src = _source(folder, n_frames)
    frames = sum(s.n_frames for s in src.sessions)
    manifest = folder / "manifest.csv"
    import pandas as pd

    listed = pd.read_csv(manifest)
    keep = listed["session"].isin([s.session for s in src.sessions])
    paths = [folder / p for p in listed.loc[keep, "path"]]
    STAGES.clear()
    out = Path(tempfile.mkdtemp(prefix="bench-speed-"))
    wall, cpu = time.perf_counter(), time.process_time()
    ws = discover(paths, out / "ws", manifest=manifest, progress=False, seed=seed)
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    table = ws.state_labels()
    labels = {
        (str(s), str(a)): part["state"].to_numpy()
        for (s, a), part in table.groupby(["session", "animal"], sort=False)
    }
    ari, unscored = _ari(src, labels)
    n_states = int(ws.summary["n_states"])
    shutil.rmtree(out, ignore_errors=True)
    mine = {
        "frames": frames,
        "discover_wall_s": wall,
        "discover_cpu_s": cpu,
        "discover_ari": ari,
        "discover_unscored": unscored,
        "discover_states": n_states,
        "stages": {k: [round(v[0], 2), round(v[1], 2)] for k, v in STAGES.items()},
    }
    if not reference:
        return mine
    ref_labels, ref = run_reference(src, seed)
    ref_ari, _ = _ari(src, ref_labels)
    return {
        **mine,
        "reference_wall_s": ref["seconds"],
        "reference_cpu_s": ref["cpu_seconds"],
        "reference_ari": ref_ari,
        "reference_states": ref["n_states_model"],
        "ratio_wall": ref["seconds"] / wall,
        "ratio_cpu": ref["cpu_seconds"] / cpu,
    }


_COMPILE_CHILD = """
import sys, time
from pathlib import Path
t, c = time.perf_counter(), time.process_time()
from ethoscribe.simulate import simulate_session
from ethoscribe.segment.model import BehaviourModel
tracks, _ = simulate_session(duration_s=60, seed=1)
m = BehaviourModel(n_states=3).fit([tracks])
m.label([tracks])
print(time.perf_counter() - t, time.process_time() - c)
"""


def compile_cost() -> dict:
    """Seconds of a small fit + label in a fresh process, numba cache empty then warm."""
    cache = Path(tempfile.mkdtemp(prefix="bench-numba-"))
    env = {**os.environ, "NUMBA_CACHE_DIR": str(cache), "PYTHONWARNINGS": "ignore"}
    runs = []
    for _ in range(2):
        done = subprocess.run(
            [sys.executable, "-c", _COMPILE_CHILD], env=env, capture_output=True, text=True
        )
        runs.append([float(v) for v in done.stdout.split()[-2:]])
    shutil.rmtree(cache, ignore_errors=True)
    (cold, cold_cpu), (warm, warm_cpu) = runs
    return {
        "cold_wall_s": cold,
        "cold_cpu_s": cold_cpu,
        "warm_wall_s": warm,
        "warm_cpu_s": warm_cpu,
        "compile_wall_s": cold - warm,
        "compile_cpu_s": cold_cpu - warm_cpu,
    }


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", nargs="+", type=int, default=[54_000, 1_000_000])
    parser.add_argument("--data", type=Path, default=Path(tempfile.gettempdir()) / "es-speed")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--compile", action="store_true", help="measure the compile cost only")
    parser.add_argument("--no-compile", action="store_true", help="skip the compile cost")
    parser.add_argument(
        "--no-reference", action="store_true", help="time discover and its stages only"
    )
    parser.add_argument("--json", type=Path, help="also write the results here")
    parser.add_argument(
        "--segmenter", type=json.loads, default={}, help="JSON options of the default method"
    )
    args = parser.parse_args(argv)
    if args.segmenter:
        _with_options(args.segmenter)
    results: dict = {"load_average": os.getloadavg()}
    results["compile"] = c = compile_cost() if args.compile or not args.no_compile else None
    if c:
        print(
            f"first-run compile: {c['compile_wall_s']:.1f} s wall "
            f"({c['compile_cpu_s']:.1f} s CPU); "
            f"cold {c['cold_wall_s']:.1f} s, warm {c['warm_wall_s']:.1f} s",
            flush=True,
        )
    if not args.compile:
        _instrument()
        for n in args.sizes:
            r = run_size(n, args.data, args.seed, reference=not args.no_reference)
            results[str(n)] = r
            ratio = (
                f" | reference {r['reference_wall_s']:.1f} s ({r['reference_cpu_s']:.1f} s CPU), "
                f"ARI {r['reference_ari']:.2f} | ratio {r['ratio_wall']:.2f}x wall, "
                f"{r['ratio_cpu']:.2f}x CPU"
                if "reference_ari" in r
                else ""
            )
            print(
                f"{r['frames']:>9,d} frames: discover {r['discover_wall_s']:.1f} s wall "
                f"({r['discover_cpu_s']:.1f} s CPU), ARI {r['discover_ari']:.2f}, "
                f"{r['discover_states']} states, {r['discover_unscored']:.1%} unscored{ratio}",
                flush=True,
            )
            stages = ", ".join(f"{k} {w:.1f}/{c:.1f}" for k, (w, c) in r["stages"].items())
            print(f"    stages (wall/CPU s): {stages}", flush=True)
    results["load_average_end"] = os.getloadavg()
    if args.json:
        args.json.write_text(json.dumps(results, indent=2) + "\n")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
