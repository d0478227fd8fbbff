"""How well discovered motifs match an expert's behaviours, overall and behaviour by behaviour.

Only frames the expert coded are compared. Frames the tool left unscored (no valid pose) keep a
label of their own, ``(unscored)``: they count in the adjusted Rand index, the mutual
information and the denominators of the accuracies, and are never a correct answer.

Definitions (N: frames compared; C: the behaviour x motif table of frame counts):

- ``ari``: adjusted Rand index, the pair-counting agreement corrected for chance (Hubert &
  Arabie 1985, Journal of Classification 2, 193-218), as ``sklearn.metrics.adjusted_rand_score``.
- ``nmi``: mutual information normalised by the arithmetic mean of the two entropies
  (Vinh, Epps & Bailey 2010, JMLR 11), as ``sklearn.metrics.normalized_mutual_info_score``.
- ``matched_accuracy``: each behaviour paired with at most one motif and each motif with at
  most one behaviour so that the paired frames are as many as possible (the Hungarian method,
  Kuhn 1955; ``scipy.optimize.linear_sum_assignment``), then paired frames / N. Motifs left
  without a behaviour count as errors: splitting a behaviour into two motifs costs accuracy.
- ``purity``: every motif named after the behaviour it overlaps most (many motifs may share a
  behaviour), then frames so named correctly / N (Manning, Raghavan & Schütze 2008,
  Introduction to Information Retrieval, ch. 16.3). Never below ``matched_accuracy``.
- ``boundary_f1``, ``precision``, ``recall``: bout boundaries inside stretches of coded frames;
  a motif boundary is correct when an expert boundary lies within ``tolerance_s``, each
  boundary used once (as ``ruptures.metrics.precision_recall``, whose margin is exclusive).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy.optimize import linear_sum_assignment
from sklearn.metrics import adjusted_rand_score, normalized_mutual_info_score

from ethoscribe.errors import InputError
from ethoscribe.segment.agreement import boundary_f1
from ethoscribe.segment.boundaries import scores_from_counts

UNSCORED = "(unscored)"
FRAME_COLUMNS = ("session", "animal", "frame", "behaviour", "motif", "fps")


@dataclass(frozen=True)
class ExpertAgreement:
    """The figures of :func:`expert_agreement`.

    ``summary``: the JSON-able figures (see the module docstring); ``confusion``: one row per
    behaviour and motif with ``frames, seconds, share_of_behaviour``; ``per_behaviour``: one row
    per behaviour; ``matrix``: frames, behaviours x motifs (the last column ``(unscored)``).
    """

    summary: dict[str, Any]
    confusion: pd.DataFrame
    per_behaviour: pd.DataFrame
    matrix: pd.DataFrame


def expert_agreement(frames: pd.DataFrame, tolerance_s: float = 0.2) -> ExpertAgreement:
    """Compare an expert's behaviours with motifs on the frames the expert coded.

    Parameters
    ----------
    frames : DataFrame ``session, animal, frame, behaviour, motif, fps``, one row per coded
        frame; ``motif`` is "" where the tool left the frame unscored.
    tolerance_s : float
        How far apart two boundaries may be and still match (seconds). 0.2 s: about the
        blending time between two postures plus a frame or two of coding uncertainty.

    Examples
    --------
    >>> f = pd.DataFrame({"session": "s", "animal": "a", "frame": range(6), "fps": 30.0,
    ...                   "behaviour": list("xxxyyy"), "motif": ["m1"] * 3 + ["m2"] * 3})
    >>> expert_agreement(f).summary["matched_accuracy"]
    1.0
    """
    _check(frames, tolerance_s)
    behaviour = frames["behaviour"].astype(str).to_numpy()
    motif = frames["motif"].fillna("").astype(str).to_numpy()
    motif = np.where(motif == "", UNSCORED, motif)
    seconds = 1.0 / frames["fps"].to_numpy(float)
    behaviours, b = np.unique(behaviour, return_inverse=True)
    motifs = np.array([*sorted(set(motif) - {UNSCORED}), UNSCORED], dtype=object)
    m = pd.Index(motifs).get_indexer(motif)
    nb, nm = len(behaviours), len(motifs)
    counts = np.bincount(b * nm + m, minlength=nb * nm).reshape(nb, nm)
    secs = np.bincount(b * nm + m, weights=seconds, minlength=nb * nm).reshape(nb, nm)
    n = len(frames)
    scored = counts[:, :-1]
    rows, cols = linear_sum_assignment(scored, maximize=True)
    matched = {behaviours[r]: motifs[c] for r, c in zip(rows, cols, strict=True) if scored[r, c]}
    purity = scored.max(axis=0).sum() / n if scored.size else 0.0
    bounds = _boundaries(frames, behaviour, motif, tolerance_s)
    summary = {
        "ari": float(adjusted_rand_score(behaviour, motif)),
        "nmi": float(normalized_mutual_info_score(behaviour, motif)),
        "matched_accuracy": float(scored[rows, cols].sum() / n),
        "purity": float(purity),
        "boundary_f1": bounds["f1"],
        "precision": bounds["precision"],
        "recall": bounds["recall"],
        "boundaries_expert": bounds["n_true"],
        "boundaries_motifs": bounds["n_predicted"],
        "boundaries_matched": bounds["n_matched"],
        "tolerance_s": float(tolerance_s),
        "frames_compared": int(n),
        "seconds_compared": float(seconds.sum()),
        "frames_unscored": int(counts[:, -1].sum()),
        "sessions_compared": int(frames["session"].nunique()),
        "n_behaviours": int(nb),
        "n_motifs": int(nm - 1),
        "matching": {str(k): str(v) for k, v in matched.items()},
    }
    confusion = pd.DataFrame(
        {
            "behaviour": np.repeat(behaviours, nm),
            "motif": np.tile(motifs, nb),
            "frames": counts.ravel(),
            "seconds": secs.ravel(),
            "share_of_behaviour": (counts / counts.sum(axis=1, keepdims=True)).ravel(),
        }
    )
    per = _per_behaviour(behaviours, motifs, counts, secs, matched)
    matrix = pd.DataFrame(counts, index=pd.Index(behaviours, name="behaviour"), columns=motifs)
    return ExpertAgreement(summary, confusion, per, matrix)


def _check(frames: pd.DataFrame, tolerance_s: float) -> None:
    missing = [c for c in FRAME_COLUMNS if c not in frames.columns]
    if missing:
        raise InputError(
            f"expert_agreement needs the columns {list(FRAME_COLUMNS)}; missing {missing}"
        )
    if not len(frames):
        raise InputError(
            "no coded frame to compare: the expert coding covers none of the labelled frames"
        )
    if not (np.isfinite(tolerance_s) and tolerance_s >= 0):
        raise InputError(f"tolerance_s must be a number of seconds >= 0, got {tolerance_s!r}")


def _per_behaviour(
    behaviours: np.ndarray,
    motifs: np.ndarray,
    counts: np.ndarray,
    secs: np.ndarray,
    matched: dict[str, str],
) -> pd.DataFrame:
    """Best motif, its F1, and the motifs whose frames are mostly this behaviour and whose
    merge raises its F1 (to merge: taken by overlap, each kept only where the F1 of the union
    rises; a small motif mostly of this behaviour but with other frames can lower it)."""
    scored = counts[:, :-1]
    row, col = counts.sum(axis=1), scored.sum(axis=0)
    f1 = 2 * scored / np.maximum(row[:, None] + col[None, :], 1)
    owner = scored.argmax(axis=0) if scored.size else np.zeros(0, int)
    out = []
    for r, name in enumerate(behaviours):
        best = int(f1[r].argmax()) if scored.shape[1] else -1
        mine: list[int] = []
        merged = 0.0
        for k in np.argsort(-scored[r], kind="stable"):
            if owner[k] != r or not scored[r, k]:
                continue
            union = [*mine, k]
            f1_union = 2 * scored[r, union].sum() / max(row[r] + col[union].sum(), 1)
            if not mine or f1_union > merged:
                mine, merged = union, f1_union
        m = matched.get(str(name))
        k = int(np.flatnonzero(motifs == m)[0]) if m is not None else -1
        out.append(
            {
                "behaviour": str(name),
                "coded_frames": int(row[r]),
                "coded_seconds": float(secs[r].sum()),
                "best_motif": str(motifs[best]) if best >= 0 else "",
                "best_f1": float(f1[r, best]) if best >= 0 else 0.0,
                "matched_motif": m or "",
                "matched_f1": float(f1[r, k]) if k >= 0 else 0.0,
                "motifs_sharing": ";".join(str(motifs[j]) for j in mine),
                "merged_f1": float(merged),
                "unscored_frames": int(counts[r, -1]),
            }
        )
    return pd.DataFrame(out)


def _boundaries(
    frames: pd.DataFrame, behaviour: np.ndarray, motif: np.ndarray, tolerance_s: float
) -> dict[str, Any]:
    """Boundary precision and recall, pooled over stretches of consecutive coded frames."""
    key = frames["session"].astype(str) + "\x00" + frames["animal"].astype(str)
    order = np.lexsort((frames["frame"].to_numpy(), key.to_numpy()))
    k, f = key.to_numpy()[order], frames["frame"].to_numpy(np.int64)[order]
    fps = frames["fps"].to_numpy(float)[order]
    b, m = behaviour[order], motif[order]
    new = np.ones(len(f), bool)
    new[1:] = (k[1:] != k[:-1]) | (f[1:] != f[:-1] + 1)
    starts = np.flatnonzero(new)
    stops = np.append(starts[1:], len(f))
    total = {"n_true": 0, "n_predicted": 0, "n_matched": 0}
    for a, z in zip(starts, stops, strict=True):
        true = np.flatnonzero(b[a + 1 : z] != b[a : z - 1]) + 1
        pred = np.flatnonzero(m[a + 1 : z] != m[a : z - 1]) + 1
        margin = int(np.floor(tolerance_s * fps[a] + 1e-9))
        s = boundary_f1(true, pred, margin)
        total["n_true"] += s.n_true
        total["n_predicted"] += s.n_predicted
        total["n_matched"] += s.n_matched
    return scores_from_counts(total["n_true"], total["n_predicted"], total["n_matched"])
