"""Label post-processing: minimum bout duration and a deterministic state order.

Both work per run of equal labels (a bout), never per frame, and never across sessions.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ethoscribe.errors import InputError


def order_states_by_occupancy(occupancy: np.ndarray, means: np.ndarray | None = None) -> np.ndarray:
    """Permutation putting states in decreasing occupancy, ties broken by lexicographic means.

    Parameters
    ----------
    occupancy : array (K,)
        Time spent in each state (frames or expected frames).
    means : array (K, D), optional
        Tie-breaker: smaller means first, column by column.

    Returns
    -------
    order : int array (K,); new state ``i`` is old state ``order[i]``.

    Examples
    --------
    >>> order_states_by_occupancy(np.array([5., 9., 5.]), np.array([[1.], [0.], [0.]])).tolist()
    [1, 2, 0]
    """
    occupancy = np.asarray(occupancy, dtype=np.float64)
    keys = [] if means is None else [np.asarray(means)[:, d] for d in range(np.shape(means)[1])]
    return np.lexsort([*keys[::-1], -occupancy])


def relabel(labels: np.ndarray, order: np.ndarray) -> np.ndarray:
    """Apply ``order`` from :func:`order_states_by_occupancy` to labels (-1 stays -1)."""
    labels = np.asarray(labels)
    inverse = np.empty(len(order), dtype=np.int64)
    inverse[np.asarray(order)] = np.arange(len(order))
    return np.where(labels >= 0, inverse[np.maximum(labels, 0)], -1)


def runs(labels: np.ndarray, lengths: np.ndarray | None = None) -> tuple[np.ndarray, ...]:
    """Runs of equal labels inside sessions: ``(start, stop, label, session)`` arrays.

    Examples
    --------
    >>> [r.tolist() for r in runs(np.array([0, 0, 1, 1]), np.array([3, 1]))]
    [[0, 2, 3], [2, 3, 4], [0, 1, 1], [0, 0, 1]]
    """
    labels = np.asarray(labels)
    n = len(labels)
    if n == 0:
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty, empty, empty
    cut = np.zeros(n, dtype=bool)
    cut[0] = True
    cut[1:] = labels[1:] != labels[:-1]
    if lengths is not None:
        cut[np.cumsum(lengths)[:-1]] = True
    start = np.flatnonzero(cut)
    stop = np.r_[start[1:], n]
    session = np.zeros(len(start), dtype=np.int64)
    if lengths is not None:
        session = np.searchsorted(np.cumsum(lengths), start, side="right")
    return start, stop, labels[start].astype(np.int64), session


def enforce_min_bout(
    labels: np.ndarray,
    min_frames: int,
    lengths: Sequence[int] | np.ndarray | None = None,
    probabilities: np.ndarray | None = None,
) -> np.ndarray:
    """Merge bouts shorter than ``min_frames`` into a neighbouring bout of the same session.

    A short bout takes the label of its left or right neighbour: the one whose state has the
    higher mean posterior over the short bout's frames when ``probabilities`` is given, else the
    longer neighbour (left on ties). Label -1 (invalid frames) is never changed or spread.
    Merges run in rounds; in each round a short bout is merged only if no adjacent short bout
    is shorter (ties: the earlier one goes first), so simultaneous merges never conflict and the
    result does not depend on processing order. A session that is one short bout stays as is.

    Parameters
    ----------
    labels : int array (n_frames,)
    min_frames : int
        Shortest allowed bout (frames); <= 1 returns a copy.
    lengths : int array (n_sessions,), optional
        Session lengths; bouts never merge across sessions.
    probabilities : array (n_frames, K), optional
        State posteriors (e.g. ``GaussianHMM.predict_proba``).

    Returns
    -------
    int64 array (n_frames,)

    Examples
    --------
    >>> enforce_min_bout(np.array([0, 0, 0, 1, 0, 0, 2, 2, 2, 2]), 2).tolist()
    [0, 0, 0, 0, 0, 0, 2, 2, 2, 2]
    """
    out = np.asarray(labels).astype(np.int64).copy()
    if out.ndim != 1:
        raise InputError(f"labels must be 1-D (frames,); got shape {out.shape}")
    if lengths is not None:
        lengths = np.asarray(lengths, dtype=np.int64)
        if (lengths <= 0).any() or lengths.sum() != len(out):
            msg = f"lengths must be positive and sum to {len(out)} labels; got sum {lengths.sum()}"
            raise InputError(msg)
    if probabilities is not None:
        probabilities = np.asarray(probabilities, dtype=np.float64)
        if probabilities.shape[0] != len(out) or out.max(initial=-1) >= probabilities.shape[1]:
            msg = (
                f"probabilities must be (n_frames={len(out)}, n_states > max label); "
                f"got {probabilities.shape}"
            )
            raise InputError(msg)
        cum = np.vstack([np.zeros(probabilities.shape[1]), np.cumsum(probabilities, axis=0)])
    if min_frames <= 1 or len(out) == 0:
        return out
    while True:
        start, stop, lab, sess = runs(out, lengths)
        size = stop - start
        n = len(start)
        idx = np.arange(n)
        left_ok = np.r_[False, (sess[1:] == sess[:-1]) & (lab[:-1] >= 0)]
        right_ok = np.r_[(sess[:-1] == sess[1:]) & (lab[1:] >= 0), False]
        short = (size < min_frames) & (lab >= 0) & (left_ok | right_ok)
        if not short.any():
            return out
        # priority (size, index): merge only local minima among adjacent short runs
        pri = size * (n + 1) + idx
        big = np.iinfo(np.int64).max
        left_pri = np.r_[big, np.where(short[:-1], pri[:-1], big)]
        right_pri = np.r_[np.where(short[1:], pri[1:], big), big]
        go = short & (pri < left_pri) & (pri < right_pri)
        i = np.flatnonzero(go)
        li, ri = np.maximum(i - 1, 0), np.minimum(i + 1, n - 1)
        if probabilities is not None:
            score_l = (cum[stop[i], lab[li]] - cum[start[i], lab[li]]) / size[i]
            score_r = (cum[stop[i], lab[ri]] - cum[start[i], lab[ri]]) / size[i]
        else:
            score_l, score_r = size[li].astype(float), size[ri].astype(float)
        score_l = np.where(left_ok[i], score_l, -np.inf)
        score_r = np.where(right_ok[i], score_r, -np.inf)
        take_right = score_r > score_l
        tie = score_r == score_l
        if probabilities is not None:  # equal posteriors: fall back to the longer neighbour
            take_right |= tie & (size[ri] > size[li]) & right_ok[i]
        target = np.where(take_right, lab[ri], lab[li])
        fill = np.repeat(target, size[i])
        frames = np.repeat(start[i], size[i]) + (np.arange(size[i].sum()) - np.repeat(
            np.cumsum(size[i]) - size[i], size[i]))  # fmt: skip
        out[frames] = fill
