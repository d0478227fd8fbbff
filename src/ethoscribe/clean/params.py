"""Cleaning settings and the checks of their values (seconds and physical units, never frames)."""

from __future__ import annotations

import warnings
from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, fields
from typing import Any

import numpy as np

from ethoscribe.clean import _kernels as kern
from ethoscribe.errors import InputError, InputWarning
from ethoscribe.pose import propose_swap_pairs

MM_PER_UNIT = {"mm": 1.0, "cm": 10.0, "m": 1000.0}
SMOOTHERS = ("savgol", "median")
AUTO_SPEED_QUANTILE, AUTO_SPEED_FACTOR = 0.99, 2.0
# Cost per second of overriding the tracker's left/right labels, in units of the pair's squared
# separation; an exchange costs ~2 separations^2 of displacement at each end, so exchanges of up
# to ~4 / SWAP_PRIOR_PER_S = 10 s are repaired in batch (half that causally).
SWAP_PRIOR_PER_S = 0.4
# A lone point of a pair (its partner unseen) is given to the side whose last position it
# continues best only while the other side was seen at most this many frames ago; else it keeps
# its label. Each side's cost is its squared distance divided by the frames since it was seen, so
# a side unseen for N frames looks N times closer than one seen on the last frame: without a
# limit, a foot lost for seconds drew the other foot into its slot for the rest of the loss
# (missing data moved from one keypoint to the other). The limit is in frames, not seconds,
# because that bias is counted in frames. 10 keeps a swap that starts while the partner is lost
# for up to 1/3 s at 30 fps repaired (the short gaps of the cleaning tests). Measured with the
# true positions of the bench's two independent simulators (18 sessions at 25-120 fps, 12 takes
# at 60-120 fps), the share of paired points on the wrong side after cleaning was 0.29 % and
# 0.016 % with 10 frames; 3.1 % and 0.099 % without a limit, 1.0 % and 0.055 % at 0.5 s, 0.20 %
# and 0.016 % at 0.1 s, 0.57 % and 0.20 % with no swap repair.
SWAP_LONE_MAX_AGE_FRAMES = 10
# Trackers rate points on scales of their own: where fewer than a tenth of a recording's tracked
# points reach CONFIDENCE_FULL, the scale is read as their 90th percentile to two decimals (the
# confidence of well-tracked points) and ``min_confidence`` taken as a share of it. Ours, from
# the bench: its sources' 90th percentiles are 0.996-1.0, a tracker whose confidences run at
# half is 0.5; a 90th percentile below CONFIDENCE_NO_SCALE is no scale at all (nearly every
# point rated 0).
CONFIDENCE_QUANTILE, CONFIDENCE_FULL, CONFIDENCE_NO_SCALE = 0.9, 0.9, 0.05


def _positive(name: str, value: Any, allow_zero: bool = False) -> float:
    ok = isinstance(value, (int, float, np.number)) and not isinstance(value, bool)
    v = float(value) if ok else float("nan")
    if not np.isfinite(v) or v < 0 or (v == 0 and not allow_zero):
        need = "a non-negative" if allow_zero else "a positive"
        raise InputError(f"{name} must be {need} number; got {value!r}")
    return v


