"""Egocentric postures for looking at motifs: per-frame body-frame keypoints, mean posture per
state, example bouts and a default skeleton.

The body frame is the one the fitted :class:`~ethoscribe.features.FeaturePipeline` defines: its
origin keypoint (``origin_``; None = the centroid of all keypoints) at 0 and its body axis
(``axis_``, tail side -> head side) along +x, turned about the vertical only
(:func:`ethoscribe.geometry.rotate_to_axis`). So the drawing of a motif's mean posture is in the
same frame as the features the segmenter saw, in the tracks' units.

Everything here takes plain arrays and tables; the workspace side (caching per session) lives in
:mod:`ethoscribe.workspace.postures`.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd
from scipy.sparse.csgraph import minimum_spanning_tree

from ethoscribe.errors import InputError
from ethoscribe.features import FeaturePipeline
from ethoscribe.geometry import horizontal_axes, rotate_to_axis
from ethoscribe.pose import PoseTracks

__all__ = [
    "egocentric_postures",
    "evenly_spaced_frames",
    "example_bouts",
    "mean_postures",
    "minimum_spanning_skeleton",
    "posture_sums",
]


def egocentric_postures(tracks: PoseTracks, pipeline: FeaturePipeline) -> np.ndarray:
    """Keypoints of every frame in the body frame of a fitted feature pipeline.

    Parameters
    ----------
    tracks : PoseTracks
        Cleaned tracks (as the model cleans them), same keypoints as the pipeline was fitted on.
    pipeline : FeaturePipeline
        Fitted; its ``origin_``, ``axis_`` and ``up_axis`` define the body frame.

    Returns
    -------
    array, shape (frames, animals, keypoints, dims)
        Forward, sideways and (3-D) height, in that order whichever axis of the tracks is
        vertical; where the tracks' vertical points down (the pipeline's ``up_sign_`` -1) the
        body is turned half round about its forward axis, so it is drawn upright and seen from
        above. NaN where a keypoint, the origin or an axis point is missing.

    Examples
    --------
    >>> from types import SimpleNamespace
    >>> t = PoseTracks(np.array([[[[0.0, 0], [0, 2]]]] * 2), keypoints=["tail", "nose"], fps=1)
    >>> pipe = SimpleNamespace(origin_="tail", axis_=("tail", "nose"), up_axis="z",
    ...                        keypoints_=("tail", "nose"))
    >>> np.round(egocentric_postures(t, pipe)[0, 0], 12) + 0.0
    array([[0., 0.],
           [2., 0.]])
    """
    fitted = tuple(getattr(pipeline, "keypoints_", ()) or ())
    if not fitted:
        raise InputError("egocentric_postures needs a fitted feature pipeline (fit it first)")
    if tuple(tracks.keypoints) != fitted:
        msg = (
            f"session '{tracks.session}' has keypoints {list(tracks.keypoints)} but the pipeline "
            f"was fitted on {list(fitted)}; read the session with the same keypoints"
        )
        raise InputError(msg)
    X = tracks.coords
    i, j = fitted.index(pipeline.axis_[0]), fitted.index(pipeline.axis_[1])
    if pipeline.origin_ is None:
        origin = X.sum(axis=2) / X.shape[2]  # centroid: NaN if a keypoint is missing, as features
    else:
        origin = X[:, :, fitted.index(pipeline.origin_)]
    ego, _ = rotate_to_axis(X, origin, X[:, :, j] - X[:, :, i], pipeline.up_axis)
    if X.shape[-1] != 3:
        return ego
    h = horizontal_axes(3, pipeline.up_axis)
    ego = ego[..., [*h, "xyz".index(pipeline.up_axis)]]  # forward, sideways, up
    if pipeline.up_sign_ < 0:
        ego[..., 1:] *= -1.0
    return ego


def posture_sums(
    postures: np.ndarray, codes: np.ndarray, n_codes: int
) -> tuple[np.ndarray, np.ndarray]:
    """Per-code sums and counts of finite keypoint positions (for means that can be combined).

    Parameters
    ----------
    postures : array, shape (N, K, D)
        One posture per frame.
    codes : int array, shape (N,)
        Group of each frame (e.g. its state); negative codes are ignored.
    n_codes : int
        Number of groups.

    Returns
    -------
    sums : array, shape (n_codes, K, D)
    counts : int array, shape (n_codes, K)
        Frames with keypoint k finite, per group. Sums of several groups divided by their summed
        counts give the mean over their union.

    Examples
    --------
    >>> p = np.array([[[0.0, 0.0]], [[2.0, 4.0]], [[5.0, 5.0]]])
    >>> s, c = posture_sums(p, np.array([0, 0, 1]), 2)
    >>> (s[0] / c[0][:, None]).tolist(), c.ravel().tolist()
    ([[1.0, 2.0]], [2, 1])
    """
    P = np.asarray(postures, dtype=np.float64)
    codes = np.asarray(codes, dtype=np.int64)
    if P.ndim != 3 or codes.shape != (len(P),):
        msg = f"postures must be (N, K, D) and codes (N,); got {P.shape} and {codes.shape}"
        raise InputError(msg)
    _, k, d = P.shape
    keep = (codes >= 0) & (codes < n_codes)
    P, codes = P[keep], codes[keep]
    finite = np.isfinite(P).all(axis=-1)
    counts = np.zeros((n_codes, k), dtype=np.int64)
    sums = np.zeros((n_codes, k, d))
    for kp in range(k):  # loops over keypoints and dims only; bincount does the frames
        ok = finite[:, kp]
        counts[:, kp] = np.bincount(codes[ok], minlength=n_codes)
        for dim in range(d):
            sums[:, kp, dim] = np.bincount(codes[ok], weights=P[ok, kp, dim], minlength=n_codes)
    return sums, counts


def mean_postures(sums: np.ndarray, counts: np.ndarray, groups: Sequence[Sequence[int]]):
    """Mean posture of each group of codes from :func:`posture_sums` output.

    Parameters
    ----------
    sums : array, shape (n_codes, K, D)
    counts : array, shape (n_codes, K)
    groups : sequence of sequences of int
        Codes pooled into each mean (e.g. the states that carry one motif name).

    Returns
    -------
    array, shape (len(groups), K, D)
        NaN for a keypoint never seen in a group.

    Examples
    --------
    >>> s, c = posture_sums(np.array([[[0.0]], [[2.0]], [[5.0]]]), np.array([0, 1, 2]), 3)
    >>> mean_postures(s, c, [[0, 1], [2]]).ravel().tolist()
    [1.0, 5.0]
    """
    out = np.full((len(groups), *np.shape(sums)[1:]), np.nan)
    for g, codes in enumerate(groups):
        codes = list(codes)
        n = counts[codes].sum(axis=0)
        with np.errstate(invalid="ignore", divide="ignore"):
            out[g] = np.where(n[:, None] > 0, sums[codes].sum(axis=0) / n[:, None], np.nan)
    return out


def example_bouts(
    bouts: pd.DataFrame, n_examples: int = 4, min_frames: int = 2, motifs: Sequence[str] = ()
) -> pd.DataFrame:
    """A few example bouts of each motif, from as many different sessions as possible.

    The choice is deterministic: within a motif, bouts not cut by a gap or a recording edge come
    first, then longer ones (ties: session, animal, start frame). Sessions take turns: every
    session's best bout before any session's second best, so examples span the study.

    Parameters
    ----------
    bouts : DataFrame
        A bout table (``ethoscribe.ethogram.bout_table``).
    n_examples : int
        Bouts per motif (fewer if the motif has fewer).
    min_frames : int
        Shorter bouts are never examples (a frame or two shows no movement).
    motifs : sequence of str
        Only these motifs (default: all).

    Returns
    -------
    DataFrame
        The chosen bout rows with an ``example`` column (0 = first choice), ordered by motif
        and example.

    Examples
    --------
    >>> b = pd.DataFrame({"session": ["s1", "s1", "s2"], "animal": "a", "motif": "m",
    ...     "start_frame": [0, 50, 9], "n_frames": [40, 30, 10], "cut_before": False,
    ...     "cut_after": [True, False, False]})
    >>> example_bouts(b, 2)[["session", "start_frame"]].values.tolist()
    [['s1', 50], ['s2', 9]]
    """
    need = ("session", "animal", "motif", "start_frame", "n_frames", "cut_before", "cut_after")
    missing = [c for c in need if c not in bouts.columns]
    if missing:
        raise InputError(f"the bout table lacks columns {missing}; pass bout_table() output")
    keep = bouts["n_frames"].to_numpy() >= max(int(min_frames), 1)
    if len(motifs):
        keep &= bouts["motif"].isin(list(motifs)).to_numpy()
    table = bouts[keep]
    motif = pd.factorize(table["motif"], sort=True)[0]
    session = pd.factorize(table["session"], sort=True)[0]
    animal = pd.factorize(table["animal"], sort=True)[0]
    cut = (table["cut_before"].to_numpy(bool) | table["cut_after"].to_numpy(bool)).astype(int)
    n = table["n_frames"].to_numpy(np.int64)
    start = table["start_frame"].to_numpy(np.int64)
    best = np.lexsort((start, animal, session, -n, cut, motif))  # last key sorts first
    turn = _rank_within(motif[best] * (session.max(initial=0) + 1) + session[best])
    chosen = best[np.lexsort((np.arange(len(best)), turn, motif[best]))]
    example = _rank_within(motif[chosen])
    out = table.iloc[chosen[example < int(n_examples)]].reset_index(drop=True)
    return out.assign(example=example[example < int(n_examples)])


def _rank_within(keys: np.ndarray) -> np.ndarray:
    """0, 1, 2 ... counting each key's occurrences in order (``groupby().cumcount()``)."""
    order = np.argsort(keys, kind="stable")
    sorted_keys = keys[order]
    first = np.r_[0, np.flatnonzero(sorted_keys[1:] != sorted_keys[:-1]) + 1]
    runs = np.diff(np.r_[first, len(keys)])
    rank = np.empty(len(keys), dtype=np.int64)
    rank[order] = np.arange(len(keys)) - np.repeat(first, runs)
    return rank


