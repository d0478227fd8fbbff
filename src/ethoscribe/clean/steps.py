"""The cleaning steps, each a pure function on ``coords (frames, animals, keypoints, dims)``."""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from ethoscribe.clean import _kernels as kern
from ethoscribe.clean.params import (
    AUTO_SPEED_FACTOR,
    AUTO_SPEED_QUANTILE,
    CONFIDENCE_FULL,
    CONFIDENCE_NO_SCALE,
    CONFIDENCE_QUANTILE,
    MM_PER_UNIT,
    SMOOTHERS,
    SWAP_LONE_MAX_AGE_FRAMES,
    SWAP_PRIOR_PER_S,
    _coords,
    _fps,
    _gap_frames,
    _pair_index,
    _partner,
    _positive,
    _window_frames,
)
from ethoscribe.errors import InputError
from ethoscribe.pose import PoseTracks


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


PLACEHOLDER_MIN_FRAMES = 10
"""A position (exact in every coordinate) held by two or more keypoints (or by one that moves
elsewhere), in at least this many frames of a session, is a candidate placeholder for lost
points (often 0, 0 or -1, -1)."""

PLACEHOLDER_FAR = 2.0
"""...and is one when the points holding it lie, on the median frame, more than this many body
lengths (median largest distance between two keypoints not at it) from the centre of the
frame's other keypoints: a lost point is put where no body part is. Where the whole body is at
it, on fewer than half the frames, it stands for an animal lost."""


PLACEHOLDER_ENTRY = 1.0
"""A position one keypoint alone holds counts when it lies this many body lengths from the rest
of the body on the median frame (not ``PLACEHOLDER_FAR``: animals rest in the corner where an
arena's coordinates start) and that keypoint reaches it by a leap: the median step onto it from
a seen point elsewhere on the frame before is more than this many body lengths. A point a
tracker held where it lost it (forward-filled) is reached by an ordinary step; a lost point
written as 0, 0 leaps there from the body."""

PLACEHOLDER_SAMPLE = 20_000
"""At most this many frames (times animals), evenly spaced, are searched for placeholders; a
position must then recur ``PLACEHOLDER_MIN_FRAMES`` / spacing times among them (at least 3).
Every point at a position found is then set missing, in every frame."""


