"""Joining a tracker's track pieces into animals by continuity.

Trackers that lose an animal often start a new identity when they find it again (``track0``,
``track1``, ... each covering part of a session). ``join_track_pieces`` chains pieces that never
overlap in time: at each frame where pieces start, the pieces are matched to the chains that
have ended by then with the Hungarian method (``scipy.optimize.linear_sum_assignment``) on the
distance from a chain's last centroid to a piece's first centroid. Every join is reported; a
piece that fits no chain (one still running, or beyond ``max_gap_s``/``max_distance``) starts an
animal of its own, so nothing is dropped.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from scipy.optimize import linear_sum_assignment

from ethoscribe.errors import InputError
from ethoscribe.pose import PoseTracks


def _pieces(tracks: PoseTracks) -> list[dict[str, Any]]:
    seen = np.isfinite(tracks.coords[..., 0]).any(axis=2)  # (frames, animals)
    out = []
    for a, name in enumerate(tracks.animals):
        frames = np.flatnonzero(seen[:, a])
        if not frames.size:
            continue
        first, last = int(frames[0]), int(frames[-1])
        out.append(
            {
                "index": a,
                "name": str(name),
                "start": first,
                "end": last,
                "first_xy": np.nanmean(tracks.coords[first, a], axis=0),
                "last_xy": np.nanmean(tracks.coords[last, a], axis=0),
            }
        )
    return sorted(out, key=lambda p: (p["start"], p["index"]))


def join_track_pieces(
    tracks: PoseTracks, max_gap_s: float | None = None, max_distance: float | None = None
) -> tuple[PoseTracks, list[dict[str, Any]]]:
    """Chain track pieces that never overlap in time into animals; report each join.

    Parameters
    ----------
    tracks : PoseTracks
        One "animal" per tracker identity; each may cover only part of the session.
    max_gap_s : float, optional
        Join only across gaps of at most this many seconds (default: any gap).
    max_distance : float, optional
        Join only when the piece starts within this distance (tracks' units) of where the chain
        ended (default: any distance; the nearest wins).

    Returns
    -------
    tracks : PoseTracks
        coords (frames, chains, keypoints, dims); each chain is named after its first piece.
        ``meta["track_joins"]`` holds the joins.
    joins : list of dict
        ``piece, joined_to, gap_frames, distance`` for every join, in time order.

    Examples
    --------
    >>> c = np.full((6, 2, 1, 2), np.nan)
    >>> c[:3, 0], c[4:, 1] = 0.0, 1.0
    >>> joined, joins = join_track_pieces(PoseTracks(c, keypoints=["nose"], fps=1,
    ...                                              animals=["track0", "track1"]))
    >>> joined.animals, joins[0]["piece"], joins[0]["gap_frames"]
    (('track0',), 'track1', 1)
    """
    if not isinstance(tracks, PoseTracks):
        raise TypeError(f"tracks must be a PoseTracks; got {type(tracks).__name__}")
    for name, value in (("max_gap_s", max_gap_s), ("max_distance", max_distance)):
        if value is not None and not (np.isfinite(value) and value >= 0):
            raise InputError(f"{name} must be a number >= 0 or None; got {value!r}")
    max_gap = np.inf if max_gap_s is None else max_gap_s * tracks.fps
    limit = np.inf if max_distance is None else float(max_distance)
    chains: list[dict[str, Any]] = []
    joins: list[dict[str, Any]] = []
    pieces = _pieces(tracks)
    starts = sorted({p["start"] for p in pieces})
    for start in starts:
        group = [p for p in pieces if p["start"] == start]
        free = [c for c in chains if c["end"] < start]
        cost = np.full((len(free), len(group)), np.inf)
        for i, c in enumerate(free):
            for j, p in enumerate(group):
                d = float(np.linalg.norm(p["first_xy"] - c["last_xy"]))
                if start - c["end"] - 1 <= max_gap and d <= limit:
                    cost[i, j] = d
        taken: set[int] = set()
        if free and np.isfinite(cost).any():
            rows, cols = linear_sum_assignment(np.where(np.isfinite(cost), cost, 1e300))
            for i, j in zip(rows, cols, strict=True):
                if not np.isfinite(cost[i, j]):
                    continue
                c, p = free[i], group[j]
                joins.append({"piece": p["name"], "joined_to": c["name"],
                              "gap_frames": int(start - c["end"] - 1),
                              "distance": float(cost[i, j])})  # fmt: skip
                c["pieces"].append(p)
                c["end"], c["last_xy"] = p["end"], p["last_xy"]
                taken.add(j)
        for j, p in enumerate(group):
            if j not in taken:
                chains.append({"name": p["name"], "pieces": [p], "end": p["end"],
                               "last_xy": p["last_xy"]})  # fmt: skip
    if not chains:
        return tracks, []
    shape = (tracks.n_frames, len(chains), tracks.n_keypoints, tracks.n_dims)
    coords = np.full(shape, np.nan)
    conf = np.full(shape[:3], np.nan)
    for k, chain in enumerate(chains):
        for p in chain["pieces"]:
            span = slice(p["start"], p["end"] + 1)
            coords[span, k] = tracks.coords[span, p["index"]]
            conf[span, k] = tracks.confidence[span, p["index"]]
    joined = tracks.replace(
        coords=coords,
        confidence=conf,
        animals=[c["name"] for c in chains],
        meta={"track_joins": joins},
    )
    return joined, joins
