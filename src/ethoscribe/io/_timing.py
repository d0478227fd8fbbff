"""Frame timing of the table readers: frame numbers from time stamps, the rate, sane spans.

A time column in another unit (milliseconds, clock times) or absurd values must become a clear
``InputError``, never a huge allocation, an overflow or a numpy warning.
"""

from __future__ import annotations

import os

import numpy as np

from ethoscribe.errors import InputError

TIME_UNITS = {"s": 1.0, "ms": 1e-3}
# A time step of this many frames (or more) at the given rate is a unit slip, not dropped frames.
UNIT_SLIP_FRAMES = 50
# Derived rates below this need the unit said out loud (milliseconds read as seconds give 0.03).
SLOWEST_UNSAID_FPS = 1.0


def seconds(times: np.ndarray, unit: str | None, where: str | os.PathLike[str]) -> np.ndarray:
    """Times in ``unit`` ("s" or "ms"; None: seconds) as seconds."""
    if unit is None or unit == "s":
        return times
    if unit not in TIME_UNITS:
        raise InputError(
            f"{where}: time_unit must be one of {list(TIME_UNITS)} (seconds or milliseconds); "
            f"got {unit!r}"
        )
    return times * TIME_UNITS[unit]


def check_time_unit(
    steps: np.ndarray,
    fps: float | None,
    unit: str | None,
    where: str | os.PathLike[str],
    column: str = "time",
) -> None:
    """Refuse time stamps whose unit cannot be what the frame rate says.

    ``steps`` are positive time steps between frames (seconds, after ``unit``). With ``fps``:
    a typical step of ``UNIT_SLIP_FRAMES`` frames or more is a unit slip (milliseconds read as
    seconds step 1000 frames at a time). Without it: a derived rate below 1 frame per second
    must have its unit given (``time_unit="s"``).
    """
    steps = steps[np.isfinite(steps) & (steps > 0)]
    if not steps.size:
        return
    step = float(np.median(steps))
    if fps is not None and step * fps >= UNIT_SLIP_FRAMES:
        raise InputError(
            f"{where}: column '{column}' advances by {step:.6g} s per row (median), which at "
            f"{fps:g} fps is {step * fps:.0f} frames per step; check the '{column}' column: if "
            "the times are in milliseconds pass time_unit='ms', otherwise check the frame rate "
            "(fps=...)"
        )
    if fps is None and unit is None and 1.0 / step < SLOWEST_UNSAID_FPS:
        raise InputError(
            f"{where}: column '{column}' advances by {step:.6g} per row (median), which read "
            f"as seconds is {1.0 / step:.3g} frames per second; check the '{column}' column: if "
            "the times are in milliseconds pass time_unit='ms', if they are seconds pass "
            "time_unit='s' (or fps=...)"
        )


def require_two_frames(n_frames: int, where: str | os.PathLike[str]) -> None:
    """Movement needs at least two frames."""
    if n_frames < 2:
        raise InputError(
            f"{where}: holds a single frame; at least 2 frames are needed to measure movement"
        )


def check_frame_span(
    n_frames: int, n_rows: int, first: int, where: str | os.PathLike[str], column: str
) -> None:
    """Refuse timing that would allocate mostly empty frames (a column in another unit)."""
    if n_frames > 100 * n_rows + 10_000:
        raise InputError(
            f"{where}: the frames span {n_frames} frames from frame {first} but the table "
            f"has only {n_rows} rows; check the '{column}' column (are these time stamps in "
            "another unit?)"
        )


# Times from this many frames on are read as a possibly jittering clock (frames_from_times)
JITTER_FRAMES = 64


