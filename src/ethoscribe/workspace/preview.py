"""A look at a study before discovering it: what would be read, and what would be chosen.

:func:`preview_study` plans the sessions as ``discover`` would (files or a manifest, frame rate,
calibration), reads and cleans the first few, and fits the feature pipeline's automatic choices
on them -- the body axis (from the direction of travel) and the origin -- so that a person can
see and correct them before a long run. Nothing is written.
"""

from __future__ import annotations

import warnings
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from ethoscribe.clean import clean
from ethoscribe.features import FeaturePipeline
from ethoscribe.features.vertical_check import resolve_up_axis
from ethoscribe.features.view_check import image_rows_down, lift_side_view, resolve_view
from ethoscribe.pose import match_keypoint_order
from ethoscribe.workspace.reading import discovery_cleaning, plan_sessions, read_planned

# Beyond the first sessions, more are read until this much tracking (or this many sessions):
# a study of short clips shows its direction of travel and its vertical in many of them
PREVIEW_SECONDS = 120.0
MAX_PREVIEW_SESSIONS = 50


def preview_study(
    inputs: Sequence[str | Path] | str | Path | None,
    manifest: str | Path | pd.DataFrame | None = None,
    fps: float | None = None,
    reader_options: Mapping[str, Any] | None = None,
    n_read: int = 2,
    up_axis: str = "auto",
    view: str = "auto",
) -> dict[str, Any]:
    """Sessions, keypoints, frame rate, units and the automatic body axis of a study.

    Returns a dict: ``sessions`` (names), ``keypoints``, ``animals``, ``fps``, ``units``,
    ``n_dims``, ``axis`` (tail side, head side), ``origin``, ``axis_text`` (how the axis was
    chosen), ``up_axis`` and ``up_axis_text`` (the vertical axis of 3-D tracks and how it was
    chosen: "auto" reads it from the tracks), ``up_axis_auto`` (the axis "auto" would use),
    ``up_direction_auto`` (which way it points as read from the floor: "up", or "down" for
    camera coordinates; "up" when there is no floor to read; None for 2-D tracks),
    ``view``, ``view_text`` and ``view_auto`` (2-D tracks: filmed from above or from the
    side, as for the vertical axis; None and "" for 3-D tracks),
    and ``warnings`` (e.g. an unreliable automatic axis, or 3-D tracks that look as if another
    axis than a given ``up_axis`` points up), from the first ``n_read`` sessions and as many
    more as make ``PREVIEW_SECONDS`` of tracks (at most ``MAX_PREVIEW_SESSIONS``; discover
    reads the vertical from all of them).

    Examples
    --------
    >>> info = preview_study("example_sessions", "example_sessions/manifest.csv")  # doctest: +SKIP
    >>> info["axis"]  # doctest: +SKIP
    ('tail_base', 'nose')
    """
    plan = plan_sessions(inputs, manifest, fps, reader_options=reader_options)
    tracks, seconds = [], 0.0
    for entry in plan[:MAX_PREVIEW_SESSIONS]:
        if len(tracks) >= max(1, n_read) and seconds >= PREVIEW_SECONDS:
            break
        tracks.append(read_planned(entry))
        seconds += tracks[-1].n_frames / tracks[-1].fps
    cleaning = discovery_cleaning(None, None)
    cleaned = [clean(t, cleaning)[0] for t in tracks]
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        cleaned = match_keypoint_order(cleaned)  # as discover reads them (one keypoint set)
        seen, vertical, view_text = resolve_view(cleaned, view)
        seen_auto = seen if view == "auto" else resolve_view(cleaned, "auto")[0]
        if seen == "side":  # as the model fits them: 3-D without depth, z up
            flip = image_rows_down(cleaned, vertical)
            cleaned = [lift_side_view(t, vertical, flip) for t in cleaned]
        up, up_text = resolve_up_axis(cleaned, "z" if seen == "side" else up_axis)
        read = up if up_axis == "auto" else resolve_up_axis(cleaned, "auto")[0]
        pipe = FeaturePipeline(up_axis=up).fit(cleaned)
    two_d = tracks[0].n_dims == 2
    first = cleaned[0]
    return {
        "sessions": [entry["session"] for entry in plan],
        "keypoints": list(first.keypoints),
        "animals": list(first.animals),
        "fps": float(first.fps),
        "units": str(first.units),
        "n_dims": int(tracks[0].n_dims),
        "axis": tuple(pipe.axis_),
        "origin": pipe.origin_ or "centroid",
        "axis_text": str(pipe.axis_report_),
        "up_axis": up,
        "up_axis_text": "" if two_d else up_text,
        "up_axis_auto": read,
        "up_direction_auto": None if two_d else ("down" if pipe.up_sign_ < 0 else "up"),
        "view": seen if two_d else None,
        "view_text": view_text,
        "view_auto": seen_auto if two_d else None,
        "warnings": [str(w.message) for w in caught if issubclass(w.category, UserWarning)],
    }
