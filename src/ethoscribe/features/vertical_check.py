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
