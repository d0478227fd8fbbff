"""What every segmenter shares: input checks over concatenated sessions, and the fitted check.

Many sessions go in as one matrix ``X`` (valid frames of each session, stacked) plus ``lengths``
(frames per session), as hmmlearn does, so that no segment or state straddles two sessions.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from ethoscribe.errors import InputError, NotFittedError


# --- plain values from saved files (JSON numbers) ----------------------------------------
def is_int(v: object) -> bool:
    """An integer, not a bool (JSON ``true`` is not a count)."""
    return isinstance(v, int | np.integer) and not isinstance(v, bool | np.bool_)


def int_between(v: object, low: int, high: int) -> bool:
    """An integer (see :func:`is_int`) with ``low <= v <= high``."""
    return is_int(v) and low <= v <= high  # type: ignore[operator]


def is_real(v: object) -> bool:
    """A finite real number, not a bool; a JSON integer too large for a float is not one.

    Examples
    --------
    >>> is_real(1.5), is_real(True), is_real(float("nan")), is_real(10**400)
    (True, False, False, False)
    """
    if not isinstance(v, int | float | np.integer | np.floating) or isinstance(v, bool | np.bool_):
        return False
    try:
        return bool(np.isfinite(float(v)))
    except OverflowError:
        return False


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
                f"got {lengths.tolist()[:10]} summing to {int(lengths.sum())}"
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
