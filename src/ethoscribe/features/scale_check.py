"""A session whose animals look far larger or smaller than the others': a unit or camera-scale
mistake (pixel tracks read as mm, a missing ``px_per_unit``) that nothing else would catch.

The measure is the spread of the body: per frame, the root-mean-square distance of the
keypoints from their centroid; per session, its 90th percentile over frames and animals (the
stretched postures, so that a session spent mostly curled up does not look small). On the
simulated example studies the sessions' spreads stay within 0.84-1.14 of the other sessions'
median (6 % spread of body size, different time budgets); a pixel session among mm sessions at
2.5 px/mm stands out by 2.5.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence

import numpy as np

from ethoscribe.errors import InputWarning
from ethoscribe.pose import PoseTracks

SCALE_RATIO = 1.6
"""Warn when a session's spread differs from the other sessions' median by this factor."""

MIN_SESSIONS = 3
"""With two sessions nothing tells which of them is off (nor two animals of different size
from a unit mistake), so fewer are not compared."""

MAX_NAMED = 5
"""Sessions named in the warning (the most extreme first); the others are counted."""

_QUANTILE = 90
_MAX_FRAMES = 20_000


def session_spreads(sessions: Sequence[PoseTracks]) -> dict[str, float]:
    """The body's spread per session (90th percentile of the per-frame RMS keypoint distance
    from the centroid, in the tracks' units); blocks ``"name [a-b]"`` of one session pooled.

    Parameters
    ----------
    sessions : sequence of PoseTracks
        coords (frames, animals, keypoints, dims).

    Returns
    -------
    dict of str to float
        Session name -> spread (NaN when no frame has every keypoint).

    Examples
    --------
    >>> from ethoscribe.io import from_arrays
    >>> c = np.zeros((3, 2, 2)); c[:, 1, 0] = 2.0   # two keypoints 2 apart: 1 from the centre
    >>> session_spreads([from_arrays(c, keypoints=["a", "b"], fps=30, session="s")])
    {'s': 1.0}
    """
    radii: dict[str, list[np.ndarray]] = {}
    for s in sessions:
        X = s.coords[:: max(1, s.n_frames // _MAX_FRAMES)]  # (F, A, K, D)
        centred = X - X.mean(axis=2, keepdims=True)  # NaN where a keypoint is lost
        with np.errstate(invalid="ignore"):
            r = np.sqrt(np.mean(np.sum(centred**2, axis=-1), axis=-1))  # (F, A), NaN if a gap
        radii.setdefault(s.session.split(" [")[0], []).append(r[np.isfinite(r)])
    out = {}
    for name, parts in radii.items():
        r = np.concatenate(parts)
        out[name] = float(np.percentile(r, _QUANTILE)) if r.size else float("nan")
    return out


def warn_scale_outliers(sessions: Sequence[PoseTracks]) -> list[str]:
    """Warn (``InputWarning``) naming the sessions whose body spread differs from the other
    sessions' median by more than ``SCALE_RATIO``; returns their names. Studies of fewer than
    ``MIN_SESSIONS`` sessions (with a complete frame) are not checked.

    Examples
    --------
    >>> from ethoscribe.io import from_arrays
    >>> rng = np.random.default_rng(0)
    >>> c = rng.normal(size=(50, 4, 2))
    >>> same = [from_arrays(c, keypoints=list("abcd"), fps=30, session=f"s{i}") for i in range(3)]
    >>> warn_scale_outliers(same)
    []
    """
    spreads = session_spreads(sessions)
    names = [n for n, v in spreads.items() if np.isfinite(v) and v > 0]
    if len(names) < MIN_SESSIONS:
        return []
    units = sessions[0].units
    odd, shown = [], []
    for name in names:
        others = float(np.median([spreads[n] for n in names if n != name]))
        ratio = spreads[name] / others
        if ratio > SCALE_RATIO or ratio < 1 / SCALE_RATIO:
            odd.append(name)
            sizes = f"{spreads[name]:.3g} vs {others:.3g} {units}"
            shown.append((abs(np.log(ratio)), f"'{name}' ({ratio:.2g} times: {sizes})"))
    if odd:
        named = [t for _, t in sorted(shown, key=lambda p: -p[0])[:MAX_NAMED]]
        if len(odd) > MAX_NAMED:  # a study of many short clips: the most extreme only
            named.append(f"and {len(odd) - MAX_NAMED} more of {len(names)}")
        msg = (
            f"the animals of session(s) {', '.join(named)} look larger or smaller than in the "
            "other sessions (the body's spread around its centre, against the other sessions' "
            "median). Tracks in pixels read as calibrated, or another camera scale (or an "
            "animal that held one posture, curled or stretched, nearly all session)? Check the "
            "units and px_per_unit of these sessions (manifest columns): sizes and speeds "
            "enter the features, so the same behaviour would look different. If the animals "
            "truly differ in size, fit with features={'scale_by_size': True} (Python)."
        )
        warnings.warn(msg, InputWarning, stacklevel=3)
    return odd
