"""Cleaning of keypoint tracks: calibrate, mask, repair, fill, smooth, resample.

Every step is a pure function on arrays ``coords (frames, animals, keypoints, dims)`` (NaN =
missing) with parameters in seconds and physical units, never frames. ``clean`` runs them in this
order, for these reasons:

1. calibrate - every threshold below (speed, distances) is then in physical units;
2. mask low confidence - unreliable points must not become references for the speed test;
3. mask jumps - an outlier kept as "last position" would mislead the swap choice (the speed test
   accepts a point that lands where its left/right partner was: that is a swap, not a jump);
4. repair swaps - before filling, or interpolation would draw paths across the body;
5. fill gaps - short gaps only; smoothing then runs over uninterrupted stretches;
6. smooth - at the recorded rate, where noise is independent from frame to frame;
7. resample - last, so every earlier step works on measured frames.

Nothing is invented in a gap longer than ``max_gap_s``: those points stay NaN and their frames
are flagged invalid in the ``QualityReport``. ``causal=True`` (and ``StreamingCleaner``) use only
past frames, for closed-loop use.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, field, fields, replace
from typing import Any

import numpy as np
import pandas as pd

from ethoscribe import _clean_kernels as kern
from ethoscribe.errors import InputError
from ethoscribe.pose import PoseTracks

__all__ = [
    "CleanParams",
    "QualityReport",
    "StreamingCleaner",
    "calibrate",
    "clean",
    "estimate_max_speed",
    "fill_gaps",
    "mask_jumps",
    "mask_low_confidence",
    "repair_swaps",
    "resample",
    "smooth",
]

MM_PER_UNIT = {"mm": 1.0, "cm": 10.0, "m": 1000.0}
SMOOTHERS = ("savgol", "median")
AUTO_SPEED_QUANTILE, AUTO_SPEED_FACTOR = 0.99, 2.0
# Cost per second of overriding the tracker's left/right labels, in units of the pair's squared
# separation; an exchange costs ~2 separations^2 of displacement at each end, so exchanges of up
# to ~4 / SWAP_PRIOR_PER_S = 10 s are repaired in batch (half that causally).
SWAP_PRIOR_PER_S = 0.4


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
    max_speed : "auto", float or None
        Speed bound in units per second for the jump test. ``"auto"`` = 2 x the 99th percentile
        of the frame-to-frame speeds of all points after confidence masking, pooled over keypoints
        and animals (sound while fewer than ~0.5 % of frames hold jumps); the value used is in
        ``QualityReport.params["max_speed"]``.
    max_gap_s : float
        Gaps of at most this many seconds are filled (0: none); longer gaps stay NaN.
    swap_pairs : sequence of (str, str)
        Left/right keypoint names whose labels the tracker may exchange.
    smooth : "savgol", "median" or None
        Savitzky-Golay polynomial smoothing or running median.
    smooth_window_s, smooth_order : float, int
        Window in seconds (made an odd frame count), polynomial order (Savitzky-Golay).
    px_per_unit, unit : float or None, str
        Pixels per ``unit`` ("mm", "cm", "m") to calibrate pixel tracks; physical tracks are
        converted to ``unit``.
    target_fps : float or None
        Resample to this frame rate at the end.

    Examples
    --------
    >>> p = CleanParams(swap_pairs=[("left_ear", "right_ear")], smooth="median")
    >>> CleanParams.from_dict(p.to_dict()) == p
    True
    """

    min_confidence: float | None = 0.5
    max_speed: float | str | None = "auto"
    max_gap_s: float = 0.5
    swap_pairs: Sequence[tuple[str, str]] = ()
    smooth: str | None = "savgol"
    smooth_window_s: float = 0.2
    smooth_order: int = 2
    px_per_unit: float | None = None
    unit: str = "mm"
    target_fps: float | None = None

    def __post_init__(self) -> None:
        conf = self.min_confidence
        if conf is not None and not 0 <= _positive("min_confidence", conf, True) <= 1:
            raise InputError(f"min_confidence must lie in [0, 1] or be None; got {conf!r}")
        if conf is not None:
            object.__setattr__(self, "min_confidence", float(conf))
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
        if self.unit not in MM_PER_UNIT:
            raise InputError(f"unit must be one of {list(MM_PER_UNIT)}; got {self.unit!r}")

    def to_dict(self) -> dict[str, Any]:
        """JSON-able dict (swap pairs as lists)."""
        d = asdict(self)
        d["swap_pairs"] = [list(p) for p in self.swap_pairs]
        return d

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> CleanParams:
        """Rebuild from ``to_dict()`` output; unknown keys are an error."""
        known = [f.name for f in fields(cls)]
        unknown = sorted(set(d) - set(known))
        if unknown:
            raise InputError(f"unknown cleaning parameters {unknown}; known: {known}")
        return cls(**d)