def frames_from_times(
    times: np.ndarray, fps: float | None, where: str | os.PathLike[str], column: str = "time"
) -> tuple[np.ndarray, float, float]:
    """Frame numbers for strictly increasing ``times`` (seconds) on a steady frame rate.

    Returns ``(frames, fps, t0)``: frames (n,) int64 counted from the first time ``t0``. Without
    ``fps`` the rate is fitted to the times (:func:`_grid_rate`). Whole missing frames are
    allowed; a time off the frame grid by more than a quarter frame is an error, but for a
    series of ``JITTER_FRAMES`` or more (a clock that may jitter) only beyond 0.4 frame or on
    more than 1 % of the times.
    """
    require_two_frames(times.size, where)
    t0 = float(times[0])
    derived = fps is None
    with np.errstate(all="ignore"):  # absurd times are reported just below, not warned about
        rel = times - t0
        if fps is None:
            fps = _grid_rate(rel, float(np.median(np.diff(times))))
        pos = rel * fps
    if not (np.isfinite(fps) and fps > 0 and np.isfinite(pos).all() and pos.max() < 2.0**53):
        raise InputError(
            f"{where}: column '{column}' runs from {times[0]:.6g} s to {times[-1]:.6g} s, which "
            f"cannot be counted in frames at {fps:.6g} fps; check that the column holds "
            "seconds (not milliseconds or clock times), or pass the true fps"
        )
    # A long series may come from a jittering clock: its grid goes through the times' typical
    # phase (not the first time's own), and a rare time a quarter frame off is kept; it is off
    # the grid by 0.4 frame (which frame is nearly ambiguous), or by a quarter frame on more
    # than 1 % of the times (a changing rate). A short series is held to a quarter frame.
    long = times.size >= JITTER_FRAMES
    if long:
        pos -= np.median(pos - np.rint(pos))
    k = np.rint(pos)
    off = np.abs(pos - k)
    same = np.r_[False, np.diff(k) == 0]
    far = off > 0.25
    bad = same | ((off > 0.4) | (far & (far.mean() > 0.01)) if long else far)
    if bad.any():
        i = int(np.argmax(bad))
        how = "fitted to the times" if derived else "given"
        what = (
            f"times {times[i - 1]:.6g} s and {times[i]:.6g} s fall within one frame"
            if same[i]
            else f"time {times[i]:.6g} s lies {off[i]:.2f} frames off the frame grid"
        )
        raise InputError(
            f"{where}: column '{column}' is not on a steady frame rate: {what} at {fps:.6g} fps "
            f"({how}). Frames must be evenly spaced in time (whole missing frames are fine): "
            "pass the true fps, give frame numbers instead, or resample the recording."
        )
    frames = k.astype(np.int64)
    if derived:
        fps = snap_rate(frames, rel, fps, float(np.abs(times).max()))
    return frames, fps, t0


def _grid_rate(rel: np.ndarray, step: float) -> float:
    """The frame rate whose grid fits ``rel`` (seconds since the first frame, ``step`` the
    typical step): over the first 64 frames, their span in whole steps; then, over twice as
    many frames each time to the end, the least-squares rate of the times against their whole
    frames (with an intercept). Rounding the whole recording's span by the median step instead
    miscounts frames when a camera clock jitters (2 ms at 30 fps over 5 min: 29.95 fps, and
    times 'off the grid'); a short series is read as before. Exact times give the rate they
    were written with."""
    n, m = len(rel), min(len(rel), 64)
    with np.errstate(all="ignore"):
        fps = float(np.rint(rel[m - 1] / step) / rel[m - 1])
        while m < n and np.isfinite(fps) and fps > 0:
            m = min(n, 2 * m)
            k = np.rint(rel[:m] * fps)
            k -= k.mean()  # rel = (k + c) / fps: least squares with an intercept, since the
            r = rel[:m] - rel[:m].mean()  # first time's own jitter must not tilt the rate
            den = float(k @ r)
            if den > 0:
                fps = float(k @ k) / den
    return fps


def snap_rate(frames: np.ndarray, rel: np.ndarray, fps: float, scale: float = 0.0) -> float:
    """The estimated ``fps``, or the shortest decimal rate that reproduces the times (for
    times from a jittering clock: whose grid stays within 0.01 frame of the estimate's).

    ``frames`` and ``rel`` (seconds since the first frame) are matching arrays; ``scale`` is the
    largest absolute time in the file, which sets the rounding noise of the times.
    """
    # A file written with time = frame / fps gives back exactly that fps. First look for a rate
    # reproducing every time bit for bit, then for one within the times' rounding noise.
    candidates = [float(f"{fps:.{digits}g}") for digits in range(3, 18)]
    for candidate in candidates:
        if np.array_equal(frames / candidate, rel):
            return candidate
    noise = 8 * np.finfo(np.float64).eps * max(scale, float(np.abs(rel).max()))
    for candidate in candidates:
        if np.abs(frames / candidate - rel).max() <= noise:
            return candidate
    # Times from a jittering clock fit no rate exactly: the shortest rate whose grid stays
    # within a hundredth of a frame of the fitted one over the whole recording is the same.
    span = float(np.abs(rel).max())
    for candidate in candidates:
        if abs(candidate - fps) * span < 0.01:
            return candidate
    return fps
