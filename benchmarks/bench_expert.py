"""Expert coding on the bundled example sessions, their truth playing the expert.

Usage::

    python benchmarks/bench_expert.py                       # discover into a temporary folder
    python benchmarks/bench_expert.py --workspace WS        # reuse a discover workspace of them

Prints (1) the agreement of the discovered motifs with the truth (``ethoscribe agreement``) and
(2) the learning curve: the classifier of ``ethoscribe learn`` fitted on the truth of the first
1 to 8 sessions of a fixed order (standard and enriched sessions alternating: 01, 09, 02, 10,
...), each time scored on every frame of the 8 sessions never coded at any step (a frame left
unlabelled counts as wrong). The classifier is the one ``learn`` saves, called directly so that
each step does not rewrite a workspace.

Everything here is simulated (invented animals): a result that holds only on our own simulator
is a result about our simulator.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ROOT / "example_sessions"
ORDER = [f"session_{i:02d}" for pair in zip(range(1, 9), range(9, 17), strict=True) for i in pair]


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--workspace", type=Path, help="an existing discover workspace")
    parser.add_argument("--max-coded", type=int, default=8)
    args = parser.parse_args(argv)
    sys.path.insert(0, str(ROOT / "src"))
    from ethoscribe.segment.supervised import BehaviourClassifier
    from ethoscribe.workspace import Workspace, discover, expert

    tmp = Path(tempfile.mkdtemp(prefix="bench_expert_"))
    truth = pd.read_parquet(EXAMPLES / "truth" / "frames.parquet")
    truth = truth.astype({"session": str, "animal": str, "behaviour": str})
    truth.to_csv(tmp / "truth.csv", index=False)
    if args.workspace is None:
        t0 = time.perf_counter()
        ws = discover([], tmp / "ws", manifest=EXAMPLES / "manifest.csv", progress=False, jobs=1)
        print(f"discover: {time.perf_counter() - t0:.1f} s")
    else:
        ws = Workspace(args.workspace)

    t0 = time.perf_counter()
    result = expert.agreement(ws, tmp / "truth.csv", tmp / "agreement")
    print(f"agreement ({time.perf_counter() - t0:.1f} s):")
    for key in ("ari", "nmi", "matched_accuracy", "purity", "boundary_f1", "precision", "recall"):
        print(f"  {key:17s} {result.summary[key]:.3f}")
    print(f"  frames compared {result.summary['frames_compared']}, unscored "
          f"{result.summary['frames_unscored']}")  # fmt: skip
    print(result.per_behaviour.round(3).to_string(index=False))

    model = ws.model()
    feats = expert.recording_features(ws)
    X = expert.classifier_inputs(model, feats)
    index = {str(f.session): i for i, f in enumerate(feats)}
    by_session = {s: g for s, g in truth.groupby("session")}
    y = {s: g.sort_values("frame")["behaviour"].to_numpy(object) for s, g in by_session.items()}
    test = ORDER[args.max_coded :]
    rows = []
    for k in range(1, args.max_coded + 1):
        coded = ORDER[:k]
        t0 = time.perf_counter()
        clf = BehaviourClassifier(fps=float(model.fps_)).fit(
            np.concatenate([X[index[s]] for s in coded]),
            np.concatenate([y[s] for s in coded]),
            [len(X[index[s]]) for s in coded],
        )
        fit_s = time.perf_counter() - t0
        true, pred = [], []
        for s in test:
            codes = clf.predict(X[index[s]], [len(X[index[s]])])
            pred.append(np.append(clf.classes_, "").astype(object)[codes])
            true.append(y[s])
        true, pred = np.concatenate(true), np.concatenate(pred)
        from sklearn.metrics import f1_score

        acc = float((true == pred).mean())
        macro = f1_score(true, pred, labels=sorted(set(true)), average="macro", zero_division=0)
        rows.append({"coded_sessions": k, "coded_minutes": 5 * k, "accuracy_unseen": acc,
                     "macro_f1_unseen": macro, "unlabelled": float((pred == "").mean()),
                     "fit_s": fit_s})  # fmt: skip
        print(f"coded {k}: accuracy {acc:.3f}, macro F1 {macro:.3f} ({fit_s:.1f} s)", flush=True)
    curve = pd.DataFrame(rows)
    print(curve.round(3).to_string(index=False))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
