"""Tracks from arrays already in memory (for example from a notebook or another program)."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from ethoscribe.errors import InputError
from ethoscribe.io._tables import check_fps
from ethoscribe.pose import PoseTracks


def _as_float(values: Any, what: str, session: str) -> np.ndarray:
    try:
        return np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(f"session '{session}': {what} must be numbers ({exc})") from None


def from_arrays(
    coords: Any,
    confidence: Any = None,
    keypoints: Sequence[str] | None = None,
    fps: float | None = None,
    animals: Sequence[str] | None = None,
    units: str = "px",
    session: str = "session",
    meta: Mapping[str, Any] | None = None,
) -> PoseTracks:
    """Wrap coordinate arrays as ``PoseTracks``.

    Parameters
    ----------
    coords : array-like, shape (frames, keypoints, dims) or (frames, animals, keypoints, dims)
        Positions with dims 2 or 3; NaN marks a missing point. One animal if 3-D.
    confidence : array-like, shape (frames, keypoints) or (frames, animals, keypoints), optional
        Values in [0, 1]; defaults to 1 where the point is present.
    keypoints : sequence of str, optional
        Keypoint names; default ``keypoint0, keypoint1, ...``.
    fps : float
        Frames per second (required).
    animals, units, session, meta
        As in ``PoseTracks``.

    Returns
    -------
    PoseTracks

    Examples
    --------
    >>> t = from_arrays(np.zeros((100, 3, 2)), keypoints=["nose", "neck", "tail"], fps=30)
    >>> t.coords.shape
    (100, 1, 3, 2)
    """
    where = f"session '{session}'"
    fps = check_fps(fps, where)
    if fps is None:
        raise InputError(f"{where}: fps is missing; pass fps=... (frames per second)")
    coords = _as_float(coords, "coordinates", session)
    if coords.ndim not in (3, 4):
        raise InputError(
            f"{where}: coords must have shape (frames, keypoints, dims) or (frames, animals, "
            f"keypoints, dims); got shape {coords.shape}"
        )
    one_animal = coords.ndim == 3
    if one_animal:
        coords = coords[:, None]
    if confidence is not None:
        confidence = _as_float(confidence, "confidence", session)
        if one_animal and confidence.ndim == 2:
            confidence = confidence[:, None]
        if confidence.shape != coords.shape[:3]:
            expected = (coords.shape[0], coords.shape[2]) if one_animal else coords.shape[:3]
            raise InputError(
                f"{where}: confidence must have shape {expected} to match coords; "
                f"got {confidence.shape}"
            )
    if keypoints is None:
        keypoints = [f"keypoint{i}" for i in range(coords.shape[2])]
    return PoseTracks(
        coords=coords,
        confidence=confidence,
        keypoints=keypoints,
        animals=animals,
        fps=fps,
        units=units,
        session=session,
        meta={"source_format": "arrays", **(meta or {})},
    )
