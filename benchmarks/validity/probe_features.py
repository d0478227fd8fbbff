"""Where is the information that tells confused activities apart lost? A supervised probe.

Usage (from the repository root)::

    python -m benchmarks.validity.probe_features                       # real_hapt and basic_motions
    python -m benchmarks.validity.probe_features --source real_hapt --seed 0
    python -m benchmarks.validity.probe_features --params '{"features": {...}}'   # a variant

The bench's own loaders (``benchmarks.validity.sources``) give the tracks, so the input is
exactly what the validation bench feeds. For every stage of the pipeline a linear classifier
is trained on the truth and scored on sessions it did not see (scikit-learn ``GroupKFold``
by session; balanced accuracy, chance = 1 / classes):

- ``raw``: the sensor channels as loaded (the keypoints' heights), per frame;
- ``raw mean <w> s``: the same averaged over a centred window of w seconds (1, 2, 4);
- ``raw mean+sd <w> s``: the window's mean and standard deviation of every channel;
- ``cleaned``: the channels after the model's cleaning (and the keypoint filler);
- ``features``: the model's whole feature matrix (``BehaviourModel.features_``), per frame,
  and averaged over 2 s;
- each feature family alone (posture components, height, speeds, band amplitudes), per
  frame and averaged over 2 s;
- ``states``: the fitted model's labelled states (and ``fine states``, the HMM's own states
  before joining) one-hot: what of the activity the unsupervised model kept;
- ``..., session median off``: raw channels and features with each session's median taken
  off every column: what offsets that last a whole session (where the sensor sits on each
  volunteer) hide.

``--within-session`` scores instead within each session (5-fold cross-validation over blocks
of 30 s, mean over sessions): what a model fitted per individual could find.

Two classifiers, the outside reference: ``LinearDiscriminantAnalysis(solver="lsqr",
shrinkage="auto")`` (Ledoit-Wolf shrinkage, sound with correlated columns) and
``StandardScaler + LogisticRegression``. Every fifth frame is used (frames are correlated far
longer than that; it keeps the probe to about a minute per source).

If the stages before the model separate a pair and the states do not, the loss is in the
unsupervised model; if ``features`` falls below ``cleaned``, in the features (the families
say which); if ``cleaned`` falls below ``raw``, in cleaning.
"""

from __future__ import annotations

import argparse
import json
import time
import warnings

import numpy as np
from benchmarks.validity.pipelines import native_labels
from benchmarks.validity.sources import LOADERS
from scipy.ndimage import uniform_filter1d
from sklearn.discriminant_analysis import LinearDiscriminantAnalysis
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import balanced_accuracy_score
from sklearn.model_selection import GroupKFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

# The confused activities of each source (benchmarks/README.md, "Why the real recordings have
# too many boundaries"), plus every activity at once.
TASKS = {
    "real_hapt": {
        "all six": None,
        "sitting / standing": ["sitting", "standing"],
        "walking / up / down": ["walking", "walking_upstairs", "walking_downstairs"],
    },
    "basic_motions": {
        "all four": None,
        "standing / walking": ["standing", "walking"],
        "badminton / running": ["badminton", "running"],
    },
}
WINDOWS_S = (1.0, 2.0, 4.0)
FEATURE_WINDOW_S = 2.0
STRIDE = 5


def family(column: str) -> str:
    """The family of a compact feature column."""
    if column.startswith("posture_pc"):
        return "posture components"
    if column.startswith("height_"):
        return "height"
    if "_band_" in column:
        return "band amplitudes"
    if "speed" in column:
        return "speeds"
    return "other"


def windowed(x: np.ndarray, frames: int, sd: bool = False) -> np.ndarray:
    """Centred moving average of every column over ``frames`` (and the moving SD beside it)."""
    mean = uniform_filter1d(x, frames, axis=0, mode="nearest")
    if not sd:
        return mean
    square = uniform_filter1d(x * x, frames, axis=0, mode="nearest")
    return np.hstack([mean, np.sqrt(np.maximum(square - mean * mean, 0.0))])


BLOCK_S = 30.0  # --within-session: folds are blocks of this many seconds