@dataclass(frozen=True)
class CleanParams:
    """Settings of ``clean``; every step can be switched off with ``None``.

    Parameters
    ----------
    min_confidence : float or None
        Points with confidence below this are masked; NaN confidence (unknown) never is. 0.5 is
        where a tracker rates a point more likely present than absent; confidence scales differ
        between trackers, so the default is lenient and relies on the speed test for confident
        errors. Cut-offs of 0.6-0.9 are common practice for some trackers.
    confidence_scale : "auto" or float
        What full confidence is for this tracker: points are masked below ``min_confidence x
        confidence_scale``. ``"auto"``: 1, unless fewer than a tenth of the recording's tracked
        points reach 0.9 (confidences that run low, as some trackers' do for good positions);
        then their 90th percentile, to two decimals. A number in (0, 1]: that scale (1:
        ``min_confidence`` as given). The scale used is in
        ``QualityReport.params["confidence_scale"]``; streaming cleaning cannot read it and
        takes ``"auto"`` as 1.
    max_speed : "auto", float or None
        Speed bound in units per second for the jump test. ``"auto"`` = 2 x the 99th percentile
        of the frame-to-frame speeds of all points after confidence masking, pooled over keypoints
        and animals (sound while fewer than ~0.5 % of frames hold jumps); the value used is in
        ``QualityReport.params["max_speed"]``.
    max_gap_s : float
        Gaps of at most this many seconds are filled (0: none); longer gaps stay NaN.
    swap_pairs : sequence of (str, str) or "auto"
        Left/right keypoint names whose labels the tracker may exchange. ``"auto"``: the pairs
        :func:`~ethoscribe.pose.propose_swap_pairs` reads from the keypoint names (``left_ear``/
        ``right_ear``, ``fore_l``/``fore_r`` ...); the pairs used are in
        ``QualityReport.params["swap_pairs_used"]``.
    smooth : "savgol", "median" or None
        Savitzky-Golay polynomial smoothing or running median.
    smooth_window_s, smooth_order : float, int
        Window in seconds (made an odd frame count), polynomial order (Savitzky-Golay).
    px_per_unit, unit : float or None, str
        Pixels per ``unit`` ("mm", "cm", "m") to calibrate pixel tracks; physical tracks are
        converted to ``unit``.
    target_fps : float or None
        Resample to this frame rate at the end.
    fill_repeated : bool
        Treat frames that repeat the frame before exactly, in short runs, as lost and fill
        them from their neighbours (a video whose frame rate was raised by repeating images;
        :func:`~ethoscribe.clean.steps.repeated_frames`). Not in causal cleaning (it needs
        the next frame).
    mask_held : bool
        Treat points exactly where they were on the frame before, where coordinates are
        written with enough digits that an animal never repeats one by chance (a track
        forward-filled over its gaps), as lost (:func:`~ethoscribe.clean.steps.held_points`;
        whether repeats can be chance is read from the whole recording; where they can, as in
        whole pixels, offline cleaning takes only holds that end in a leap beyond the jump
        test's bound, ``max_speed`` as given or the automatic one where it is "auto" or None;
        streaming cleaning takes it as a setting, ``StreamingCleaner(held=...)``).
    mask_interpolated : bool
        Treat points on straight lines at constant speed, or on cubic curves, between seen
        points, where coordinates are written with enough digits for that never to be chance
        (a track interpolated over its gaps before export: linear, cubic, spline, pchip), as
        lost
        (:func:`~ethoscribe.clean.steps.interpolated_points`). Not in causal cleaning (it
        needs the next frame).
    placeholders : "auto", positions or None
        Positions a tracker writes for lost points (0, 0; -1, -1), set missing. "auto": any
        position held exactly on many frames of a recording, away from the rest of the body
        (:func:`~ethoscribe.clean.steps.placeholder_positions`); positions, e.g.
        ``[(-1, -1)]``: these, exactly; None: none. Streaming cleaning masks given positions
        only (it cannot read them from a recording it has not seen).
    repair_identities : bool
        With several animals, a track that leaps to where another animal's track last was (a
        multi-animal tracker exchanging identities, usually as the animals touch) is given
        that animal's identity from then on (:class:`~ethoscribe.clean.steps.IdentityKeeper`;
        needs the jump test's speed bound); offline, after a loss of both, the animals'
        proportions decide (:func:`~ethoscribe.clean.steps.relink_by_shape`), and keypoints
        that sit on the other animal's body are given back (the noses of two animals that
        touch; :func:`~ethoscribe.clean.steps.part_exchanges`). Streaming and causal cleaning
        use the motion only.

    Examples
    --------
    >>> p = CleanParams(swap_pairs=[("left_ear", "right_ear")], smooth="median")
    >>> CleanParams.from_dict(p.to_dict()) == p
    True
    """

    min_confidence: float | None = 0.5
    confidence_scale: float | str = "auto"
    max_speed: float | str | None = "auto"
    max_gap_s: float = 0.5
    swap_pairs: Sequence[tuple[str, str]] | str = ()
    smooth: str | None = "savgol"
    smooth_window_s: float = 0.2
    smooth_order: int = 2
    px_per_unit: float | None = None
    unit: str = "mm"
    target_fps: float | None = None
    fill_repeated: bool = True
    mask_held: bool = True
    mask_interpolated: bool = True
    placeholders: str | Sequence[Sequence[float]] | None = "auto"
    repair_identities: bool = True

    def __post_init__(self) -> None:
        conf = self.min_confidence
        if conf is not None and not 0 <= _positive("min_confidence", conf, True) <= 1:
            raise InputError(
                f"min_confidence must lie in [0, 1], e.g. 0.5; got {conf!r} (confidences "
                "written in percent are read as fractions, so 50 % is 0.5; 0 or None masks "
                "no point)"
            )
        if conf is not None:
            object.__setattr__(self, "min_confidence", float(conf))
        scale = self.confidence_scale
        if not (isinstance(scale, str) and scale == "auto"):
            if isinstance(scale, str) or not 0 < _positive("confidence_scale", scale) <= 1:
                raise InputError(
                    f"confidence_scale must be 'auto' or a number in (0, 1]; got {scale!r}"
                )
            object.__setattr__(self, "confidence_scale", float(scale))
        speed = self.max_speed
        if speed is not None and not (isinstance(speed, str) and speed == "auto"):
            if isinstance(speed, str):
                raise InputError(f"max_speed must be 'auto', None or a number; got {speed!r}")
            object.__setattr__(self, "max_speed", _positive("max_speed (units/s)", speed))
        gap = 0.0 if self.max_gap_s is None else _positive("max_gap_s", self.max_gap_s, True)
        object.__setattr__(self, "max_gap_s", gap)
        object.__setattr__(self, "swap_pairs", _check_pairs(self.swap_pairs))
        if self.smooth is not None and self.smooth not in SMOOTHERS:
            raise InputError(f"smooth must be one of {SMOOTHERS} or None; got {self.smooth!r}")
        _positive("smooth_window_s", self.smooth_window_s)
        order = self.smooth_order
        if not isinstance(order, (int, np.integer)) or isinstance(order, bool) or order < 0:
            raise InputError(f"smooth_order must be a non-negative integer; got {order!r}")
        object.__setattr__(self, "smooth_order", int(order))
        object.__setattr__(self, "smooth_window_s", float(self.smooth_window_s))
        for name in ("px_per_unit", "target_fps"):  # plain floats keep to_dict() JSON-able
            if getattr(self, name) is not None:
                object.__setattr__(self, name, _positive(name, getattr(self, name)))
        for name in ("fill_repeated", "mask_held", "mask_interpolated", "repair_identities"):
            if not isinstance(getattr(self, name), bool | np.bool_):
                raise InputError(f"{name} must be True or False; got {getattr(self, name)!r}")
            object.__setattr__(self, name, bool(getattr(self, name)))
        object.__setattr__(self, "placeholders", _check_placeholders(self.placeholders))
        if self.unit not in MM_PER_UNIT:
            raise InputError(f"unit must be one of {list(MM_PER_UNIT)}; got {self.unit!r}")

    def to_dict(self) -> dict[str, Any]:
        """JSON-able dict (swap pairs as lists)."""
        d = asdict(self)
        if not isinstance(self.swap_pairs, str):
            d["swap_pairs"] = [list(p) for p in self.swap_pairs]
        if isinstance(self.placeholders, tuple):
            d["placeholders"] = [list(p) for p in self.placeholders]
        return d

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> CleanParams:
        """Rebuild from ``to_dict()`` output; unknown keys are an error."""
        known = [f.name for f in fields(cls)]
        unknown = sorted(set(d) - set(known))
        if unknown:
            raise InputError(f"unknown cleaning parameters {unknown}; known: {known}")
        return cls(**d)


