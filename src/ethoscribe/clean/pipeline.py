"""``clean`` (all steps in order, batch or causal) and the frame-by-frame ``StreamingCleaner``."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import fields, replace
from typing import Any

import numpy as np

from ethoscribe.clean import _kernels as kern
from ethoscribe.clean.params import (
    AUTO_SPEED_FACTOR,
    AUTO_SPEED_QUANTILE,
    SWAP_LONE_MAX_AGE_FRAMES,
    SWAP_PRIOR_PER_S,
    CleanParams,
    _coords,
    _fps,
    _gap_frames,
    _pair_index,
    _window_frames,
    resolve_swap_pairs,
)
from ethoscribe.clean.report import QualityReport, _report
from ethoscribe.clean.steps import (
    IDENTITY_MAX_AGE_S,
    IdentityKeeper,
    _by_owner,
    _calibration,
    _fill_gaps_inplace,
    _mask_confidence_inplace,
    _mask_jumps_inplace,
    _resolve_speed,
    _run_causal,
    _settings,
    _smooth_inplace,
    at_positions,
    calibrate,
    confidence_scale,
    held_points,
    interpolated_points,
    part_exchanges,
    placeholder_positions,
    relink_by_shape,
    repeated_frames,
    resample,
)
from ethoscribe.errors import InputError
from ethoscribe.pose import PoseTracks


def clean(
    tracks: PoseTracks,
    params: CleanParams | Mapping[str, Any] | None = None,
    causal: bool = False,
    **overrides: Any,
) -> tuple[PoseTracks, QualityReport]:
    """Run calibrate -> placeholders -> held and interpolated points -> repeats -> confidence ->
    jumps -> swaps -> gaps -> smoothing -> resampling.

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
    pair_names = resolve_swap_pairs(p.swap_pairs, cal.keypoints)
    pairs = _pair_index(cal.keypoints, pair_names)
    width = _window_frames(p.smooth, p.smooth_window_s, p.smooth_order, fps) if p.smooth else 0
    max_gap = _gap_frames(p.max_gap_s, fps)
    x, conf = _coords(cal.coords), np.array(cal.confidence)
    # lost points written as a fixed position (in the file's units): missing, as if the file
    # had left them empty
    if p.placeholders == "auto":
        placed, placeholders = placeholder_positions(tracks.coords)
    else:
        placeholders = [list(q) for q in p.placeholders or ()]
        placed = at_positions(tracks.coords, placeholders)
    x[placed], conf[placed] = np.nan, np.nan
    raw_missing = np.isnan(x[..., 0])
    # a tracker whose confidences run low: the threshold as a share of its full confidence
    scale = p.confidence_scale
    scale = confidence_scale(x, conf) if scale == "auto" else scale
    thr = None if p.min_confidence is None else p.min_confidence * scale
    # points held still where the tracker lost them (a track forward-filled), or on straight
    # lines between seen ones (interpolated): not seen. Before repeated images, whose frames
    # would break a hold in two. A held point is known on its own frame; whether repeats can be
    # chance is read from the whole recording, as the "auto" speed bound is (streaming takes
    # it as a setting).
    held, looked = np.zeros(x.shape[:3], bool), False
    lined, lined_looked = np.zeros(x.shape[:3], bool), False
    interpolated = p.mask_interpolated and not causal  # a line needs the next frame
    if p.mask_held or interpolated:
        probe = x.copy()  # the points the confidence keeps
        _mask_confidence_inplace(probe, conf, thr)
        if p.mask_held:
            # a hold's end is a later frame; a leap is what the jump test would call one
            given = None if p.max_speed in ("auto", None) else p.max_speed / fps
            held, looked = held_points(probe, leaps=not causal, bound=given)
            probe[held] = np.nan
        if interpolated:
            lined, lined_looked = interpolated_points(probe)
        filled_in = held | lined
        x[filled_in], conf[filled_in] = np.nan, np.nan
        raw_missing |= filled_in
        del probe, filled_in
    # repeated images (offline only: a repeat is known once the next frame differs)
    repeated = repeated_frames(x) if p.fill_repeated and not causal else np.zeros(len(x), bool)
    x[repeated], conf[repeated] = np.nan, np.nan  # missing points have no confidence
    parts = 0  # stretches of some keypoints handed back to their animal (offline only)
    if causal:
        probe = x.copy()  # the check of confidence, and what "auto" speed sees
        _mask_confidence_inplace(probe, conf, thr)
        max_speed = _resolve_speed(p.max_speed, probe, fps)
        order, exchanges = _identities(probe, fps, max_speed, p, True)
        del probe
        x, conf, raw_missing, held = (_in_order(v, order) for v in (x, conf, raw_missing, held))
        smooth_spec = (p.smooth, width, p.smooth_order) if p.smooth else None
        settings = _settings(x.shape, fps, thr, max_speed, pairs, True, max_gap, smooth_spec)
        flags, swapped = _run_causal(x, conf, settings)
        low, jumps, filled = (
            (flags & f) > 0 for f in (kern.FLAG_LOW_CONFIDENCE, kern.FLAG_JUMP, kern.FLAG_FILLED)
        )
    else:
        low = _mask_confidence_inplace(x, conf, thr)
        max_speed = _resolve_speed(p.max_speed, x, fps)
        order, exchanges = _identities(x, fps, max_speed, p, False)
        x, conf, raw_missing, held, low = (
            _in_order(v, order) for v in (x, conf, raw_missing, held, low)
        )
        if p.repair_identities:  # parts of two animals exchanged (offline: a path over time)
            owner, parts = part_exchanges(x)
            if parts:
                x, conf, raw_missing, held, low = (
                    _by_owner(v, owner) for v in (x, conf, raw_missing, held, low)
                )
        jumps = _mask_jumps_inplace(x, fps, max_speed, pairs, False)
        swapped = kern.swap_pass(x, conf, pairs, SWAP_PRIOR_PER_S / fps, SWAP_LONE_MAX_AGE_FRAMES)
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
        "confidence_scale": scale,
        "confidence_threshold": thr,
        "swap_pairs_used": [list(q) for q in pair_names],
        "causal": causal,
        "smooth_window_frames": width,
        "max_gap_frames": max_gap,
        "units": cal.units,
        "fps_in": fps,
        "fps_out": fps_out,
        "repeated_frames": int(repeated.sum()),
        "placeholder_points": int(placed.sum()),
        "held_points": int(held.sum()),
        "held_share": float(held.mean()) if held.size else 0.0,
        "interpolated_points": int(lined.sum()),
        "interpolated_share": float(lined.mean()) if lined.size else 0.0,
        "interpolated_looked_for": lined_looked,
        "held_looked_for": looked,
        "identity_exchanges": exchanges,
        "part_exchanges": parts,
        "placeholders": placeholders,
    }
    out = cal.replace(coords=x, confidence=conf, fps=fps_out, meta={"cleaning": resolved})
    masks = {
        "frac_missing_raw": raw_missing,
        "frac_low_confidence": low,
        "frac_jumps": jumps,
        "frac_filled": filled,
    }
    return out, _report(cal, out, masks, swapped, pair_names, resolved)