def placeholder_positions(coords: np.ndarray) -> tuple[np.ndarray, list[list[float]]]:
    """Points ``(frames, animals, keypoints)`` at a placeholder position, and the placeholders.

    Some trackers and exports write a lost point as a fixed position (0, 0; -1, -1) instead of
    leaving it empty. Without a confidence to mask it, such a point is taken for a keypoint
    that leaps across the image and back, and the postures and speeds lose all sense (the
    example sessions with their lost points written as 0, 0 and no confidence: ARI 0.80 ->
    0.01). A position counts when at least two different keypoints hold it exactly, on at
    least ``PLACEHOLDER_MIN_FRAMES`` frames in all, away from the rest of the body
    (``PLACEHOLDER_FAR``): one keypoint that stays put (a landmark, an animal resting in integer
    pixels, another keypoint passing through its pixel) is no placeholder. One keypoint alone
    (the only one ever lost) counts when it moves elsewhere and leaps onto the position
    (``PLACEHOLDER_ENTRY``).

    Examples
    --------
    >>> x = np.zeros((15, 1, 3, 2)); x[..., 0] = [100.0, 101.0, 102.0]  # a body at x = 100
    >>> x[:, 0, :, 1] = np.arange(15.0)[:, None]  # moving along y
    >>> x[:6, 0, 0] = 0.0; x[6:12, 0, 1] = 0.0  # two keypoints each lost for six frames: 0, 0
    >>> held, values = placeholder_positions(x)
    >>> int(held.sum()), values
    (12, [[0.0, 0.0]])
    >>> still = x[:, :, :1].copy(); still[:12] = 5.0  # one keypoint at one place: kept
    >>> placeholder_positions(still)[1]
    []
    """
    x = np.asarray(coords, dtype=np.float64)
    bodies = x.reshape(-1, *x.shape[2:])  # (frames x animals, keypoints, dims)
    # Placeholders recur: a sample of frames finds them (at most PLACEHOLDER_SAMPLE), then
    # every point at one is found exactly.
    step = -(-len(bodies) // PLACEHOLDER_SAMPLE)
    places, lone, length = _placeholders_in(
        bodies[::step], max(3, -(-PLACEHOLDER_MIN_FRAMES // step))
    )
    # one keypoint alone: only where it leaps onto the position (checked on every frame)
    places = [
        q for q, one in zip(places, lone, strict=True) if not one or _leapt_onto(x, q, length)
    ]
    return at_positions(x, places), places


def _leapt_onto(x: np.ndarray, place: Sequence[float], length: float) -> bool:
    """Whether points of ``x (frames, animals, keypoints, dims)`` reach ``place`` by a leap: the
    median step onto it, from a point seen elsewhere on the frame before, is more than
    ``PLACEHOLDER_ENTRY`` body lengths (``length``)."""
    at = at_positions(x, [place])
    onto = at[1:] & ~at[:-1] & np.isfinite(x[:-1]).all(axis=-1)
    if not onto.any():
        return False
    steps = np.linalg.norm(x[:-1][onto] - np.asarray(place, dtype=np.float64), axis=-1)
    return bool(np.median(steps) > PLACEHOLDER_ENTRY * length)


def _placeholders_in(bodies: np.ndarray, min_count: int) -> tuple[list, list[bool], float]:
    """The placeholder positions of ``bodies (N, K, D)`` (:func:`placeholder_positions`), each
    held at least ``min_count`` times; per position whether one keypoint alone holds it (to be
    checked on every frame); the body length."""
    n_kp = bodies.shape[1]
    flat = bodies.reshape(-1, bodies.shape[-1])
    first = flat[:, 0]
    # Candidates first (values of one coordinate that recur), so the exact comparison of
    # whole positions runs on a few rows, not on every point.
    values, counts = np.unique(first[np.isfinite(first)], return_counts=True)
    common = values[counts >= min_count]
    if not common.size or n_kp < 2:
        return [], [], 0.0
    rows = np.flatnonzero(np.isin(first, common) & np.isfinite(flat).all(axis=1))
    points = flat[rows] + 0.0  # -0.0 as 0.0
    keys = _position_keys(points)
    _, first_at, which, n = np.unique(
        keys, return_index=True, return_inverse=True, return_counts=True
    )
    places, which = points[first_at], which.ravel()
    pairs = np.unique(which.astype(np.int64) * n_kp + rows % n_kp)  # (place, keypoint) pairs
    holders = np.bincount(pairs // n_kp, minlength=len(places))
    recur = n >= min_count
    lone = _lone_holder(bodies, pairs, n, recur & (holders == 1))
    candidate = recur & ((holders >= 2) | lone)
    if not candidate.any():
        return [], [], 0.0
    keep = candidate[which]
    rows, which = rows[keep], which[keep]
    # The bodies without the points at any candidate: their length, and each one's centre.
    off = np.zeros(len(flat), bool)
    off[rows] = True
    off = off.reshape(-1, n_kp)

    def without(i: np.ndarray) -> np.ndarray:  # bodies i, candidates removed
        return np.where(off[i][..., None], np.nan, bodies[i])

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # bodies with no keypoint left
        sample = without(np.arange(0, len(bodies), max(1, len(bodies) // 2_000)))
        two = np.isfinite(sample).all(-1).sum(-1) >= 2  # a length needs two keypoints
        gaps = np.linalg.norm(sample[two, :, None] - sample[two, None], axis=-1)
        length = float(np.nanmedian(np.nanmax(gaps, axis=(1, 2)))) if two.any() else 0.0
        centre = np.nanmean(without(rows // n_kp), axis=1)
    distance = pd.Series(np.linalg.norm(centre - places[which], axis=-1))
    median = distance.groupby(which).median()  # NaN: only whole bodies at the place
    # one keypoint alone: one body length, as its leap onto the place is checked too
    far = np.where(lone[median.index], PLACEHOLDER_ENTRY, PLACEHOLDER_FAR) * length
    found = median.index[median > far].tolist()
    for i in median.index[median.isna() & ~lone[median.index]]:
        # Whole bodies there, on fewer than half the frames: an animal lost, written so
        if len(np.unique(rows[which == i] // n_kp)) < 0.5 * len(bodies):
            found.append(i)
    found = sorted(found)
    return places[found].tolist(), lone[found].tolist(), length


def _position_keys(points: np.ndarray) -> np.ndarray:
    """One void item per row of ``points (N, D)``, equal where the rows are equal bit for bit
    (write -0.0 as 0.0 first): a 1-D ``np.unique`` of positions, much faster than ``axis=0``."""
    points = np.ascontiguousarray(points)
    return points.view(np.dtype((np.void, points.itemsize * points.shape[1]))).ravel()


def _lone_holder(
    bodies: np.ndarray, pairs: np.ndarray, n: np.ndarray, lone: np.ndarray
) -> np.ndarray:
    """Per place (of the ``lone`` ones, each held by one keypoint alone, ``n`` times; ``pairs``
    place x keypoints + keypoint): that keypoint moves elsewhere (its other seen points hold
    more distinct positions than half their number).

    A keypoint lost at times and written as a placeholder (0, 0) while no other is lost moves
    with the body on its other frames, however often it is lost; a landmark written as a
    keypoint sits at one position on every frame it is seen (or at two, if moved once)."""
    n_kp = bodies.shape[1]
    if not lone.any():
        return lone
    keypoint = np.zeros(len(n), np.int64)
    keypoint[pairs // n_kp] = pairs % n_kp  # the holder, where there is one
    seen = np.isfinite(bodies).all(axis=-1)
    n_seen = seen.sum(axis=0)
    distinct = np.zeros(n_kp, np.int64)
    for k in np.unique(keypoint[lone]):  # a few keypoints at most, not every place
        distinct[k] = len(np.unique(_position_keys(bodies[seen[:, k], k] + 0.0)))
    k = keypoint
    return lone & (distinct[k] - 1 > 0.5 * (n_seen[k] - n))


def position_text(position: Sequence[float]) -> str:
    """A position as people write it: ``(0, 0)``, ``(-1, -1, 2.5)``."""
    return "(" + ", ".join(f"{float(v):g}" for v in position) + ")"


def at_positions(coords: np.ndarray, positions: Sequence[Sequence[float]]) -> np.ndarray:
    """Points ``(frames, animals, keypoints)`` exactly at one of ``positions`` (of as many
    coordinates as the tracks have; others match nothing).

    Examples
    --------
    >>> at_positions(np.array([[[[-1.0, -1.0], [2.0, -1.0]]]]), [(-1, -1)]).tolist()
    [[[True, False]]]
    """
    x = np.asarray(coords)
    held = np.zeros(x.shape[:-1], bool)
    for q in positions:
        if len(q) == x.shape[-1]:
            held |= (x == np.asarray(q, dtype=x.dtype)).all(axis=-1)
    return held


REPEAT_RUN_MAX = 2
"""Runs of at most this many frames that repeat the frame before exactly are repeated images
(a video whose frame rate was raised by showing frames twice: 25 -> 30 fps repeats one frame
in five, 30 -> 60 every frame, 10 -> 30 each frame twice more); longer runs are kept (a video
frozen, or an animal still with rounded coordinates)."""


REPEAT_MIN_MOVING = 4
"""Repeats are looked for only where at least this many coordinates move (two keypoints in
2-D): that all of them repeat to the last digit is then no chance."""

REPEAT_STEP_RATIO = 0.5
"""Repeats count as repeated images when the median step from a repeat to the next frame is at
least this fraction of the median frame-to-frame step: measured 1.1 on sessions with every
fifth image repeated, 0.2 on a slow one-channel series written with few digits (GunPoint)."""


HELD_CHANCE = 0.01
"""Held points are looked for only where single exact repeats (a point on one frame exactly
where it was on the frame before, and not on the frame after) are rarer than this share of a
moving point's steps: coordinates written with enough digits that a living animal never repeats
one by chance (bench sources as recorded: 0.00001 at most; the example sessions with lost points
forward-filled 0.004, the independent simulator's 0.001; the same rounded to whole units, as
integer pixels are, 0.05-0.09: there an animal at rest repeats, and only holds that end in a
leap are taken, see ``held_points``)."""


def held_points(
    coords: np.ndarray, leaps: bool = True, bound: float | None = None
) -> tuple[np.ndarray, bool]:
    """Points ``(frames, animals, keypoints)`` held at their last position: exactly where the
    keypoint was on the frame before, where coordinates have too many digits for that to be
    chance; and whether they do (False: repeats can be chance here, and only holds that end in
    a leap are looked for, below).

    A track forward-filled over its gaps (``DataFrame.ffill()`` before export, or a tracker
    that keeps a lost point where it last saw it) holds each lost point still, exactly, for as
    long as it was lost. A whole animal held still for 20 s at a time on a fifth of the frames
    took the example sessions from ARI 0.80 to 0.20: the model spent its states on the
    stillness. Where single exact repeats are rarer than ``HELD_CHANCE``, a repeat cannot be an
    animal, and every one is returned (from a hold's first repeated frame to its last), for
    keypoints whose position moves along at least two axes over the recording (a fixed
    landmark, or a one-channel signal, is left alone).

    Where repeats can be chance (whole pixels: a point at rest keeps its pixel), a hold is
    told by how it ends: a point forward-filled while it was lost leaps, on the frame it is
    seen again, to where the animal went meanwhile, while a point at rest moves off by an
    ordinary step. With ``leaps`` (offline: the end of a hold is a later frame), holds whose
    next step is longer than ``bound`` (units per frame; None: the jump test's automatic
    bound, :func:`estimate_max_speed` per frame) are returned there too, and the second value
    is False (not every repeat was looked at). A point that was lost and held while the
    animal stayed put comes back by an ordinary step and is kept: it was held about where it
    was.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> x = rng.normal(size=(12, 1, 2, 2))
    >>> x[4:9, 0, 1] = x[3, 0, 1]  # keypoint 1 lost from frame 4 to 8, held where last seen
    >>> held, looked = held_points(x)
    >>> np.flatnonzero(held[:, 0, 1]).tolist(), looked
    ([4, 5, 6, 7, 8], True)
    >>> coarse = np.round(rng.normal(size=(200, 1, 2, 2)))  # on a coarse grid, repeats
    >>> coarse[4:9, 0, 1] = coarse[3, 0, 1]  # are chance: nothing is held
    >>> held, looked = held_points(coarse)
    >>> held.any(), looked
    (np.False_, False)
    """
    x = np.asarray(coords, dtype=np.float64)
    held = np.zeros(x.shape[:3], bool)
    if len(x) < 2:
        return held, True
    same = (x[1:] == x[:-1]).all(axis=-1)  # (F - 1, A, K): NaN is never equal
    if not same.any():  # coordinates written with many digits, nothing held: done
        return held, True
    moving = _moving(x)
    same &= moving
    if not _many_digits(x, same, moving):
        return (_holds_before_leaps(x, same, bound) if leaps else held), False
    held[1:] = same
    return held, True


def _holds_before_leaps(x: np.ndarray, same: np.ndarray, bound: float | None) -> np.ndarray:
    """``(frames, animals, keypoints)``: the repeated frames of holds (``same``, steps that
    repeat the frame before) whose next step leaps beyond ``bound`` per frame (None: the jump
    test's automatic bound)."""
    held = np.zeros(x.shape[:3], bool)
    if not same.any():  # nothing repeats: no speed bound is needed
        return held
    bound = estimate_max_speed(x, 1.0) if bound is None else bound
    if bound is None:
        return held
    # the last repeated step of each hold (step t: frame t -> t + 1), and the step after it
    last = same & ~np.concatenate([same[1:], np.zeros_like(same[:1])])
    t, a, k = np.nonzero(last[:-1])
    with np.errstate(invalid="ignore"):
        after = np.linalg.norm(x[t + 2, a, k] - x[t + 1, a, k], axis=-1)  # NaN: not seen
    leap = np.zeros_like(same)
    leap[t, a, k] = after > bound
    if not leap.any():
        return held
    # from each leaping hold's last step back to its first: runs of ``same`` ending in a leap
    for a, k in zip(*np.nonzero(leap.any(axis=0)), strict=True):
        column, ends = same[:, a, k], np.flatnonzero(leap[:, a, k])
        starts = np.flatnonzero(column & ~np.r_[False, column[:-1]])
        first = starts[np.searchsorted(starts, ends, side="right") - 1]
        for begin, end in zip(first, ends, strict=True):
            held[begin + 1 : end + 2, a, k] = True  # the frames that repeat: begin+1..end+1
    return held


def _moving(x: np.ndarray) -> np.ndarray:
    """(animals, keypoints): keypoints whose position moves along two axes or more over the
    recording (not a fixed landmark or a one-channel signal)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # a keypoint never tracked
        return (np.nanmax(x, axis=0) > np.nanmin(x, axis=0)).sum(axis=-1) >= 2


def _many_digits(x: np.ndarray, found: np.ndarray, moving: np.ndarray) -> bool:
    """Whether single finds (``found (frames, animals, keypoints)``, e.g. a moving point exactly
    where it was on the frame before; single: not on the frames either side) are rarer than
    ``HELD_CHANCE`` of the moving points' steps: coordinates with too many digits for an animal
    to give one by chance."""
    steps = int((np.isfinite(x[1:]).all(axis=-1) & moving).sum())
    if not steps:
        return True
    padded = np.pad(found, ((1, 1), (0, 0), (0, 0)))
    single = found & ~padded[:-2] & ~padded[2:]
    return bool(single.sum() < HELD_CHANCE * steps)


LINE_TOLERANCE = 1e-9
"""A point lies on the straight line through its neighbours when its second difference is at
most this share of the coordinate's size (its absolute value, at least 1) in every
coordinate: the rounding of a linear interpolation in double precision (about 1e-16 of the
size). Tracked points of the validation bench's animal sources, as recorded, go no lower than
8e-6 (seed 0), but for two exact zeros among the example sessions' 520,000 moving points
(stored in 1/64 mm: chance, see ``LINE_EVIDENT``)."""

GRID_SHARE = 0.99
"""Coordinates lie on a grid (whole pixels, 1/64 mm) when at least this share of their steps
from frame to frame are whole multiples of the smallest step; else they carry all their digits
(ours, common sense: a track interpolated in whole pixels has a few steps off the grid)."""

LINE_EVIDENT = 0.001
"""Points on such lines count in runs of two frames or more; single ones (a gap of one frame)
too where the runs hold at least this share of the moving points: the export evidently
interpolated (the example sessions so exported: 2.7 %). A lone point on a line is otherwise
chance (two of the example sessions' 520,000 moving points as recorded, stored in 1/64 mm;
0.02-0.6 % of the bench's simulated sources rounded to 0.1 mm, where runs of two are 0.005 %
at most)."""

LINE_MAX_SHARE = 0.9
"""...of keypoints with at most this share of their points on such lines: a keypoint that moves
in straight lines nearly all the time was made so (invented tracks, a machine), not filled in
over its gaps (a leg of the independently simulated study was lost, so interpolated, on 52 %
of one session's frames)."""


def _in_runs(mask: np.ndarray) -> np.ndarray:
    """``mask (frames, ...)`` where a neighbouring frame is set too (runs of two or more; the
    first and last frames must be False)."""
    return mask & (np.roll(mask, 1, axis=0) | np.roll(mask, -1, axis=0))


def interpolated_points(coords: np.ndarray) -> tuple[np.ndarray, bool]:
    """Points ``(frames, animals, keypoints)`` filled in on straight lines or cubic curves
    between seen points (a track interpolated over its gaps before export), and whether they
    were looked for.

    ``DataFrame.interpolate()`` before export fills each lost stretch of a point with steps of
    one length along the straight line between the points either side: a paw lost for two
    seconds slides across the body in a line, as no paw moves. The example sessions and the
    independently simulated study so exported, with no confidence column, scored ARI 0.63 and
    0.49 against 0.80 and 0.75 with those points left empty (with cubic splines,
    ``interpolate(method="cubic")``, 0.47 and 0.11; "pchip" 0.75 and 0.46). A point moving at
    exactly constant velocity through both neighbours (``LINE_TOLERANCE``), or on one cubic
    with two neighbours either side (a fourth difference of zero: a gap of three frames or
    more filled by a cubic, spline, pchip or akima interpolation; the gap's first and last
    points with it), in runs of two frames or more (single ones too where the export
    evidently interpolated: ``LINE_EVIDENT``), is returned, for keypoints that move along two
    axes or more and lie on such lines on at most ``LINE_MAX_SHARE`` of their frames, where
    coordinates have too many digits for that to be chance: single exact repeats rarer than
    ``HELD_CHANCE`` of the steps, and so are the lines chance would give, estimated from the
    points one step of the coordinates' grid beside a line or cubic (``GRID_SHARE``; none
    without a grid). Points beside lines, not on them, tell chance from interpolation: a
    tracker that loses many points on single frames, interpolated, puts as many single points
    on lines as whole pixels do by chance (before, single points on lines at 1 % of the steps
    turned the check off, long gaps included). Points held still are left to
    :func:`held_points`.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> x = rng.normal(size=(12, 1, 2, 2))
    >>> x[4:8, 0, 1] = np.linspace(x[3, 0, 1], x[8, 0, 1], 6)[1:-1]  # lost 4-7, interpolated
    >>> lined, looked = interpolated_points(x)
    >>> np.flatnonzero(lined[:, 0, 1]).tolist(), looked
    ([4, 5, 6, 7], True)
    """
    x = np.asarray(coords, dtype=np.float64)
    lined = np.zeros(x.shape[:3], bool)
    if len(x) < 3:
        return lined, True
    moving = _moving(x)
    grid = kern.grid_step(np.ascontiguousarray(x).reshape(len(x), -1), GRID_SHARE)
    near = 0  # points one grid step off a line or cubic: what chance puts on one
    codes = kern.on_curves(x, LINE_TOLERANCE, 2, grid)  # lines: the gap's points
    lined[1:-1] = (codes == kern.ON_CURVE) & moving
    near += int(((codes == kern.NEAR_CURVE) & moving).sum())
    curved = np.zeros_like(lined)
    if len(x) >= 5:  # cubics: the gap's points but its first and last
        codes = kern.on_curves(x, LINE_TOLERANCE, 4, grid)
        curved[2:-2] = (codes == kern.ON_CURVE) & moving
        near += int(((codes == kern.NEAR_CURVE) & moving).sum())
    del codes
    if not (lined.any() or curved.any()):
        return lined, True
    # Lines by chance (whole pixels: an animal moving 2 px a frame) are as common as
    # differences one grid step off zero in each coordinate, of which there are 3^D - 1 cells
    # around the one at zero; an interpolated track puts points on lines, not beside them.
    # Coordinates with all their digits have no grid: no line is chance. Where a point repeats
    # its position by chance (few digits, an animal at rest), it lies on a line by chance too.
    chance = near / (3 ** x.shape[-1] - 1)
    steps = int((np.isfinite(x[1:]).all(axis=-1) & moving).sum())
    same = (x[1:] == x[:-1]).all(axis=-1) & moving
    if not (_many_digits(x, same, moving) and chance < HELD_CHANCE * steps):
        return np.zeros_like(lined), False
    points = int((np.isfinite(x).all(axis=-1) & moving).sum())
    if _in_runs(lined | curved).sum() < LINE_EVIDENT * points:  # not evidently interpolated
        lined, curved = _in_runs(lined), _in_runs(curved)
    lined |= curved | np.roll(curved, 1, axis=0) | np.roll(curved, -1, axis=0)  # ends False
    seen = np.isfinite(x).all(axis=-1).sum(axis=0)
    return lined & (lined.sum(axis=0) <= LINE_MAX_SHARE * seen), True


def repeated_frames(coords: np.ndarray) -> np.ndarray:
    """Frames ``(frames,)`` that repeat the frame before in every coordinate of every animal
    (missing where it was missing, at least one point tracked), in runs of at most
    ``REPEAT_RUN_MAX`` frames with a frame after them, when the frames after the repeats move
    as much as frames do in general (``REPEAT_STEP_RATIO``; else none: nothing moved).

    A tracker shown the same image twice reports the same pose twice, to the last digit; a
    living animal tracked on two images never does. Such frames make the animal stop for one
    frame in every few, a rhythm no behaviour has (on the independently simulated study with
    every fifth frame repeated, ARI 0.60 / 0.58 at two seeds against 0.75 / 0.83 as recorded;
    with the repeats filled from their neighbours 0.74 / 0.84).

    Examples
    --------
    >>> body = np.array([[0.0, 0.0], [5.0, 1.0]])  # two keypoints, (x, y)
    >>> x = np.arange(5.0)[[0, 1, 1, 2, 3, 3, 4, 4], None, None, None] + body[None, None]
    >>> repeated_frames(x).tolist()  # the last repeat ends the recording: kept
    [False, False, True, False, False, True, False, False]
    >>> repeated_frames(x[[0, 1, 1, 1, 1, 1, 2]]).tolist()  # frozen: a run of four is kept
    [False, False, False, False, False, False, False]
    """
    x = np.asarray(coords)
    n = len(x)
    same = np.zeros(n, bool)
    if n < 2:
        return same
    now, before = x[1:].reshape(n - 1, -1), x[:-1].reshape(n - 1, -1)
    # A few values can repeat by chance (a one-channel signal written with few digits); all of
    # several moving coordinates at once cannot.
    with np.errstate(invalid="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # a coordinate never tracked
        moving = int((np.nanmax(now, axis=0) > np.nanmin(now, axis=0)).sum())
    if moving < REPEAT_MIN_MOVING:
        return same
    both_missing = np.isnan(now) & np.isnan(before)
    same[1:] = ((now == before) | both_missing).all(axis=1) & ~np.isnan(now).all(axis=1)
    # run lengths of consecutive repeats; keep short runs only
    edges = np.diff(np.r_[0, same.astype(np.int8), 0])
    starts, stops = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
    lengths = stops - starts
    # short runs only, and not one that ends the recording (nothing after it to fill from)
    short = (lengths <= REPEAT_RUN_MAX) & (stops < n)
    same[same] = np.repeat(short, lengths)  # the True frames, in run order
    if not same.any():
        return same
    # Images shown twice repeat whatever the animal does: the step out of a repeat is as large
    # as steps are in general. Values that repeat because nothing moves (a still body with
    # rounded coordinates, a slow signal written with few digits) step out by little: kept.
    with np.errstate(invalid="ignore"):
        step = np.sqrt(np.nanmean((now - before) ** 2, axis=1))  # into frames 1 .. n-1
    out_of = step[np.flatnonzero(same)]  # from each repeat to the frame after it
    typical = np.nanmedian(step) if np.isfinite(step).any() else np.nan
    if not np.nanmedian(out_of) >= REPEAT_STEP_RATIO * typical:
        same[:] = False
    return same


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


def confidence_scale(coords: np.ndarray, confidence: np.ndarray | None) -> float:
    """The scale a tracker rates its points on: 1, unless fewer than a tenth of the tracked
    points (with coordinates and a known confidence) reach ``CONFIDENCE_FULL`` (0.9); then their
    90th percentile, the confidence of well-tracked points, to two decimals (an estimate: a
    readable threshold, and the same one for recordings whose confidences differ by a factor)
    (``CleanParams.confidence_scale``).

    Examples
    --------
    >>> x = np.ones((100, 1, 1, 2))
    >>> c = np.linspace(0.0, 1.0, 100).reshape(100, 1, 1)
    >>> confidence_scale(x, c), confidence_scale(x, c / 2)
    (1.0, 0.45)
    """
    if confidence is None:
        return 1.0
    conf = np.asarray(confidence, dtype=np.float64)
    seen = ~np.isnan(np.asarray(coords)[..., 0])
    full = np.count_nonzero(seen & (conf >= CONFIDENCE_FULL))  # NaN: not full
    if full >= (1 - CONFIDENCE_QUANTILE) * np.count_nonzero(seen & ~np.isnan(conf)):
        return 1.0  # the usual case, without sorting millions of confidences
    rated = conf[seen & ~np.isnan(conf)]
    top = round(float(np.quantile(rated, CONFIDENCE_QUANTILE)), 2)
    return top if CONFIDENCE_NO_SCALE <= top < CONFIDENCE_FULL else 1.0


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
            f"(median confidence {median:.3g}); lower min_confidence (e.g. to {median:.2g}), "
            "check that confidence is on a 0-1 scale, or leave this recording out of the study "
            "if its tracking failed"
        )
    x[masked] = np.nan
    return masked


def estimate_max_speed(coords: np.ndarray, fps: float) -> float | None:
    """The ``"auto"`` speed bound: 2 x the 99th percentile of frame-to-frame point speeds.

    Speeds (units per second) of all keypoints and animals are pooled; ``None`` if fewer than 10
    consecutive pairs of points exist. Where more than 99 % of the steps are exactly zero (an
    animal still nearly all the time, positions repeated exactly), the percentile is taken over
    the steps that move instead (``None`` if fewer than 10 do), never giving a bound of 0.

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
    bound = AUTO_SPEED_FACTOR * float(np.quantile(speed, AUTO_SPEED_QUANTILE))
    if bound > 0:
        return bound
    # An animal still on more than 99 % of steps (exactly repeated positions, as integer-pixel
    # or position-holding trackers give) would get a bound of 0, and its every movement would
    # be masked as a jump: take the quantile over the steps that move; none move: no bound.
    moving = speed[speed > 0]
    if moving.size < 10:
        return None
    return AUTO_SPEED_FACTOR * float(np.quantile(moving, AUTO_SPEED_QUANTILE))


def _resolve_speed(max_speed: Any, x: np.ndarray, fps: float) -> float | None:
    if max_speed == "auto":
        return estimate_max_speed(x, fps)
    return None if max_speed is None else _positive("max_speed", max_speed)


IDENTITY_RATIO = 0.5
"""A track is taken for another animal when that animal's last seen points lie less than this
fraction as far from it as the track's own last seen points (median over keypoints)..."""

IDENTITY_MIN_STEP = 0.25
"""...and the track's own step is at least this fraction of the jump test's bound (twice a
fast point's speed, per frame): animals lying close, whose tracks only jitter, keep theirs."""

IDENTITY_MAX_AGE_S = 0.25
"""Points last seen longer ago than this say nothing about who is who: after a longer loss of
both animals their proportions decide (``relink_by_shape``). With 1 s, tracks exchanged as two
animals were both lost for 20 frames were left on the wrong animal more often than with no
repair at all (invented pairs: 12,570 of 28,800 frames against 10,244; 5,862 with 0.25 s)."""

_IDENTITY_CHUNK = 1 << 21  # elements of the (frames, animals, animals) distances per call


class IdentityKeeper:
    """Which animal each track is, frame by frame: a track that leaps to where another
    animal's track just was (a multi-animal tracker exchanging identities, usually as the
    animals touch) is given that animal from then on.

    On each frame every track is compared with every track's last seen points (at most
    ``max_age`` frames old), by the median over keypoints of the distances. A track is given
    another animal when its own step is at least ``IDENTITY_MIN_STEP`` of ``max_step`` and the
    other animal's last points lie less than ``IDENTITY_RATIO`` as far (the assignment of all
    tracks at once: Hungarian, ``scipy.optimize.linear_sum_assignment``). Only the past is
    read, so batch, causal and streaming cleaning give the same identities; :meth:`run`
    carries its state from one block of frames to the next.

    Parameters
    ----------
    n_animals : int
    max_step : float
        The speed bound in units per frame (``max_speed / fps``).
    max_age : int
        Frames after which a last seen point is forgotten.

    Examples
    --------
    >>> x = np.zeros((6, 2, 2, 2)); x[:, 1] += 10.0  # two still animals, 10 apart
    >>> x[:, :, 1, 0] += 1.0  # each a two-point body along x
    >>> x[3:] = x[3:, ::-1]  # the tracker exchanges them on frame 3
    >>> IdentityKeeper(2, max_step=2.0, max_age=5).run(x)[:, 0].tolist()
    [0, 0, 0, 1, 1, 1]
    """

    def __init__(self, n_animals: int, max_step: float, max_age: int) -> None:
        self.max_step, self.max_age = float(max_step), int(max_age)
        self.identity = np.arange(n_animals)  # raw track -> animal
        self.changes = 0
        self._last: np.ndarray | None = None  # last seen point of each track (A, K, D)
        self._last_t: np.ndarray | None = None  # and its frame (A, K; -1: never)
        self._t = 0

    def run(self, coords: np.ndarray) -> np.ndarray:
        """Tracks in order ``(frames, animals)``: ``coords[t, order[t]]`` puts each animal's
        points in its own place. ``coords`` ``(frames, animals, keypoints, dims)``, NaN where
        unseen, the frames after those of the last call."""
        x = np.asarray(coords, dtype=np.float64)
        n, a, k = x.shape[:3]
        ids = np.broadcast_to(self.identity, (n, a)).copy()
        if a < 2 or n == 0 or not self.max_step > 0:
            self._t += n
            return np.argsort(ids, axis=1)
        if self._last is None:
            self._last = np.full(x.shape[1:], np.nan)
            self._last_t = np.full((a, k), -1, np.int64)
        floor = IDENTITY_MIN_STEP * self.max_step
        step = max(1, _IDENTITY_CHUNK // (a * a))
        for s in range(0, n, step):
            dist = kern.identity_block(
                x[s : s + step], self._t + s, self._last, self._last_t, self.max_age, floor
            )
            own = np.diagonal(dist, axis1=1, axis2=2)[:, None, :]  # (n, 1, track now)
            with np.errstate(invalid="ignore"):
                nearer = (dist < IDENTITY_RATIO * own).any(axis=(1, 2))
            for t in np.flatnonzero(nearer):
                order = _reassigned(dist[t], self.max_step)
                if order is not None:  # order[j]: the track whose identity track j takes on
                    ids[s + t :] = ids[s + t][order]
                    self.changes += 1
        self.identity = ids[-1].copy()
        self._t += n
        return np.argsort(ids, axis=1)


SHAPE_MIN_S = 3.0
"""Stretches between junctions shorter than this keep the identities motion gave them: their
proportions are more posture than build (with 1 s, a 2.8-s stretch of four invented animals
was handed two animals of 17 % different size wrongly)."""

SHAPE_RATIO = 0.5
"""A stretch's tracks are handed other animals when their proportions differ from those
animals' less than this fraction as much as from their own (median over keypoint pairs of the
absolute log ratio of distances)."""

SHAPE_MIN_GAIN = 0.05
"""...and by at least this much for every track moved (5 % of their distances): proportions
that differ by less are posture, not another body."""

_SHAPE_FRAMES = 300  # frames per stretch whose proportions are read (evenly spaced)


PART_CLIP = 10.0
"""A point's misfit to a body (``_kernels._median_misfit``) counts at most this many spreads of
its usual distances: one frame's glitch cannot outweigh several frames of evidence."""

PART_SWITCH = 30.0
"""What giving a keypoint of two animals to the other costs in the path of
:func:`part_exchanges`: three frames of one animal's full misfit (``PART_CLIP``)."""

PART_MARGIN = 2.0
"""What the exchanged way pays on every frame: two spreads. Without it, bodies curled
otherwise than usual took a tail point for the other animal's (3 stretches in two sessions
of invented pairs; none with 2, with 1,826 of 3,324 exchanged points put back)."""

PART_SAMPLE = 20_000  # frames (evenly spaced) the usual distances are read from


def _by_owner(values: np.ndarray, owner: np.ndarray) -> np.ndarray:
    """``values (frames, animals, keypoints, ...)`` with each point taken from the track
    ``owner (frames, animals, keypoints)`` gives it."""
    return np.take_along_axis(values, owner.reshape(owner.shape + (1,) * (values.ndim - 3)), 1)


def part_exchanges(coords: np.ndarray) -> tuple[np.ndarray, int]:
    """Points that sit on another animal's body (a multi-animal tracker exchanging some
    keypoints of two animals that touch, the noses and ears, say, while the rest stay):
    ``(owner, handed)``, ``owner (frames, animals, keypoints)`` the track each animal's point
    is to be taken from (its own where it stays), ``handed`` the stretches handed back.

    Each animal's usual distances between its keypoints are read (medians over frames) with
    their spread (1.4826 x the median absolute deviation over frames and animals, at least 5 %
    of the distance); for every two animals and every keypoint,
    ``_kernels.part_exchanges`` follows which body each of the two points fits (the median
    over the body's other keypoints, so other exchanged keypoints do not decide) with a cost
    per change, so a point is handed back only after it sat on the other body for several
    frames. Where the animals stay within a body length of each other, distances fit either
    body and the points stay as tracked. Whole animals exchanged are the identity step's
    (:class:`IdentityKeeper`, :func:`relink_by_shape`), before this one.
    """
    x = np.asarray(coords, dtype=np.float64)
    n, n_a, n_k = x.shape[:3]
    owner = np.broadcast_to(np.arange(n_a)[None, :, None], (n, n_a, n_k)).copy()
    if n_a < 2 or n_k < 4 or n < 2:
        return owner, 0
    sample = x[np.unique(np.linspace(0, n - 1, min(n, PART_SAMPLE)).astype(int))]
    first, second = np.triu_indices(n_k, 1)  # distances are symmetric: each pair once
    apart = np.linalg.norm(sample[:, :, first] - sample[:, :, second], axis=-1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # keypoints never seen together
        pair_ref = np.nanmedian(apart, axis=0)  # (animals, pairs)
        pair_spread = 1.4826 * np.nanmedian(np.abs(apart - pair_ref), axis=(0, 1))
        pair_floor = 0.05 * np.nanmedian(pair_ref, axis=0)
    ref = np.zeros((n_a, n_k, n_k))  # the diagonal is never read (a point's own keypoint)
    ref[:, first, second] = ref[:, second, first] = pair_ref
    scale = np.full((n_k, n_k), np.inf)
    pair_scale = np.fmax(pair_spread, pair_floor)
    scale[first, second] = scale[second, first] = np.where(
        np.isfinite(pair_scale) & (pair_scale > 0), pair_scale, np.inf
    )
    handed = 0
    for i in range(n_a):
        for j in range(i + 1, n_a):
            placed = _by_owner(x, owner) if handed else x  # a copy only once points moved
            swap = kern.part_exchanges(
                placed, i, j, ref, scale, PART_CLIP, PART_SWITCH, PART_MARGIN
            )
            handed += int((swap[1:] & ~swap[:-1]).sum() + swap[0].sum())
            owner[:, i][swap], owner[:, j][swap] = owner[:, j][swap], owner[:, i][swap]
    return owner, handed


def relink_by_shape(
    coords: np.ndarray, fps: float, order: np.ndarray | None = None
) -> tuple[np.ndarray, int]:
    """Identities across junctions, read from the bodies' proportions: ``(order, changed)``,
    ``coords[t, order[t]]`` the animals in their places, ``changed`` the junctions across
    which the animals change tracks other than motion said.

    ``coords (frames, animals, keypoints, dims)``, NaN where unseen, with ``order`` the
    tracks in the order motion gave them (:class:`IdentityKeeper`; None: as they are). Where
    a track reappears while another animal was unseen on the frame before (both lost
    together, as animals in contact often are), motion cannot say who is who, and an error
    would carry on to the end of the recording. Between such junctions each stretch's tracks
    are compared, by the distances between their keypoints, with each animal's proportions
    over the stretches already placed (longest first); a stretch whose tracks match other
    animals' much better than their own (``SHAPE_RATIO``, ``SHAPE_MIN_GAIN``) is handed
    those. The first stretch read keeps the tracks' own numbers. Animals of one size and
    build keep motion's identities.
    """
    x = np.asarray(coords, dtype=np.float64)
    n, a, k = x.shape[:3]
    given = np.broadcast_to(np.arange(a), (n, a)) if order is None else order
    order = np.broadcast_to(np.arange(a), (n, a)).copy()
    if a < 2 or k < 3 or n < 2:
        return given.copy(), 0
    seen = np.take_along_axis(np.isfinite(x).all(axis=-1).any(axis=-1), given, axis=1)
    back = seen[1:] & ~seen[:-1]  # a track reappearing...
    others = (~seen[:-1]).sum(axis=1, keepdims=True) - ~seen[:-1]  # ...while another was lost
    junctions = np.flatnonzero((back & (others > 0)).any(axis=1)) + 1
    edges = np.r_[0, junctions, n]
    lengths = np.diff(edges)
    if len(lengths) < 2:
        return given.copy(), 0
    i, j = np.triu_indices(k, 1)
    sig = np.full((len(lengths), a, len(i)), np.nan)
    for s in np.flatnonzero(lengths >= SHAPE_MIN_S * fps):
        rows = np.unique(np.linspace(edges[s], edges[s + 1] - 1, _SHAPE_FRAMES).astype(int))
        body = np.take_along_axis(x[rows], given[rows][..., None, None], axis=1)
        pair = np.linalg.norm(body[:, :, i] - body[:, :, j], axis=-1)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # a pair never seen
            sig[s] = np.log(np.nanmedian(pair, axis=0))
    from scipy.optimize import linear_sum_assignment

    placed, weight = np.zeros(sig.shape[1:]), np.zeros(sig.shape[1:])  # nothing placed yet
    for s in np.argsort(-lengths, kind="stable"):  # longest first: the surest proportions
        here = sig[s]
        if not np.isfinite(here).any():
            continue
        if weight.any():
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)  # pairs seen in one only
                cost = np.nanmedian(np.abs(placed[:, None] - here[None]), axis=-1)
            if np.isfinite(cost).all():  # (animal, track); a move must gain SHAPE_MIN_GAIN
                rows, cols = linear_sum_assignment(cost - SHAPE_MIN_GAIN * np.eye(a))
                moved = cols != rows
                if cost[rows, cols][moved].sum() < SHAPE_RATIO * np.diagonal(cost)[moved].sum():
                    order[edges[s] : edges[s + 1]] = cols  # animal r is track cols[r]
                    here = here[cols]
        w = np.isfinite(here) * float(lengths[s])
        total = weight + w
        with np.errstate(invalid="ignore"):
            mixed = (np.nan_to_num(placed) * weight + np.nan_to_num(here) * w) / total
        placed, weight = np.where(total > 0, mixed, np.nan), total
    # the first stretch read keeps the tracks' own numbers: the others follow it
    read = np.flatnonzero(np.isfinite(sig).any(axis=(1, 2)))
    if len(read):
        order = order[:, np.argsort(order[edges[read[0]]])]
    # junctions across which the animals now change tracks other than motion said
    turned = (order[junctions] != order[junctions - 1]).any(axis=1)
    return np.take_along_axis(given, order, axis=1), int(turned.sum())


def _reassigned(dist: np.ndarray, max_step: float) -> np.ndarray | None:
    """The track whose animal each track takes on (``order[j]``), from one frame's median
    distances ``(track's last points, track now)``, NaN where none pair up; None when no
    exchange is clear (see :class:`IdentityKeeper`)."""
    from scipy.optimize import linear_sum_assignment

    a = len(dist)
    known = np.isfinite(dist)
    rows, cols = linear_sum_assignment(np.where(known, dist, 1e6 * (np.nanmax(dist) + 1.0)))
    taken = np.arange(a)
    taken[cols] = rows
    own = np.diagonal(dist)
    # changes both sides of which were seen; a track not seen now keeps its animal unless
    # another takes it
    changed = [j for j in range(a) if taken[j] != j and known[taken[j], j] and known[j, j]]
    if not changed:
        return None
    new, old = dist[taken[changed], changed].sum(), own[changed].sum()
    if not (new < IDENTITY_RATIO * old and (own[changed] > IDENTITY_MIN_STEP * max_step).all()):
        return None
    order = np.arange(a)
    order[changed] = taken[changed]
    # animals the changed tracks left go to the tracks whose animals they took, in order
    freed = [i for i in changed if i not in order[changed]]
    left = [j for j in range(a) if j not in changed and order[j] in order[changed]]
    order[left] = freed
    return order


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
    the past). A frame with one point seen gives it to the side whose last position it continues
    best, on the same costs, if the other side was seen in the last ``SWAP_LONE_MAX_AGE_FRAMES``
    frames; else the point keeps its label (a keypoint lost for long never takes its partner's).

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
        swapped = kern.swap_pass(x, conf, pairs, SWAP_PRIOR_PER_S / fps, SWAP_LONE_MAX_AGE_FRAMES)
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
        SWAP_LONE_MAX_AGE_FRAMES,
        int(max_gap),
        kind,
        coef,
    )


def _run_causal(x: np.ndarray, conf: np.ndarray | None, settings: kern.CausalSettings):
    conf = np.full(x.shape[:3], np.nan) if conf is None else conf
    state = kern.CausalState(*x.shape[1:], settings.pairs.shape[0], settings.coef.shape[0])
    return state.run(settings, x, conf)