def _check_placeholders(value: Any) -> str | tuple[tuple[float, ...], ...] | None:
    """``"auto"``, None, or positions as a tuple of tuples of 2 or 3 finite floats."""
    if value is None or (isinstance(value, str) and value == "auto"):
        return value
    fix = "placeholders must be 'auto', None or positions such as [(-1, -1)]"
    try:
        out = tuple(tuple(float(v) for v in q) for q in value)
    except (TypeError, ValueError):
        raise InputError(f"{fix}; got {value!r}") from None
    if isinstance(value, str) or any(len(q) not in (2, 3) or not np.isfinite(q).all() for q in out):
        raise InputError(f"{fix} (2 or 3 finite numbers each); got {value!r}")
    return out


def _check_pairs(pairs: Any) -> tuple[tuple[str, str], ...] | str:
    if isinstance(pairs, str) and pairs == "auto":
        return "auto"
    if isinstance(pairs, str):
        raise InputError(
            f"swap_pairs must be 'auto' or pairs of keypoint names, e.g. "
            f"[('left_ear', 'right_ear')]; got {pairs!r}"
        )
    out = []
    for pair in pairs or ():
        if isinstance(pair, str) or len(pair) != 2 or pair[0] == pair[1]:
            raise InputError(
                f"swap_pairs must hold pairs of two different keypoint names, e.g. "
                f"[('left_ear', 'right_ear')]; got {pair!r}"
            )
        out.append((str(pair[0]), str(pair[1])))
    names = [n for p in out for n in p]
    twice = sorted({n for n in names if names.count(n) > 1})
    if twice:
        raise InputError(f"keypoints {twice} appear in more than one swap pair; use each once")
    return tuple(out)


