"""Representative subsamples of stacked sessions: whole contiguous blocks from every session.

Fits that cannot use every frame (the HMM, the state-count choice, the stability refits, the
training sample of a batch run) draw the same kind of sample, so every animal and every part of
a recording is represented while memory stays bounded.
"""

from __future__ import annotations

import itertools

import numpy as np


def representative_blocks(
    lengths: np.ndarray, max_frames: int | None, block_frames: int, rng: np.random.Generator
) -> tuple[np.ndarray, np.ndarray]:
    """Whole contiguous blocks from every session, about ``max_frames`` frames in total.

    Each session gets a share of the budget proportional to its length (largest remainder,
    at least ``min(length, 10)`` frames). The share is cut into ``m = ceil(share/block_frames)``
    equal blocks, and one block is placed at a uniformly random offset inside each of ``m``
    equal slices of the session, so early and late behaviour are both represented. Blocks
    never overlap and never straddle sessions; they become separate sequences for EM.

    Returns
    -------
    starts, stops : int64 arrays of frame indices into the concatenated matrix.

    Examples
    --------
    >>> a, b = representative_blocks(np.array([50, 50]), None, 10, np.random.default_rng(0))
    >>> a.tolist(), b.tolist()
    ([0, 50], [50, 100])
    """
    lengths = np.asarray(lengths, dtype=np.int64)
    offsets = np.cumsum(lengths) - lengths
    total = int(lengths.sum())
    if max_frames is None or total <= max_frames:
        return offsets.copy(), offsets + lengths
    exact = max_frames * lengths / total
    share = np.floor(exact).astype(np.int64)
    extra = max_frames - int(share.sum())
    share[np.argsort(share - exact, kind="stable")[:extra]] += 1
    share = np.clip(np.maximum(share, np.minimum(lengths, 10)), 1, lengths)
    starts, stops = [], []
    for off, n, q in zip(offsets, lengths, share, strict=True):
        m = int(-(-q // block_frames))
        size = int(q // m)
        edges = np.linspace(0, n, m + 1).astype(np.int64)
        for lo, hi in itertools.pairwise(edges):
            begin = lo + int(rng.integers(0, hi - lo - size + 1))
            starts.append(off + begin)
            stops.append(off + begin + size)
    return np.array(starts, dtype=np.int64), np.array(stops, dtype=np.int64)


def take_blocks(
    X: np.ndarray,
    lengths: np.ndarray,
    max_frames: int | None,
    block_frames: int,
    rng: np.random.Generator,
) -> tuple[np.ndarray, np.ndarray]:
    """The rows of :func:`representative_blocks` and their lengths (``X`` itself if all).

    Examples
    --------
    >>> X = np.arange(100.0)[:, None]
    >>> sub, n = take_blocks(X, np.array([50, 50]), 20, 10, np.random.default_rng(0))
    >>> sub.shape, n.tolist()
    ((20, 1), [10, 10])
    """
    return take_session_blocks(X, lengths, max_frames, block_frames, rng)[:2]


def take_session_blocks(
    X: np.ndarray,
    lengths: np.ndarray,
    max_frames: int | None,
    block_frames: int,
    rng: np.random.Generator,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`take_blocks`, and the session (index into ``lengths``) of every block.

    Examples
    --------
    >>> X = np.arange(100.0)[:, None]
    >>> _, n, session = take_session_blocks(X, np.array([50, 50]), 20, 10,
    ...                                     np.random.default_rng(0))
    >>> n.tolist(), session.tolist()
    ([10, 10], [0, 1])
    """
    starts, stops = representative_blocks(lengths, max_frames, block_frames, rng)
    sub = (stops - starts).astype(np.int64)
    session = np.searchsorted(np.cumsum(lengths), starts, side="right").astype(np.int64)
    if sub.sum() == len(X):
        return X, sub, session
    X_fit = np.concatenate([X[a:b] for a, b in zip(starts, stops, strict=True)])
    return X_fit, sub, session
