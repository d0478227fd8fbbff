"""The two pipelines every source goes through, on the same tracks.

``ethoscribe``: ``BehaviourModel(random_state=seed)`` with every other parameter at its
default (automatic state count, default cleaning, features and minimum bout), fitted on all
sessions of the source at once and then labelling them (``fit`` then ``label``, the calls
``ethoscribe.workspace.discover`` makes; the bench skips discover's files and stability
refits, which do not change the labels). The ``state`` column is scored. When a source's
sessions have different frame rates the model refuses them and says to resample with
``cleaning={'target_fps': ...}``; the bench does that, to the lowest rate, and scores each
native frame with the label of the resampled frame nearest in time.

``reference``: what a user would write with the general libraries, one line per step:
confidence below 0.5 -> missing (common practice); gaps filled by linear interpolation over
frames (pandas ``interpolate``, both directions); horizontal coordinates centred on the mean
of the keypoints in each frame (heights, in 3-D, kept); scikit-learn ``PCA`` (8 components,
or fewer when there are fewer coordinates) fitted on all frames of the source; the speed of
the keypoints' mean (units per second) as one more column; ``StandardScaler``; then hmmlearn
``GaussianHMM(n_components=<true number of behaviours>, covariance_type="full", n_iter=50,
random_state=seed)`` fitted on all sequences (``lengths``) and decoded (Viterbi); when hmmlearn
gives up on the fit (a covariance no longer positive definite: on the single series the PCA
gives constant columns), the constant columns are left out and it is fitted again, the usual
fix (``failed_fit`` in the JSON). Every frame is scored. It is given the true number of
behaviours, which ethoscribe is not.
"""

from __future__ import annotations

import logging
import time
import warnings
from typing import Any

import numpy as np
import pandas as pd
from benchmarks.validity.sources import Source


def run_ethoscribe(
    src: Source, seed: int, params: dict | None = None
) -> tuple[dict[tuple[str, str], np.ndarray], dict]:
    """Labels per (session, animal) and facts of the fit (states chosen, seconds, warnings).

    ``params``: ``BehaviourModel`` parameters other than the defaults (a variant under study)."""
    from ethoscribe.segment.model import BehaviourModel

    rates = sorted({float(s.fps) for s in src.sessions})
    params = dict(params or {})
    cleaning = dict(params.pop("cleaning", None) or {})
    if len(rates) > 1:
        cleaning["target_fps"] = rates[0]
    t, cpu = time.perf_counter(), time.process_time()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        model = BehaviourModel(cleaning=cleaning or None, random_state=seed, **params)
        model.fit(src.sessions)
        table = model.label(src.sessions)
    seconds, cpu = time.perf_counter() - t, time.process_time() - cpu
    labels = native_labels(src, table, cleaning.get("target_fps"))
    info = {
        "seconds": seconds,
        "cpu_seconds": cpu,
        "n_states_model": int(model.n_states_),
        # scored frames whose own label has probability < 0.01 (labels backed by their HMM?)
        "low_probability_share": float(
            (table.loc[table["state"] >= 0, "probability"] < 0.01).mean()
        ),
        # how much a frame's unit tells its state: unit rules left out at >= 0.5 (clips)
        "unit_lambda": float(getattr(model, "unit_lambda_", float("nan"))),
        "params": model.get_params(),
        "warnings": sorted({str(w.message)[:300] for w in caught}),
    }
    regimes = getattr(model, "regimes_", None)
    if regimes is not None:  # the slow-regime rule's measurements (NaN written as null)
        numbers = {"persistence": regimes.persistence_, "p_value": regimes.p_value_,
                   "residual_persistence": regimes.residual_persistence_,
                   "changes_per_recording": regimes.changes_per_recording_}  # fmt: skip
        info["regimes"] = {
            **{k: (float(v) if np.isfinite(v) else None) for k, v in numbers.items()},
            "used": bool(regimes.used_),
            "one_change": bool(regimes.one_change_),
        }
    return labels, info


