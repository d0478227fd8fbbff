"""Features of one animal over time (batch or causal), the online ``FeatureStream``, and the
small array helpers they share with the pipeline."""

from __future__ import annotations

from collections.abc import Sequence
from functools import partial
from typing import TYPE_CHECKING

import numpy as np

from ethoscribe.errors import InputError
from ethoscribe.filters import (
    CausalBandPower,
    CausalLowPass,
    TrailingDerivative,
    TrailingStd,
    band_filters,
    band_power,
    derivative,
    lowpass,
    rolling_std,
)
from ethoscribe.geometry import horizontal_axes, unwrap_angles

if TYPE_CHECKING:
    from ethoscribe.features.pipeline import FeaturePipeline


class _Motion:
    """Features of one animal over time; when causal it carries filter state between chunks,
    so a recording can be fed whole or one frame at a time with the same result."""

    def __init__(self, pipe: FeaturePipeline, fps: float) -> None:
        self.pipe = pipe
        d, k = pipe.n_dims_, len(pipe.keypoints_)
        n_small = d + 1 + int(pipe.social_)
        bc = pipe._band_components
        compact = pipe.feature_set == "compact"
        n_shape = pipe.n_components_ if compact else k * d  # channels of the posture speed
        w_std = max(1, round(pipe.variability_window_s * fps))
        vw, freqs = pipe.velocity_window_s, tuple(pipe.frequencies_)
        # Windowed means (compact set): a low-pass at the -3 dB point of a w-second average.
        self.posture_mean = self.speed_mean = self.band_mean = None
        n_speeds = 4 if pipe._separate_heights else 3
        n_bands = len(freqs) if bc else 0
        windows = (("posture", pipe.n_components_), ("speed", n_speeds), ("band", n_bands))
        for name, channels in windows:
            w = getattr(pipe, f"{name}_window_s", None)
            if not compact or w is None or not channels:
                continue
            cut = MOVING_AVERAGE_CUTOFF / float(w)
            if pipe.causal:
                smooth = CausalLowPass(channels, fps, cut).process
            else:
                smooth = partial(lowpass, fps=fps, cutoff_hz=cut)
            setattr(self, f"{name}_mean", smooth)
        if pipe.causal:
            self.d_small = TrailingDerivative(n_small, fps, vw).process
            self.d_ego = TrailingDerivative(n_shape, fps, vw).process
            smoothing = getattr(pipe, "band_smoothing", "butterworth")
            self.bands = (
                CausalBandPower(bc, fps, freqs, smoothing=smoothing).process
                if bc and freqs
                else None
            )
            self.stds = None if compact else TrailingStd(bc + 1, w_std).process
        else:
            self.d_small = self.d_ego = partial(derivative, fps=fps, window_s=vw)
            bands = partial(
                band_power,
                fps=fps,
                frequencies=freqs,
                sum_channels=compact,
                smoothing=getattr(pipe, "band_smoothing", "butterworth"),
            )
            self.bands = bands if bc and freqs else None
            self.stds = None if compact else partial(rolling_std, window_frames=w_std)
        self._last_heading: tuple[float, float] | None = None  # (raw, unwrapped), causal only
        self.body_scale = None if pipe.body_size_ is None else BodyScale(pipe).scale

    def _unwrap(self, heading: np.ndarray) -> np.ndarray:
        if not self.pipe.causal:
            return unwrap_angles(heading)
        prev = self._last_heading
        if prev is None:
            out = unwrap_angles(heading)
        else:
            out = unwrap_angles(np.concatenate([[prev[0]], heading]))[1:] + (prev[1] - prev[0])
        finite = np.flatnonzero(np.isfinite(heading))
        if finite.size:
            self._last_heading = (float(heading[finite[-1]]), float(out[finite[-1]]))
        return out

    def __call__(self, geo: tuple, social: np.ndarray | None) -> np.ndarray:
        """Raw features of a chunk, shape (F, n_features): linear, before the log transform
        and standardisation of ``FeaturePipeline._finish``."""
        p = self.pipe
        centroid, heading, ego = geo
        n, d = ego.shape[0], ego.shape[2]
        if self.body_scale is not None:
            ego = ego * self.body_scale(ego)[:, None, None]
        bc = p._band_components
        out = np.empty((n, len(p.columns_)))
        col = 0

        def put(block: np.ndarray) -> None:
            nonlocal col
            block = block.reshape(n, -1)
            out[:, col : col + block.shape[1]] = block
            col += block.shape[1]

        pcs = ego.reshape(n, -1) @ p.pca_components_.T - p.pca_components_ @ p.pca_mean_
        put(pcs if self.posture_mean is None else self.posture_mean(pcs))
        small = [centroid, self._unwrap(heading)[:, None]]
        rates = self.d_small(np.hstack(small + ([social[:, :1]] if social is not None else [])))
        if p.feature_set == "compact":
            moving = rates[:, :d]
            if p._separate_heights:  # horizontal speed here; vertical speed and height below
                up = "xyz".index(p.up_axis)
                moving = rates[:, list(horizontal_axes(d, p.up_axis))]
            speeds = [np.linalg.norm(moving, axis=1), np.abs(rates[:, d])]
            speeds += [np.linalg.norm(self.d_ego(pcs), axis=1)]
            if p._separate_heights:
                speeds += [np.abs(rates[:, up])]
            speeds = np.column_stack(speeds)
            put(speeds if self.speed_mean is None else self.speed_mean(speeds))
            if p._separate_heights:
                put(centroid[:, up] - p.height_floor_)
            if self.bands is not None:  # amplitude of the whole posture in each band
                power = self.bands(pcs[:, :bc])
                power = power.sum(axis=1) if power.shape[1] > 1 else power[:, 0]
                if self.band_mean is not None:  # averaged over the bout-scale window too
                    power = np.maximum(self.band_mean(power), 0.0)
                put(np.sqrt(power))
        else:
            speed = np.linalg.norm(rates[:, :d], axis=1)
            self._detailed(put, rates, speed, (centroid, heading, ego), pcs)
        if social is not None:
            put(social)
            put(-rates[:, d + 1])
        return out

    def _detailed(self, put, rates, speed, geo, pcs) -> None:
        """The per-keypoint columns of ``feature_set="detailed"``."""
        p = self.pipe
        centroid, heading, ego = geo
        n, k, d = ego.shape
        bc = p._band_components
        h = list(horizontal_axes(d, p.up_axis))
        c, s = np.cos(heading), np.sin(heading)
        vx, vy = rates[:, h[0]], rates[:, h[1]]
        put(np.column_stack([speed, vx * c + vy * s, vy * c - vx * s, rates[:, d]]))
        ego_rate = self.d_ego(ego.reshape(n, -1)).reshape(n, k, d)
        keep = p._speed_keypoints
        put(_point_norms(ego_rate if len(keep) == k else ego_rate[:, keep]))
        if d == 3:  # heights above the floor of the world, also when postures are shapes
            up = "xyz".index(p.up_axis)
            put(ego[:, :, up] + centroid[:, None, up] if p._separate_heights else ego[:, :, up])
        if self.bands is not None:
            put(np.sqrt(self.bands(pcs[:, :bc])))
        put(self.stds(np.column_stack([pcs[:, :bc], speed])))


