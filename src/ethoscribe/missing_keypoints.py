"""Frames with lost keypoints: fill them from a probabilistic model of the body's shape.

Trackers lose paws under the body and tail points behind objects for seconds at a time; gap
filling by interpolation covers only short losses. A frame that still lacks a few keypoints
keeps most of its information, so instead of leaving it unscored we fill the lost keypoints
with their expected position given the visible ones, under a Gaussian model of the aligned
body shape:

1. Alignment. Each frame is turned (about the vertical in 3-D) and shifted onto the mean body
   shape using only its visible keypoints (weighted Kabsch; the translation matches the mean
   of the visible points to the mean of the same points of the body shape).
2. Shape model. Aligned shapes ``y`` (K*D values) are Gaussian, ``y ~ N(mu, C)`` with ``C`` in
   the form of probabilistic PCA (Tipping & Bishop 1999): ``C = W W^T + s2 I`` with ``q``
   components. Fitted by EM for a Gaussian with missing values (frames need not be complete),
   the covariance put in probabilistic-PCA form after each step.
3. Filling. The lost coordinates get their conditional mean given the visible ones,
   ``mu_m + C_mo C_oo^-1 (y_o - mu_o)``, mapped back into the frame.

Rule for unscored frames: a frame is filled when at least ``min_body_seen`` of its keypoints
(default 0.6) and at least two are seen; frames with less of the body seen stay missing (and
unscored downstream). ``body_seen`` gives the fraction per frame.

Everything is per frame, so the filler is causal: the same in offline and streamed use.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
from sklearn.base import BaseEstimator

from ethoscribe.errors import InputError, NotFittedError
from ethoscribe.geometry import horizontal_axes
from ethoscribe.pose import PoseTracks

_UP = {"x": 0, "y": 1, "z": 2}


def body_seen(coords: np.ndarray) -> np.ndarray:
    """Fraction of keypoints with a finite position, per frame: (F, K, D) -> (F,).

    Examples
    --------
    >>> x = np.zeros((2, 4, 2)); x[1, 0] = np.nan
    >>> body_seen(x)
    array([1.  , 0.75])
    """
    x = np.asarray(coords, dtype=np.float64)
    return np.isfinite(x).all(-1).mean(-1)


def ppca_from_covariance(cov: np.ndarray, n_components: int) -> tuple[np.ndarray, float]:
    """Maximum-likelihood probabilistic PCA of a covariance (Tipping & Bishop 1999).

    Returns the loadings ``W`` (D, q) = ``U_q (L_q - s2 I)^1/2`` and the noise variance ``s2``,
    the mean of the discarded eigenvalues; the model covariance is ``W W^T + s2 I``.
    """
    values, vectors = np.linalg.eigh(cov)
    values, vectors = values[::-1], vectors[:, ::-1]
    q = int(n_components)
    s2 = float(values[q:].mean()) if q < len(values) else 0.0
    s2 = max(s2, 1e-12 * max(float(values[0]), 1e-300))
    W = vectors[:, :q] * np.sqrt(np.maximum(values[:q] - s2, 0.0))
    return W, s2


def _patterns(missing: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distinct rows of a boolean mask (N, P) and the index of each row's pattern."""
    packed = np.packbits(missing, axis=1)
    _, first, inverse = np.unique(packed, axis=0, return_index=True, return_inverse=True)
    return missing[first], inverse.ravel()


def conditional_fill(
    Y: np.ndarray, mean: np.ndarray, cov: np.ndarray, second_moment: bool = False
) -> tuple[np.ndarray, np.ndarray | None]:
    """Missing entries (NaN) of rows ``Y`` (N, P) replaced by their Gaussian conditional mean.

    With ``second_moment=True`` also returns the sum over rows of the conditional covariance
    of the filled entries (P, P), the term EM adds to the scatter of the filled rows.
    """
    Y = np.array(Y, dtype=np.float64)
    miss = np.isnan(Y)
    extra = np.zeros((Y.shape[1],) * 2) if second_moment else None
    if not miss.any():
        return Y, extra
    rows = np.flatnonzero(miss.any(1))
    pats, which = _patterns(miss[rows])
    for p, pat in enumerate(pats):
        r = rows[which == p]
        m, o = np.flatnonzero(pat), np.flatnonzero(~pat)
        if len(o) == 0:
            Y[np.ix_(r, m)] = mean[m]
            if second_moment:
                extra[np.ix_(m, m)] += len(r) * cov[np.ix_(m, m)]
            continue
        gain = np.linalg.solve(cov[np.ix_(o, o)], cov[np.ix_(o, m)]).T  # (m, o)
        Y[np.ix_(r, m)] = mean[m] + (Y[np.ix_(r, o)] - mean[o]) @ gain.T
        if second_moment:
            cond = cov[np.ix_(m, m)] - gain @ cov[np.ix_(o, m)]
            extra[np.ix_(m, m)] += len(r) * cond
    return Y, extra