def _check_pairs(pairs: Any) -> tuple[tuple[str, str], ...]:
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


def _pair_index(keypoints: Sequence[str], swap_pairs: Any) -> np.ndarray:
    """(P, 2) int64 indices of declared pairs; a clear error names unknown keypoints."""
    pairs, kps = _check_pairs(swap_pairs), list(keypoints)
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


def _window_frames(method: str, window_s: float, order: int, fps: float) -> int:
    """Odd frame count of a smoothing window; checks it can smooth at all."""
    n = round(_positive("smooth_window_s", window_s) * fps)
    n += 1 - n % 2
    need = order + 2 if method == "savgol" else 3
    if n < need:
        what = f"a polynomial of order {order}" if method == "savgol" else "a running median"
        raise InputError(
            f"smoothing window {window_s:g} s at {fps:g} fps is {n} frame(s), but {what} needs "
            f"at least {need} frames to smooth; use smooth_window_s >= {need / fps:.3g}"
            + (" or a lower smooth_order" if method == "savgol" else "")
        )
    return n


def calibrate(tracks: PoseTracks, px_per_unit: float | None = None, unit: str = "mm") -> PoseTracks:
    """Convert pixel tracks to physical units (or physical tracks to ``unit``).

    Pixel tracks without ``px_per_unit`` are returned unchanged (still ``"px"``). The factor is
    recorded in ``meta["calibration"]``.

    Examples
    --------
    >>> t = PoseTracks(np.full((2, 1, 1, 2), 50.0), keypoints=["nose"], fps=30)
    >>> c = calibrate(t, px_per_unit=5.0, unit="mm")
    >>> c.units, float(c.coords[0, 0, 0, 0])
    ('mm', 10.0)
    """
    divisor, units = _calibration(tracks.units, px_per_unit, unit, f"session '{tracks.session}'")
    if divisor == 1.0 and units == tracks.units:
        return tracks
    cal = {"from": tracks.units, "to": units, "divisor": divisor}
    return tracks.replace(coords=tracks.coords / divisor, units=units, meta={"calibration": cal})


def _calibration(units: str, px_per_unit: float | None, unit: str, where: str) -> tuple[float, str]:
    """Divisor turning ``units`` into the output units, and those units."""
    if unit not in MM_PER_UNIT:
        raise InputError(f"unit must be one of {list(MM_PER_UNIT)}; got {unit!r}")
    if units == "px":
        if px_per_unit is None:
            return 1.0, "px"
        return _positive("px_per_unit", px_per_unit), unit
    if px_per_unit is not None:
        raise InputError(
            f"{where} is already in {units}; px_per_unit applies only to pixel tracks. "
            "Drop px_per_unit (set it to None)."
        )
    if units not in MM_PER_UNIT:
        raise InputError(f"units must be 'px' or one of {list(MM_PER_UNIT)}; got {units!r}")
    return MM_PER_UNIT[unit] / MM_PER_UNIT[units], unit


def mask_low_confidence(
    coords: np.ndarray, confidence: np.ndarray | None, min_confidence: float | None = 0.5
) -> tuple[np.ndarray, np.ndarray]:
    """Set points with confidence below ``min_confidence`` to NaN (NaN confidence is kept).

    Parameters
    ----------
    coords : array (F, A, K, D); confidence : array (F, A, K) or None

    Returns
    -------
    coords : array (F, A, K, D); masked : bool array (F, A, K)

    Examples
    --------
    >>> x, m = mask_low_confidence(np.ones((2, 1, 2, 2)), np.array([[[0.9, 0.1]], [[np.nan, 1]]]))
    >>> m[:, 0].tolist()
    [[False, True], [False, False]]
    """
    x = _coords(coords)
    return x, _mask_confidence_inplace(x, confidence, min_confidence)