def _identities(
    seen: np.ndarray, fps: float, max_speed: float | None, p: CleanParams, causal: bool
) -> tuple[np.ndarray | None, int]:
    """Each animal's track per frame (``IdentityKeeper``; offline also across junctions,
    ``relink_by_shape``) and how many exchanges were undone; None where there is one animal,
    no speed bound, or ``repair_identities`` is off."""
    if not p.repair_identities or max_speed is None or seen.shape[1] < 2:
        return None, 0
    keeper = IdentityKeeper(seen.shape[1], max_speed / fps, _age_frames(fps))
    order = keeper.run(seen)
    changes = keeper.changes
    if not causal:
        order, stretches = relink_by_shape(seen, fps, order)
        changes += stretches
    return (order if changes else None), changes


def _age_frames(fps: float) -> int:
    return max(1, round(IDENTITY_MAX_AGE_S * fps))


def _in_order(values: np.ndarray, order: np.ndarray | None) -> np.ndarray:
    """``values (frames, animals, ...)`` with each frame's tracks put in ``order``, in place."""
    if order is None:
        return values
    # the order changes at a few frames only: one permutation per stretch between them
    starts = np.r_[0, np.flatnonzero((order[1:] != order[:-1]).any(axis=1)) + 1]
    for start, stop in zip(starts, np.r_[starts[1:], len(order)], strict=True):
        if (order[start] != np.arange(order.shape[1])).any():
            values[start:stop] = values[start:stop][:, order[start]]
    return values


