"""Scoring detected boundaries against true ones: precision/recall/F1 with a margin, Hausdorff.

A *boundary* is the index of the first frame of a new segment, so a session of ``n`` frames split
into segments ``[0, b1), [b1, b2), ..., [bk, n)`` has boundaries ``[b1, ..., bk]`` (0 and ``n`` are
never boundaries). Change-point libraries often list ``n`` as a last "breakpoint" too;
:func:`to_breakpoints` converts to that convention.

Matching rule: a detected boundary counts as a hit if it lies within ``margin`` frames of a true
boundary (``|detected - true| <= margin``), and every true and every detected boundary is used at
most once. Among all such one-to-one matchings we take one with the most hits, then the least
total distance (Hungarian algorithm on each cluster of nearby boundaries). A greedy "first come"
rule can under-count when two true boundaries are closer than ``2 * margin``.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy.optimize import linear_sum_assignment

from ethoscribe.errors import InputError, listed


def _as_boundaries(b: Sequence[int] | np.ndarray, name: str) -> np.ndarray:
    try:
        arr = np.asarray(b, dtype=np.float64).ravel()
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name} boundaries must be numbers (frame indices); {exc}") from None
    if not np.isfinite(arr).all():
        raise InputError(
            f"{name} boundaries contain NaN or infinite values: {listed(arr.tolist(), 10)}"
        )
    return np.sort(arr)


def match_boundaries(
    true: Sequence[int] | np.ndarray, predicted: Sequence[int] | np.ndarray, margin: float
) -> tuple[np.ndarray, np.ndarray]:
    """One-to-one matching of detected to true boundaries within ``margin``.

    Parameters
    ----------
    true, predicted : array-like of int, shape (n_true,), (n_predicted,)
        Boundary frame indices (any order; sorted internally).
    margin : float
        Largest allowed distance in frames (inclusive), >= 0.

    Returns
    -------
    true_index, predicted_index : int arrays, shape (n_matched,)
        Positions into the *sorted* inputs of each matched pair.

    Examples
    --------
    >>> t, p = match_boundaries([10, 50], [12, 30, 49], margin=3)
    >>> t.tolist(), p.tolist()
    ([0, 1], [0, 2])
    """
    t = _as_boundaries(true, "true")
    p = _as_boundaries(predicted, "predicted")
    if not np.isfinite(margin) or margin < 0:
        raise InputError(f"margin must be a finite number of frames >= 0; got {margin!r}")
    if len(t) == 0 or len(p) == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    # Clusters of points (true and detected pooled) chained by gaps <= margin: no match can
    # cross a larger gap, so each cluster is solved on its own small cost matrix.
    pos = np.concatenate([t, p])
    is_true = np.concatenate([np.ones(len(t), bool), np.zeros(len(p), bool)])
    index = np.concatenate([np.arange(len(t)), np.arange(len(p))])
    order = np.argsort(pos, kind="stable")
    pos, is_true, index = pos[order], is_true[order], index[order]
    cuts = np.flatnonzero(np.diff(pos) > margin) + 1
    matched_t, matched_p = [], []
    for lo, hi in zip(np.r_[0, cuts], np.r_[cuts, len(pos)], strict=True):
        sel_t = index[lo:hi][is_true[lo:hi]]
        sel_p = index[lo:hi][~is_true[lo:hi]]
        if len(sel_t) == 0 or len(sel_p) == 0:
            continue
        dist = np.abs(t[sel_t][:, None] - p[sel_p][None, :])
        allowed = dist <= margin
        # A missed pair costs more than every allowed distance together: most hits first.
        big = (dist[allowed].sum() + 1.0) * 2.0
        rows, cols = linear_sum_assignment(np.where(allowed, dist, big))
        ok = allowed[rows, cols]
        matched_t.append(sel_t[rows[ok]])
        matched_p.append(sel_p[cols[ok]])
    if not matched_t:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    mt, mp = np.concatenate(matched_t), np.concatenate(matched_p)
    order = np.argsort(mt)
    return mt[order].astype(np.int64), mp[order].astype(np.int64)


def boundary_scores(
    true: Sequence[int] | np.ndarray, predicted: Sequence[int] | np.ndarray, margin: float
) -> dict[str, float]:
    """Precision, recall and F1 of detected boundaries within ``margin`` frames.

    Parameters
    ----------
    true, predicted : array-like of int
        Boundary frame indices (segment starts, excluding 0 and the series length).
    margin : float
        Largest distance (frames, inclusive) at which a detection counts as a hit.

    Returns
    -------
    dict with ``precision``, ``recall``, ``f1`` and the counts ``n_true``, ``n_predicted``,
    ``n_matched``. With no detections precision and recall are 0; with no true boundaries recall
    is 1 (nothing was missed); with neither, all three scores are 1.

    Examples
    --------
    >>> s = boundary_scores([100, 200], [98, 150, 203], margin=5)
    >>> round(s["precision"], 3), s["recall"], round(s["f1"], 3)
    (0.667, 1.0, 0.8)
    """
    t_idx, _ = match_boundaries(true, predicted, margin)
    n_true = len(np.ravel(true))
    n_pred = len(np.ravel(predicted))
    return scores_from_counts(n_true, n_pred, len(t_idx))


def scores_from_counts(n_true: int, n_pred: int, n_matched: int) -> dict[str, float]:
    """Precision, recall and F1 from boundary counts (pooled over sessions by summing counts).

    With no detections precision is 0; with no true boundaries recall is 1; with neither, all
    three scores are 1.
    """
    if n_true == 0 and n_pred == 0:
        precision = recall = 1.0
    else:
        precision = n_matched / n_pred if n_pred else 0.0
        recall = n_matched / n_true if n_true else (1.0 if n_pred else 0.0)
    f1 = 2 * precision * recall / (precision + recall) if precision + recall > 0 else 0.0
    return {
        "precision": float(precision),
        "recall": float(recall),
        "f1": float(f1),
        "n_true": int(n_true),
        "n_predicted": int(n_pred),
        "n_matched": int(n_matched),
    }


def pooled_boundary_scores(
    true: Sequence[np.ndarray], predicted: Sequence[np.ndarray], margin: float
) -> dict[str, float]:
    """Boundary scores over many sessions: hits and counts summed, then the ratios.

    Parameters
    ----------
    true, predicted : sequences (one per session) of boundary index arrays
    margin : float
        See :func:`boundary_scores`.

    Examples
    --------
    >>> pooled_boundary_scores([[10], [5, 20]], [[11], [20]], margin=2)["recall"]
    0.6666666666666666
    """
    if len(true) != len(predicted):
        raise InputError(
            f"need one boundary array per session on both sides; got {len(true)} true and "
            f"{len(predicted)} detected"
        )
    n_true = n_pred = n_matched = 0
    for t, p in zip(true, predicted, strict=True):
        n_true += len(np.ravel(t))
        n_pred += len(np.ravel(p))
        n_matched += len(match_boundaries(t, p, margin)[0])
    return scores_from_counts(n_true, n_pred, n_matched)


def hausdorff(true: Sequence[int] | np.ndarray, predicted: Sequence[int] | np.ndarray) -> float:
    """Hausdorff distance (frames) between two boundary sets.

    The largest distance from any boundary of one set to the nearest of the other. Two empty sets
    are at distance 0; an empty set is infinitely far from a non-empty one.

    Examples
    --------
    >>> hausdorff([100, 200], [90, 205, 400])
    200.0
    """
    a = _as_boundaries(true, "true")
    b = _as_boundaries(predicted, "predicted")
    if len(a) == 0 or len(b) == 0:
        return 0.0 if len(a) == len(b) else float("inf")
    return float(max(_nearest_distance(a, b).max(), _nearest_distance(b, a).max()))


def _nearest_distance(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Distance from each point of ``a`` to the nearest point of sorted ``b``."""
    j = np.searchsorted(b, a)
    left = np.abs(a - b[np.clip(j - 1, 0, len(b) - 1)])
    right = np.abs(b[np.clip(j, 0, len(b) - 1)] - a)
    return np.minimum(left, right)


