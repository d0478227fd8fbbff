"""Agreement between two labelings of the same frames, and between boundary sets.

State ids of two unsupervised fits are arbitrary, so states are first paired by the Hungarian
method on the contingency table (maximum total overlap), then scored per state by Jaccard
(intersection over union of the frames) and F1 (Dice). Frames labelled -1 in either labeling
are ignored.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.optimize import linear_sum_assignment

from ethoscribe.errors import InputError
from ethoscribe.segment.boundaries import boundary_scores


def _pair(labels_a: np.ndarray, labels_b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    a, b = np.asarray(labels_a).ravel(), np.asarray(labels_b).ravel()
    if a.shape != b.shape:
        raise InputError(
            f"the two labelings must cover the same frames; got {a.shape} and {b.shape}"
        )
    keep = (a >= 0) & (b >= 0)
    return a[keep].astype(np.int64), b[keep].astype(np.int64)


def contingency_table(labels_a, labels_b) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Frame counts ``(n_states_a, n_states_b)`` and the state ids of each axis.

    Examples
    --------
    >>> table, sa, sb = contingency_table([0, 0, 1, 1], [1, 1, 1, 0])
    >>> table.tolist()
    [[0, 2], [1, 1]]
    """
    a, b = _pair(labels_a, labels_b)
    states_a, ia = np.unique(a, return_inverse=True)
    states_b, ib = np.unique(b, return_inverse=True)
    table = np.bincount(ia * len(states_b) + ib, minlength=len(states_a) * len(states_b))
    return table.reshape(len(states_a), len(states_b)), states_a, states_b


@dataclass(frozen=True)
class StateMatch:
    """Hungarian pairing of the states of labeling a with those of labeling b.

    ``mapping``: state of a -> matched state of b (-1 when a has more states than b).
    ``table``: one row per state of a with columns ``state_a, state_b, frames_a, frames_b,
    overlap, jaccard, f1`` (unmatched states have jaccard and f1 of 0).
    """

    mapping: dict[int, int]
    table: pd.DataFrame
    contingency: np.ndarray

    @property
    def jaccard(self) -> pd.Series:
        """Per-state Jaccard indexed by the states of labeling a."""
        return self.table.set_index("state_a")["jaccard"]


def match_states(labels_a, labels_b) -> StateMatch:
    """Pair states of two labelings by maximum overlap (Hungarian method) and score each pair.

    Examples
    --------
    >>> m = match_states([0, 0, 1, 1, 2], [5, 5, 7, 7, 7])
    >>> m.mapping
    {0: 5, 1: 7, 2: -1}
    >>> m.table["jaccard"].round(3).tolist()
    [1.0, 0.667, 0.0]
    """
    table, states_a, states_b = contingency_table(labels_a, labels_b)
    rows, cols = linear_sum_assignment(table, maximize=True)
    frames_a, frames_b = table.sum(axis=1), table.sum(axis=0)
    matched = np.full(len(states_a), -1)
    matched[rows] = cols
    overlap = np.where(matched >= 0, table[np.arange(len(states_a)), np.maximum(matched, 0)], 0)
    size_b = np.where(matched >= 0, frames_b[np.maximum(matched, 0)], 0)
    union = frames_a + size_b - overlap
    out = pd.DataFrame(
        {
            "state_a": states_a,
            "state_b": np.where(matched >= 0, states_b[np.maximum(matched, 0)], -1),
            "frames_a": frames_a,
            "frames_b": size_b,
            "overlap": overlap,
            "jaccard": np.where(union > 0, overlap / np.maximum(union, 1), 0.0),
            "f1": np.where(
                frames_a + size_b > 0, 2 * overlap / np.maximum(frames_a + size_b, 1), 0.0
            ),
        }
    )
    mapping = {int(s): int(t) for s, t in zip(out["state_a"], out["state_b"], strict=True)}
    return StateMatch(mapping, out, table)


def adjusted_rand(labels_a, labels_b) -> float:
    """Adjusted Rand index (Hubert & Arabie 1985) over frames labelled in both (scikit-learn)."""
    from sklearn.metrics import adjusted_rand_score

    a, b = _pair(labels_a, labels_b)
    return float(adjusted_rand_score(a, b))


def normalized_mutual_info(labels_a, labels_b) -> float:
    """Normalised mutual information (arithmetic mean normalisation, scikit-learn)."""
    from sklearn.metrics import normalized_mutual_info_score

    a, b = _pair(labels_a, labels_b)
    return float(normalized_mutual_info_score(a, b))


def label_boundaries(labels, lengths=None) -> np.ndarray:
    """Frames where a new bout starts inside a session (session starts are not boundaries).

    Examples
    --------
    >>> label_boundaries([0, 0, 1, 1, 1, 2], [4, 2]).tolist()
    [2, 5]
    """
    labels = np.asarray(labels)
    change = np.flatnonzero(labels[1:] != labels[:-1]) + 1
    if lengths is not None:
        change = np.setdiff1d(change, np.cumsum(lengths)[:-1])
    return change.astype(np.int64)


@dataclass(frozen=True)
class BoundaryScore:
    """Precision, recall and F1 of predicted boundaries within a margin."""

    precision: float
    recall: float
    f1: float
    n_true: int
    n_predicted: int
    n_matched: int


def boundary_f1(true_boundaries, predicted, margin_frames: int) -> BoundaryScore:
    """Match boundaries one-to-one within ``margin_frames`` and score them.

    The one scoring rule of the package (:func:`ethoscribe.segment.boundaries.boundary_scores`):
    a true and a predicted boundary match when ``|t - p| <= margin_frames``, each used at most
    once, as many matches as possible. With nothing predicted precision is 0; with nothing to
    find recall is 1; with neither all three scores are 1.

    Examples
    --------
    >>> s = boundary_f1([100, 200], [103, 150, 199], margin_frames=5)
    >>> (s.n_matched, round(s.precision, 3), s.recall)
    (2, 0.667, 1.0)
    """
    if margin_frames < 0:
        raise InputError(f"margin_frames must be >= 0, got {margin_frames}")
    t = np.asarray(true_boundaries, dtype=np.int64).ravel()
    p = np.asarray(predicted, dtype=np.int64).ravel()
    s = boundary_scores(t, p, margin_frames)
    return BoundaryScore(
        s["precision"], s["recall"], s["f1"], s["n_true"], s["n_predicted"], s["n_matched"]
    )
