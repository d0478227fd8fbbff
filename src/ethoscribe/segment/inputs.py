"""Input checks every segmenter shares: stacked sessions (X, lengths), and the fitted check.

Many sessions go in as one matrix ``X`` (valid frames of each session, stacked) plus ``lengths``
(frames per session), as hmmlearn does, so that no segment or state straddles two sessions.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ethoscribe.errors import InputError, NotFittedError, listed


def check_X_lengths(
    X: np.ndarray, lengths: Sequence[int] | np.ndarray | None = None, n_features: int | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Validate a feature matrix and its session lengths.

    Parameters
    ----------
    X : array, shape (n_frames, n_features)
        Finite feature values of all sessions stacked.
    lengths : sequence of int, optional
        Frames per session, summing to ``n_frames``; ``None`` means one session.
    n_features : int, optional
        Expected feature count (that of the fitted model).

    Returns
    -------
    X : float64 C-contiguous array, lengths : int64 array

    Examples
    --------
    >>> X, lengths = check_X_lengths(np.zeros((5, 2)), [2, 3])
    >>> lengths.tolist()
    [2, 3]
    """
    try:
        X = np.ascontiguousarray(X, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(f"features must be numeric ({exc})") from None
    if X.ndim != 2:
        raise InputError(f"features must be a 2-D array (frames, features); got shape {X.shape}")
    if X.shape[0] == 0:
        raise InputError("no frames to segment (all frames invalid or empty input)")
    if not np.isfinite(X).all():
        bad = int((~np.isfinite(X)).any(axis=1).sum())
        raise InputError(
            f"features contain NaN or infinite values in {bad} frames; pass only valid frames "
            "(FeatureSet.valid) to the segmenter"
        )
    if n_features is not None and X.shape[1] != n_features:
        raise InputError(
            f"the model was fitted on {n_features} features but got {X.shape[1]}; use the same "
            "feature pipeline as at fitting time"
        )
    if lengths is None:
        lengths = np.array([X.shape[0]], dtype=np.int64)
    else:
        lengths = np.asarray(lengths, dtype=np.int64).ravel()
        if (lengths <= 0).any() or lengths.sum() != X.shape[0]:
            raise InputError(
                f"session lengths must be positive and sum to the number of frames ({X.shape[0]}); "
                f"got {listed(lengths.tolist(), 10)} summing to {int(lengths.sum())}"
            )
    return X, lengths


def check_fitted(estimator: object, attribute: str) -> None:
    """Raise NotFittedError if ``estimator`` lacks the fitted ``attribute``."""
    if not hasattr(estimator, attribute):
        raise NotFittedError(
            f"this {type(estimator).__name__} is not fitted yet; call fit(...) first"
        )


def split_by_lengths(a: np.ndarray, lengths: np.ndarray) -> list[np.ndarray]:
    """Split the stacked array ``a`` back into per-session pieces."""
    return np.split(a, np.cumsum(lengths)[:-1])
