"""Penalised change-point search (ruptures) and the change-point segmenter.

``detect_change_points`` finds where the mean of a series changes, minimising the squared
deviations from segment means plus a penalty per change: ``"kernel"`` (default) is ruptures'
compiled ``KernelCPD(kernel="linear")`` (PELT on that cost, 3.5 s for 1e6 x 12 frames with a
change every 300); ``"pelt"`` is ``Pelt(model="l2")`` on a grid of ``jump`` frames (pure Python,
short series only); ``"binseg"`` is ``Binseg(model="l2")``, greedy, for a fixed number of changes.
Pruned search turns quadratic on long stretches without changes (30 000 stationary frames: 5.6 s),
so a long penalised search runs on windows of ``window`` frames padded with context on both
sides; each window keeps the changes in its own core. The penalty uses the whole length.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
import ruptures as rpt
from sklearn.base import BaseEstimator

from ethoscribe.checks import is_real, seed_from
from ethoscribe.errors import InputError, listed
from ethoscribe.saved_state import check_header, header
from ethoscribe.segment.inputs import check_fitted, check_X_lengths, split_by_lengths
from ethoscribe.segment.motifs import (
    SEGMENT_COLUMNS,
    cluster_segments,
    describe_segments,
    motif_probabilities,
    motif_table,
)
from ethoscribe.segment.prediction_error import PredictionErrorBoundaries

CHANGE_POINT_METHODS = ("kernel", "pelt", "binseg")
SEGMENTER_METHODS = (*CHANGE_POINT_METHODS, "prediction_error")
PENALTY_SCALE = 2.0
DEFAULT_JUMP = {"kernel": 1, "pelt": 5, "binseg": 1}
MAD_TO_SD = 1.482602218505602  # 1 / Phi^-1(3/4): MAD of a normal sample -> its SD

FORMAT_VERSION = 1  # layout of to_state()


def robust_noise_variance(
    x: np.ndarray, block: int = 1, lengths: np.ndarray | None = None
) -> np.ndarray:
    """Per-feature noise variance that ignores the (few) jumps between segments.

    Differences of consecutive means over blocks of ``block`` frames have variance
    ``2 * sigma^2 / block`` for white noise, and their median absolute deviation is barely moved
    by the few that straddle a jump. ``block=1`` is the classic ``(MAD(diff(x)) / sqrt(2))^2``;
    a block longer than the noise correlation time gives the long-run variance of smooth
    (autocorrelated) features instead, which is what the least-squares cost actually sees.

    Parameters
    ----------
    x : array, shape (n_frames, n_features)
    block : int, frames per block (>= 1)
    lengths : frames per session if ``x`` stacks several (differences never cross sessions)

    Returns
    -------
    array, shape (n_features,)

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> float(np.round(robust_noise_variance(rng.normal(0, 2, (20000, 1)))[0], 1))
    4.0
    """
    x = np.asarray(x, dtype=np.float64)
    x = x.reshape(len(x), -1)
    lengths = np.array([len(x)]) if lengths is None else np.asarray(lengths, dtype=np.int64)
    block = max(1, int(block))
    if (lengths // block).sum() - len(lengths) < 2:
        block = 1  # too short for blocks: fall back to single frames
    diffs = []
    for part in np.split(x, np.cumsum(lengths)[:-1]):
        nb = len(part) // block
        if nb >= 2:
            means = part[: nb * block].reshape(nb, block, -1).mean(axis=1)
            diffs.append(np.diff(means, axis=0))
    if not diffs:
        return np.zeros(x.shape[1])
    d = np.concatenate(diffs)
    mad = np.median(np.abs(d - np.median(d, axis=0)), axis=0)
    return (MAD_TO_SD * mad) ** 2 * block / 2.0


def auto_penalty(
    x: np.ndarray, block: int = 1, scale: float = 2.0, n_frames: int | None = None
) -> float:
    """BIC-style penalty per change for the least-squares (l2 / linear kernel) cost.

    ``penalty = scale * sum_d sigma_d^2 * log(T)`` = ``scale * D * mean(sigma^2) * log(T)``, with
    ``sigma_d^2`` from :func:`robust_noise_variance` and ``T`` the series length. Schwarz' BIC
    charges ``log T`` per parameter in units of the noise variance (Yao 1988, from memory); the
    factor 2 keeps false alarms rare on long series. Checked on ``ruptures.pw_constant``.

    Parameters
    ----------
    x : array, shape (n_frames, n_features)
    block : int, block length of the noise estimate (:func:`robust_noise_variance`)
    scale : float, multiplier of the BIC term
    n_frames : int, length ``T`` in the log term (default ``len(x)``)

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> x = rng.normal(0, 1, (1000, 3))
    >>> 35 < auto_penalty(x) < 48   # 2 * 3 * 1 * log(1000) = 41.4
    True
    """
    x = np.asarray(x, dtype=np.float64).reshape(len(x), -1)
    n = len(x) if n_frames is None else int(n_frames)
    sigma2 = float(robust_noise_variance(x, block).sum())
    # A constant series has no noise: any positive penalty keeps it in one piece.
    sigma2 = max(sigma2, 1e-12 * x.shape[1])
    return float(scale * sigma2 * np.log(max(n, 2)))


def _check_series(x: np.ndarray) -> np.ndarray:
    try:
        x = np.asarray(x, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(f"the series must be numeric (frames, features); {exc}") from None
    if x.ndim == 1:
        x = x[:, None]
    if x.ndim != 2 or len(x) == 0:
        raise InputError(f"the series must be a non-empty (frames, features) array; got {x.shape}")
    if not np.isfinite(x).all():
        bad = int((~np.isfinite(x)).any(axis=1).argmax())
        raise InputError(
            f"the series contains NaN or infinite values (first at frame {bad}); drop or fill "
            "invalid frames before change-point detection"
        )
    return np.ascontiguousarray(x)


def _positive_number(v: object) -> bool:
    return isinstance(v, (int, float, np.number)) and not isinstance(v, bool) and 0 < v < np.inf


def _ruptures_search(x: np.ndarray, method: str, min_size: int, jump: int):
    if method == "kernel":
        return rpt.KernelCPD(kernel="linear", min_size=min_size).fit(x)
    if method == "pelt":
        return rpt.Pelt(model="l2", min_size=min_size, jump=jump).fit(x)
    return rpt.Binseg(model="l2", min_size=min_size, jump=jump).fit(x)


def _penalised(x: np.ndarray, method: str, pen: float, min_size: int, jump: int) -> np.ndarray:
    if len(x) < 2 * min_size:
        return np.zeros(0, np.int64)
    try:
        bkps = _ruptures_search(x, method, min_size, jump).predict(pen=pen)
    except rpt.exceptions.BadSegmentationParameters:
        return np.zeros(0, np.int64)
    return np.asarray(bkps[:-1], dtype=np.int64)


def detect_change_points(
    x: np.ndarray,
    method: str = "kernel",
    penalty: str | float = "auto",
    min_size: int = 2,
    jump: int | None = None,
    n_change_points: int | None = None,
    noise_block: int | None = None,
    window: int = 2000,
) -> np.ndarray:
    """Boundaries where the mean of ``x`` changes.

    Parameters
    ----------
    x : array, shape (n_frames, n_features) or (n_frames,); one session, finite
    method : {"kernel", "pelt", "binseg"}, see the module docstring
    penalty : "auto" or float
        Cost per change (squared feature units); "auto" is :func:`auto_penalty` with
        ``block=noise_block``. Ignored when ``n_change_points`` is given.
    min_size : int, shortest segment in frames
    jump : int, grid step of candidates for "pelt" (default 5) and "binseg" (default 1)
    n_change_points : int, optional
        Exact number of changes: "kernel" by dynamic programming (quadratic in ``n_frames``),
        "binseg" greedily; "pelt" cannot.
    noise_block : int, block of the "auto" noise estimate (default ``min_size``)
    window : int, core length of the windows of a long penalised search

    Returns
    -------
    int64 array, shape (n_changes,)
        Sorted first frames of each new segment (0 and ``n_frames`` excluded).

    Examples
    --------
    >>> x = np.r_[np.zeros(50), np.full(50, 5.0)] + np.random.default_rng(0).normal(0, .5, 100)
    >>> detect_change_points(x, min_size=5).tolist()
    [50]
    """
    x = _check_series(x)
    if method not in CHANGE_POINT_METHODS:
        known = ", ".join(CHANGE_POINT_METHODS)
        raise InputError(f"unknown change-point method {method!r}; known methods: {known}")
    jump = DEFAULT_JUMP[method] if jump is None else jump
    for name, v, low in (
        ("min_size", min_size, 1),
        ("jump", jump, 1),
        ("n_change_points", n_change_points, 0),
    ):
        if v is not None and (not isinstance(v, (int, np.integer)) or v < low):
            raise InputError(f"{name} must be a whole number >= {low}; got {v!r}")
    if n_change_points is None and not (penalty == "auto" or _positive_number(penalty)):
        raise InputError(f"penalty must be 'auto' or a positive number; got {penalty!r}")
    n = len(x)
    if n < min_size:
        raise InputError(
            f"the series has {n} frames, fewer than min_size={min_size}; pass a longer series "
            "or a smaller min_size"
        )
    if n_change_points is not None:
        return _fixed_count(x, method, int(n_change_points), min_size, jump)
    block = min_size if noise_block is None else int(noise_block)
    pen = auto_penalty(x, block=block) if penalty == "auto" else float(penalty)
    window = max(int(window), 10 * min_size)
    context = max(200, 4 * min_size)
    if n <= window + 2 * context:
        return _penalised(x, method, pen, min_size, jump)
    found = []
    for start in range(0, n, window):
        stop = min(start + window, n)
        lo, hi = max(0, start - context), min(n, stop + context)
        b = _penalised(x[lo:hi], method, pen, min_size, jump) + lo
        found.append(b[(b >= start) & (b < stop)])
    return _drop_close(np.concatenate(found), min_size, n)


def _drop_close(b: np.ndarray, min_size: int, n: int) -> np.ndarray:
    """Keep boundaries at least ``min_size`` apart (and from both ends), first come first kept."""
    keep, last = [], 0
    for v in np.sort(b):
        if v - last >= min_size and n - v >= min_size:
            keep.append(v)
            last = v
    return np.asarray(keep, dtype=np.int64)


def _fixed_count(x: np.ndarray, method: str, k: int, min_size: int, jump: int) -> np.ndarray:
    if k == 0:
        return np.zeros(0, np.int64)
    if method == "pelt":
        raise InputError(
            "method 'pelt' needs a penalty, not a number of changes; use method='binseg' or "
            "'kernel' with n_change_points"
        )
    try:
        bkps = _ruptures_search(x, method, min_size, jump).predict(n_bkps=k)
    except rpt.exceptions.BadSegmentationParameters:
        msg = (
            f"cannot place {k} changes at least {min_size} frames apart in {len(x)} frames; "
            "ask for fewer changes or a smaller min_size"
        )
        raise InputError(msg) from None
    return np.asarray(bkps[:-1], dtype=np.int64)


class ChangePointSegmenter(BaseEstimator):
    """Segments between change points, clustered into motifs.

    ``fit`` standardises the features, finds boundaries in each session (penalised change points,
    or prediction-error peaks with ``method="prediction_error"``), describes each segment
    (:func:`ethoscribe.segment.motifs.describe_segments`) and clusters the descriptions into
    motifs (:func:`~ethoscribe.segment.motifs.cluster_segments`). ``predict`` segments new
    sessions the same way and gives each segment its most probable motif.

    Parameters
    ----------
    method : {"kernel", "pelt", "binseg", "prediction_error"}
    penalty : "auto" or float
        Cost per change on standardised features. "auto": ``2 * sigma^2 * log(T)``, ``sigma^2``
        the summed long-run noise variance of the training features (blocks of the minimum
        duration, :func:`robust_noise_variance`), ``T`` each session's length. For
        "prediction_error" it is the peak threshold (z units; "auto" = 4).
    min_duration_s : float
        Shortest segment, seconds.
    fps : float
        Frames per second.
    n_motifs : "auto" or int
        Motif count ("auto": lowest BIC up to ``max_motifs``).
    max_motifs : int
    random_state : int, numpy.random.Generator or None
        Seed of the motif clustering; a generator gives one seed per fit (``random_seed_``).

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> X = np.repeat(rng.normal(0, 3, (8, 2))[[0, 1, 0, 1, 0, 1, 0, 1]], 60, axis=0)
    >>> X = X + rng.normal(0, 0.3, X.shape)
    >>> model = ChangePointSegmenter().fit(X)
    >>> model.n_motifs_, len(model.boundaries_[0])
    (2, 7)
    """

    def __init__(
        self,
        method: str = "kernel",
        penalty: str | float = "auto",
        min_duration_s: float = 0.3,
        fps: float = 30.0,
        n_motifs: int | str = "auto",
        max_motifs: int = 12,
        random_state: int | np.random.Generator | None = 0,
    ) -> None:
        self.method = method
        self.penalty = penalty
        self.min_duration_s = min_duration_s
        self.fps = fps
        self.n_motifs = n_motifs
        self.max_motifs = max_motifs
        self.random_state = random_state

    def _check_params(self) -> None:
        if self.method not in SEGMENTER_METHODS:
            raise InputError(
                f"unknown segmentation method {self.method!r}; known methods: "
                f"{', '.join(SEGMENTER_METHODS)}"
            )
        for name in ("min_duration_s", "fps"):
            if not _positive_number(getattr(self, name)):
                raise InputError(f"{name} must be a positive number; got {getattr(self, name)!r}")
        if not (self.penalty == "auto" or _positive_number(self.penalty)):
            raise InputError(f"penalty must be 'auto' or a positive number; got {self.penalty!r}")
        for name, value in (("n_motifs", self.n_motifs), ("max_motifs", self.max_motifs)):
            if not (value == "auto" and name == "n_motifs") and not (
                isinstance(value, (int, np.integer)) and not isinstance(value, bool) and value >= 1
            ):
                raise InputError(f"{name} must be an integer >= 1 (or 'auto'); got {value!r}")

    def _min_size(self) -> int:
        return max(2, round(self.min_duration_s * self.fps))

    def _check_sessions(self, lengths: np.ndarray) -> None:
        min_size = self._min_size()
        short = np.flatnonzero(lengths < min_size)
        if len(short):
            i = int(short[0])
            raise InputError(
                f"session {i} has {int(lengths[i])} frames, fewer than one minimum segment "
                f"({min_size} frames = min_duration_s {self.min_duration_s} s at {self.fps} fps); "
                "drop that session or lower min_duration_s"
            )

    def _session_boundaries(self, xs: np.ndarray, lengths: np.ndarray) -> list[np.ndarray]:
        if self.method == "prediction_error":
            return self.detector_.boundaries(xs, lengths)
        out = []
        for part in split_by_lengths(xs, lengths):
            pen = self._penalty_for(len(part))
            out.append(detect_change_points(part, self.method, pen, min_size=self._min_size()))
        return out

    def _penalty_for(self, n: int) -> float:
        if self.penalty != "auto":
            return float(self.penalty)
        return float(PENALTY_SCALE * max(self.noise_variance_, 1e-12) * np.log(max(n, 2)))

    def fit(self, X: np.ndarray, lengths: np.ndarray | None = None) -> ChangePointSegmenter:
        """Find segments in every session and cluster them into motifs.

        Parameters
        ----------
        X : array, shape (n_frames, n_features)
        lengths : int array, shape (n_sessions,), optional
        """
        self._check_params()
        X, lengths = check_X_lengths(X, lengths)
        self._check_sessions(lengths)
        self.mean_ = X.mean(axis=0)
        scale = X.std(axis=0)
        self.scale_ = np.where(scale > 0, scale, 1.0)
        self.n_features_in_ = X.shape[1]
        xs = (X - self.mean_) / self.scale_
        noise = robust_noise_variance(xs, block=self._min_size(), lengths=lengths)
        self.noise_variance_ = float(noise.sum())
        if self.method == "prediction_error":
            threshold = "auto" if self.penalty == "auto" else float(self.penalty)
            self.detector_ = PredictionErrorBoundaries(
                threshold=threshold, min_duration_s=self.min_duration_s, fps=self.fps
            ).fit(xs, lengths)
        self.penalty_ = np.array([self._penalty_for(n) for n in lengths])
        self.boundaries_ = self._session_boundaries(xs, lengths)
        desc, table = describe_segments(xs, self.boundaries_, self.fps, lengths)
        seed = seed_from(self.random_state)
        if seed is None:  # unseeded: a fresh seed, recorded
            seed = int(np.random.default_rng().integers(2**31 - 1))
        _, self.motif_params_ = cluster_segments(
            desc, self.n_motifs, self.max_motifs, seed, weights=table["duration_s"]
        )
        self.random_seed_ = seed
        self.n_motifs_ = len(self.motif_params_["weights"])
        self.n_states_ = self.n_motifs_
        self.segments_ = motif_table(table, motif_probabilities(desc, self.motif_params_))
        return self

    def _prepare(self, X: np.ndarray, lengths: np.ndarray | None) -> tuple[np.ndarray, ...]:
        check_fitted(self, "motif_params_")
        X, lengths = check_X_lengths(X, lengths, n_features=self.n_features_in_)
        self._check_sessions(lengths)
        xs = (X - self.mean_) / self.scale_
        return xs, lengths, self._session_boundaries(xs, lengths)

    def predict_segments(self, X: np.ndarray, lengths: np.ndarray | None = None) -> pd.DataFrame:
        """Segments of new sessions and their motifs.

        Returns
        -------
        DataFrame with ``session`` (index), ``start``, ``stop`` (frames within the session, stop
        exclusive), ``motif`` (int, 0 = largest training time budget) and ``probability``.
        """
        xs, lengths, bounds = self._prepare(X, lengths)
        desc, table = describe_segments(xs, bounds, self.fps, lengths)
        return motif_table(table, motif_probabilities(desc, self.motif_params_))

    def predict(self, X: np.ndarray, lengths: np.ndarray | None = None) -> np.ndarray:
        """Motif of every frame, shape (n_frames,) int64."""
        seg = self.predict_segments(X, lengths)
        return np.repeat(seg["motif"].to_numpy(), (seg["stop"] - seg["start"]).to_numpy())

    def predict_proba(self, X: np.ndarray, lengths: np.ndarray | None = None) -> np.ndarray:
        """Hard state rows, shape (n_frames, n_states_): 1 for the frame's motif, 0 elsewhere.

        The motif of a whole segment is chosen at once, so a frame has no posterior of its own;
        ``predict_segments`` gives each segment's motif probability.
        """
        states = self.predict(X, lengths)
        out = np.zeros((len(states), self.n_states_))
        out[np.arange(len(states)), states] = 1.0
        return out

    def boundaries(self, X: np.ndarray, lengths: np.ndarray | None = None) -> list[np.ndarray]:
        """Boundaries (first frames of new segments) of each session of new data."""
        return self._prepare(X, lengths)[2]

    def to_state(self) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
        """JSON-able parameters and metadata, and the fitted arrays (no pickle)."""
        check_fitted(self, "motif_params_")
        meta = {
            **header("ethoscribe.ChangePointSegmenter", FORMAT_VERSION),
            "params": {**self.get_params(), "random_state": self.random_seed_},
            "versions": {"ruptures": rpt.__version__},
            "n_features_in": int(self.n_features_in_),
            "n_motifs": int(self.n_motifs_),
            "noise_variance": self.noise_variance_,
            "detector": None,
        }
        arrays = {"mean": self.mean_, "scale": self.scale_, "penalty": self.penalty_}
        arrays.update({f"motif/{k}": v for k, v in self.motif_params_.items()})
        arrays["boundaries"] = np.concatenate([np.zeros(0, np.int64), *self.boundaries_])
        arrays["boundary_counts"] = np.array([len(b) for b in self.boundaries_], dtype=np.int64)
        for col in SEGMENT_COLUMNS:
            arrays[f"segments/{col}"] = self.segments_[col].to_numpy()
        if self.method == "prediction_error":
            meta["detector"], det = self.detector_.to_state()
            arrays.update({f"detector/{k}": v for k, v in det.items()})
        return meta, arrays

    @classmethod
    def from_state(
        cls, meta: dict[str, Any], arrays: dict[str, np.ndarray]
    ) -> ChangePointSegmenter:
        """Rebuild a fitted segmenter saved by :meth:`to_state`.

        Parameters, counts and array shapes are checked, so a damaged or hand-edited state is
        an ``InputError`` naming the field instead of a ``TypeError`` or ``KeyError``.
        """
        what = "change-point state"
        check_header(meta, "ethoscribe.ChangePointSegmenter", FORMAT_VERSION, what)
        params = meta.get("params")
        if not isinstance(params, dict):
            raise InputError(f"change-point state: 'params' must be an object, got {params!r:.60}")
        unknown = sorted(set(params) - set(cls._get_param_names()))
        if unknown:
            raise InputError(
                f"change-point state: unknown parameters {listed(map(repr, unknown))}; valid: "
                f"{cls._get_param_names()}"
            )
        obj = cls(**params)
        obj._check_params()
        problems = []
        for name, high in (("n_features_in", 100_000), ("n_motifs", 1000)):
            v = meta.get(name)
            if not (isinstance(v, int | np.integer) and not isinstance(v, bool) and 1 <= v <= high):
                problems.append(f"'{name}' must be an integer from 1 to {high}, got {v!r:.60}")
        noise = meta.get("noise_variance")
        if not (is_real(noise) and noise >= 0):
            problems.append(f"'noise_variance' must be a number >= 0, got {noise!r:.60}")
        needed = ["mean", "scale", "penalty", "boundaries", "boundary_counts"]
        needed += [f"segments/{c}" for c in SEGMENT_COLUMNS]
        missing = [k for k in needed if k not in arrays]
        if missing:
            problems.append(f"arrays {missing} are missing")
        if problems:
            raise InputError("change-point state: " + "; ".join(problems))
        D = int(meta["n_features_in"])
        try:
            for name in ("mean", "scale", "penalty"):
                setattr(obj, f"{name}_", np.asarray(arrays[name], dtype=np.float64))
            counts = np.asarray(arrays["boundary_counts"], dtype=np.int64)
            flat = np.asarray(arrays["boundaries"], dtype=np.int64)
            segments = {c: np.asarray(arrays[f"segments/{c}"]) for c in SEGMENT_COLUMNS}
        except (TypeError, ValueError) as exc:
            raise InputError(f"change-point state: arrays must hold numbers ({exc})") from None
        if obj.mean_.shape != (D,) or obj.scale_.shape != (D,):
            raise InputError(
                f"change-point state: 'mean' and 'scale' must have shape ({D},) for "
                f"n_features_in={D}; got {obj.mean_.shape} and {obj.scale_.shape}"
            )
        if counts.ndim != 1 or (counts < 0).any() or counts.sum() != flat.size:
            raise InputError(
                "change-point state: 'boundary_counts' must be counts >= 0 adding up to the "
                "number of saved boundaries"
            )
        obj.n_features_in_ = D
        obj.noise_variance_ = float(noise)
        obj.random_seed_ = obj.random_state
        obj.motif_params_ = _with_prefix(arrays, "motif/")
        obj.n_motifs_ = obj.n_states_ = int(meta["n_motifs"])
        weights = obj.motif_params_.get("weights")
        if weights is None or np.shape(weights) != (obj.n_motifs_,):
            raise InputError(
                f"change-point state: motif weights must have shape ({obj.n_motifs_},) for "
                f"n_motifs={obj.n_motifs_}; got {None if weights is None else np.shape(weights)}"
            )
        obj.boundaries_ = np.split(flat, np.cumsum(counts)[:-1])
        obj.segments_ = pd.DataFrame(segments)
        if meta.get("detector") is not None:
            det = _with_prefix(arrays, "detector/")
            obj.detector_ = PredictionErrorBoundaries.from_state(meta["detector"], det)
        return obj


def _with_prefix(arrays: dict[str, np.ndarray], prefix: str) -> dict[str, np.ndarray]:
    return {k[len(prefix) :]: np.asarray(v) for k, v in arrays.items() if k.startswith(prefix)}