def to_breakpoints(boundaries: Sequence[int] | np.ndarray, n_frames: int) -> list[int]:
    """Boundaries in the "last index of each regime" convention: sorted, ending with ``n_frames``.

    Examples
    --------
    >>> to_breakpoints(np.array([30, 10]), 50)
    [10, 30, 50]
    """
    return [int(v) for v in np.sort(np.asarray(boundaries, dtype=np.int64))] + [int(n_frames)]


def boundaries_from_labels(
    labels: np.ndarray, lengths: Sequence[int] | np.ndarray | None = None
) -> list[np.ndarray]:
    """Frames where the label changes, per session (a new session is not a boundary).

    Parameters
    ----------
    labels : int array, shape (n_frames,)
    lengths : frames per session (sum ``n_frames``); ``None`` means one session.

    Returns
    -------
    list of int64 arrays, one per session, of within-session boundary indices.

    Examples
    --------
    >>> [b.tolist() for b in boundaries_from_labels(np.array([0, 0, 1, 1, 2, 2]), [3, 3])]
    [[2], [1]]
    """
    labels = np.asarray(labels).ravel()
    if lengths is None:
        lengths = [len(labels)]
    lengths = np.asarray(lengths, dtype=np.int64).ravel()
    if lengths.sum() != len(labels) or (lengths <= 0).any():
        raise InputError(
            f"session lengths must be positive and sum to the number of labels ({len(labels)}); "
            f"got {listed(lengths.tolist(), 10)}"
        )
    out = []
    for part in np.split(labels, np.cumsum(lengths)[:-1]):
        out.append((np.flatnonzero(part[1:] != part[:-1]) + 1).astype(np.int64))
    return out
