"""The vertical axis of 3-D tracks: chosen from the tracks (``up_axis="auto"``), or checked
when given. Motion capture and some 3-D trackers put "up" along y; with the wrong vertical the
body frame is turned about a horizontal axis and headings, heights and speeds mix the vertical
in, so the motifs are silently worse (the validation bench's simulated fish with y and z
exchanged: adjusted Rand index with the truth 0.846 -> 0.559; its upright figure 0.555 -> 0.263).

Two cues, both from gravity. An animal turns about the vertical, so over a study the body's
spread along the two horizontal axes is alike while along the vertical it differs (smaller for
a four-legged animal or a fish, larger for an upright one): the vertical is the odd one out of
the three spreads. And animals travel over the floor, so the body centre ranges least along
the vertical, read from the animals that travel most (the top quarter of the sessions' animals
by range: a study of short clips holds many that hardly move). An axis is chosen when both cues
name it, each by a clear margin, and those animals travel at least the body's spread;
otherwise z is kept (tracks of tethered animals, or sensor channels, give no sign).
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence

import numpy as np

from ethoscribe.errors import InputWarning
from ethoscribe.pose import PoseTracks

ODD_SPREAD = np.log(1.5)
"""The vertical's spread differs from the horizontal ones' geometric mean by at least this
factor (log) and by at least twice the log-ratio of the two horizontal spreads (bench, seed 0:
simulated fish 4.9x, 1.1x apart; upright figure 2.7x, 1.02x apart)."""

RANGE_RATIO = 0.7
"""The body centre's range (5-95 % of its positions) along the vertical is below this fraction
of its range along each horizontal axis (bench, seed 0: fish 0.35, upright figure 0.06)."""

FLOOR_RATIO = 0.5
"""Which way the vertical points: the lowest keypoint's height ranges (5-95 % over frames) at
most this fraction of the highest keypoint's, or the other way round (bench, seeds 0-2: the
upright figure standing on its floor 0.08-0.12; the swimming fish 1.00, no floor: no call)."""

_AXES = "xyz"
_MAX_FRAMES = 20_000


def vertical_evidence(sessions: Sequence[PoseTracks]) -> dict[str, list[float]]:
    """Per axis (x, y, z): the body's spread (median over frames with every keypoint of the
    keypoints' standard deviation) and the body centre's range (5-95 % range of its positions
    per animal of each session; the median over the quarter of them that range most), from at
    most 20,000 frames of each session.

    Examples
    --------
    >>> from ethoscribe.io import from_arrays
    >>> c = np.zeros((50, 2, 3)); c[:, 1] = [4.0, 0.0, 1.0]; c[:, :, 0] += np.arange(50)[:, None]
    >>> e = vertical_evidence([from_arrays(c, keypoints=["a", "b"], fps=30)])
    >>> e["spread"], [round(v, 1) for v in e["range"]]
    ([2.0, 0.0, 0.5], [44.1, 0.0, 0.0])
    """
    spreads, ranges = [], []
    for s in sessions:
        X = s.coords[:: max(1, s.n_frames // _MAX_FRAMES)]  # (F, A, K, 3)
        for a in range(X.shape[1]):
            Y = X[:, a][np.isfinite(X[:, a]).all(axis=(1, 2))]  # (F', K, 3), whole bodies
            if len(Y) < 2:
                continue
            spreads.append(Y.std(axis=1))
            q = np.quantile(Y.mean(axis=1), [0.05, 0.95], axis=0)
            ranges.append(q[1] - q[0])
    if not spreads:
        nan = [float("nan")] * 3
        return {"spread": nan, "range": nan}
    return {
        "spread": np.median(np.concatenate(spreads), axis=0).tolist(),
        "range": np.median(_most_travelled(np.array(ranges)), axis=0).tolist(),
    }


def _most_travelled(ranges: np.ndarray) -> np.ndarray:
    """The rows (animals) whose range vector is at least the 75th percentile of their lengths."""
    total = np.linalg.norm(ranges, axis=1)
    return ranges[total >= np.quantile(total, 0.75)]


def choose_vertical_axis(sessions: Sequence[PoseTracks]) -> tuple[str | None, str]:
    """The vertical axis the tracks show (module docstring), or None when they give no clear
    sign, with a sentence saying why (None and "" for 2-D tracks).

    Examples
    --------
    >>> from ethoscribe.io import from_arrays
    >>> rng = np.random.default_rng(0)
    >>> body = rng.normal(size=(400, 1, 6, 3)) * [1.0, 1.0, 3.0]  # tall, turning: z odd
    >>> body[..., :2] += rng.uniform(0, 20, size=(400, 1, 1, 2))  # travels over x and y
    >>> choose_vertical_axis([from_arrays(body, keypoints=list("abcdef"), fps=30)])[0]
    'z'
    >>> y_up = from_arrays(body[..., [0, 2, 1]], keypoints=list("abcdef"), fps=30)
    >>> choose_vertical_axis([y_up])[0]
    'y'
    """
    if not sessions or sessions[0].n_dims != 3:
        return None, ""
    e = vertical_evidence(sessions)
    spread, rng = np.asarray(e["spread"]), np.asarray(e["range"])
    shown = (
        f"body spread x/y/z {_three(spread)}, body-centre range {_three(rng)} {sessions[0].units}"
    )
    if not (np.isfinite(spread).all() and np.isfinite(rng).all()) or (spread <= 0).any():
        return None, f"the tracks give no clear sign of the vertical ({shown})"
    log = np.log(spread)
    odd = None
    for a in range(3):
        b, c = (i for i in range(3) if i != a)
        gap, alike = abs(log[a] - (log[b] + log[c]) / 2), abs(log[b] - log[c])
        if gap >= ODD_SPREAD and gap >= 2 * alike:
            odd = a
    low = int(np.argmin(rng))
    others = np.delete(rng, low)
    travels = others.max() >= spread.max()
    if odd is None or odd != low or not travels or not rng[low] < RANGE_RATIO * others.min():
        return None, f"the tracks give no clear sign of the vertical ({shown})"
    axis = _AXES[odd]
    return axis, (
        f"the body's spread along {axis} stands apart from two alike horizontal ones and the "
        f"animals range least along it ({shown})"
    )


def vertical_direction(sessions: Sequence[PoseTracks], up_axis: str) -> tuple[int, str]:
    """Which way ``up_axis`` points in 3-D tracks: +1 up, -1 down (camera coordinates often
    grow downwards), with a sentence saying why ("" when there is no sign of it: +1 kept).

    Gravity again: animals stand on a floor, so their lowest keypoint (a paw, a foot) keeps one
    height while the highest (a head, a back) rises and falls; upside down, the highest keeps
    it. Read from each animal's whole-body frames (at most 20,000 per session): the 5-95 %
    range over frames of the lowest and of the highest keypoint's coordinate, the median over
    animals of each; one must be at most ``FLOOR_RATIO`` of the other. Only drawings depend on
    it (features do not: heights enter them through a linear map).

    Examples
    --------
    >>> from ethoscribe.io import from_arrays
    >>> rng = np.random.default_rng(0)
    >>> c = np.zeros((300, 1, 3, 3)); c[:, 0, 1, 2] = 1.0  # a foot on the floor, a hip above
    >>> c[:, 0, 2, 2] = rng.uniform(1.5, 2.5, 300)  # a head that rises and falls
    >>> kp = ["foot", "hip", "head"]
    >>> vertical_direction([from_arrays(c, keypoints=kp, fps=30)], "z")[0]
    1
    >>> down = c * [1.0, -1.0, -1.0]  # the same animal in camera coordinates: y and z turned over
    >>> vertical_direction([from_arrays(down, keypoints=kp, fps=30)], "z")[0]
    -1
    """
    if not sessions or sessions[0].n_dims != 3:
        return 1, ""
    up = _AXES.index(up_axis)
    low, high = [], []
    for s in sessions:
        X = s.coords[:: max(1, s.n_frames // _MAX_FRAMES), ..., up]  # (F, A, K)
        for a in range(X.shape[1]):
            h = X[:, a][np.isfinite(X[:, a]).all(axis=1)]
            if len(h) >= 2:
                low.append(np.subtract(*np.quantile(h.min(axis=1), [0.95, 0.05])))
                high.append(np.subtract(*np.quantile(h.max(axis=1), [0.95, 0.05])))
    if not low:
        return 1, ""
    lo, hi = float(np.median(low)), float(np.median(high))
    shown = f"lowest keypoint's range {lo:.3g}, highest's {hi:.3g} {sessions[0].units}"
    if lo <= FLOOR_RATIO * hi:
        return 1, f"{up_axis} points up (the lowest keypoints keep one height: a floor; {shown})"
    if hi <= FLOOR_RATIO * lo:
        return -1, (
            f"{up_axis} points down (the highest keypoints along {up_axis} keep one height: "
            f"a floor seen upside down; {shown}); postures are drawn turned upright"
        )
    return 1, ""


def _three(v: np.ndarray) -> str:
    return "/".join(f"{x:.3g}" for x in v)


def resolve_up_axis(sessions: Sequence[PoseTracks], up_axis: str) -> tuple[str, str]:
    """The vertical axis to use and how it was chosen: ``up_axis`` itself when given ("x", "y"
    or "z"; the feature pipeline checks it), else (``"auto"``) the one
    :func:`choose_vertical_axis` names, or z when the tracks give no clear sign. The text is
    empty for 2-D tracks."""
    if not sessions or sessions[0].n_dims != 3:
        return ("z" if up_axis == "auto" else up_axis), ""
    if up_axis != "auto":
        return up_axis, f"{up_axis} (given)"
    axis, why = choose_vertical_axis(sessions)
    if axis is None:
        return "z", f"z (assumed: {why}; if another axis points up, set it by hand)"
    return axis, f"{axis} (chosen from the tracks: {why})"


def warn_vertical_axis(sessions: Sequence[PoseTracks], up_axis: str) -> str | None:
    """Warn (``InputWarning``) when 3-D tracks show another vertical axis than ``up_axis``
    (:func:`choose_vertical_axis`); returns that axis (None: no sign of it, or not 3-D).

    Examples
    --------
    >>> from ethoscribe.io import from_arrays
    >>> c = np.zeros((50, 2, 3)); c[:, 1] = [3.0, 1.0, 0.2]; c[:, :, 0] += np.arange(50)[:, None]
    >>> warn_vertical_axis([from_arrays(c, keypoints=["a", "b"], fps=30)], "z") is None
    True
    """
    if up_axis not in _AXES:
        return None
    axis, why = choose_vertical_axis(sessions)
    if axis is None or axis == up_axis:
        return None
    msg = (
        f"3-D tracks: the vertical axis is taken to be {up_axis}, but {why}. If {axis} points "
        f"up, pass up_axis='{axis}' or up_axis='auto' (command line: --up-axis {axis}): "
        f"headings, heights and speeds are taken about the vertical, so the motifs depend on "
        f"it. If {up_axis} is up, ignore this."
    )
    warnings.warn(msg, InputWarning, stacklevel=3)
    return axis