def resolve_swap_pairs(swap_pairs: Any, keypoints: Sequence[str]) -> tuple[tuple[str, str], ...]:
    """The pairs ``swap_pairs`` stands for among ``keypoints`` ("auto": read from the names)."""
    pairs = _check_pairs(swap_pairs)
    return propose_swap_pairs(keypoints) if isinstance(pairs, str) else pairs


def _pair_index(keypoints: Sequence[str], swap_pairs: Any) -> np.ndarray:
    """(P, 2) int64 indices of declared pairs; a clear error names unknown keypoints."""
    pairs, kps = resolve_swap_pairs(swap_pairs, keypoints), list(keypoints)
    unknown = [n for p in pairs for n in p if n not in kps]
    if unknown:
        raise InputError(f"swap_pairs name unknown keypoints {unknown}; known keypoints: {kps}")
    return np.array([[kps.index(a), kps.index(b)] for a, b in pairs], np.int64).reshape(-1, 2)


def _partner(n_kp: int, pairs: np.ndarray) -> np.ndarray:
    partner = np.full(n_kp, -1, np.int64)
    partner[pairs[:, 0]], partner[pairs[:, 1]] = pairs[:, 1], pairs[:, 0]
    return partner


def _coords(coords: Any) -> np.ndarray:
    """A float64 copy, shape-checked, with a point missing in every dim if missing in one."""
    x = np.array(coords, dtype=np.float64)
    if x.ndim != 4 or x.shape[-1] not in (2, 3):
        raise InputError(
            f"coords must have shape (frames, animals, keypoints, dims) with dims 2 or 3; "
            f"got shape {x.shape}"
        )
    kern.normalise_missing(x)
    return x


def _fps(fps: Any) -> float:
    return _positive("fps (frames per second)", fps)


def _gap_frames(max_gap_s: float, fps: float) -> int:
    return int(np.floor(_positive("max_gap_s", max_gap_s, True) * fps + 1e-9))


# A longer smoothing window means a frame rate no camera has (0.2 s at 500,000 fps): a slip.
MAX_WINDOW_FRAMES = 100_001


def _window_frames(method: str, window_s: float, order: int, fps: float) -> int:
    """Odd frame count of a smoothing window, widened to the shortest that smooths at all.

    At low frame rates a window given in seconds can be too few frames for the smoother (the
    default 0.2 s is 3 frames at 10 fps, and a polynomial of order 2 through 3 points changes
    nothing): it is widened to the smallest odd count that smooths, with a warning saying so,
    rather than refusing data that are merely slow.
    """
    n = round(_positive("smooth_window_s", window_s) * fps)
    n += 1 - n % 2
    need = order + 2 if method == "savgol" else 3
    need += 1 - need % 2
    if n < need:
        what = f"a polynomial of order {order}" if method == "savgol" else "a running median"
        warnings.warn(
            f"smoothing window {window_s:g} s at {fps:g} fps is {n} frame(s), but {what} needs "
            f"at least {need} frames to smooth: {need} frames ({need / fps:.3g} s) are used "
            f"(set smooth_window_s >= {need / fps:.3g} to say so"
            + (", or a lower smooth_order)" if method == "savgol" else ")"),
            InputWarning,
            stacklevel=3,
        )
        n = need
    if n > MAX_WINDOW_FRAMES:
        raise InputError(
            f"smoothing window {window_s:g} s at {fps:g} fps is {n} frames (at most "
            f"{MAX_WINDOW_FRAMES} are supported); check the frame rate (fps=...), which looks "
            "far too high, or shorten smooth_window_s"
        )
    return n
