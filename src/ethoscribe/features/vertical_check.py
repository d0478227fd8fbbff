"""3-D tracks whose vertical axis is likely not the one the features assume (``up_axis``,
"z" by default): motion capture and some 3-D trackers put "up" along y. Nothing fails then:
the body frame is turned about a horizontal axis and headings, heights and speeds mix the
vertical in, so the motifs are silently worse (the two example fish sessions, 60 s each,
with y and z exchanged: adjusted Rand index with the truth 0.84 -> 0.42).

Two cues from the tracks: animals travel least along the vertical (walking, swimming, flying
mostly level), and the body's extent along the vertical is extreme (smallest for a four-legged
animal or a fish, largest for an upright one). When the axis of least travel is not
``up_axis``, by a clear margin, and the body's extent along it is the smallest or the largest
of the three, a warning names it.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence

import numpy as np

from ethoscribe.errors import InputWarning
from ethoscribe.pose import PoseTracks

TRAVEL_RATIO = 0.7
"""Warn only when the least-travelled axis moves less than this fraction of ``up_axis``'s
travel (the two example fish sessions, z up: 0.44 and 0.63 for z against the least-travelled
other axis)."""

_AXES = "xyz"
_MAX_FRAMES = 20_000


def axis_profile(sessions: Sequence[PoseTracks]) -> tuple[np.ndarray, np.ndarray]:
    """Per axis (x, y, z): the centroid's median absolute step between frames, and the
    body's median extent (largest minus smallest keypoint coordinate in a frame).

    Parameters
    ----------
    sessions : sequence of 3-D PoseTracks
        coords (frames, animals, keypoints, 3).

    Returns
    -------
    travel, extent : arrays (3,), NaN where no frame had a complete body

    Examples
    --------
    >>> from ethoscribe.io import from_arrays
    >>> c = np.zeros((4, 2, 3)); c[:, 1] = [2.0, 0.0, 1.0]; c[:, :, 0] += np.arange(4)[:, None]
    >>> travel, extent = axis_profile([from_arrays(c, keypoints=["a", "b"], fps=30)])
    >>> travel.tolist(), extent.tolist()
    ([1.0, 0.0, 0.0], [2.0, 0.0, 1.0])
    """
    steps, extents = [], []
    for s in sessions:
        X = s.coords[:: max(1, s.n_frames // _MAX_FRAMES)]  # (F, A, K, 3)
        whole = np.isfinite(X).all(axis=(2, 3))  # (F, A)
        centroid = np.where(whole[..., None], X.mean(axis=2), np.nan)  # (F, A, 3)
        step = np.abs(np.diff(centroid, axis=0)).reshape(-1, 3)
        steps.append(step[np.isfinite(step).all(axis=1)])
        ext = (X.max(axis=2) - X.min(axis=2)).reshape(-1, 3)
        extents.append(ext[np.isfinite(ext).all(axis=1)])
    step, ext = np.concatenate(steps), np.concatenate(extents)
    travel = np.median(step, axis=0) if len(step) else np.full(3, np.nan)
    extent = np.median(ext, axis=0) if len(ext) else np.full(3, np.nan)
    return travel, extent


def warn_vertical_axis(sessions: Sequence[PoseTracks], up_axis: str) -> str | None:
    """Warn (``InputWarning``) when 3-D tracks look as if another axis than ``up_axis`` were
    vertical; returns that axis (None: no sign of it, or not 3-D).

    Examples
    --------
    >>> from ethoscribe.io import from_arrays
    >>> c = np.zeros((50, 2, 3)); c[:, 1] = [3.0, 1.0, 0.2]; c[:, :, 0] += np.arange(50)[:, None]
    >>> warn_vertical_axis([from_arrays(c, keypoints=["a", "b"], fps=30)], "z") is None
    True
    """
    if not sessions or sessions[0].n_dims != 3 or up_axis not in _AXES:
        return None
    travel, extent = axis_profile(sessions)
    if not (np.isfinite(travel).all() and np.isfinite(extent).all()):
        return None
    up, low = _AXES.index(up_axis), int(np.argmin(travel))
    extreme = extent[low] in (extent.min(), extent.max())
    if low == up or not extreme or not travel[low] < TRAVEL_RATIO * travel[up]:
        return None
    axis = _AXES[low]
    u = sessions[0].units
    shown = ", ".join(f"{a} {t:.3g}" for a, t in zip(_AXES, travel, strict=True))
    body = ", ".join(f"{a} {e:.3g}" for a, e in zip(_AXES, extent, strict=True))
    msg = (
        f"3-D tracks: the vertical axis is taken to be {up_axis}, but the animals travel least "
        f"along {axis} (median step of the body centre per frame: {shown} {u}; body extent: "
        f"{body} {u}), as they do along the vertical. If {axis} points up, pass "
        f"up_axis='{axis}' (command line: --up-axis {axis}): headings, heights and speeds are "
        f"taken about the vertical, so the motifs depend on it. If {up_axis} is up, ignore this."
    )
    warnings.warn(msg, InputWarning, stacklevel=3)
    return axis
