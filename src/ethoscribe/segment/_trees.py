"""A fitted gradient-boosted tree ensemble as plain arrays: saved as JSON + npz, no pickle.

scikit-learn's ``HistGradientBoostingClassifier`` keeps each tree as a table of nodes (feature,
threshold, where missing values go, children, leaf value). Those columns are all that predicting
needs, so they are stored as ordinary numeric arrays and evaluated here; the result equals
``predict_proba`` of the fitted scikit-learn model (checked in the tests). Categorical splits
are not used by ethoscribe and are refused.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from numba import njit

from ethoscribe.errors import InputError

NODE_FIELDS = (
    "value",
    "feature_idx",
    "num_threshold",
    "missing_go_to_left",
    "left",
    "right",
    "is_leaf",
)


@dataclass(frozen=True)
class TreeEnsemble:
    """Trees of a boosted classifier: ``n_iterations x n_outputs`` trees, nodes concatenated.

    ``offsets[t]`` is the first node of tree ``t`` (tree order: iteration-major, output-minor);
    children are indices within a tree. ``baseline`` is the raw score before any tree.
    """

    value: np.ndarray
    feature: np.ndarray
    threshold: np.ndarray
    missing_left: np.ndarray
    left: np.ndarray
    right: np.ndarray
    is_leaf: np.ndarray
    offsets: np.ndarray
    baseline: np.ndarray
    n_features: int

    @classmethod
    def from_sklearn(cls, clf: Any) -> TreeEnsemble:
        """Read the trees of a fitted ``HistGradientBoostingClassifier``."""
        trees = [p for iteration in clf._predictors for p in iteration]
        nodes = [t.nodes for t in trees]
        if any(n["is_categorical"].any() for n in nodes):
            raise InputError("categorical splits cannot be stored; use numeric features only")
        sizes = np.array([len(n) for n in nodes], dtype=np.int64)
        cat = np.concatenate(nodes)
        return cls(
            value=cat["value"].astype(np.float64),
            feature=cat["feature_idx"].astype(np.int64),
            threshold=cat["num_threshold"].astype(np.float64),
            missing_left=cat["missing_go_to_left"].astype(bool),
            left=cat["left"].astype(np.int64),
            right=cat["right"].astype(np.int64),
            is_leaf=cat["is_leaf"].astype(bool),
            offsets=np.concatenate([[0], np.cumsum(sizes)[:-1]]).astype(np.int64),
            baseline=np.asarray(clf._baseline_prediction, dtype=np.float64).ravel(),
            n_features=int(clf.n_features_in_),
        )

    @property
    def n_outputs(self) -> int:
        return len(self.baseline)

    def raw_scores(self, X: np.ndarray) -> np.ndarray:
        """Sum of the baseline and every tree's leaf value, shape ``(n_samples, n_outputs)``."""
        X = np.asarray(X, dtype=np.float64)
        if X.ndim != 2 or X.shape[1] != self.n_features:
            raise InputError(f"expected {self.n_features} feature columns, got shape {X.shape}")
        out = np.tile(self.baseline, (len(X), 1))
        _add_tree_values(
            X, self.value, self.feature, self.threshold, self.missing_left, self.left,
            self.right, self.is_leaf, self.offsets, out,
        )  # fmt: skip
        return out

    def predict_proba(self, X: np.ndarray) -> np.ndarray:
        """Class probabilities: softmax of the raw scores (a logistic for two classes)."""
        raw = self.raw_scores(X)
        if raw.shape[1] == 1:
            p = 1.0 / (1.0 + np.exp(-raw[:, 0]))
            return np.column_stack([1.0 - p, p])
        raw -= raw.max(axis=1, keepdims=True)
        e = np.exp(raw)
        return e / e.sum(axis=1, keepdims=True)

    def to_arrays(self) -> dict[str, np.ndarray]:
        return {
            "tree_value": self.value,
            "tree_feature": self.feature,
            "tree_threshold": self.threshold,
            "tree_missing_left": self.missing_left,
            "tree_left": self.left,
            "tree_right": self.right,
            "tree_is_leaf": self.is_leaf,
            "tree_offsets": self.offsets,
            "tree_baseline": self.baseline,
        }

    @classmethod
    def from_arrays(cls, arrays: dict[str, np.ndarray], n_features: int) -> TreeEnsemble:
        """Rebuild from :meth:`to_arrays`; shapes and child indices are checked."""
        try:
            parts = {k: np.asarray(arrays[f"tree_{k}"]) for k in (
                "value", "feature", "threshold", "missing_left", "left", "right", "is_leaf",
                "offsets", "baseline",
            )}  # fmt: skip
        except KeyError as exc:
            raise InputError(f"saved classifier: array {exc} is missing") from None
        n = len(parts["value"])
        same = all(
            parts[k].shape == (n,)
            for k in ("feature", "threshold", "missing_left", "left", "right", "is_leaf")
        )
        offsets = parts["offsets"].astype(np.int64)
        sizes = np.diff(np.append(offsets, n))
        owner = np.repeat(np.arange(len(offsets)), np.maximum(sizes, 0))
        inner = ~parts["is_leaf"].astype(bool)
        ok = (
            same
            and len(offsets) > 0
            and len(parts["baseline"]) > 0
            and (sizes > 0).all()
            and len(owner) == n
            and (parts["feature"][inner] >= 0).all()
            and (parts["feature"][inner] < n_features).all()
            and (parts["left"][inner] < sizes[owner[inner]]).all()
            and (parts["right"][inner] < sizes[owner[inner]]).all()
            and (parts["left"][inner] > 0).all()
            and (parts["right"][inner] > 0).all()
            and len(offsets) % len(parts["baseline"]) == 0
        )
        if not ok:
            raise InputError("saved classifier: the tree arrays are inconsistent (damaged file)")
        return cls(
            value=parts["value"].astype(np.float64),
            feature=parts["feature"].astype(np.int64),
            threshold=parts["threshold"].astype(np.float64),
            missing_left=parts["missing_left"].astype(bool),
            left=parts["left"].astype(np.int64),
            right=parts["right"].astype(np.int64),
            is_leaf=parts["is_leaf"].astype(bool),
            offsets=offsets,
            baseline=parts["baseline"].astype(np.float64),
            n_features=int(n_features),
        )


@njit(cache=True, nogil=True)
def _add_tree_values(
    X, value, feature, threshold, missing_left, left, right, is_leaf, offsets, out
):  # pragma: no cover - compiled
    """Walk every sample down every tree; add each reached leaf's value to its output column."""
    n_outputs = out.shape[1]
    for i in range(X.shape[0]):
        for t in range(len(offsets)):
            base = offsets[t]
            node = base
            while not is_leaf[node]:
                x = X[i, feature[node]]
                if np.isnan(x):
                    go_left = missing_left[node]
                else:
                    go_left = x <= threshold[node]
                node = base + (left[node] if go_left else right[node])
            out[i, t % n_outputs] += value[node]