def native_labels(
    src: Source, table: pd.DataFrame, rate: float | None = None
) -> dict[tuple[str, str], np.ndarray]:
    """The ``state`` column of a label table per (session, animal), on each unit's native
    frames (the label of the resampled frame nearest in time when the rates were mixed, or
    when the table's frames are at ``rate``, a variant's cleaning ``target_fps``)."""
    native = {s.session: float(s.fps) for s in src.sessions}
    rates = sorted(set(native.values()))
    common = rate or (rates[0] if len(rates) > 1 else None)  # the table's rate, if not native
    labels = {}
    for (session, animal), part in table.groupby(["session", "animal"], sort=False):
        key = (str(session), str(animal))
        n = len(src.truth[key])
        at = common or native[key[0]]
        # Labels of the resampled frames nearest in time to each native frame.
        nearest = np.rint(np.arange(n) / native[key[0]] * at).astype(np.int64)
        state = np.full(len(part), -1, dtype=np.int64)
        state[part["frame"].to_numpy()] = part["state"].to_numpy()
        labels[key] = state[np.clip(nearest, 0, len(part) - 1)]
    return labels


def reference_features(tracks_coords: np.ndarray, confidence: np.ndarray, fps: float) -> np.ndarray:
    """Per-frame columns of one animal: centred coordinates then the centroid speed.

    tracks_coords : (frames, keypoints, dims); confidence : (frames, keypoints)
    Returns (frames, keypoints * dims + 1); keypoints never seen stay NaN (filled with 0 later).
    """
    xyz = np.where(
        (confidence >= 0.5)[..., None] | np.isnan(confidence)[..., None], tracks_coords, np.nan
    )
    n, k, d = xyz.shape
    wide = pd.DataFrame(xyz.reshape(n, k * d)).interpolate(limit_direction="both")
    xyz = wide.to_numpy().reshape(n, k, d)
    centre = np.nanmean(xyz, axis=1)
    ego = xyz.copy()
    ego[..., :2] -= centre[:, None, :2]  # heights (3-D) kept
    speed = np.r_[0.0, np.linalg.norm(np.diff(centre, axis=0), axis=1) * fps]
    return np.column_stack([ego.reshape(n, k * d), np.nan_to_num(speed)])


def run_reference(src: Source, seed: int) -> tuple[dict[tuple[str, str], np.ndarray], dict]:
    from hmmlearn.hmm import GaussianHMM
    from sklearn.decomposition import PCA
    from sklearn.preprocessing import StandardScaler

    t, cpu = time.perf_counter(), time.process_time()
    keys, parts = [], []
    for s in src.sessions:
        for a, animal in enumerate(s.animals):
            parts.append(reference_features(s.coords[:, a], s.confidence[:, a], s.fps))
            keys.append((s.session, animal))
    lengths = [len(p) for p in parts]
    raw = np.nan_to_num(np.vstack(parts))
    pcs = PCA(n_components=min(8, raw.shape[1] - 1), random_state=seed).fit_transform(raw[:, :-1])
    X = StandardScaler().fit_transform(np.column_stack([pcs, raw[:, -1]]))
    k = src.n_behaviours
    logging.getLogger("hmmlearn").setLevel(logging.ERROR)

    def fit_and_decode(X: np.ndarray) -> tuple[Any, np.ndarray]:
        hmm = GaussianHMM(n_components=k, covariance_type="full", n_iter=50, random_state=seed)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            hmm.fit(X, lengths)
            return hmm, hmm.predict(X, lengths)

    failed = None
    try:
        hmm, state = fit_and_decode(X)
    except ValueError as exc:  # e.g. "'covars' must be symmetric, positive-definite"
        failed = str(exc)
        X = X[:, X.std(axis=0) > 1e-9]  # the usual fix: constant columns left out
        hmm, state = fit_and_decode(X)
    seconds, cpu = time.perf_counter() - t, time.process_time() - cpu
    labels = dict(zip(keys, np.split(state, np.cumsum(lengths)[:-1]), strict=True))
    info: dict[str, Any] = {
        "seconds": seconds,
        "cpu_seconds": cpu,
        "n_states_model": k,
        "params": {
            "pca_components": int(pcs.shape[1]),
            "n_components": k,
            "covariance_type": "full",
            "n_iter": 50,
            "random_state": seed,
            "columns": int(X.shape[1]),
        },
        "converged": bool(hmm.monitor_.converged),
        "failed_fit": failed,
    }
    return labels, info
