"""Learn an expert's behaviours from coded frames: boosted trees, then persistence over time.

Each frame is described by the model's features (and the HMM's state posteriors, when the
workspace has them) plus their mean and spread over several time windows around it, because a
behaviour is a rhythm as much as a posture: a motionless animal and a scanning one can share a
posture and differ only in how the keypoints move over a second or two. A
``HistGradientBoostingClassifier`` (scikit-learn) gives each frame's class probabilities; a
hybrid HMM (Bourlard & Morgan 1994, Connectionist Speech Recognition: the classifier's
posterior divided by the class prior serves as the emission) with each behaviour's coded mean
bout length as its persistence turns them into bouts by the Viterbi path, and its
forward-backward posterior is the ``probability`` reported beside each label.

The trees are stored as plain arrays (:mod:`ethoscribe.segment._trees`), never pickled.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
from threadpoolctl import threadpool_limits

from ethoscribe import __version__
from ethoscribe.checks import is_real
from ethoscribe.errors import InputError
from ethoscribe.segment._hmm_kernels import forward_backward_log, viterbi_log
from ethoscribe.segment._trees import TreeEnsemble
from ethoscribe.segment.inputs import check_fitted
from ethoscribe.segment.postprocess import enforce_min_bout, runs

FORMAT_VERSION = 1
KIND = "ethoscribe.BehaviourClassifier"


def _bounds(lengths: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    lengths = np.asarray(lengths, dtype=np.int64)
    if lengths.sum() != n or (lengths < 0).any():
        raise InputError(f"lengths must be >= 0 and sum to the {n} frames; got sum {lengths.sum()}")
    stops = np.cumsum(lengths)
    return stops - lengths, stops


def context_features(
    X: np.ndarray, lengths: np.ndarray, fps: float, scales_s: Sequence[float] = (0.5, 2.0, 6.0)
) -> np.ndarray:
    """Each frame's features, then their centred moving mean and standard deviation per scale.

    A scale of ``w`` seconds is a window of ``2 h + 1`` frames, ``h = max(1, round(w fps / 2))``
    (Python's rounding: 1.5 s at 2 fps is 5 frames). NaN (frames without a valid pose) are left
    out of the windows; a window without any valid frame gives NaN. Windows never cross a
    sequence boundary (they are cut at it).

    Returns
    -------
    array (T, D * (1 + 2 * len(scales_s)))

    Examples
    --------
    >>> context_features(np.arange(5.0)[:, None], [5], fps=2, scales_s=[1.5])[:, 1].tolist()
    [1.0, 1.5, 2.0, 2.5, 3.0]
    """
    X = np.asarray(X, dtype=np.float64)
    starts, stops = _bounds(lengths, len(X))
    out = [X]
    for scale in scales_s:
        half = max(1, round(scale * fps / 2))
        mean = np.full_like(X, np.nan)
        std = np.full_like(X, np.nan)
        for a, b in zip(starts, stops, strict=True):
            if b > a:
                mean[a:b], std[a:b] = _moving(X[a:b], half)
        out += [mean, std]
    return np.concatenate(out, axis=1)


def _moving(x: np.ndarray, half: int) -> tuple[np.ndarray, np.ndarray]:
    """NaN-aware centred mean and standard deviation over ``2 * half + 1`` frames."""
    ok = np.isfinite(x)
    v = np.where(ok, x, 0.0)
    n = len(x)
    zero = np.zeros((1, x.shape[1]))
    c0 = np.concatenate([zero, np.cumsum(ok, axis=0)])
    c1 = np.concatenate([zero, np.cumsum(v, axis=0)])
    c2 = np.concatenate([zero, np.cumsum(v * v, axis=0)])
    lo = np.clip(np.arange(n) - half, 0, n)
    hi = np.clip(np.arange(n) + half + 1, 0, n)
    count = c0[hi] - c0[lo]
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = (c1[hi] - c1[lo]) / count
        var = np.maximum((c2[hi] - c2[lo]) / count - mean * mean, 0.0)
    return mean, np.sqrt(var)


def coded_bouts(y: np.ndarray, lengths: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Runs of one coded class inside sequences: class codes and run lengths (frames).

    ``y`` holds class codes, -1 where nothing is coded (not a class: never a run).
    """
    starts, stops, labels, _ = runs(np.asarray(y), np.asarray(lengths, dtype=np.int64))
    keep = labels >= 0
    return labels[keep], (stops - starts)[keep]


class BehaviourClassifier:
    """Frames to an expert's behaviours: boosted trees on multi-scale features + persistence.

    Parameters
    ----------
    fps : float
        Frame rate of the sequences (sets the windows and the bout lengths).
    scales_s : sequence of float
        Window widths (seconds) of the moving mean and spread added to every feature. 0.5, 2
        and 6 s: a few cycles of the fastest rhythms, about one short bout, and the slow context.
    max_iter, learning_rate, max_leaf_nodes : boosting parameters
        (scikit-learn's ``HistGradientBoostingClassifier``; early stopping on 10 % of the frames).
    max_train_frames : int
        Fit on at most this many coded frames, taken at an even stride (neighbouring frames say
        nearly the same thing). 60,000 frames: over half an hour of coding at 30 fps.
    persistence : bool
        Smooth frame decisions into bouts with the hybrid HMM (see the module docstring).
    min_bout_s : float
        Bouts shorter than this are merged into a neighbour after smoothing.
    random_state : int

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> y = np.repeat([0, 1, 0, 1], 50)
    >>> X = y[:, None] + rng.normal(0, 0.3, (200, 1))
    >>> clf = BehaviourClassifier(fps=10, max_iter=20).fit(X, np.array(list("ab"))[y], [200])
    >>> float((clf.predict(X, [200]) == y).mean())
    1.0
    """

    def __init__(
        self,
        fps: float | None = None,
        scales_s: Sequence[float] = (0.5, 2.0, 6.0),
        max_iter: int = 100,
        learning_rate: float = 0.1,
        max_leaf_nodes: int = 31,
        max_train_frames: int = 60_000,
        persistence: bool = True,
        min_bout_s: float = 0.2,
        random_state: int = 0,
    ) -> None:
        self.fps = fps
        self.scales_s = scales_s
        self.max_iter = max_iter
        self.learning_rate = learning_rate
        self.max_leaf_nodes = max_leaf_nodes
        self.max_train_frames = max_train_frames
        self.persistence = persistence
        self.min_bout_s = min_bout_s
        self.random_state = random_state

    def get_params(self) -> dict[str, Any]:
        return {
            "fps": self.fps,
            "scales_s": [float(s) for s in self.scales_s],
            "max_iter": self.max_iter,
            "learning_rate": self.learning_rate,
            "max_leaf_nodes": self.max_leaf_nodes,
            "max_train_frames": self.max_train_frames,
            "persistence": self.persistence,
            "min_bout_s": self.min_bout_s,
            "random_state": self.random_state,
        }

    def _check_params(self) -> None:
        if not (is_real(self.fps) and self.fps > 0):
            raise InputError(f"fps must be a positive frame rate; got {self.fps!r}")
        if not all(is_real(s) and s > 0 for s in self.scales_s):
            raise InputError(f"scales_s must be positive seconds; got {list(self.scales_s)}")
        if not (is_real(self.min_bout_s) and self.min_bout_s >= 0):
            raise InputError(f"min_bout_s must be >= 0 seconds; got {self.min_bout_s!r}")
        if int(self.max_train_frames) < 10:
            raise InputError(f"max_train_frames must be at least 10; got {self.max_train_frames}")

    # --- fitting --------------------------------------------------------------------------
    def fit(self, X: np.ndarray, y: Sequence[str], lengths: Sequence[int]) -> BehaviourClassifier:
        """Fit on the coded frames of ``X`` (T, D); ``y`` (T,) names a behaviour or is "".

        ``lengths`` gives the frames of each sequence (one recording). Rows of ``X`` that are
        NaN (frames without a valid pose) are still learned from and labelled through their
        moving windows; only frames with no valid frame in any window are left out.
        """
        from sklearn.ensemble import HistGradientBoostingClassifier

        self._check_params()
        X = np.asarray(X, dtype=np.float64)
        y = np.asarray(y, dtype=object)
        lengths = np.asarray(lengths, dtype=np.int64)
        if X.ndim != 2 or y.shape != (len(X),):
            raise InputError(
                f"X must be (frames, features) and y (frames,); got {X.shape}, {y.shape}"
            )
        coded = np.array([isinstance(v, str) and v != "" for v in y])
        classes = np.array(sorted(set(y[coded])), dtype=object)
        if len(classes) < 2:
            raise InputError(
                f"learning needs coded frames of at least two behaviours; found {list(classes)}"
            )
        codes = np.full(len(y), -1, dtype=np.int64)
        codes[coded] = np.searchsorted(classes, y[coded].astype(str))
        Z = context_features(X, lengths, self.fps, self.scales_s)
        rows = np.flatnonzero(coded & ~np.isnan(Z).all(axis=1))
        if len(rows) < 10:
            raise InputError(f"only {len(rows)} coded frames have a valid pose; code more frames")
        stride = max(1, int(np.ceil(len(rows) / int(self.max_train_frames))))
        rows = rows[::stride]
        clf = HistGradientBoostingClassifier(
            max_iter=self.max_iter,
            learning_rate=self.learning_rate,
            max_leaf_nodes=self.max_leaf_nodes,
            random_state=self.random_state,
        )
        # One OpenMP thread: the trees' threads busy-wait, and on a shared or busy machine
        # that made fits ten times slower (measured: 21 s instead of 4 s of CPU for 10 rounds).
        with threadpool_limits(limits=1, user_api="openmp"):
            clf.fit(Z[rows], codes[rows])
        present = clf.classes_
        if len(present) != len(classes):
            missing = sorted(set(range(len(classes))) - set(present.tolist()))
            names = [str(classes[k]) for k in missing]
            msg = f"behaviours {names} have no frame with a valid pose to learn from; code more"
            raise InputError(msg)
        self.trees_ = TreeEnsemble.from_sklearn(clf)
        self.classes_ = classes
        self.n_features_in_ = int(X.shape[1])
        self.n_train_frames_ = len(rows)
        self.n_iter_ = int(clf.n_iter_)
        self._fit_persistence(codes, lengths)
        return self

    def _fit_persistence(self, codes: np.ndarray, lengths: np.ndarray) -> None:
        """Class prior, start probabilities and the bout-length transition matrix."""
        k = len(self.classes_)
        coded = codes[codes >= 0]
        prior = (np.bincount(coded, minlength=k) + 1.0) / (len(coded) + k)
        labels, durations = coded_bouts(codes, lengths)
        mean_bout = np.array(
            [durations[labels == c].mean() if (labels == c).any() else 1.0 for c in range(k)]
        )
        # Bout-to-bout moves from consecutive coded bouts (+1 each: none is impossible).
        moves = np.ones((k, k))
        np.add.at(moves, (labels[:-1], labels[1:]), 1.0)
        np.fill_diagonal(moves, 0.0)
        moves /= moves.sum(axis=1, keepdims=True)
        stay = 1.0 - 1.0 / np.maximum(mean_bout, 1.0 + 1e-6)
        trans = moves * (1.0 - stay)[:, None]
        trans[np.diag_indices(k)] = stay
        self.class_prior_ = prior
        self.transmat_ = trans / trans.sum(axis=1, keepdims=True)
        self.mean_bout_frames_ = mean_bout

    # --- predicting -----------------------------------------------------------------------
    def _check_X(self, X: np.ndarray) -> np.ndarray:
        check_fitted(self, "trees_")
        X = np.asarray(X, dtype=np.float64)
        if X.ndim != 2 or X.shape[1] != self.n_features_in_:
            raise InputError(
                f"the classifier was fitted on {self.n_features_in_} feature columns; got "
                f"an array of shape {X.shape}"
            )
        return X

    def predict_frame_proba(self, X: np.ndarray, lengths: Sequence[int]) -> np.ndarray:
        """Class probabilities of each frame on its own (no persistence), ``(T, n_classes)``;
        NaN rows for frames with no valid pose anywhere in their widest window."""
        X = self._check_X(X)
        lengths = np.asarray(lengths, dtype=np.int64)
        Z = context_features(X, lengths, self.fps, self.scales_s)
        valid = ~np.isnan(Z).all(axis=1)
        out = np.full((len(X), len(self.classes_)), np.nan)
        if valid.any():
            out[valid] = self.trees_.predict_proba(Z[valid])
        return out

    def predict_proba(self, X: np.ndarray, lengths: Sequence[int]) -> np.ndarray:
        """Posterior of each behaviour per frame after persistence, ``(T, n_classes)``."""
        return self._decode(X, lengths)[1]

    def predict(self, X: np.ndarray, lengths: Sequence[int]) -> np.ndarray:
        """Behaviour code per frame (index into :attr:`classes_`); -1 without a valid pose."""
        return self._decode(X, lengths)[0]

    def predict_with_probability(
        self, X: np.ndarray, lengths: Sequence[int]
    ) -> tuple[np.ndarray, np.ndarray]:
        """Codes (as :meth:`predict`) and the posterior of each frame's code (NaN if -1)."""
        codes, post = self._decode(X, lengths)
        p = np.full(len(codes), np.nan)
        ok = codes >= 0
        p[ok] = np.clip(post[np.flatnonzero(ok), codes[ok]], 0.0, 1.0)
        return codes, p

    def _decode(self, X: np.ndarray, lengths: Sequence[int]) -> tuple[np.ndarray, np.ndarray]:
        lengths = np.asarray(lengths, dtype=np.int64)
        frame_p = self.predict_frame_proba(X, lengths)
        valid = ~np.isnan(frame_p).any(axis=1)
        keep = lengths > 0
        if not self.persistence:
            codes = np.where(valid, np.nan_to_num(frame_p, nan=0.0).argmax(axis=1), -1)
            return codes.astype(np.int64), frame_p
        with np.errstate(divide="ignore"):
            log_e = np.log(np.maximum(frame_p, 1e-12)) - np.log(self.class_prior_)
        log_e[~valid] = 0.0  # no pose: the chain carries on by persistence alone
        codes, _ = viterbi_log(log_e, self.class_prior_, self.transmat_, lengths[keep])
        post = forward_backward_log(log_e, self.class_prior_, self.transmat_, lengths[keep]).gamma
        min_frames = round(self.min_bout_s * self.fps)
        if min_frames > 1:
            codes = enforce_min_bout(codes, min_frames, lengths=lengths[keep], probabilities=post)
        codes = np.where(valid, codes, -1).astype(np.int64)
        post = np.where(valid[:, None], post, np.nan)
        return codes, post

    # --- persistence (JSON + arrays) ------------------------------------------------------
    def to_state(self) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
        """JSON-able description and arrays that rebuild this fitted classifier exactly."""
        check_fitted(self, "trees_")
        meta = {
            "kind": KIND,
            "format_version": FORMAT_VERSION,
            "ethoscribe_version": __version__,
            "params": self.get_params(),
            "classes": [str(c) for c in self.classes_],
            "n_features_in": self.n_features_in_,
            "n_train_frames": self.n_train_frames_,
            "n_iter": self.n_iter_,
        }
        arrays = {
            **self.trees_.to_arrays(),
            "class_prior": self.class_prior_,
            "transmat": self.transmat_,
            "mean_bout_frames": self.mean_bout_frames_,
        }
        return meta, arrays

    @classmethod
    def from_state(cls, meta: dict[str, Any], arrays: dict[str, np.ndarray]) -> BehaviourClassifier:
        """Rebuild from :meth:`to_state`; every field is checked before use."""
        if not isinstance(meta, dict) or meta.get("kind") != KIND:
            raise InputError("saved classifier: not an ethoscribe behaviour classifier record")
        if meta.get("format_version") != FORMAT_VERSION:
            raise InputError(
                f"saved classifier: format {meta.get('format_version')!r}; this version reads "
                f"{FORMAT_VERSION}: run 'ethoscribe learn' again"
            )
        classes, n_features = meta.get("classes"), meta.get("n_features_in")
        params = meta.get("params")
        ok = (
            isinstance(classes, list)
            and len(classes) >= 2
            and all(isinstance(c, str) and c for c in classes)
            and isinstance(n_features, int)
            and n_features > 0
            and isinstance(params, dict)
        )
        if not ok:
            raise InputError("saved classifier: classes, feature count or parameters are damaged")
        allowed = set(cls().get_params())
        clf = cls(**{k: v for k, v in params.items() if k in allowed})
        try:
            clf._check_params()
        except InputError as exc:
            raise InputError(f"saved classifier: {exc}") from None
        n_inputs = n_features * (1 + 2 * len(clf.scales_s))  # the trees see the context too
        clf.trees_ = TreeEnsemble.from_arrays(arrays, n_inputs)
        k = len(classes)
        prior, trans = np.asarray(arrays.get("class_prior")), np.asarray(arrays.get("transmat"))
        if (
            clf.trees_.n_outputs != (1 if k == 2 else k)
            or prior.shape != (k,)
            or trans.shape != (k, k)
            or not (np.isfinite(prior).all() and np.isfinite(trans).all())
            or (prior <= 0).any()
            or (trans < 0).any()
        ):
            raise InputError("saved classifier: prior or transition arrays do not fit its classes")
        clf.classes_ = np.array(classes, dtype=object)
        clf.n_features_in_ = n_features
        clf.n_train_frames_ = int(meta.get("n_train_frames") or 0)
        clf.n_iter_ = int(meta.get("n_iter") or 0)
        clf.class_prior_ = prior.astype(np.float64)
        clf.transmat_ = trans.astype(np.float64)
        clf.mean_bout_frames_ = np.asarray(arrays.get("mean_bout_frames", np.ones(k)), float)
        return clf