def _mask_confidence_inplace(x: np.ndarray, confidence: Any, thr: float | None) -> np.ndarray:
    present = ~np.isnan(x[..., 0])
    if thr is None or confidence is None:
        return np.zeros(present.shape, bool)
    conf = np.asarray(confidence, dtype=np.float64)
    if conf.shape != x.shape[:3]:
        raise InputError(f"confidence must have shape {x.shape[:3]}; got {conf.shape}")
    with np.errstate(invalid="ignore"):
        masked = present & (conf < thr)  # NaN < thr is False: unknown confidence is kept
    n_present = int(present.sum())
    if n_present and not (present & ~masked).any():
        median = float(np.median(conf[present]))
        raise InputError(
            f"all {n_present} tracked points have confidence below min_confidence={thr:g} "
            f"(median confidence {median:.3g}); lower min_confidence (e.g. to {median:.2g}) or "
            "check that confidence is on a 0-1 scale"
        )
    x[masked] = np.nan
    return masked


def estimate_max_speed(coords: np.ndarray, fps: float) -> float | None:
    """The ``"auto"`` speed bound: 2 x the 99th percentile of frame-to-frame point speeds.

    Speeds (units per second) of all keypoints and animals are pooled; ``None`` if fewer than 10
    consecutive pairs of points exist.

    Examples
    --------
    >>> x = np.arange(200.0).reshape(-1, 1, 1, 1).repeat(2, axis=-1)  # moves 1.414 per frame
    >>> round(estimate_max_speed(x, fps=10), 3)
    28.284
    """
    x, fps = np.asarray(coords, dtype=np.float64), _fps(fps)
    if x.ndim != 4 or x.shape[0] < 2:
        raise InputError(
            f"coords must have shape (frames >= 2, animals, keypoints, dims); got {x.shape}"
        )
    speed = kern.step_speeds(x, fps)
    if speed.size < 10:
        return None
    return AUTO_SPEED_FACTOR * float(np.quantile(speed, AUTO_SPEED_QUANTILE))


def _resolve_speed(max_speed: Any, x: np.ndarray, fps: float) -> float | None:
    if max_speed == "auto":
        return estimate_max_speed(x, fps)
    return None if max_speed is None else _positive("max_speed", max_speed)


def mask_jumps(
    coords: np.ndarray,
    fps: float,
    max_speed: float | str | None = "auto",
    keypoints: Sequence[str] = (),
    swap_pairs: Sequence[tuple[str, str]] = (),
    causal: bool = False,
) -> tuple[np.ndarray, np.ndarray]:
    """Mask points that would need a speed above ``max_speed`` (units per second) to reach.

    Each point is compared with the last accepted point of its keypoint (allowing ``max_speed``
    times the time elapsed), or of its declared partner (a swap is left to ``repair_swaps``).
    Batch mode masks what both a forward and a backward pass reject (a first point, which one
    pass cannot judge, counts as rejected there), so a jump to an outlier and back masks the
    outlier only, never its neighbours. ``causal=True`` runs the forward pass only.

    Parameters
    ----------
    coords : array (F, A, K, D); fps : float
    max_speed : "auto" (see ``estimate_max_speed``), float or None (no masking)
    keypoints, swap_pairs : names, needed only when pairs are declared

    Returns
    -------
    coords : array (F, A, K, D); masked : bool array (F, A, K)

    Examples
    --------
    >>> x = np.zeros((5, 1, 1, 2)); x[2] = 100.0
    >>> mask_jumps(x, fps=10, max_speed=50.0)[1][:, 0, 0].tolist()
    [False, False, True, False, False]
    """
    x, fps = _coords(coords), _fps(fps)
    pairs = _pair_index(keypoints, swap_pairs) if swap_pairs else np.zeros((0, 2), np.int64)
    return x, _mask_jumps_inplace(x, fps, _resolve_speed(max_speed, x, fps), pairs, causal)


def _mask_jumps_inplace(x, fps, max_speed, pairs, causal) -> np.ndarray:
    if max_speed is None:
        return np.zeros(x.shape[:3], bool)
    partner, step = _partner(x.shape[2], pairs), max_speed / fps
    forward = kern.jump_pass(x, partner, step, True)
    masked = forward == kern.JUMP_REJECTED
    if not causal:  # rejected by one pass, and rejected or without reference in the other
        backward = kern.jump_pass(x, partner, step, False)
        masked &= backward > 0
        masked |= (forward == kern.JUMP_UNJUDGED) & (backward == kern.JUMP_REJECTED)
    x[masked] = np.nan
    return masked