def evenly_spaced_frames(start: int, stop: int, n_shown: int) -> np.ndarray:
    """At most ``n_shown`` frame numbers spread evenly over ``start .. stop - 1`` (ends included).

    Examples
    --------
    >>> evenly_spaced_frames(10, 20, 4).tolist()
    [10, 13, 16, 19]
    """
    if stop <= start:
        raise InputError(f"a bout needs stop > start; got frames {start} .. {stop}")
    n = min(int(n_shown), stop - start)
    return np.unique(np.round(np.linspace(start, stop - 1, max(n, 1))).astype(np.int64))


def minimum_spanning_skeleton(
    postures: np.ndarray, keypoints: Sequence[str]
) -> tuple[tuple[str, str], ...]:
    """Skeleton edges joining every keypoint to its nearest neighbours: the minimum spanning tree
    of the mean keypoint-to-keypoint distances.

    A sensible default to draw a body whose plan is unknown: the tree links each keypoint to the
    body through the shortest bones, with no cycles.

    Parameters
    ----------
    postures : array, shape (N, K, D) or (K, D)
        Postures (egocentric or not: distances do not depend on the frame); NaN ignored.
    keypoints : sequence of str
        The K keypoint names.

    Returns
    -------
    tuple of (str, str)
        K - 1 edges (fewer if some keypoint is never seen), each ordered as in ``keypoints``.

    Examples
    --------
    >>> line = np.array([[0.0, 0], [3, 0], [1, 0]])
    >>> minimum_spanning_skeleton(line, ["a", "b", "c"])
    (('a', 'c'), ('b', 'c'))
    """
    P = np.asarray(postures, dtype=np.float64)
    P = P[None] if P.ndim == 2 else P
    if P.ndim != 3 or P.shape[1] != len(keypoints):
        msg = f"postures must be (N, K, D) with K = {len(keypoints)} keypoints; got {P.shape}"
        raise InputError(msg)
    dist = np.linalg.norm(P[:, :, None] - P[:, None], axis=-1)
    ok = np.isfinite(dist)
    with np.errstate(invalid="ignore"):
        mean = np.where(ok, dist, 0.0).sum(0) / ok.sum(0)
    # csgraph treats 0 as "no edge": nudge coincident keypoints to a tiny positive length.
    graph = np.where(np.isfinite(mean), np.maximum(mean, 1e-12), 0.0)
    np.fill_diagonal(graph, 0.0)
    tree = minimum_spanning_tree(graph).tocoo()
    pairs = sorted((min(a, b), max(a, b)) for a, b in zip(tree.row, tree.col, strict=True))
    return tuple((str(keypoints[a]), str(keypoints[b])) for a, b in pairs)
