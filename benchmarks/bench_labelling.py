"""Labelling variants on the validation bench: one fit per source, labels under each variant.

Decoding and the minimum bout act only when labelling, so every variant of them can share one
fit of the default model: the bench's sources and scores (``benchmarks.validity``), the
ethoscribe pipeline's defaults (``random_state=seed``, the lowest rate where rates are mixed),
then ``label`` once per variant. Besides the bench's scores it reports the share of scored
frames whose own label has probability < 0.01 and the mean of that probability; in brackets,
that share for the same labels under the minimum-duration chain of the same bout without
outlier frames (would the chain's posteriors suit merged labels?).

Usage: python -m benchmarks.bench_labelling [--source NAME ...] [--out results/labelling]
       (about as long as one bench run without the reference: 3-6 min of CPU)
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

import numpy as np
from benchmarks.validity.pipelines import native_labels
from benchmarks.validity.scoring import score_units
from benchmarks.validity.sources import LOADERS
from benchmarks.validity.sources import independent as independent_source

from ethoscribe.segment.model import stack_valid

VARIANTS = {  # name: BehaviourModel labelling parameters
    "merge 0.5 s": {"decoding": "merge", "min_bout_s": 0.5},
    "min_duration 0.5 s": {"decoding": "min_duration", "min_bout_s": 0.5},
    "merge 0.25 s": {"decoding": "merge", "min_bout_s": 0.25},
    "merge 1 s": {"decoding": "merge", "min_bout_s": 1.0},
    "min_duration 0.25 s": {"decoding": "min_duration", "min_bout_s": 0.25},
    "min_duration 1 s": {"decoding": "min_duration", "min_bout_s": 1.0},
    "no minimum": {"decoding": "merge", "min_bout_s": 0.0},
}


def run_source(name: str, seed: int) -> dict:
    from ethoscribe.segment.model import BehaviourModel

    src = LOADERS[name](seed=seed)
    rates = sorted({float(s.fps) for s in src.sessions})
    cleaning = {"target_fps": rates[0]} if len(rates) > 1 else None
    t = time.process_time()
    model = BehaviourModel(cleaning=cleaning, random_state=seed).fit(src.sessions)
    feats, _ = model.transform_features(src.sessions)
    X, lengths = stack_valid(feats)
    out = {"fit_cpu_s": time.process_time() - t, "n_states_model": int(model.n_states_)}
    for variant, params in VARIANTS.items():
        model.set_params(**params)
        t = time.process_time()
        table = model.label_features(feats)
        cpu = time.process_time() - t
        scored = table[table["state"] >= 0]
        own = scored["probability"].to_numpy()
        scores = score_units(src.truth, native_labels(src, table), src.unit_fps)
        # the same labels' probability under the minimum-duration chain of the same bout
        d = max(1, round(params["min_bout_s"] * model.fps_))
        chain = model.segmenter_.predict_min_duration(X, lengths, d)[1]
        states = scored["state"].to_numpy()
        own_chain = chain[np.arange(len(states)), states]
        out[variant] = {
            "ari": scores["ari"],
            "boundary_f1": scores["boundary_f1"],
            "states": scores["states_found"],
            "low_probability_share": float((own < 0.01).mean()),
            "mean_probability": float(own.mean()),
            "chain_low_probability_share": float((own_chain < 0.01).mean()),
            "bouts": int((np.diff(table["state"].to_numpy()) != 0).sum()),
            "label_cpu_s": cpu,
        }
        print(f"  {name} / {variant}: {out[variant]}", flush=True)
    return out


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--source", action="append", choices=sorted(LOADERS))
    parser.add_argument("--out", type=Path, default=Path("results") / "labelling")
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args(argv)
    args.out.mkdir(parents=True, exist_ok=True)
    independent_source.DATA_DIR[0] = args.out / "independent_sim_data"
    results = {name: run_source(name, args.seed) for name in args.source or list(LOADERS)}
    (args.out / "labelling.json").write_text(json.dumps(results, indent=1))
    print("| source | " + " | ".join(VARIANTS) + " |")
    print("|---|" + "---:|" * len(VARIANTS))
    for name, res in results.items():
        cells = [
            f"{res[v]['ari']:.2f} / {res[v]['boundary_f1']:.2f} / {res[v]['states']} / "
            f"{100 * res[v]['low_probability_share']:.1f} % "
            f"({100 * res[v]['chain_low_probability_share']:.1f} %)"
            for v in VARIANTS
        ]
        print(f"| {name} | " + " | ".join(cells) + " |")
    means = [
        f"{np.mean([r[v]['ari'] for r in results.values()]):.3f} / "
        f"{np.mean([r[v]['boundary_f1'] for r in results.values()]):.3f}"
        for v in VARIANTS
    ]
    print("| mean ARI / boundary F1 | " + " | ".join(means) + " |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