def streaming_cleaning(params: CleanParams, used: Sequence[Mapping[str, Any]]) -> CleanParams:
    """``params`` with what their automatic choices resolved to in the cleaning of some
    recordings (``used``: each one's ``report.params``) as fixed settings, as streaming needs
    them: the median of the speed bounds and of the confidence scales, every placeholder
    position found, and held points only where no recording's repeats could be chance.

    Examples
    --------
    >>> used = [{"max_speed": 400.0, "placeholders": [[0.0, 0.0]], "held_looked_for": True},
    ...         {"max_speed": 600.0, "placeholders": [], "held_looked_for": False}]
    >>> p = streaming_cleaning(CleanParams(), used)
    >>> p.max_speed, p.placeholders, p.mask_held
    (500.0, ((0.0, 0.0),), False)
    """
    if params.max_speed == "auto":
        speeds = [float(u["max_speed"]) for u in used if u.get("max_speed") is not None]
        params = replace(params, max_speed=float(np.median(speeds)) if speeds else None)
    if params.confidence_scale == "auto":
        scales = [float(u.get("confidence_scale", 1.0)) for u in used]
        params = replace(params, confidence_scale=float(np.median(scales)) if scales else 1.0)
    if params.placeholders == "auto":
        found = {tuple(q) for u in used for q in u.get("placeholders") or ()}
        params = replace(params, placeholders=sorted(found))
    if params.mask_held and not all(u.get("held_looked_for", True) for u in used):
        params = replace(params, mask_held=False)
    return params


def cleaned_again(
    given: CleanParams, fixed: CleanParams, used: Sequence[Mapping[str, Any]]
) -> bool:
    """Whether recordings cleaned with ``given`` (``used``: each one's ``report.params``) must
    be cleaned again with ``fixed`` (:func:`streaming_cleaning` of them) to mask the points
    streaming will: a speed bound, placeholders, held points or a confidence scale that were
    read per recording and are now one setting."""
    unheld = given.mask_held and not fixed.mask_held
    scales = given.confidence_scale == "auto" and any(
        u.get("confidence_scale", 1.0) != fixed.confidence_scale for u in used
    )
    return bool(given.max_speed == "auto" or fixed.placeholders or unheld or scales)


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
    held : bool
        Set a point exactly where it was on the frame before missing (``params.mask_held``
        where a pilot recording's ``report.params["held_looked_for"]`` is True: its repeats
        could not be chance). Off by default: a stream in whole units repeats by chance.

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
        held: bool = False,
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
        # a stream cannot read its tracker's confidence scale: "auto" is taken as 1
        scale = 1.0 if p.confidence_scale == "auto" else p.confidence_scale
        self._threshold = None if p.min_confidence is None else p.min_confidence * scale
        self._placeholders = p.placeholders if isinstance(p.placeholders, tuple) else ()
        self._held, self._last = bool(held), None  # the frame before, as pushed
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
            self._threshold,
            p.max_speed,
            pairs,
            True,
            _gap_frames(p.max_gap_s, self.fps),
            smooth_spec,
        )
        self._state = kern.CausalState(*self.shape, pairs.shape[0], self._settings.coef.shape[0])
        self._identities = None
        if p.repair_identities and p.max_speed is not None and self.shape[0] > 1:
            step = p.max_speed / self.fps  # in the output's units, as the kernel's bound
            self._identities = IdentityKeeper(self.shape[0], step, _age_frames(self.fps))

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
        lost = np.zeros(self.shape[:2], bool)  # set missing here, as in clean()
        if self._placeholders:  # given positions only: "auto" needs the whole recording
            lost |= at_positions(x, self._placeholders)
        thr = self._threshold
        with np.errstate(invalid="ignore"):
            low = (c < thr) if thr is not None else np.zeros(self.shape[:2], bool)
        if self._held:  # exactly where it was on the frame before, among the points seen
            seen = np.where((lost | low)[..., None], np.nan, x)  # NaN confidence: kept
            last, self._last = self._last, seen
            if last is not None:
                lost |= (seen == last).all(axis=-1)
        x[lost], c[lost] = np.nan, np.nan  # missing points have no confidence
        x = x[None] / self._divisor if self._divisor != 1.0 else x[None]
        if self._identities is not None:  # who is who, from the points the confidence keeps
            order = self._identities.run(np.where(low[None, ..., None], np.nan, x))
            x, c = _in_order(x, order), _in_order(c[None], order)[0]
        self._state.run(self._settings, x, c[None])
        return x[0]
