"""``FeaturePipeline``: egocentric posture and movement features fitted across sessions."""

from __future__ import annotations

import difflib
import warnings
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from sklearn.base import BaseEstimator

from ethoscribe.errors import InputError, InputWarning, NotFittedError, listed
from ethoscribe.features.motion import (
    MOVING_AVERAGE_CUTOFF,
    BodyScale,
    FeatureStream,
    _body_size,
    _centroid,
    _check_rate,
    _Motion,
    _pair_flatness,
    _pair_lengths,
)
from ethoscribe.features.saved import (
    _FITTED_ARRAYS,
    _FITTED_META,
    pipeline_from_state,
    pipeline_state,
)
from ethoscribe.features.scale_check import warn_scale_outliers
from ethoscribe.features.sets import FeatureSet
from ethoscribe.features.vertical_check import vertical_direction, warn_vertical_axis
from ethoscribe.filters import BAND_SMOOTHERS, derivative
from ethoscribe.geometry import (
    heading_angle,
    horizontal_axes,
    procrustes_align,
    rotate_to_axis,
    travel_alignment,
)
from ethoscribe.pose import PoseTracks, check_same_body_plan, keypoints_seen


def _accumulate(acc: list | None, X: np.ndarray, full: bool) -> list | None:
    """Add the finite rows of ``X`` to running [count, mean, scatter] (Chan et al. pairwise
    update), block by block; scatter is the full matrix or, with ``full=False``, its diagonal."""
    for s in range(0, len(X), 65536):
        B = X[s : s + 65536]
        B = B[np.isfinite(B).all(1)]
        if not len(B):
            continue
        nb, mb = len(B), B.mean(0)
        C = B - mb
        m2b = C.T @ C if full else np.einsum("ij,ij->j", C, C)
        if acc is None:
            acc = [nb, mb, m2b]
            continue
        n, mean, m2 = acc
        delta, total = mb - mean, n + nb
        cross = np.outer(delta, delta) if full else delta * delta
        acc = [total, mean + delta * nb / total, m2 + m2b + cross * (n * nb / total)]
    return acc


# Quantile of a magnitude (speed, amplitude) used as its log offset: the noise floor (below).
LOG_OFFSET_QUANTILE = 0.05

# A magnitude at most this fraction of its column's 99 % quantile is float rounding of a point
# that did not move (positions repeated exactly), not tracking noise.
ROUNDING_LEVEL = 1e-9

# Band centres (Hz) of the automatic band amplitudes: one octave apart, from rhythms slower than a
# stride (0.5 Hz) to fast gait, tremor-free grooming and wing or fin beats at the low end (8 Hz).
DEFAULT_FREQUENCIES = (0.5, 1.0, 2.0, 4.0, 8.0)
# An automatic band is used only if its upper edge (f * sqrt 2) stays at or below this fraction of
# the Nyquist frequency: a 5 % margin, i.e. at least 2.1 frames per cycle of the fastest movement
# in the band, where a digital Butterworth band-pass is still a band-pass. Every default band
# fits at 24 fps and above (8 Hz: edge 11.3 Hz <= 0.95 * 12 Hz); 10 fps keeps 0.5-2 Hz.
BAND_EDGE_MARGIN = 0.95
# Quantile of the body centroid's height taken as the floor in 3-D (vertical="separate").
HEIGHT_FLOOR_QUANTILE = 0.01
# 3-D automatic body axis: pairs whose median horizontal length is below half their length
# (more than 60 degrees from horizontal on a typical frame) are not candidates, where any
# other pair is (common practice: a heading is read from a near-horizontal body axis)
MIN_AXIS_FLATNESS = 0.5


def automatic_frequencies(fps: float) -> tuple[float, ...]:
    """The default band centres whose band fits below the Nyquist frequency of ``fps`` with
    the BAND_EDGE_MARGIN.

    Examples
    --------
    >>> automatic_frequencies(10.0)
    (0.5, 1.0, 2.0)
    """
    top = BAND_EDGE_MARGIN * float(fps) / 2
    return tuple(f for f in DEFAULT_FREQUENCIES if f * np.sqrt(2) <= top)


N_SOCIAL_FEATURES = 8  # the last columns of a social pipeline (see ``_columns``)