def score(
    blocks: list[np.ndarray],
    truth: list[np.ndarray],
    names: list[str],
    wanted,
    fps: float = 25.0,
    within: bool = False,
):
    """Balanced accuracy (LDA, logistic regression) of a task, cross-validated by session
    (``within``: by 30-s blocks inside each session, mean over sessions)."""
    X, y, g = [], [], []
    for i, (x, t) in enumerate(zip(blocks, truth, strict=True)):
        keep = np.zeros(len(t), dtype=bool)
        keep[::STRIDE] = True
        keep &= t >= 0
        if wanted is not None:
            keep &= np.isin(t, [names.index(w) for w in wanted])
        keep &= np.isfinite(x).all(1)
        X.append(x[keep])
        y.append(t[keep])
        g.append(np.flatnonzero(keep) // round(BLOCK_S * fps) if within else np.full(keep.sum(), i))
    if within:
        scores = [
            _cross_validated(xs, ys, gs, 5)
            for xs, ys, gs in zip(X, y, g, strict=True)
            if len(np.unique(ys)) > 1 and len(np.unique(gs)) >= 5
        ]
        return list(np.mean(scores, axis=0))
    X, y, g = np.vstack(X), np.concatenate(y), np.concatenate(g)
    return _cross_validated(X, y, g, min(len(blocks), 6))


def _cross_validated(X: np.ndarray, y: np.ndarray, g: np.ndarray, n_splits: int) -> list[float]:
    folds = GroupKFold(n_splits=n_splits)
    out = []
    for make in (
        lambda: LinearDiscriminantAnalysis(solver="lsqr", shrinkage="auto"),
        lambda: make_pipeline(StandardScaler(), LogisticRegression(max_iter=1000)),
    ):
        pred = np.empty_like(y)
        for train, test in folds.split(X, y, g):
            if len(np.unique(y[train])) < 2:  # a fold that saw one class predicts it
                pred[test] = y[train][0]
                continue
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                pred[test] = make().fit(X[train], y[train]).predict(X[test])
        out.append(balanced_accuracy_score(y, pred))
    return out


def one_hot(labels: np.ndarray, n_codes: int) -> np.ndarray:
    codes = np.arange(n_codes)
    out = (labels[:, None] == codes[None]).astype(float)
    out[labels < 0] = np.nan
    return out


def stages(name: str, seed: int, params: dict | None) -> tuple[dict, list, list[str]]:
    """Every stage's per-frame matrix of every unit, the truth per unit, activity names."""
    from ethoscribe.segment.model import BehaviourModel

    src = LOADERS[name](seed=seed)
    keys = [(s.session, a) for s in src.sessions for a in s.animals]
    truth = [src.truth[k] for k in keys]
    fps = float(src.sessions[0].fps)
    raw = [s.coords[:, 0, :-1, 2] for s in src.sessions]  # the channels (the last is "base")
    out: dict[str, list[np.ndarray]] = {"raw": raw}
    for w in WINDOWS_S:
        out[f"raw mean {w:g} s"] = [windowed(x, round(w * fps)) for x in raw]
    for w in WINDOWS_S:
        out[f"raw mean+sd {w:g} s"] = [windowed(x, round(w * fps), sd=True) for x in raw]
    params = dict(params or {})
    cleaning = params.pop("cleaning", None)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        model = BehaviourModel(cleaning=cleaning, random_state=seed, **params).fit(src.sessions)
        cleaned, _ = model._clean_all(src.sessions, model.cleaning_)
        feats = model.featurise_cleaned(cleaned)
        table = model.label(src.sessions)
    out["cleaned"] = [c.coords[:, 0, :-1, 2] for c in cleaned]
    columns = list(feats[0].columns)
    values = [f.values for f in feats]
    frames = round(FEATURE_WINDOW_S * fps)
    out["features"] = values
    out[f"features mean {FEATURE_WINDOW_S:g} s"] = [windowed(v, frames) for v in values]
    for fam in dict.fromkeys(family(c) for c in columns):
        idx = [j for j, c in enumerate(columns) if family(c) == fam]
        out[f"  {fam} ({len(idx)})"] = [v[:, idx] for v in values]
        out[f"  {fam} mean {FEATURE_WINDOW_S:g} s"] = [windowed(v[:, idx], frames) for v in values]
    for stage in ("raw", "raw mean+sd 2 s", "features", f"features mean {FEATURE_WINDOW_S:g} s"):
        out[f"{stage}, session median off"] = [x - np.nanmedian(x, axis=0) for x in out[stage]]
    states = native_labels(src, table)
    out[f"states ({model.n_states_})"] = [one_hot(states[k], model.n_states_) for k in keys]
    if "fine_state" in table:
        fine = native_labels(src, table.assign(state=table["fine_state"]))
        n_fine = int(model.segmenter_.n_states_)
        out[f"fine states ({n_fine})"] = [one_hot(fine[k], n_fine) for k in keys]
    return out, truth, src.behaviours, fps


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--source", action="append", choices=sorted(TASKS))
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--params", default=None, help="BehaviourModel parameters (JSON)")
    parser.add_argument("--json", default=None, help="also write the table here")
    parser.add_argument(
        "--within-session",
        action="store_true",
        help="cross-validate within each session (30-s blocks) instead of across sessions",
    )
    args = parser.parse_args(argv)
    params = json.loads(args.params) if args.params else None
    results = {}
    for name in args.source or list(TASKS):
        t = time.perf_counter()
        blocks, truth, names, fps = stages(name, args.seed, params)
        tasks = TASKS[name]
        how = "within sessions (30-s blocks)" if args.within_session else "by session"
        print(f"\n{name} (seed {args.seed}): balanced accuracy LDA / logistic, {how}")
        print("| stage | " + " | ".join(tasks) + " |")
        print("|---|" + "---|" * len(tasks))
        rows = {}
        for stage, xs in blocks.items():
            cells = {
                task: score(xs, truth, names, wanted, fps, args.within_session)
                for task, wanted in tasks.items()
            }
            rows[stage] = cells
            text = " | ".join(f"{a:.2f} / {b:.2f}" for a, b in cells.values())
            print(f"| {stage} | {text} |", flush=True)
        results[name] = rows
        print(f"({time.perf_counter() - t:.0f} s)")
    if args.json:
        with open(args.json, "w") as f:
            json.dump(results, f, indent=1)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