class KeypointFiller(BaseEstimator):
    """Fill lost keypoints from the visible ones under a probabilistic body-shape model.

    Parameters
    ----------
    min_body_seen : float
        Smallest fraction of keypoints seen for a frame to be filled (and scored downstream).
        0.6: with 10 keypoints, up to 4 lost; the fill error grows fast below half the body.
    n_components : int or None
        Components of the probabilistic PCA shape model; None: as many as explain 99 % of the
        aligned shape variance (at most K*D - D - 2).
    up_axis : {"x", "y", "z"}
        Vertical axis of 3-D tracks (rotations are about it only).
    max_frames : int
        Frames (spread evenly) used to fit the shape model.
    n_iter : int
        Alternations of alignment and EM.

    Attributes
    ----------
    mean_shape_ : (K, D) mean aligned body shape
    mean_, covariance_ : (K*D,), (K*D, K*D) Gaussian shape model (probabilistic-PCA form)
    components_ : (q, K*D) loadings ``W^T``; noise_variance_ : float
    n_frames_fitted_ : int

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> shape = np.array([[0.0, 0], [1, 0], [2, 0.3], [3, 0]])
    >>> X = shape + rng.normal(0, 0.05, (500, 4, 2))
    >>> f = KeypointFiller().fit([X])
    >>> Y = X[:3].copy(); Y[:, 2] = np.nan
    >>> filled, seen = f.transform(Y)
    >>> bool(np.abs(filled[:, 2] - shape[2]).max() < 0.3), seen.tolist()
    (True, [0.75, 0.75, 0.75])
    """

    def __init__(
        self,
        *,
        min_body_seen: float = 0.6,
        n_components: int | None = None,
        up_axis: str = "z",
        max_frames: int = 50_000,
        n_iter: int = 4,
    ) -> None:
        self.min_body_seen = min_body_seen
        self.n_components = n_components
        self.up_axis = up_axis
        self.max_frames = max_frames
        self.n_iter = n_iter

    # --- alignment ------------------------------------------------------------------------
    def _align(self, X: np.ndarray, shape: np.ndarray) -> tuple[np.ndarray, ...]:
        """Angle and shifts putting each frame's visible points onto ``shape``.

        Returns ``(cos, sin, centre_x, centre_m)``: ``y = R^T (x - centre_x) + centre_m``.
        """
        d = X.shape[-1]
        h0, h1 = horizontal_axes(d, self.up_axis)
        seen = np.isfinite(X).all(-1)
        w = seen / np.maximum(seen.sum(-1, keepdims=True), 1)
        X0 = np.where(seen[..., None], X, 0.0)
        cx = np.einsum("fk,fkd->fd", w, X0)
        cm = w @ shape
        xs = X0 - cx[:, None]
        ms = shape[None] - cm[:, None]
        a = np.einsum("fk,fk->f", w, ms[..., h0] * xs[..., h0] + ms[..., h1] * xs[..., h1])
        b = np.einsum("fk,fk->f", w, ms[..., h0] * xs[..., h1] - ms[..., h1] * xs[..., h0])
        norm = np.hypot(a, b)
        ok = norm > 0
        cos = np.where(ok, a / np.where(ok, norm, 1.0), 1.0)
        sin = np.where(ok, b / np.where(ok, norm, 1.0), 0.0)
        return cos, sin, cx, cm

    def _to_shape(self, X: np.ndarray, shape: np.ndarray) -> tuple[np.ndarray, tuple]:
        """Frames (F, K, D) in the shape's frame (NaN kept), and the alignment used."""
        d = X.shape[-1]
        h0, h1 = horizontal_axes(d, self.up_axis)
        cos, sin, cx, cm = self._align(X, shape)
        xs = X - cx[:, None]
        Y = xs.copy()
        Y[..., h0] = cos[:, None] * xs[..., h0] + sin[:, None] * xs[..., h1]
        Y[..., h1] = -sin[:, None] * xs[..., h0] + cos[:, None] * xs[..., h1]
        return Y + cm[:, None], (cos, sin, cx, cm)

    def _from_shape(self, Y: np.ndarray, how: tuple) -> np.ndarray:
        cos, sin, cx, cm = how
        h0, h1 = horizontal_axes(Y.shape[-1], self.up_axis)
        ys = Y - cm[:, None]
        X = ys.copy()
        X[..., h0] = cos[:, None] * ys[..., h0] - sin[:, None] * ys[..., h1]
        X[..., h1] = sin[:, None] * ys[..., h0] + cos[:, None] * ys[..., h1]
        return X + cx[:, None]

    # --- fitting ----------------------------------------------------------------------------
    def _check_params(self) -> None:
        bad = []
        v = self.min_body_seen
        if isinstance(v, bool) or not isinstance(v, int | float) or not 0 < v <= 1:
            bad.append(f"min_body_seen must be a fraction in (0, 1]; got {v!r}")
        v = self.n_components
        if v is not None and (isinstance(v, bool) or not isinstance(v, int | np.integer) or v < 1):
            bad.append(f"n_components must be a positive integer or None; got {v!r}")
        if self.up_axis not in _UP:
            bad.append(f"up_axis must be 'x', 'y' or 'z'; got {self.up_axis!r}")
        for name, low in (("max_frames", 10), ("n_iter", 1)):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, int | np.integer) or v < low:
                bad.append(f"{name} must be an integer >= {low}; got {v!r}")
        if bad:
            raise InputError("KeypointFiller: " + "; ".join(bad))

    def _usable(self, X: np.ndarray) -> np.ndarray:
        seen = np.isfinite(X).all(-1)
        n = seen.sum(-1)
        return (n >= 2) & (n >= self.min_body_seen * X.shape[1] - 1e-9)

    def fit(self, coords: Sequence[np.ndarray]) -> KeypointFiller:
        """Fit the shape model on frames of one body plan.

        Parameters
        ----------
        coords : sequence of arrays, shape (F, K, D)
            One animal's keypoints per array (NaN = lost).
        """
        self._check_params()
        arrays = [np.asarray(c, dtype=np.float64) for c in coords]
        if not arrays or any(a.ndim != 3 for a in arrays):
            raise InputError("KeypointFiller.fit needs arrays of shape (frames, keypoints, dims)")
        k, d = arrays[0].shape[1:]
        usable = [np.flatnonzero(self._usable(a)) for a in arrays]  # frame indices
        total = sum(len(i) for i in usable)
        if total < 3:
            msg = (
                f"KeypointFiller: only {total} frame(s) show at least {self.min_body_seen:.0%} "
                "of the keypoints; too few to learn the body shape"
            )
            raise InputError(msg)
        step = max(1, total // self.max_frames)
        # Every step-th usable frame of all arrays in a row, taken without copying the rest:
        # array j's share starts at the first multiple of step at or after its offset.
        offsets = np.cumsum([0] + [len(i) for i in usable[:-1]])
        X = np.concatenate(
            [a[i[(-off) % step :: step]] for a, i, off in zip(arrays, usable, offsets, strict=True)]
        )
        complete = np.isfinite(X).all((1, 2))
        start = X[complete] if complete.sum() >= 3 else X
        shape = np.nanmean(start - np.nanmean(start, axis=1, keepdims=True), axis=0)
        shape = np.nan_to_num(shape)
        p = k * d
        q_max = max(1, p - d - 2)
        mean = cov = None
        for _ in range(self.n_iter):
            Y, _how = self._to_shape(X, shape)
            Y = Y.reshape(len(X), p)
            if mean is None:
                mean = np.nanmean(Y, axis=0)
                centred = np.where(np.isnan(Y), 0.0, Y - mean)
                cov = centred.T @ centred / len(Y) + 1e-6 * np.eye(p) * np.nanvar(Y)
            for _em in range(3):  # EM for a Gaussian with missing values
                filled, extra = conditional_fill(Y, mean, cov, second_moment=True)
                mean = filled.mean(0)
                c = filled - mean
                cov = (c.T @ c + extra) / len(filled)
                q = self._n_components(cov, q_max)
                W, s2 = ppca_from_covariance(cov, q)
                cov = W @ W.T + s2 * np.eye(p)
            shape = mean.reshape(k, d)
        self.mean_shape_ = shape
        self.mean_ = mean
        self.covariance_ = cov
        self.components_ = W.T
        self.noise_variance_ = float(s2)
        self.n_keypoints_, self.n_dims_ = int(k), int(d)
        self.n_frames_fitted_ = len(X)
        return self

    def _n_components(self, cov: np.ndarray, q_max: int) -> int:
        if self.n_components is not None:
            return min(int(self.n_components), q_max)
        values = np.linalg.eigvalsh(cov)[::-1]
        share = np.cumsum(values) / max(values.sum(), 1e-300)
        return int(min(np.searchsorted(share, 0.99) + 1, q_max))

    # --- use --------------------------------------------------------------------------------
    def transform(self, coords: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Frames with lost keypoints filled where enough of the body is seen.

        Parameters
        ----------
        coords : array, shape (F, K, D)

        Returns
        -------
        filled : array, shape (F, K, D)
            Lost keypoints of frames with at least ``min_body_seen`` seen are filled; other
            frames are returned as given.
        seen : array, shape (F,)
            Fraction of keypoints seen in each frame (before filling).
        """
        if not hasattr(self, "mean_"):
            raise NotFittedError("this KeypointFiller is not fitted yet; call fit first")
        X = np.array(coords, dtype=np.float64)
        if X.ndim != 3 or X.shape[1:] != (self.n_keypoints_, self.n_dims_):
            msg = (
                f"KeypointFiller: expected frames of shape (F, {self.n_keypoints_}, "
                f"{self.n_dims_}); got {X.shape}"
            )
            raise InputError(msg)
        seen = body_seen(X)
        rows = np.flatnonzero(self._usable(X) & (seen < 1))
        if len(rows):
            part = X[rows]
            Y, how = self._to_shape(part, self.mean_shape_)
            lost = ~np.isfinite(part).all(-1)
            Y[lost] = np.nan
            flat, _ = conditional_fill(Y.reshape(len(rows), -1), self.mean_, self.covariance_)
            back = self._from_shape(flat.reshape(part.shape), how)
            part[lost] = back[lost]
            X[rows] = part
        return X, seen

    # --- persistence -----------------------------------------------------------------------
    _ARRAYS = ("mean_shape_", "mean_", "covariance_", "components_")

    def to_state(self) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
        """JSON-able parameters and fitted numbers, plus the fitted arrays (no pickle)."""
        if not hasattr(self, "mean_"):
            raise NotFittedError("this KeypointFiller is not fitted yet; call fit first")
        meta = {
            "estimator": "KeypointFiller",
            "params": self.get_params(),
            "fitted": {
                "noise_variance_": self.noise_variance_,
                "n_keypoints_": self.n_keypoints_,
                "n_dims_": self.n_dims_,
                "n_frames_fitted_": self.n_frames_fitted_,
            },
        }
        return meta, {k: np.asarray(getattr(self, k), dtype=np.float64) for k in self._ARRAYS}

    @classmethod
    def from_state(cls, meta: dict[str, Any], arrays: dict[str, np.ndarray]) -> KeypointFiller:
        """Rebuild a fitted filler from ``to_state`` output (checked; InputError if not)."""
        try:
            if meta["estimator"] != "KeypointFiller":
                raise KeyError("estimator")
            filler = cls(**meta["params"])
            fitted = dict(meta["fitted"])
            k, d = int(fitted["n_keypoints_"]), int(fitted["n_dims_"])
            filler.noise_variance_ = float(fitted["noise_variance_"])
            filler.n_keypoints_, filler.n_dims_ = k, d
            filler.n_frames_fitted_ = int(fitted["n_frames_fitted_"])
            for name in cls._ARRAYS:
                setattr(filler, name, np.array(arrays[name], dtype=np.float64))
        except (KeyError, TypeError, ValueError) as exc:
            raise InputError(f"not a KeypointFiller state (missing or wrong {exc})") from None
        filler._check_params()
        p = k * d
        shapes = {"mean_shape_": (k, d), "mean_": (p,), "covariance_": (p, p)}
        wrong = [n for n, s in shapes.items() if getattr(filler, n).shape != s]
        if wrong or filler.components_.ndim != 2 or filler.components_.shape[1] != p:
            raise InputError(f"KeypointFiller state: arrays of the wrong shape {wrong}")
        return filler


def fit_filler(
    sessions: Sequence[PoseTracks], min_body_seen: float, up_axis: str = "z"
) -> KeypointFiller | None:
    """A filler fitted on every animal of ``sessions`` (deterministic: evenly spaced frames);
    None when a keypoint is never seen (the feature pipeline then names it) or too few frames
    show enough of the body to learn its shape."""
    arrays = [s.coords[:, a] for s in sessions for a in range(s.n_animals)]
    ever = np.zeros(arrays[0].shape[1], dtype=bool)
    for x in arrays:
        ever |= np.isfinite(x).all(-1).any(0)
    filler = KeypointFiller(min_body_seen=min_body_seen, up_axis=up_axis)
    if not ever.all() or sum(int(filler._usable(x).sum()) for x in arrays) < 3:
        return None
    return filler.fit(arrays)


def fill_tracks(filler: KeypointFiller | None, tracks: PoseTracks) -> tuple[PoseTracks, np.ndarray]:
    """``tracks`` with lost keypoints filled (where enough of the body is seen), and the
    fraction of the body seen per frame and animal, shape (F, A)."""
    seen = np.isfinite(tracks.coords).all(-1).mean(-1)
    if filler is None or seen.min(initial=1.0) >= 1.0:
        return tracks, seen
    coords = np.stack(
        [filler.transform(tracks.coords[:, a])[0] for a in range(tracks.n_animals)], axis=1
    )
    return tracks.replace(coords=coords), seen
