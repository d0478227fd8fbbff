"""One way of scoring every source: agreement of per-frame labels with the truth.

Inputs are per-unit label arrays (a unit is one animal in one session), the truth coded as
integers with -1 for frames the truth leaves unlabelled, the prediction with -1 for frames
the pipeline left unscored.

- ``ari``, ``nmi``: adjusted Rand index and normalised mutual information (arithmetic mean
  normalisation) over frames labelled in both (scikit-learn, through
  ``ethoscribe.segment.agreement``).
- ``accuracy``: Hungarian-matched accuracy: found states are paired one-to-one with true
  behaviours by maximum overlap (``scipy.optimize.linear_sum_assignment``), and the matched
  overlap is divided by the frames labelled in both. Extra states (over-splitting) count as
  wrong frames.
- ``boundary_f1`` (with precision and recall) within ``margin_s`` (0.2 s): frames the truth
  leaves unlabelled are removed from both sequences first (a change across such a gap counts
  at the join); the margin in frames follows each unit's frame rate (at least one frame);
  unscored predicted frames take the last scored state before them, so a run
  of unscored frames makes no boundary by itself. Boundaries are matched one-to-one within
  the margin, pooled over units (micro average), with ``ethoscribe.segment.agreement``.
- ``boundary_lag_s``: median over true boundaries (pooled) of the signed time from each to the
  nearest found boundary, among those with one within ``LAG_WINDOW_S`` (1 s); positive when
  found boundaries come late. A diagnostic beside the F1 (NaN without such pairs).
- ``unscored_pct``: share of truth-labelled frames that the pipeline left unscored.
- ``states_found``: distinct states among the scored frames; ``states_true``: distinct
  behaviours in the truth.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from ethoscribe.segment.agreement import (
    adjusted_rand,
    boundary_f1,
    label_boundaries,
    match_states,
    normalized_mutual_info,
)
from ethoscribe.segment.boundaries import scores_from_counts


def matched_accuracy(truth: np.ndarray, found: np.ndarray) -> float:
    """Accuracy after pairing found states with true ones by maximum overlap (Hungarian).

    Frames with -1 in either are ignored.

    Examples
    --------
    >>> matched_accuracy(np.array([0, 0, 1, 1, 1]), np.array([5, 5, 7, 7, 8]))
    0.8
    """
    m = match_states(truth, found)
    n = int(m.contingency.sum())
    return float(m.table["overlap"].sum() / n) if n else float("nan")


def _forward_fill(labels: np.ndarray) -> np.ndarray:
    """-1 runs take the last state >= 0 before them (the first state after, at the start)."""
    labels = np.asarray(labels)
    ok = labels >= 0
    if not ok.any():
        return labels.copy()
    idx = np.where(ok, np.arange(len(labels)), 0)
    np.maximum.accumulate(idx, out=idx)
    out = labels[idx]
    first = int(np.argmax(ok))
    out[:first] = labels[first]
    return out


# Nearest found boundaries farther than this from a true one do not enter the median lag.
LAG_WINDOW_S = 1.0


def boundary_lags(true_b: np.ndarray, found_b: np.ndarray, fps: float) -> np.ndarray:
    """Signed seconds from each true boundary to the nearest found one, within LAG_WINDOW_S.

    Examples
    --------
    >>> boundary_lags(np.array([10, 50, 90]), np.array([12, 49]), 10.0).tolist()
    [0.2, -0.1]
    """
    true_b, found_b = np.asarray(true_b), np.asarray(found_b)  # both sorted
    if not len(true_b) or not len(found_b):
        return np.zeros(0)
    j = np.searchsorted(found_b, true_b)
    before, after = found_b[np.maximum(j - 1, 0)], found_b[np.minimum(j, len(found_b) - 1)]
    near = np.where(true_b - before <= after - true_b, before, after)  # ties: the earlier
    lag = (near - true_b) / float(fps)
    return lag[np.abs(lag) <= LAG_WINDOW_S]


def unit_boundaries(truth: np.ndarray, found: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """True and found boundary frames of one unit, after the gap rules of the module doc.

    Examples
    --------
    >>> t, f = unit_boundaries(np.array([0, 0, -1, 1, 1]), np.array([3, -1, 3, 4, 4]))
    >>> t.tolist(), f.tolist()
    ([2], [2])
    """
    keep = np.asarray(truth) >= 0
    return label_boundaries(np.asarray(truth)[keep]), label_boundaries(
        _forward_fill(np.asarray(found))[keep]
    )


def score_units(
    truth: Mapping[tuple[str, str], np.ndarray],
    found: Mapping[tuple[str, str], np.ndarray],
    fps: float | Mapping[tuple[str, str], float],
    margin_s: float = 0.2,
) -> dict[str, float]:
    """Every score of the module doc over all units (same keys in ``truth`` and ``found``).

    ``fps``: one frame rate, or one per unit (the margin in frames follows each unit's rate).
    """
    keys: Sequence[tuple[str, str]] = sorted(truth)
    missing = [k for k in keys if k not in found or len(found[k]) != len(truth[k])]
    if missing:
        raise ValueError(f"labels missing or of the wrong length for units {missing[:3]}")
    t = np.concatenate([np.asarray(truth[k], dtype=np.int64) for k in keys])
    f = np.concatenate([np.asarray(found[k], dtype=np.int64) for k in keys])
    labelled = t >= 0
    both = labelled & (f >= 0)
    rate = fps if isinstance(fps, Mapping) else dict.fromkeys(keys, fps)
    margins = {k: max(1, round(margin_s * rate[k])) for k in keys}
    counts = np.zeros(3, dtype=np.int64)
    lags = []
    for k in keys:
        tb, fb = unit_boundaries(np.asarray(truth[k]), np.asarray(found[k]))
        s = boundary_f1(tb, fb, margins[k])
        counts += (s.n_true, s.n_predicted, s.n_matched)
        lags.append(boundary_lags(tb, fb, rate[k]))
    lag = np.concatenate(lags)
    pooled = scores_from_counts(*(int(c) for c in counts))
    f1, precision, recall = pooled["f1"], pooled["precision"], pooled["recall"]
    scored = both.any()
    return {
        "ari": adjusted_rand(t, f) if scored else float("nan"),
        "nmi": normalized_mutual_info(t, f) if scored else float("nan"),
        "accuracy": matched_accuracy(t, f) if scored else float("nan"),
        "boundary_f1": float(f1),
        "boundary_precision": float(precision),
        "boundary_recall": float(recall),
        "boundaries_true": int(counts[0]),
        "boundaries_found": int(counts[1]),
        "margin_frames": sorted({int(m) for m in margins.values()}),
        "boundary_lag_s": float(np.median(lag)) if len(lag) else float("nan"),
        "unscored_pct": float(100 * (1 - both.sum() / max(labelled.sum(), 1))),
        "states_found": len(np.unique(f[both])),
        "states_true": len(np.unique(t[labelled])),
        "frames_scored": int(both.sum()),
        "frames_labelled": int(labelled.sum()),
    }