def repair_swaps(
    coords: np.ndarray,
    confidence: np.ndarray | None,
    keypoints: Sequence[str],
    swap_pairs: Sequence[tuple[str, str]],
    fps: float,
    causal: bool = False,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Undo left/right label exchanges of declared keypoint pairs.

    Per frame and pair there are two assignments: as labelled, or exchanged. Between frames where
    both points are seen, an assignment costs the squared displacement of the assigned points
    (divided by the frames elapsed); the exchanged one also costs ``SWAP_PRIOR_PER_S / fps``
    squared separations per frame, so the tracker's labels win unless continuity clearly says
    otherwise, and a wrong choice cannot persist. The cheapest sequence is found by a two-state
    Viterbi recursion (``causal=True``: the forward recursion only, deciding each frame from
    the past). A frame with one point seen follows the last frame with both.

    Returns
    -------
    coords : array (F, A, K, D); confidence : array (F, A, K) (exchanged along with coords);
    swapped : bool array (F, A, P), frames where pair p was exchanged

    Examples
    --------
    >>> x = np.array([[0, 0], [10, 0]] * 2 + [[10, 0], [0, 0]], float).reshape(3, 1, 2, 2)
    >>> y, _, s = repair_swaps(x, None, ["left", "right"], [("left", "right")], fps=30)
    >>> s[:, 0, 0].tolist(), y[2, 0, 0].tolist()
    ([False, False, True], [0.0, 0.0])
    """
    x = _coords(coords)
    conf = np.full(x.shape[:3], np.nan) if confidence is None else np.array(confidence, float)
    if conf.shape != x.shape[:3]:
        raise InputError(f"confidence must have shape {x.shape[:3]}; got {conf.shape}")
    pairs, fps = _pair_index(keypoints, swap_pairs), _fps(fps)
    if causal:
        settings = _settings(x.shape, fps, pairs=pairs, repair=True)
        swapped = _run_causal(x, conf, settings)[1]
    else:
        swapped = kern.swap_pass(x, conf, pairs, SWAP_PRIOR_PER_S / fps)
    return x, conf, swapped


def fill_gaps(
    coords: np.ndarray, fps: float, max_gap_s: float = 0.5, causal: bool = False
) -> tuple[np.ndarray, np.ndarray]:
    """Fill gaps of at most ``max_gap_s`` seconds; longer gaps and the ends stay NaN.

    Batch: linear interpolation in time between the valid points on either side. Causal: the
    last valid point is held for up to ``max_gap_s`` (also at the start of a longer gap, which is
    not yet known to be long).

    Returns
    -------
    coords : array (F, A, K, D); filled : bool array (F, A, K)

    Examples
    --------
    >>> x = np.array([0.0, np.nan, np.nan, 3.0])[:, None, None, None].repeat(2, axis=-1)
    >>> fill_gaps(x, fps=10, max_gap_s=0.2)[0][:, 0, 0, 0].tolist()
    [0.0, 1.0, 2.0, 3.0]
    """
    x, fps = _coords(coords), _fps(fps)
    max_gap = _gap_frames(max_gap_s, fps)
    if causal:
        flags = _run_causal(x, None, _settings(x.shape, max_gap=max_gap))[0]
        return x, (flags & kern.FLAG_FILLED) > 0
    return x, _fill_gaps_inplace(x, max_gap)


def _fill_gaps_inplace(x: np.ndarray, max_gap: int) -> np.ndarray:
    filled = np.zeros(x.shape[:3], bool)
    if max_gap <= 0:
        return filled
    missing = np.isnan(x[..., 0])
    for a, k in zip(*np.nonzero(missing.any(axis=0)), strict=True):  # series with gaps only
        have = np.flatnonzero(~missing[:, a, k])
        gaps = np.flatnonzero(missing[:, a, k])
        after = np.searchsorted(have, gaps)  # index in `have` of the next valid frame
        inner = (after > 0) & (after < have.size)
        gaps, after = gaps[inner], after[inner]
        p, q = have[after - 1], have[after]
        short = q - p - 1 <= max_gap
        t, p, q = gaps[short], p[short], q[short]
        y = x[:, a, k]
        w = ((t - p) / (q - p))[:, None]
        y[t] = y[p] + w * (y[q] - y[p])
        filled[t, a, k] = True
    return filled


def smooth(
    coords: np.ndarray,
    fps: float,
    method: str = "savgol",
    window_s: float = 0.2,
    order: int = 2,
    causal: bool = False,
) -> np.ndarray:
    """NaN-aware smoothing over a window of ``window_s`` seconds (an odd number of frames).

    ``"savgol"``: Savitzky-Golay polynomial of ``order``, each run of valid frames on its own
    (equal to ``scipy.signal.savgol_filter(..., mode="interp")`` on a run without gaps).
    ``"median"``: median of the valid points in the centred window. Missing points stay missing.
    ``causal=True``: the end point of a fit to the trailing run (Savitzky-Golay) or the median
    of the trailing window.

    Examples
    --------
    >>> x = np.arange(10.0)[:, None, None, None].repeat(2, axis=-1) ** 2  # a parabola
    >>> bool(np.allclose(smooth(x, fps=25, window_s=0.2), x))
    True
    """
    x, fps = _coords(coords), _fps(fps)
    if method not in SMOOTHERS:
        raise InputError(f"smoothing method must be one of {SMOOTHERS}; got {method!r}")
    width = _window_frames(method, window_s, order, fps)
    if causal:
        _run_causal(x, None, _settings(x.shape, smooth=(method, width, order)))
        return x
    _smooth_inplace(x, method, width, order)
    return x


def _smooth_inplace(x: np.ndarray, method: str, width: int, order: int) -> None:
    for a in range(x.shape[1]):  # loop over series: memory stays at one keypoint's track
        for k in range(x.shape[2]):
            y = np.ascontiguousarray(x[:, a, k])
            valid = ~np.isnan(y[:, 0])
            if not valid.any():
                continue
            if method == "savgol":
                x[:, a, k] = kern.savgol_series(y, valid, width, order)
            else:
                x[:, a, k] = kern.median_series(y, valid, width)


def resample(values: np.ndarray, fps: float, target_fps: float) -> np.ndarray:
    """Linear interpolation in time to ``target_fps``, frames on axis 0 (any trailing shape).

    Output frame j is at time j / target_fps, up to the last input frame. A value next to a NaN
    is NaN unless it falls exactly on a valid frame: nothing is interpolated across a gap.

    Examples
    --------
    >>> resample(np.array([0.0, 1.0, np.nan, 3.0]), fps=1, target_fps=2).tolist()
    [0.0, 0.5, 1.0, nan, nan, nan, 3.0]
    """
    v, fps, target = np.asarray(values, dtype=np.float64), _fps(fps), _fps(target_fps)
    n_out = int(np.floor((v.shape[0] - 1) * target / fps + 1e-9)) + 1
    pos = np.arange(n_out) * (fps / target)
    near = np.rint(pos)
    pos = np.where(np.abs(pos - near) < 1e-9, near, pos)  # exact hits must not see a NaN beyond
    out = np.empty((n_out, *v.shape[1:]))
    for lo in range(0, n_out, 1 << 16):  # chunks keep the temporaries small
        p = pos[lo : lo + (1 << 16)]
        i0 = np.minimum(p.astype(np.int64), v.shape[0] - 1)
        i1 = np.minimum(i0 + 1, v.shape[0] - 1)
        w = (p - i0).reshape((-1,) + (1,) * (v.ndim - 1))
        out[lo : lo + p.size] = np.where(w == 0, v[i0], v[i0] * (1 - w) + v[i1] * w)
    return out


def _settings(
    shape, fps=1.0, min_conf=None, max_speed=None, pairs=None, repair=False, max_gap=0, smooth=None
) -> kern.CausalSettings:
    """Causal-kernel settings; every step is off unless given."""
    pairs = np.zeros((0, 2), np.int64) if pairs is None else pairs
    kind, coef = kern.SMOOTH_OFF, np.zeros((1, 1))
    if smooth:
        method, width, order = smooth
        kind = kern.SMOOTH_SAVGOL if method == "savgol" else kern.SMOOTH_MEDIAN
        coef = kern.trailing_weights(width, order) if method == "savgol" else np.zeros((width, 1))
    return kern.CausalSettings(
        -1.0 if min_conf is None else float(min_conf),
        -1.0 if max_speed is None else max_speed / fps,
        _partner(shape[2], pairs),
        pairs if repair else np.zeros((0, 2), np.int64),
        SWAP_PRIOR_PER_S / fps,
        int(max_gap),
        kind,
        coef,
    )


def _run_causal(x: np.ndarray, conf: np.ndarray | None, settings: kern.CausalSettings):
    conf = np.full(x.shape[:3], np.nan) if conf is None else conf
    state = kern.CausalState(*x.shape[1:], settings.pairs.shape[0], settings.coef.shape[0])
    return state.run(settings, x, conf)


FRACTIONS = (
    "frac_missing_raw",
    "frac_low_confidence",
    "frac_jumps",
    "frac_filled",
    "frac_missing_after",
)


@dataclass(frozen=True, eq=False)
class QualityReport:
    """What cleaning did to one session.

    Attributes
    ----------
    per_keypoint : DataFrame
        One row per animal and keypoint: ``session, animal, keypoint`` and the fractions of input
        frames missing in the raw data, masked for low confidence, masked as jumps, filled, and
        of output frames still missing (``frac_missing_after``).
    swaps_repaired : int
        Frames x animals where a declared pair was exchanged; ``swaps_per_pair`` by "left/right".
    invalid : bool array (output frames, animals)
        Frames where any keypoint is still missing: flagged, never invented.
    params : dict
        Resolved, JSON-able settings, including the ``max_speed`` actually used.
    """

    per_keypoint: pd.DataFrame
    swaps_repaired: int
    swaps_per_pair: dict[str, int]
    invalid: np.ndarray
    params: dict[str, Any]
    session: str = "session"
    animals: tuple[str, ...] = field(default=())

    def summary(self) -> dict[str, Any]:
        """JSON-able headline numbers of the session."""
        t = self.per_keypoint
        return {
            "session": self.session,
            "n_frames": int(self.invalid.shape[0]),
            "frac_invalid": float(self.invalid.mean()) if self.invalid.size else 0.0,
            "swaps_repaired": int(self.swaps_repaired),
            "swaps_per_pair": dict(self.swaps_per_pair),
            "max_speed": self.params.get("max_speed"),
            "units": self.params.get("units"),
            "fps": self.params.get("fps_out"),
            **{c: float(t[c].mean()) for c in FRACTIONS},
        }

    def to_frame(self) -> pd.DataFrame:
        """``per_keypoint`` plus ``frac_invalid_frames`` of each row's animal."""
        t = self.per_keypoint.copy()
        inv = dict(zip(self.animals, self.invalid.mean(axis=0).tolist(), strict=True))
        t["frac_invalid_frames"] = t["animal"].map(inv).astype(float)
        return t


def _report(
    raw: PoseTracks, out: PoseTracks, masks: dict[str, np.ndarray], swapped, pairs, params
) -> QualityReport:
    n_animals, n_kp = raw.n_animals, raw.n_keypoints
    missing_after = np.isnan(out.coords[..., 0])
    table = {
        "session": [raw.session] * (n_animals * n_kp),
        "animal": np.repeat(list(raw.animals), n_kp),
        "keypoint": np.tile(list(raw.keypoints), n_animals),
    }
    for name, m in (*masks.items(), ("frac_missing_after", missing_after)):
        table[name] = (np.count_nonzero(m, axis=0) / m.shape[0]).ravel()
    per_pair = {f"{a}/{b}": int(swapped[:, :, i].sum()) for i, (a, b) in enumerate(pairs)}
    return QualityReport(
        per_keypoint=pd.DataFrame(table),
        swaps_repaired=int(sum(per_pair.values())),
        swaps_per_pair=per_pair,
        invalid=missing_after.any(axis=2),
        params=params,
        session=raw.session,
        animals=tuple(raw.animals),
    )


def clean(
    tracks: PoseTracks,
    params: CleanParams | Mapping[str, Any] | None = None,
    causal: bool = False,
    **overrides: Any,
) -> tuple[PoseTracks, QualityReport]:
    """Run calibrate -> confidence -> jumps -> swaps -> gaps -> smoothing -> resampling.

    Parameters
    ----------
    tracks : PoseTracks
    params : CleanParams or its ``to_dict()``, optional; ``overrides`` replace single fields
        (``max_gap_s=0.3``).
    causal : bool
        Use past frames only: jump test forwards only, gaps held for up to ``max_gap_s``, trailing
        smoothing, no resampling. ``max_speed="auto"`` is still estimated from the whole
        recording (a calibration constant); ``StreamingCleaner`` needs it as a number.

    Returns
    -------
    cleaned : PoseTracks (confidence NaN where filled or missing); report : QualityReport

    Examples
    --------
    >>> t = PoseTracks(np.random.default_rng(0).normal(size=(90, 1, 2, 2)), keypoints=["a", "b"],
    ...                fps=30, units="mm")
    >>> cleaned, report = clean(t, max_gap_s=0.2)
    >>> cleaned.coords.shape, report.per_keypoint.shape[0]
    ((90, 1, 2, 2), 2)
    """
    if not isinstance(tracks, PoseTracks):
        raise InputError(f"clean() takes a PoseTracks; got {type(tracks).__name__}")
    known = [f.name for f in fields(CleanParams)]
    unknown = sorted(set(overrides) - set(known))
    try:
        p = CleanParams.from_dict(params) if isinstance(params, Mapping) else params
        p = CleanParams() if p is None else p
        if not isinstance(p, CleanParams):
            raise InputError(f"params must be a CleanParams or a dict; got {type(p).__name__}")
        if unknown:
            raise InputError(f"unknown cleaning parameters {unknown}; known: {known}")
        return _clean(tracks, replace(p, **overrides), bool(causal))
    except InputError as exc:
        msg = str(exc)
        msg = msg if msg.startswith("session") else f"session '{tracks.session}': {msg}"
        raise InputError(msg) from None


def _clean(tracks: PoseTracks, p: CleanParams, causal: bool) -> tuple[PoseTracks, QualityReport]:
    cal = calibrate(tracks, p.px_per_unit, p.unit)
    fps = cal.fps
    if causal and p.target_fps is not None:
        raise InputError(
            "causal cleaning cannot resample (it needs future frames); set "
            "target_fps=None and resample afterwards"
        )
    pairs = _pair_index(cal.keypoints, p.swap_pairs)
    width = _window_frames(p.smooth, p.smooth_window_s, p.smooth_order, fps) if p.smooth else 0
    max_gap = _gap_frames(p.max_gap_s, fps)
    x, conf = _coords(cal.coords), np.array(cal.confidence)
    raw_missing = np.isnan(x[..., 0])
    if causal:
        probe = x.copy()  # the check of confidence, and what "auto" speed sees
        _mask_confidence_inplace(probe, conf, p.min_confidence)
        max_speed = _resolve_speed(p.max_speed, probe, fps)
        del probe
        smooth_spec = (p.smooth, width, p.smooth_order) if p.smooth else None
        settings = _settings(
            x.shape, fps, p.min_confidence, max_speed, pairs, True, max_gap, smooth_spec
        )
        flags, swapped = _run_causal(x, conf, settings)
        low, jumps, filled = (
            (flags & f) > 0 for f in (kern.FLAG_LOW_CONFIDENCE, kern.FLAG_JUMP, kern.FLAG_FILLED)
        )
    else:
        low = _mask_confidence_inplace(x, conf, p.min_confidence)
        max_speed = _resolve_speed(p.max_speed, x, fps)
        jumps = _mask_jumps_inplace(x, fps, max_speed, pairs, False)
        swapped = kern.swap_pass(x, conf, pairs, SWAP_PRIOR_PER_S / fps)
        filled = _fill_gaps_inplace(x, max_gap)
        if p.smooth:
            _smooth_inplace(x, p.smooth, width, p.smooth_order)
    conf[np.isnan(x[..., 0]) | filled] = np.nan  # only measured points keep a confidence
    fps_out = fps if p.target_fps is None else float(p.target_fps)
    if p.target_fps is not None:
        x, conf = resample(x, fps, fps_out), resample(conf, fps, fps_out)
    rule = f"auto: {AUTO_SPEED_FACTOR:g} x {AUTO_SPEED_QUANTILE:.0%} quantile of point speeds"
    if p.max_speed is None:
        rule = "off: no jump test"
    elif p.max_speed != "auto":
        rule = "given"
    elif max_speed is None:
        rule = "auto: too few consecutive points, jump test skipped"
    resolved = {
        **p.to_dict(),
        "max_speed": max_speed,
        "max_speed_rule": rule,
        "causal": causal,
        "smooth_window_frames": width,
        "max_gap_frames": max_gap,
        "units": cal.units,
        "fps_in": fps,
        "fps_out": fps_out,
    }
    out = cal.replace(coords=x, confidence=conf, fps=fps_out, meta={"cleaning": resolved})
    masks = {
        "frac_missing_raw": raw_missing,
        "frac_low_confidence": low,
        "frac_jumps": jumps,
        "frac_filled": filled,
    }
    return out, _report(cal, out, masks, swapped, p.swap_pairs, resolved)


class StreamingCleaner:
    """Causal cleaning one frame at a time; reproduces ``clean(..., causal=True)`` exactly.

    Parameters
    ----------
    params : CleanParams
        ``max_speed`` must be a number or None: ``"auto"`` needs the whole recording, so take
        ``report.params["max_speed"]`` from ``clean`` of a pilot recording. No ``target_fps``.
    keypoints : sequence of str; fps : float; n_animals, n_dims : int
    units : str
        Units of the pushed coordinates (``"px"`` is calibrated with ``params.px_per_unit``).

    Examples
    --------
    >>> sc = StreamingCleaner(CleanParams(max_speed=500.0), ["nose", "tail"], fps=30, units="mm")
    >>> sc.push(np.zeros((1, 2, 2)), np.ones((1, 2))).shape
    (1, 2, 2)
    """

    def __init__(
        self,
        params: CleanParams | None,
        keypoints: Sequence[str],
        fps: float,
        n_animals: int = 1,
        n_dims: int = 2,
        units: str = "px",
    ) -> None:
        p = params if params is not None else CleanParams()
        if p.max_speed == "auto":
            raise InputError(
                "streaming cleaning needs a fixed max_speed (units per second): 'auto' uses the "
                "whole recording. Run clean() on a pilot recording and pass "
                "max_speed=report.params['max_speed'], or set max_speed=None."
            )
        if p.target_fps is not None:
            raise InputError("streaming cleaning cannot resample; set target_fps=None")
        self.params, self.keypoints, self.fps = p, tuple(keypoints), _fps(fps)
        self._divisor, self.units = _calibration(units, p.px_per_unit, p.unit, "the stream")
        self.shape = (int(n_animals), len(self.keypoints), int(n_dims))
        if self.shape[0] < 1 or self.shape[1] < 1 or self.shape[2] not in (2, 3):
            raise InputError(
                f"a stream needs >= 1 animal, >= 1 keypoint and 2 or 3 dims; got "
                f"n_animals={n_animals}, {len(self.keypoints)} keypoints, n_dims={n_dims}"
            )
        pairs = _pair_index(self.keypoints, p.swap_pairs)
        width = _window_frames(p.smooth, p.smooth_window_s, p.smooth_order, fps) if p.smooth else 0
        smooth_spec = (p.smooth, width, p.smooth_order) if p.smooth else None
        self._settings = _settings(
            (1, *self.shape),
            self.fps,
            p.min_confidence,
            p.max_speed,
            pairs,
            True,
            _gap_frames(p.max_gap_s, self.fps),
            smooth_spec,
        )
        self._state = kern.CausalState(*self.shape, pairs.shape[0], self._settings.coef.shape[0])

    @property
    def n_frames_seen(self) -> int:
        return self._state.t

    def push(self, coords: np.ndarray, confidence: np.ndarray | None = None) -> np.ndarray:
        """Clean the next frame: coords (A, K, D), confidence (A, K) -> cleaned (A, K, D)."""
        x = np.array(coords, dtype=np.float64)
        if x.shape != self.shape:
            raise InputError(
                f"frame {self._state.t}: coords must have shape {self.shape} "
                f"(animals, keypoints, dims); got {x.shape}"
            )
        if np.isinf(x).any():
            raise InputError(f"frame {self._state.t}: coordinates contain infinite values")
        if confidence is None:
            c = np.where(np.isfinite(x).all(axis=-1), 1.0, np.nan)
        else:
            c = np.array(confidence, dtype=np.float64)
            if c.shape != self.shape[:2]:
                raise InputError(
                    f"frame {self._state.t}: confidence must have shape "
                    f"{self.shape[:2]}; got {c.shape}"
                )
        x = x[None] / self._divisor if self._divisor != 1.0 else x[None]
        self._state.run(self._settings, x, c[None])
        return x[0]