class FeaturePipeline(BaseEstimator):
    """Egocentric posture and movement features fitted across sessions (scikit-learn style).

    Parameters
    ----------
    origin : str, optional
        Keypoint at the origin of the body frame; None = centroid of all keypoints.
    axis : (str, str), optional
        Body axis from a tail-side to a head-side keypoint. None = automatic: over the fastest
        25% of frames (centroid speed), the mean cosine between each keypoint-to-keypoint
        direction and the direction of travel is scored; among the pairs within 0.05 of the
        best score the longest (mean distance) wins; in 3-D, pairs that stand upright on most
        frames (median horizontal length below half their length: an upright body's spine,
        which leans forward only when running) are left out where any other pair can be
        scored. Without movement, the two keypoints
        farthest apart, in listed order, with a warning. Reported in ``axis_report_`` (text)
        and ``axis_details_`` (dict).
    up_axis : {"x", "y", "z"}
        Vertical axis of 3-D tracks; rotations are about it only, so heights are kept.
    up_direction : {"auto", "up", "down"}
        Which way ``up_axis`` points in 3-D tracks: "auto" reads it from the floor
        (``vertical_check.vertical_direction``; up when the tracks give no sign of it), "down"
        for coordinates that grow downwards (camera coordinates). Only drawings depend on it:
        postures of tracks whose vertical points down are drawn turned upright.
    align : {"rotate", "procrustes"}
        "rotate": turn the body axis onto +x. "procrustes": rotate each frame onto the mean
        posture (fitted), which uses all keypoints and is steadier when the axis points jitter.
    n_components : int
        Posture principal components kept (fewer if postures span fewer dimensions).
    frequencies : sequence of float, optional
        Centre frequencies (Hz) of the band amplitudes. None (default): of 0.5, 1, 2, 4 and 8
        Hz, those whose one-octave band ends at or below 95 % of the Nyquist frequency of the
        slowest fitted session (all five from 24 fps; 0.5-2 Hz at 10 fps), with a warning
        naming the bands left out; used bands in ``frequencies_``. A given list is used as is
        and every band must lie below the Nyquist frequency of every session.
    feature_set : {"compact", "detailed"}
        Column set (module doc): "compact" (default) is lean and log-scaled for segmentation;
        "detailed" has one column per keypoint and per component, in linear units.
    band_components : int or None
        Leading components that get band amplitudes (and rolling variability in the detailed
        set); None: all kept components.
    velocity_window_s, variability_window_s : float
        Derivative fitting window and rolling-std window, in seconds.
    posture_window_s : float, optional
        Compact set: the posture columns are the components averaged over about this many
        seconds (``posture_pc<i>_mean_<w>s``) instead of their instantaneous values, so the
        phases of a rhythmic movement share one posture. The average is a Butterworth low-pass
        (order 2) with cut-off 0.443 / w Hz, the -3 dB point of a w-second moving average;
        zero-phase offline, one-way when causal. None (default): instantaneous.
    speed_window_s : float, optional
        Compact set: the speeds (centroid, turning, posture; and vertical) averaged the same
        way before their logarithm (``..._mean_<w>s``), so a speed that rises and falls within
        every cycle of a gait is one level. None (default): instantaneous.
    band_window_s : float, optional
        Compact set: the band powers averaged over about this many seconds as well (the same
        low-pass as ``speed_window_s``, after their own smoothing over about two cycles of each
        band; ``log_posture_band_<f>hz_mean_<w>s``), so a rhythm's amplitude is one level over a
        bout instead of fluctuating from one estimate of two cycles to the next. None
        (default): two cycles of each band only.
    band_smoothing : {"butterworth", "critically_damped"}
        Low-pass that smooths each band's squared output (at half the band's centre
        frequency). "butterworth" (default, order 2): it undershoots after a burst of the
        rhythm ends, and the power, clipped at 0 there, is exactly 0 on 4-8 % of the frames
        of the validation bench's sources in the 0.5 Hz band (2-4 % at 1 Hz); the log offset
        of such a column (its 5 % quantile) is then 1e-6 of its median, and those frames lie
        far below every other value on the log scale. "critically_damped": two equal real poles
        (:func:`ethoscribe.filters.critically_damped_lowpass`), 3 dB down at the same
        frequency, whose impulse response is never negative, so the power never falls to 0
        after a burst. Not the default: on the validation bench mean ARI and boundary F1 rose
        a little (seeds 0 / 1: ARI +0.000 / +0.007, boundary F1 +0.003 / +0.034), but fewer
        states were chosen on the independent simulator (ARI -0.17 / -0.11) and the pairs
        (-0.08 / -0.06) (benchmarks/README.md, "Where the real recordings lose their
        activities").
    vertical : {"separate", "posture"}
        3-D only. "separate" (default): postures come from the shape (the centroid's height
        removed from every keypoint), and the height of the body centroid above its floor (the
        1 % quantile over the fitted frames) and the vertical speed are columns of their own
        (compact: ``height_<u>``, linear, and ``log_vertical_speed_<u>_s``; the centroid speed
        is then horizontal). "posture" (the only way before this option): heights stay in the
        body frame, so the posture components see the body's height above the floor (on the
        example fish the first component was 99.4 % height).
    scale_by_size : bool
        Divide each animal's egocentric keypoints by its body size (the median over the
        session's frames of the RMS distance of its keypoints from their centroid; causal: the
        mean over the frames so far) and multiply by the fitted typical size ``body_size_``
        (the median over fitted animals), so animals of different sizes share one posture
        space; posture speed and band amplitudes follow, the centroid speed stays absolute.
    social : bool
        Add features of the nearest other animal when the fitted sessions have several animals
        (left out, with a warning, when some sessions have one animal and others several:
        :attr:`social_report_` says so).
    causal : bool
        Compute every feature from past frames only (online use; ``stream``).
    standardise : bool
        Scale features to zero mean and unit variance over the fitted sessions' valid frames.

    Attributes
    ----------
    origin_, axis_ : keypoint names used (``origin_`` None = centroid)
    axis_report_, axis_details_ : how the axis was chosen (text, JSON-able dict)
    mean_posture_ : (K, D) mean egocentric posture (the Procrustes target)
    pca_mean_, pca_components_, explained_variance_, explained_variance_ratio_ : posture PCA
        (eigh of the ddof-1 covariance of all valid postures; largest loading positive)
    scaler_mean_, scaler_scale_ : (n_features,) standardisation (constant features: scale 1)
    frequencies_ : tuple of float, band centres used (given, or chosen for the frame rate)
    height_floor_ : float or None, 3-D floor of the centroid's height (vertical="separate")
    up_sign_, up_report_ : 3-D: +1 when ``up_axis`` points up, -1 when the tracks show it
        pointing down or ``up_direction`` says so, and why (``vertical_check.vertical_direction``);
        postures are drawn with it
    body_size_ : float or None, typical body size (scale_by_size=True)
    columns_, keypoints_, n_dims_, units_, fps_, social_, n_components_

    A frame is valid when every feature is finite; invalid frames stay in the output as NaN
    rows. In 3-D the body frame keeps the vertical coordinate (height above the floor).

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> walk = np.cumsum(rng.normal(0.5, 0.1, (300, 1, 1, 2)), axis=0)
    >>> body = np.array([[0.0, 0.0], [1.0, 0.2], [2.0, 0.0]])
    >>> tracks = PoseTracks(walk + body + rng.normal(0, 0.05, (300, 1, 3, 2)),
    ...                     keypoints=["tail", "mid", "nose"], fps=30, units="cm")
    >>> fs = FeaturePipeline(n_components=2).fit_transform([tracks])[0]
    >>> fs.columns[:3]
    ('posture_pc1', 'posture_pc2', 'log_centroid_speed_cm_s')
    """

    def __init__(
        self,
        *,
        origin: str | None = None,
        axis: tuple[str, str] | None = None,
        up_axis: str = "z",
        up_direction: str = "auto",
        align: str = "rotate",
        n_components: int = 8,
        frequencies: Sequence[float] | None = None,
        feature_set: str = "compact",
        band_components: int | None = None,
        velocity_window_s: float = 0.1,
        variability_window_s: float = 0.5,
        posture_window_s: float | None = None,
        speed_window_s: float | None = None,
        band_window_s: float | None = None,
        band_smoothing: str = "butterworth",
        vertical: str = "separate",
        scale_by_size: bool = False,
        social: bool = True,
        causal: bool = False,
        standardise: bool = True,
    ) -> None:
        self.origin = origin
        self.axis = axis
        self.up_axis = up_axis
        self.up_direction = up_direction
        self.align = align
        self.n_components = n_components
        self.frequencies = frequencies
        self.feature_set = feature_set
        self.band_components = band_components
        self.velocity_window_s = velocity_window_s
        self.variability_window_s = variability_window_s
        self.posture_window_s = posture_window_s
        self.speed_window_s = speed_window_s
        self.band_window_s = band_window_s
        self.band_smoothing = band_smoothing
        self.vertical = vertical
        self.scale_by_size = scale_by_size
        self.social = social
        self.causal = causal
        self.standardise = standardise

    # --- derived from fitted state -------------------------------------------------------
    @property
    def _band_components(self) -> int:
        if self.band_components is None:
            return self.n_components_
        return min(int(self.band_components), self.n_components_)

    @property
    def _separate_heights(self) -> bool:
        return self.vertical == "separate" and self.n_dims_ == 3

    @property
    def _origin_index(self) -> int | None:
        return None if self.origin_ is None else self.keypoints_.index(self.origin_)

    @property
    def _axis_index(self) -> tuple[int, int]:
        return self.keypoints_.index(self.axis_[0]), self.keypoints_.index(self.axis_[1])

    @property
    def _speed_keypoints(self) -> list[int]:
        return [k for k in range(len(self.keypoints_)) if k != self._origin_index]

    def _check_fitted(self) -> None:
        if not hasattr(self, "columns_"):
            msg = "this FeaturePipeline is not fitted yet; call fit(sessions) first"
            raise NotFittedError(msg)

    # --- validation ----------------------------------------------------------------------
    def _check_params(self) -> None:
        bad = []
        if self.origin is not None and not isinstance(self.origin, str):
            bad.append(f"origin must be a keypoint name or None (centroid); got {self.origin!r}")
        ax = self.axis
        if ax is not None and (
            isinstance(ax, str)
            or not isinstance(ax, Sequence)
            or len(ax) != 2
            or not all(isinstance(a, str) for a in ax)
            or ax[0] == ax[1]
        ):
            bad.append(
                f"axis must be two different keypoint names (tail side, head side); got {ax!r}"
            )
        if self.up_axis not in ("x", "y", "z"):
            bad.append(
                f"up_axis must be 'x', 'y' or 'z'; got {self.up_axis!r} ('auto' is read by "
                "BehaviourModel and discover; here use vertical_check.resolve_up_axis first)"
            )
        if self.up_direction not in ("auto", "up", "down"):
            bad.append(f"up_direction must be 'auto', 'up' or 'down'; got {self.up_direction!r}")
        if self.align not in ("rotate", "procrustes"):
            bad.append(f"align must be 'rotate' or 'procrustes'; got {self.align!r}")
        if self.feature_set not in ("compact", "detailed"):
            bad.append(f"feature_set must be 'compact' or 'detailed'; got {self.feature_set!r}")
        for name, low in (("n_components", 1), ("band_components", 0)):
            v = getattr(self, name)
            if name == "band_components" and v is None:
                continue
            if isinstance(v, bool) or not isinstance(v, int | np.integer) or v < low:
                bad.append(f"{name} must be an integer >= {low}; got {v!r}")
        if self.vertical not in ("posture", "separate"):
            bad.append(f"vertical must be 'posture' or 'separate'; got {self.vertical!r}")
        if self.band_smoothing not in BAND_SMOOTHERS:
            bad.append(
                f"band_smoothing must be one of {BAND_SMOOTHERS}; got {self.band_smoothing!r}"
            )
        try:
            ok = self.frequencies is None
            if not ok:
                freqs = np.asarray(self.frequencies, dtype=np.float64)
                ok = freqs.ndim == 1 and np.isfinite(freqs).all() and (freqs > 0).all()
                ok = ok and len(np.unique(freqs)) == len(freqs)
        except (TypeError, ValueError):
            ok = False
        if not ok:
            bad.append(
                "frequencies must be None (chosen for the frame rate) or distinct positive "
                f"numbers (Hz); got {self.frequencies!r}"
            )
        for name in ("velocity_window_s", "variability_window_s", "posture_window_s"):
            v = getattr(self, name)
            if name == "posture_window_s" and v is None:
                continue
            if isinstance(v, bool) or not isinstance(v, int | float) or not 0 < v < np.inf:
                bad.append(f"{name} must be a positive number of seconds; got {v!r}")
        for name in ("speed_window_s", "band_window_s"):
            v = getattr(self, name)
            if v is not None and (
                isinstance(v, bool) or not isinstance(v, int | float) or not 0 < v < np.inf
            ):
                bad.append(f"{name} must be a positive number of seconds or None; got {v!r}")
        for name in ("social", "causal", "standardise", "scale_by_size"):
            if not isinstance(getattr(self, name), bool | np.bool_):
                bad.append(f"{name} must be True or False; got {getattr(self, name)!r}")
        if bad:
            raise InputError("FeaturePipeline: " + "; ".join(bad))

    @staticmethod
    def _check_sessions(sessions: Sequence[PoseTracks] | PoseTracks) -> list[PoseTracks]:
        if isinstance(sessions, PoseTracks):
            sessions = [sessions]
        sessions = list(sessions)
        wrong = [type(s).__name__ for s in sessions if not isinstance(s, PoseTracks)]
        if wrong:
            raise InputError(f"fit needs a list of PoseTracks; got items of type {listed(wrong)}")
        check_same_body_plan(sessions)
        units = sorted({s.units for s in sessions})
        if len(units) > 1:
            pixels = sorted({s.session.split(" [")[0] for s in sessions if s.units == "px"})
            fix = (
                f"; sessions {listed(map(repr, pixels))} are in pixels: give their px_per_unit "
                "(and units) in "
                "the manifest, or the units of files already calibrated"
                if pixels
                else ""
            )
            msg = (
                f"sessions mix units {units}; calibrate all sessions to one unit before "
                f"fitting{fix}"
            )
            raise InputError(msg)
        return sessions

    @staticmethod
    def _check_keypoints_seen(sessions: list[PoseTracks]) -> None:
        """Refuse a keypoint without a single tracked position in any session.

        Features need every keypoint in a frame, so such a keypoint leaves no valid frame at
        all; naming it here beats the later "no complete frame" (and the spurious warning
        about the body axis that the missing centroid would cause first).
        """
        seen = keypoints_seen(sessions)
        if seen.all():
            return
        names = [k for k, ok in zip(sessions[0].keypoints, seen, strict=True) if not ok]
        shown = listed(repr(s.session) for s in sessions)
        quoted = ", ".join(f"'{n}'" for n in names)
        kept = [k for k, ok in zip(sessions[0].keypoints, seen, strict=True) if ok]
        msg = (
            f"keypoint {quoted} has no tracked position in any frame of session(s) {shown} "
            "(missing, or below the confidence threshold, everywhere), so no frame has all "
            "keypoints and no feature can be computed. Leave it out when reading "
            f"(keypoints={kept}; command line: --reader-option keypoints={','.join(kept)}), or "
            "check that the tracker's keypoint names match (a renamed keypoint looks untracked)."
        )
        if len(names) == len(seen):
            msg = (
                f"no keypoint has a tracked position in any frame of session(s) {shown}; check "
                "that the files hold tracks (and the confidence threshold, min_confidence)"
            )
        raise InputError(msg)

    def _check_keypoints(self, keypoints: tuple[str, ...]) -> None:
        if len(keypoints) < 2:
            msg = (
                f"an egocentric frame needs a body axis between 2 keypoints; the tracks have only "
                f"{len(keypoints)} ({list(keypoints)}). Track at least a head-side and a "
                "tail-side keypoint."
            )
            raise InputError(msg)
        named = [("origin", self.origin)] if self.origin is not None else []
        named += [("axis", a) for a in self.axis or ()]
        for what, name in named:
            if name not in keypoints:
                close = difflib.get_close_matches(name, keypoints, n=1)
                msg = (
                    f"the {what} keypoint '{name}' ({what}=) is not one of the tracks' "
                    f"keypoints {list(keypoints)}; name one of them"
                    + (f" ('{close[0]}'?)" if close else "")
                )
                raise InputError(msg)

    def _check_tracks(self, tracks: PoseTracks) -> None:
        if not isinstance(tracks, PoseTracks):
            raise InputError(f"transform needs PoseTracks; got {type(tracks).__name__}")
        where = f"session '{tracks.session}'"
        if tuple(tracks.keypoints) != self.keypoints_:
            missing = sorted(set(self.keypoints_) - set(tracks.keypoints))
            extra = sorted(set(tracks.keypoints) - set(self.keypoints_))
            msg = (
                f"{where} has keypoints {list(tracks.keypoints)} but the pipeline was fitted on "
                f"{list(self.keypoints_)} (missing {missing}, extra {extra}, or another order); "
                "use tracks with the fitted keypoint set or refit"
            )
            raise InputError(msg)
        if tracks.n_dims != self.n_dims_ or tracks.units != self.units_:
            msg = (
                f"{where} is {tracks.n_dims}-D in '{tracks.units}' but the pipeline was fitted "
                f"on {self.n_dims_}-D tracks in '{self.units_}'"
            )
            raise InputError(msg)
        if self.social_ and tracks.n_animals < 2:
            msg = (
                f"{where} has 1 animal but the model was fitted on groups, with features of "
                "the nearest other animal; to label single-animal sessions, fit with "
                "social=False (or on solo and group sessions together)"
            )
            raise InputError(msg)

    def _motions(self, fps: float, n_animals: int, where: str) -> list[_Motion]:
        self._check_rate(fps, where)
        return [_Motion(self, fps) for _ in range(n_animals)]

    def _check_rate(self, fps: float, where: str) -> None:
        """The fitted bands and windows must fit below the Nyquist frequency of ``fps``."""
        if self.frequencies is None and self.frequencies_:
            where = (
                f"{where} (the bands {list(self.frequencies_)} Hz were chosen for the frame "
                "rate of the fitted sessions; refit on sessions at this rate)"
            )
        _check_rate(self.frequencies_, fps, where)
        for name in ("posture_window_s", "speed_window_s", "band_window_s"):
            w = getattr(self, name)
            if w is not None and MOVING_AVERAGE_CUTOFF / w >= fps / 2:
                msg = (
                    f"{where}: {name}={w:g} is shorter than two frames at {fps:g} fps; use "
                    "a longer window"
                )
                raise InputError(msg)

    def _choose_frequencies(self, sessions: list[PoseTracks]) -> None:
        """``frequencies_``: the given bands (checked) or those that fit the slowest rate."""
        slowest = min(s.fps for s in sessions)
        if self.frequencies is not None:
            self.frequencies_ = tuple(float(f) for f in self.frequencies)
            return
        self.frequencies_ = automatic_frequencies(slowest)
        left = [f for f in DEFAULT_FREQUENCIES if f not in self.frequencies_]
        if left:
            used = ", ".join(f"{f:g}" for f in self.frequencies_) or "none"
            warnings.warn(
                f"at {slowest:g} fps the band amplitudes around {', '.join(f'{f:g}' for f in left)}"
                f" Hz do not fit below the Nyquist frequency ({slowest / 2:g} Hz, with a "
                f"{round(100 * (1 - BAND_EDGE_MARGIN))} % margin); bands used: {used} Hz. "
                "Rhythms faster than the top band are not described; film at a higher rate "
                "to see them",
                UserWarning,
                stacklevel=4,
            )

    # --- fitting -------------------------------------------------------------------------
    def fit(self, sessions: Sequence[PoseTracks]) -> FeaturePipeline:
        """Fit body axis, mean posture, posture PCA and scaler across all sessions and animals.

        Parameters
        ----------
        sessions : sequence of PoseTracks
            One body plan (keypoints, dims) and one unit; cleaned tracks may keep NaN points.

        Returns
        -------
        self
        """
        self._fit(sessions, keep=False)
        return self

    def fit_transform(self, sessions: Sequence[PoseTracks]) -> list[FeatureSet]:
        """``fit`` then ``transform`` every session: one FeatureSet per session and animal,
        sessions in order, animals in order within a session."""
        return self._fit(sessions, keep=True)

    def _fit(self, sessions: Sequence[PoseTracks], keep: bool) -> list[FeatureSet]:
        for name in (*_FITTED_META, *_FITTED_ARRAYS):  # a failed refit must not look fitted
            self.__dict__.pop(name, None)
        self._check_params()
        sessions = self._check_sessions(sessions)
        first = sessions[0]
        self._check_keypoints(tuple(first.keypoints))
        self._check_keypoints_seen(sessions)
        if not self.scale_by_size:
            warn_scale_outliers(sessions)
        warn_vertical_axis(sessions, self.up_axis)
        # which way the vertical points: drawings only (heights enter features linearly)
        if self.up_direction == "auto" or first.n_dims != 3:
            self.up_sign_, self.up_report_ = vertical_direction(sessions, self.up_axis)
        else:  # given: nothing to read
            self.up_sign_ = 1 if self.up_direction == "up" else -1
            turned = "; postures are drawn turned upright" if self.up_sign_ < 0 else ""
            self.up_report_ = f"{self.up_axis} points {self.up_direction} (given){turned}"
        self.keypoints_ = tuple(first.keypoints)
        self.n_dims_, self.units_ = first.n_dims, first.units
        rates = {s.fps for s in sessions}
        self.fps_ = rates.pop() if len(rates) == 1 else None
        self.origin_ = self.origin
        counts = sorted({s.n_animals for s in sessions})
        self.social_ = bool(self.social) and counts[-1] > 1
        self.social_report_ = ""
        if self.social_ and counts[0] == 1:
            # Solo and group sessions in one study (a social and an isolation condition):
            # every session is described alike, so their motifs can be compared.
            alone = [s.session for s in sessions if s.n_animals == 1]
            self.social_ = False
            self.social_report_ = (
                f"left out: sessions have {' or '.join(map(str, counts))} animals, so every "
                "session is described by each animal's own movement alone"
            )
            warnings.warn(
                f"social features (the nearest other animal) {self.social_report_}; fit the "
                "multi-animal sessions apart to use them (social=False silences this). "
                f"Sessions with one animal: {listed(repr(n) for n in alone)}",
                InputWarning,
                stacklevel=3,
            )
        self._choose_frequencies(sessions)
        for s in sessions:
            self._check_rate(s.fps, f"session '{s.session}'")
        self.axis_, self.axis_report_, self.axis_details_ = self._choose_axis(sessions)
        if self.align == "procrustes":
            self._fit_reference(sessions)
        self._fit_pca(sessions)
        self.columns_ = self._column_names()
        raws = [
            self._compute(s.coords, self._motions(s.fps, s.n_animals, f"session '{s.session}'"))
            for s in sessions
        ]
        self.log_offset_ = self._fit_log_offsets([v for r in raws for v in r])
        acc = None
        logged = np.flatnonzero(self.log_offset_)
        for values in (v for r in raws for v in r):
            if len(logged):  # the scaler sees the transformed columns; raws stay linear
                values = values.copy()
                values[:, logged] = np.log(values[:, logged] + self.log_offset_[logged])
            acc = _accumulate(acc, values, full=False)
        if acc is None:
            msg = (
                "no valid frame in the fitted sessions: every frame misses a keypoint or lacks "
                "history; clean the tracks (fill gaps) or use longer sessions"
            )
            raise InputError(msg)
        n, mean, m2 = acc
        scale = np.sqrt(m2 / n)
        self.scaler_mean_ = mean
        self.scaler_scale_ = np.where(scale > 1e-12 * np.maximum(1.0, np.abs(mean)), scale, 1.0)
        if not keep:
            return []
        return [fs for s, r in zip(sessions, raws, strict=True) for fs in self._sets(s, r)]

    def _fit_log_offsets(self, raws: list[np.ndarray]) -> np.ndarray:
        """Offset ``c`` of each log column (``log(x + c)``), 0 for linear columns.

        ``c`` is the LOG_OFFSET_QUANTILE quantile of the column over the fitted frames (at
        most ~200k evenly spaced rows): about the tracking-noise floor of a speed or an
        amplitude, so values at the floor are compressed together and real movement is
        spread on a log scale. Floored at 1e-6 of the column's median, and 1 for an
        all-zero column. For a speed whose quantile is at rounding level (at most
        ROUNDING_LEVEL of the column's 99 % quantile: positions repeated exactly on many
        frames), the quantile and median are those of the frames above rounding level. Band
        amplitudes keep the plain rule: their exact zeros after a burst (``band_smoothing``)
        are a property of the filter that the validation bench was measured with.
        """
        logged = [j for j, c in enumerate(self.columns_) if c.startswith("log_")]
        offsets = np.zeros(len(self.columns_))
        if not logged:
            return offsets
        step = max(1, sum(len(r) for r in raws) // 200_000)
        sample = np.concatenate([r[::step][:, logged] for r in raws])
        for j, col in zip(logged, sample.T, strict=True):
            speed = "_speed_" in self.columns_[j]
            col = col[np.isfinite(col)]
            if not col.size:
                offsets[j] = 1.0
                continue
            low, mid, top = np.quantile(col, [LOG_OFFSET_QUANTILE, 0.5, 0.99])
            if speed and top > 0 and low <= ROUNDING_LEVEL * top:
                # Positions repeated exactly (an animal still for long, integer pixels): the
                # quantile is float rounding, and log(x + c) would spread it over many units.
                col = col[col > ROUNDING_LEVEL * top]
                low, mid = np.quantile(col, [LOG_OFFSET_QUANTILE, 0.5])
            offsets[j] = max(low, 1e-6 * mid) if mid > 0 else 1.0
        return offsets

    def _fit_reference(self, sessions: list[PoseTracks]) -> None:
        """Mean posture for Procrustes: start from axis-aligned postures, then two rounds of
        align-to-mean, re-pointing the mean's axis along +x each time. Uses at most ~100k
        evenly spaced frames of all sessions and animals (plenty for a mean)."""
        i, j = self._axis_index
        step = max(1, sum(s.n_frames * s.n_animals for s in sessions) // 100_000)
        sample = [s.coords[::step, a] for s in sessions for a in range(s.n_animals)]
        for align in ("rotate", "procrustes", "procrustes"):
            ego = np.concatenate([self._geometry(X, align)[2] for X in sample])
            ego = ego[np.isfinite(ego).all((1, 2))]
            if not len(ego):
                raise InputError("no frame has all keypoints present; cannot fit a mean posture")
            mean = ego.mean(0)
            turn = rotate_to_axis(mean, np.zeros(self.n_dims_), mean[j] - mean[i], self.up_axis)
            self.mean_posture_ = turn[0]

    def _fit_pca(self, sessions: list[PoseTracks]) -> None:
        """Posture PCA via eigh of the covariance (ddof 1) of valid egocentric postures."""
        acc, heights = None, []
        self.body_size_ = None
        if self.scale_by_size:
            sizes = [_body_size(s.coords[:, a]) for s in sessions for a in range(s.n_animals)]
            self.body_size_ = float(np.nanmedian(sizes)) if np.isfinite(sizes).any() else None
        for s in sessions:
            for a in range(s.n_animals):
                centroid, _, ego = self._geometry(s.coords[:, a])
                if self.body_size_ is not None:
                    ego = ego * BodyScale(self).scale(ego)[:, None, None]
                acc = _accumulate(acc, ego.reshape(s.n_frames, -1), full=True)
                if self._separate_heights:
                    step = max(1, s.n_frames * s.n_animals * len(sessions) // 200_000)
                    heights.append(centroid[::step, "xyz".index(self.up_axis)])
        self.height_floor_ = None
        if heights:
            h = np.concatenate(heights)
            h = h[np.isfinite(h)]
            self.height_floor_ = float(np.quantile(h, HEIGHT_FLOOR_QUANTILE)) if h.size else 0.0
        if acc is None or acc[0] < 2:
            missing = np.mean(
                [np.isnan(s.coords[..., 0]).mean(axis=(0, 1)) for s in sessions], axis=0
            )
            worst = [f"'{self.keypoints_[k]}' {missing[k]:.0%}" for k in np.argsort(-missing)]
            msg = (
                "fewer than 2 frames have every keypoint tracked, and posture components need "
                f"such frames; missing on (mean over sessions): {listed(worst)}. If the "
                "tracker's confidences run low for good positions, lower the confidence "
                "threshold (min_confidence); leave out keypoints that are hardly ever tracked"
            )
            raise InputError(msg)
        n, mean, m2 = acc
        evals, evecs = np.linalg.eigh(m2 / (n - 1))
        evals, evecs = np.maximum(evals[::-1], 0.0), evecs[:, ::-1]
        # Dimensions with (relative to the body's size) no variance are rounding, not posture.
        rank = int((evals > 1e-10 * max(evals[0], float(np.mean(mean**2)))).sum())
        m = min(int(self.n_components), rank)
        comps = np.ascontiguousarray(evecs[:, :m].T)  # C order: same matmul after a reload
        # Sign convention: the largest loading of each component is positive.
        comps *= np.sign(comps[np.arange(m), np.abs(comps).argmax(1)])[:, None]
        self.n_components_ = m
        if m == 0:
            warnings.warn(
                f"the keypoints {list(self.keypoints_)} never move relative to each other (a "
                "rigid body): there is no posture to describe, so the motifs come from movement "
                "alone; track keypoints on parts that bend or move (head, limbs, tail)",
                UserWarning,
                stacklevel=4,
            )
        self.pca_mean_, self.pca_components_ = mean, comps
        self.explained_variance_ = evals[:m]
        self.explained_variance_ratio_ = evals[:m] / evals.sum() if evals.sum() > 0 else evals[:m]
        if self.align == "rotate":
            self.mean_posture_ = mean.reshape(len(self.keypoints_), self.n_dims_)

    def _column_names(self) -> tuple[str, ...]:
        u, us = self.units_, f"{self.units_}_s"
        pcs = [f"posture_pc{i + 1}" for i in range(self.n_components_)]
        bands = [f"{float(f):g}hz" for f in self.frequencies_] if self._band_components else []
        if self.feature_set == "compact":
            pw, sw = self.posture_window_s, self.speed_window_s
            mean = f"_mean_{float(pw):g}s" if pw is not None else ""
            smean = f"_mean_{float(sw):g}s" if sw is not None else ""
            cols = [f"{pc}{mean}" for pc in pcs]
            speeds = [f"log_centroid_speed_{us}", "log_turning_speed_rad_s"]
            speeds += [f"log_posture_speed_{us}"]
            if self._separate_heights:
                speeds += [f"log_vertical_speed_{us}"]
            cols += [f"{c}{smean}" for c in speeds]
            if self._separate_heights:
                cols += [f"height_{u}"]
            bw = self.band_window_s
            bmean = f"_mean_{float(bw):g}s" if bw is not None else ""
            cols += [f"log_posture_band_{b}{bmean}" for b in bands]
        else:
            lead = pcs[: self._band_components]
            cols = [*pcs, f"centroid_speed_{us}", f"forward_velocity_{us}"]
            cols += [f"lateral_velocity_{us}", "heading_velocity_rad_s"]
            cols += [f"{self.keypoints_[k]}_ego_speed_{us}" for k in self._speed_keypoints]
            if self.n_dims_ == 3:
                cols += [f"height_{kp}_{u}" for kp in self.keypoints_]
            cols += [f"{pc}_band_{b}" for pc in lead for b in bands]
            w = f"std_{float(self.variability_window_s):g}s"
            cols += [f"{pc}_{w}" for pc in lead] + [f"centroid_speed_{us}_{w}"]
        if self.social_:
            log = "log_" if self.feature_set == "compact" else ""
            cols += [f"{log}dist_to_nearest_{u}", f"{log}head_to_nearest_body_{u}"]
            cols += [f"{log}nearest_head_to_body_{u}", "facing_nearest_cos", "facing_nearest_sin"]
            cols += ["nearest_heading_cos", "nearest_heading_sin", f"nearest_approach_speed_{us}"]
        return tuple(cols)

    def _travel_sample(self, sessions: list[PoseTracks]) -> tuple[np.ndarray, np.ndarray, float]:
        """Keypoints (n, K, D) and centroid velocity (n, D) on the fastest 25% of frames (at
        most ~20k frames, evenly thinned), and the speed threshold."""
        points, travel, speeds = [], [], []
        h = list(horizontal_axes(self.n_dims_, self.up_axis))
        for s in sessions:
            for a in range(s.n_animals):
                v = derivative(_centroid(s.coords[:, a]), s.fps, self.velocity_window_s)
                points.append(s.coords[:, a])
                travel.append(v)
                speeds.append(np.linalg.norm(v[:, h], axis=1))
        finite = np.concatenate([sp[np.isfinite(sp)] for sp in speeds])
        threshold = float(np.percentile(finite, 75)) if finite.size else 0.0
        fast = [np.isfinite(sp) & (sp >= threshold) & (sp > 0) for sp in speeds]
        stride = max(1, -(-sum(int(f.sum()) for f in fast) // 20_000))
        P = np.concatenate([X[f] for X, f in zip(points, fast, strict=True)])[::stride]
        T = np.concatenate([v[f] for v, f in zip(travel, fast, strict=True)])[::stride]
        return P, T, threshold

    def _choose_axis(self, sessions: list[PoseTracks]) -> tuple[tuple[str, str], str, dict]:
        """Body axis, given or automatic, with a report (see the class docstring for the rule:
        best mean cosine with travel; among pairs within 0.05 of the best, the longest)."""
        kp = self.keypoints_
        P, T, threshold = self._travel_sample(sessions)
        score = travel_alignment(P, T, self.up_axis) if len(P) >= 10 else None
        if score is not None and not np.isfinite(score).any():
            score = None
        step = max(1, sum(s.n_frames * s.n_animals for s in sessions) // 2000)
        sample = np.concatenate([s.coords[::step, a] for s in sessions for a in range(s.n_animals)])
        upright = 0
        if score is not None and self.n_dims_ == 3:
            # a pair standing upright on most frames (an upright body's spine leaning only
            # when it runs) gives a heading from a short horizontal length, noise at rest
            lying = _pair_flatness(sample, self.up_axis) >= MIN_AXIS_FLATNESS
            upright = int(np.isfinite(score).sum() - np.isfinite(score[lying]).sum()) // 2
            if np.isfinite(score[lying]).any():
                score = np.where(lying, score, np.nan)
            else:
                upright = 0
        if self.axis is not None:
            rule, (i, j) = "given", (kp.index(self.axis[0]), kp.index(self.axis[1]))
        elif score is not None:
            near = np.nan_to_num(score, nan=-2.0) >= np.nanmax(score) - 0.05
            length = np.where(near, _pair_lengths(P[:: max(1, len(P) // 2000)]), -1.0)
            rule, (i, j) = "travel", np.unravel_index(np.argmax(length), length.shape)
        else:
            length = np.triu(_pair_lengths(sample), 1)
            rule, (i, j) = "farthest pair", np.unravel_index(np.argmax(length), length.shape)
        i, j = int(i), int(j)
        cos = None if score is None or np.isnan(score[i, j]) else float(score[i, j])
        axis = f"axis {kp[i]} -> {kp[j]}"
        agreement = "" if cos is None else f"mean cosine {cos:.2f} over {len(P)} frames"
        text = {
            "given": f"{axis} as given"
            + (f"; agreement with the direction of travel: {agreement}" if agreement else ""),
            "travel": f"{axis} chosen automatically: its direction agreed best with the "
            f"direction of travel in the fastest 25% of frames ({agreement}; the longest of the "
            "pairs within 0.05 of the best"
            + (f"; {upright} pairs standing upright on most frames left out" if upright else "")
            + ")",
            "farthest pair": f"{axis}: no movement to tell head from tail, so the two keypoints "
            "farthest apart on average were taken in listed order",
        }[rule]
        if rule == "farthest pair" or (rule == "travel" and cos < 0.3):
            warnings.warn(
                f"unreliable automatic body axis: {text}; pass axis=(tail_side, head_side)",
                UserWarning,
                stacklevel=4,
            )
        if rule == "given" and cos is not None and cos < -0.5 and len(P) >= 100:
            warnings.warn(
                f"the given {axis} points against the direction of travel ({agreement})"
                f"; did you mean axis=({kp[j]!r}, {kp[i]!r})?",
                UserWarning,
                stacklevel=4,
            )
        origin = self.origin_ or "centroid"
        details = {
            "rule": rule,
            "axis": [kp[i], kp[j]],
            "origin": origin,
            "mean_cosine": cos,
            "upright_pairs_left_out": upright,
            "n_frames": len(P),
            "speed_threshold": threshold,
        }
        return (kp[i], kp[j]), f"{text}. Origin: {origin}.", details

    # --- per-frame geometry --------------------------------------------------------------
    def _geometry(self, X: np.ndarray, align: str | None = None) -> tuple[np.ndarray, ...]:
        """Centroid (F, D), heading (F,) and egocentric keypoints (F, K, D) of one animal."""
        h = list(horizontal_axes(X.shape[-1], self.up_axis))
        centroid = _centroid(X)
        if self._separate_heights:  # the shape: the centroid's height taken off every keypoint
            up = "xyz".index(self.up_axis)
            X = X.copy()
            X[..., up] -= centroid[:, None, up]
        origin = centroid if self.origin_ is None else X[:, self._origin_index]
        i, j = self._axis_index
        if (align or self.align) == "rotate":
            ego, heading = rotate_to_axis(X, origin, X[:, j] - X[:, i], self.up_axis)
            return centroid, heading, ego
        shifted = X.copy()
        shifted[..., h] -= origin[:, None, h]
        up = self.up_axis if X.shape[-1] == 3 else None
        ego, R = procrustes_align(shifted, self.mean_posture_, center=False, up_axis=up)
        # R turns the world by -heading: R[h0, h1] = sin(heading), R[h0, h0] = cos(heading).
        return centroid, np.arctan2(R[:, h[0], h[1]], R[:, h[0], h[0]]), ego

    def _social(self, coords: np.ndarray, geos: list, a: int) -> np.ndarray:
        """Nearest other animal (by centroid) per frame: distances and angles, (F, 7)."""
        n = len(coords)
        rows = np.arange(n)
        centroids = np.stack([g[0] for g in geos], axis=1)
        dist = np.linalg.norm(centroids - centroids[:, a : a + 1], axis=-1)
        dist[:, a] = np.inf
        dist[~np.isfinite(dist)] = np.inf
        near = dist.argmin(1)
        d = dist[rows, near]
        me, other = coords[:, a], coords[rows, near]
        head = self._axis_index[1]
        head_to_body = np.linalg.norm(other - me[:, head : head + 1], axis=-1).min(1)
        body_to_head = np.linalg.norm(me - other[:, head : head + 1], axis=-1).min(1)
        heading = geos[a][1]
        facing = heading_angle(centroids[rows, near] - centroids[:, a], self.up_axis) - heading
        relative = np.stack([g[1] for g in geos], axis=1)[rows, near] - heading
        angles = [np.cos(facing), np.sin(facing), np.cos(relative), np.sin(relative)]
        out = np.column_stack([d, head_to_body, body_to_head, *angles])
        out[np.isinf(d)] = np.nan
        return out

    def _compute(self, coords: np.ndarray, motions: list[_Motion]) -> list[np.ndarray]:
        """Raw features of every animal for frames ``coords`` (F, A, K, D)."""
        geos = [self._geometry(coords[:, a]) for a in range(coords.shape[1])]
        social = self.social_
        return [
            m(geos[a], self._social(coords, geos, a) if social else None)
            for a, m in enumerate(motions)
        ]

    def _finish(self, raw: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Log-transform the magnitudes, standardise (both in place), blank invalid rows."""
        logged = np.flatnonzero(self.log_offset_)
        if len(logged):
            part = raw[:, logged]
            part += self.log_offset_[logged]
            raw[:, logged] = np.log(part)
        if self.standardise:
            raw -= self.scaler_mean_
            raw /= self.scaler_scale_
        valid = np.isfinite(raw).all(1)
        if self.social_ and not valid.all():
            valid = self._without_partner(raw, valid)
        raw[~valid] = np.nan
        return raw, valid

    def _without_partner(self, raw: np.ndarray, valid: np.ndarray) -> np.ndarray:
        """Frames whose own features are whole but whose social ones are missing (no other
        animal in view: it left the arena, or its track ended) stay valid: their social
        features take the fitted mean ("nothing known about a partner"), so an animal alone
        is still scored on its own movement."""
        k = N_SOCIAL_FEATURES
        own = np.isfinite(raw[:, :-k]).all(1)
        alone = own & ~valid
        if alone.any():
            neutral = np.zeros(k) if self.standardise else self.scaler_mean_[-k:]
            part = raw[alone, -k:]
            raw[alone, -k:] = np.where(np.isfinite(part), part, neutral)
        return valid | alone

    def _sets(self, tracks: PoseTracks, raws: list[np.ndarray]) -> list[FeatureSet]:
        meta = {
            "units": self.units_,
            "causal": bool(self.causal),
            "standardised": bool(self.standardise),
            "origin": self.origin_ or "centroid",
            "axis": list(self.axis_),
        }
        out = []
        for animal, raw in zip(tracks.animals, raws, strict=True):
            values, valid = self._finish(raw)
            out.append(
                FeatureSet(values, self.columns_, valid, tracks.session, animal, tracks.fps, meta)
            )
        return out

    # --- use -----------------------------------------------------------------------------
    def transform(self, tracks: PoseTracks) -> list[FeatureSet]:
        """Features of one session: one FeatureSet per animal.

        Parameters
        ----------
        tracks : PoseTracks
            Same keypoints (and order), dims and units as the fitted sessions; any fps.

        Returns
        -------
        list of FeatureSet
            ``values`` (F, n_features) NaN on invalid frames, ``valid`` (F,).
        """
        self._check_fitted()
        self._check_tracks(tracks)
        motions = self._motions(tracks.fps, tracks.n_animals, f"session '{tracks.session}'")
        return self._sets(tracks, self._compute(tracks.coords, motions))

    def stream(self, n_animals: int, fps: float | None = None) -> FeatureStream:
        """Online feature computer for a causal pipeline.

        Parameters
        ----------
        n_animals : int
        fps : float, optional
            Frame rate of the incoming frames; defaults to that of the fitted sessions.

        Returns
        -------
        FeatureStream
            ``push(coords (A, K, D)) -> (A, n_features)``, row for row equal to ``transform``.
        """
        self._check_fitted()
        if not self.causal:
            msg = "stream needs a pipeline with causal=True (offline features use future frames)"
            raise InputError(msg)
        if (
            isinstance(n_animals, bool)
            or not isinstance(n_animals, int | np.integer)
            or n_animals < 1
        ):
            raise InputError(f"n_animals must be a positive integer; got {n_animals!r}")
        if self.social_ and n_animals < 2:
            raise InputError("the pipeline has social features: stream needs n_animals >= 2")
        fps = self.fps_ if fps is None else fps
        if fps is None:
            msg = "the fitted sessions had different frame rates; pass fps=... to stream"
            raise InputError(msg)
        self._check_rate(float(fps), f"stream at {fps} fps")
        return FeatureStream(self, int(n_animals), float(fps))

    # --- persistence ---------------------------------------------------------------------
    def to_state(self) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
        """JSON-able parameters and fitted metadata, plus the fitted arrays (no pickle)."""
        return pipeline_state(self)

    @classmethod
    def from_state(
        cls, meta: Mapping[str, Any], arrays: Mapping[str, np.ndarray]
    ) -> FeaturePipeline:
        """Rebuild a fitted pipeline from ``to_state`` output."""
        return pipeline_from_state(cls, meta, arrays)