def _radius(ego: np.ndarray) -> np.ndarray:
    """RMS distance of the keypoints (F, K, D) from their centroid, per frame (F,)."""
    centred = ego - np.einsum("fkd->fd", ego)[:, None] / ego.shape[1]
    return np.sqrt(np.einsum("fkd,fkd->f", centred, centred) / ego.shape[1])


def _body_size(X: np.ndarray) -> float:
    """Median RMS keypoint distance from the centroid over the frames (F, K, D) seen."""
    r = _radius(X[:: max(1, len(X) // 20_000)])
    r = r[np.isfinite(r)]
    return float(np.median(r)) if r.size else np.nan


class BodyScale:
    """Factor that brings one animal's keypoints to the typical body size: ``body_size_`` /
    its own size (offline: the median over the chunk it is given, the whole session; causal:
    the mean over every frame seen so far, carried from chunk to chunk)."""

    def __init__(self, pipe: FeaturePipeline) -> None:
        self.typical, self.causal = pipe.body_size_, pipe.causal
        self._sum, self._count = 0.0, 0

    def scale(self, ego: np.ndarray) -> np.ndarray:
        r = _radius(ego)
        ok = np.isfinite(r)
        if not self.causal:
            size = np.median(r[ok]) if ok.any() else np.nan
            return np.full(len(r), self.typical / size if size > 0 else np.nan)
        sums = self._sum + np.cumsum(np.where(ok, r, 0.0))
        counts = self._count + np.cumsum(ok)
        self._sum, self._count = float(sums[-1]), int(counts[-1])
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(sums > 0, self.typical * counts / sums, np.nan)


class FeatureStream:
    """Online causal features: push one frame of all animals, get one feature row per animal.

    Made by ``FeaturePipeline.stream``; rows equal those of ``transform`` on the whole
    recording. State is a few filter states and trailing buffers per animal.
    """

    def __init__(self, pipeline: FeaturePipeline, n_animals: int, fps: float) -> None:
        self.pipeline, self.n_animals, self.fps = pipeline, n_animals, fps
        self.columns = pipeline.columns_
        self.n_frames = 0
        self._motions = [_Motion(pipeline, fps) for _ in range(n_animals)]

    def push(self, coords: np.ndarray) -> np.ndarray:
        """Features of the next frame.

        Parameters
        ----------
        coords : array, shape (n_animals, n_keypoints, n_dims)
            NaN marks a missing keypoint.

        Returns
        -------
        array, shape (n_animals, n_features)
            NaN rows where the frame is invalid (e.g. not enough history yet).
        """
        p = self.pipeline
        X = np.asarray(coords, dtype=np.float64)
        expected = (self.n_animals, len(p.keypoints_), p.n_dims_)
        if X.shape != expected or np.isinf(X).any():
            msg = (
                f"frame {self.n_frames}: expected finite-or-NaN coordinates of shape {expected} "
                f"(animals, keypoints, dims); got shape {X.shape}"
            )
            raise InputError(msg)
        rows = p._compute(X[None], self._motions)
        self.n_frames += 1
        return np.vstack([p._finish(r)[0] for r in rows])


# Cut-off of a low-pass standing for a w-second moving average: 0.443 / w Hz, the frequency at
# which a moving average's response |sin(pi f w) / (pi f w)| falls to 1/sqrt(2) (-3 dB).
MOVING_AVERAGE_CUTOFF = 0.443


def _check_rate(frequencies: Sequence[float], fps: float, where: str) -> None:
    """Every band must lie below the Nyquist frequency of this frame rate."""
    try:
        for f in frequencies:
            band_filters(float(f), fps)
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from None


def _centroid(X: np.ndarray) -> np.ndarray:
    """Mean of the keypoints (F, K, D) -> (F, D); NaN if any is missing."""
    return np.einsum("fkd->fd", X) / X.shape[1]  # einsum: ~6x faster than mean over axis 1


def _point_norms(a: np.ndarray) -> np.ndarray:
    """Lengths of vectors (F, K, D) -> (F, K)."""
    if a.shape[-1] == 2 and a.flags.c_contiguous:
        return np.abs(a.view(np.complex128)[..., 0])
    return np.sqrt(np.einsum("fkd,fkd->fk", a, a))


def _pair_flatness(points: np.ndarray, up_axis: str) -> np.ndarray:
    """Median over frames of every keypoint pair's horizontal length over its 3-D length,
    (n, K, 3) -> (K, K): 1 for a pair lying flat, 0 for one keypoint above the other; NaN
    where never both seen apart."""
    d = points[:, :, None] - points[:, None]
    full = np.linalg.norm(d, axis=-1)
    flat = np.linalg.norm(d[..., list(horizontal_axes(3, up_axis))], axis=-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(full > 0, flat / full, np.nan)
    out = np.full(full.shape[1:], np.nan)
    seen = np.isfinite(ratio).any(axis=0)
    out[seen] = np.nanmedian(ratio[:, seen], axis=0)
    return out


def _pair_lengths(points: np.ndarray) -> np.ndarray:
    """Mean distance between every two keypoints over frames (n, K, D) -> (K, K)."""
    dist = np.linalg.norm(points[:, :, None] - points[:, None], axis=-1)
    ok = np.isfinite(dist)
    return np.where(ok, dist, 0.0).sum(0) / np.maximum(ok.sum(0), 1)
