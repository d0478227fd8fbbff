"""Describe segments by a few numbers each, and cluster the descriptions into motifs.

Description of a segment (``3 * n_features + 1`` numbers, computed for all segments at once from
cumulative sums):

- ``mean_<f>``: mean of each feature;
- ``log_std_<f>``: log of the within-segment standard deviation (+ 0.001 x the feature's overall
  standard deviation, so a constant stretch stays finite);
- ``log_change_power_<f>``: log of the mean squared first difference (same floor, squared). The
  first difference weighs the power spectrum by ``4 sin^2(pi f / fps)``, so this measures the
  fast (high-frequency) content: trembling, sniffing, grooming strokes;
- ``log_duration``: log of the duration in seconds.

Clustering: a Gaussian mixture with diagonal covariances on the centred descriptions (in their own
units; feed descriptions of standardised features). Each segment weighs by its duration, so motifs
follow the time budget. scikit-learn's ``GaussianMixture`` takes no sample weights (and repeated
copies of a segment form spurious tight clusters), so :func:`fit_weighted_mixture` runs the same
EM with weights (start: scikit-learn's weighted k-means from k-means++ seeds); with equal
weights it matches ``GaussianMixture`` (tests/test_motifs.py). Weights are scaled to mean 1,
so the log-likelihood counts segments. The number of motifs is the candidate with the lowest
``BIC(k) = -2 * sum_i w_i log p(d_i) + (2 * k * n_desc + k - 1) * log(n_segments)``; a count
leaving a motif with fewer than 2 segments is not eligible, variances have a floor of 0.05, and
the search stops after 3 counts in a row worse than the best.
Motifs are numbered by decreasing time budget, ties by the order of their mean descriptions.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd
from scipy.ndimage import uniform_filter1d
from sklearn.cluster import KMeans

from ethoscribe.errors import InputError

EM_TOL = 1e-6  # stop when the mean log-likelihood per segment changes less
# Variance floor (description units): clusters narrower than ~0.2 (SD or log units) are not split,
# so a handful of segments cannot each become a zero-width "motif" (BIC alone allows that).
REG_COVAR = 0.05
MIN_SEGMENTS_PER_MOTIF = 2
STOP_AFTER_WORSE = 3


def description_names(columns: Sequence[str]) -> list[str]:
    """Names of the description columns for feature names ``columns``."""
    return (
        [f"mean_{c}" for c in columns]
        + [f"log_std_{c}" for c in columns]
        + [f"log_change_power_{c}" for c in columns]
        + ["log_duration"]
    )


def segment_bounds(
    boundaries: Sequence[np.ndarray], lengths: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Session index, start and stop (within the session) of every segment, in order."""
    sessions, starts, stops = [], [], []
    for i, (b, n) in enumerate(zip(boundaries, lengths, strict=True)):
        b = np.asarray(b, dtype=np.int64)
        edges = np.r_[0, b, n]
        sessions.append(np.full(len(edges) - 1, i))
        starts.append(edges[:-1])
        stops.append(edges[1:])
    return np.concatenate(sessions), np.concatenate(starts), np.concatenate(stops)


def describe_segments(
    X: np.ndarray,
    boundaries: np.ndarray | Sequence[np.ndarray],
    fps: float,
    lengths: Sequence[int] | np.ndarray | None = None,
    columns: Sequence[str] | None = None,
) -> tuple[np.ndarray, pd.DataFrame]:
    """Summary numbers of every segment (see the module docstring).

    Parameters
    ----------
    X : array, shape (n_frames, n_features)
        Sessions stacked.
    boundaries : int array (one session) or list of int arrays (one per session)
        First frame of each new segment, within its session.
    fps : float
        Frames per second (durations in seconds).
    lengths : frames per session; ``None`` means one session.
    columns : feature names (default ``f0, f1, ...``).

    Returns
    -------
    descriptions : array, shape (n_segments, 3 * n_features + 1)
    table : DataFrame with ``session, start, stop, duration_s`` and the description columns

    Examples
    --------
    >>> X = np.r_[np.zeros((30, 1)), np.ones((60, 1))]
    >>> d, table = describe_segments(X, np.array([30]), fps=30.0)
    >>> table[["start", "stop", "duration_s", "mean_f0"]].round(9).to_numpy().tolist()
    [[0.0, 30.0, 1.0, 0.0], [30.0, 90.0, 2.0, 1.0]]
    """
    X = np.asarray(X, dtype=np.float64)
    n_frames, n_feat = X.shape
    lengths = np.array([n_frames]) if lengths is None else np.asarray(lengths, dtype=np.int64)
    if isinstance(boundaries, np.ndarray) and boundaries.dtype != object:
        boundaries = [boundaries]
    if len(boundaries) != len(lengths):
        raise InputError(
            f"need one boundary array per session: got {len(boundaries)} for {len(lengths)} "
            "sessions"
        )
    columns = [f"f{j}" for j in range(n_feat)] if columns is None else list(columns)
    session, start, stop = segment_bounds(boundaries, lengths)
    offset = np.r_[0, np.cumsum(lengths)[:-1]][session]
    g0, g1 = start + offset, stop + offset
    count = (g1 - g0)[:, None].astype(np.float64)
    overall_sd = X.std(axis=0)
    floor = 1e-3 * np.where(overall_sd > 0, overall_sd, 1.0)
    xc = X - X.mean(axis=0)  # centred: keeps the cumulative sums of squares well conditioned
    c1 = np.vstack([np.zeros(n_feat), np.cumsum(xc, axis=0)])
    c2 = np.vstack([np.zeros(n_feat), np.cumsum(xc**2, axis=0)])
    mean = (c1[g1] - c1[g0]) / count
    var = np.where(count > 1, np.maximum((c2[g1] - c2[g0]) / count - mean**2, 0.0), 0.0)
    # Squared first differences; pair (t-1, t) counts for the segment that holds both frames.
    d2 = np.vstack([np.zeros(n_feat), np.diff(xc, axis=0) ** 2])
    cd = np.vstack([np.zeros(n_feat), np.cumsum(d2, axis=0)])
    pairs = np.maximum(count - 1, 1)
    change = np.where(count > 1, (cd[g1] - cd[np.minimum(g0 + 1, g1)]) / pairs, 0.0)
    duration = (stop - start) / float(fps)
    desc = np.hstack(
        [
            mean + X.mean(axis=0),
            np.log(np.sqrt(var) + floor),
            np.log(change + floor**2),
            np.log(duration)[:, None],
        ]
    )
    table = pd.DataFrame({"session": session, "start": start, "stop": stop, "duration_s": duration})
    table = pd.concat([table, pd.DataFrame(desc, columns=description_names(columns))], axis=1)
    return desc, table


def local_energy_features(x: np.ndarray, width: int) -> np.ndarray:
    """Log local energy of the centred values and of their first differences.

    A change of variability (rest vs. trembling, walking vs. running) leaves the mean alone; the
    least-squares cost sees it once the series is replaced by these features. Centred moving
    means over ``width`` frames of ``x^2`` and of ``diff(x)^2``, logged (floor 1e-3 x their
    mean). Use ``noise_block=width`` in ``detect_change_points``, as they are smooth. These
    are the per-frame counterparts of the ``log_std`` and ``log_change_power`` descriptions.

    Parameters
    ----------
    x : array, shape (n_frames, n_features)
    width : int, frames of the moving mean (>= 1)

    Returns
    -------
    array, shape (n_frames, 2 * n_features)

    Examples
    --------
    >>> local_energy_features(np.ones((10, 2)), 3).shape
    (10, 4)
    """
    x = np.asarray(x, dtype=np.float64).reshape(len(x), -1)
    xc = x - x.mean(axis=0)
    d = np.vstack([np.zeros((1, x.shape[1])), np.diff(xc, axis=0)])
    energy = uniform_filter1d(np.hstack([xc**2, d**2]), max(1, int(width)), axis=0, mode="nearest")
    return np.log(energy + 1e-3 * energy.mean(axis=0) + 1e-300)


def _log_densities(z: np.ndarray, weights, means, variances) -> np.ndarray:
    """log(weight_k) + log N(z_i | mean_k, diag variance_k), shape (n, k)."""
    var = np.asarray(variances)
    maha = ((z[:, None, :] - np.asarray(means)[None]) ** 2 / var[None]).sum(axis=2)
    log_det = np.log(var).sum(axis=1)
    return np.log(weights)[None] - 0.5 * (maha + log_det[None] + z.shape[1] * np.log(2 * np.pi))


def _m_step(z: np.ndarray, resp: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, ...]:
    r = resp * w[:, None]
    nk = r.sum(axis=0) + 1e-10
    means = (r.T @ z) / nk[:, None]
    variances = np.maximum((r.T @ z**2) / nk[:, None] - means**2, 0.0) + REG_COVAR
    return nk / nk.sum(), means, variances


def _logsumexp(a: np.ndarray) -> np.ndarray:
    top = a.max(axis=1)
    return top + np.log(np.exp(a - top[:, None]).sum(axis=1))


def _kmeans_start(z: np.ndarray, w: np.ndarray, k: int, rng: np.random.Generator) -> np.ndarray:
    """One-hot responsibilities of weighted k-means (k-means++ seeding, 20 Lloyd steps)."""
    centers = [z[rng.choice(len(z), p=w / w.sum())]]
    for _ in range(1, k):
        d2 = ((z[:, None, :] - np.array(centers)[None]) ** 2).sum(axis=2).min(axis=1)
        p = w * d2
        centers.append(z[rng.choice(len(z), p=p / p.sum())] if p.sum() > 0 else z[0])
    # Lloyd steps by scikit-learn's weighted k-means from these k-means++ centres.
    km = KMeans(k, init=np.array(centers), n_init=1, max_iter=20, tol=0.0, algorithm="lloyd")
    return np.eye(k)[km.fit(z, sample_weight=w).labels_]


def fit_weighted_mixture(
    z: np.ndarray, w: np.ndarray, k: int, seed: int, n_init: int = 2, max_iter: int = 300
) -> tuple[dict[str, np.ndarray], float]:
    """Diagonal Gaussian mixture by weighted EM (k-means start); returns params and log-lik.

    The best of ``n_init`` starts (highest weighted log-likelihood) is kept.

    ``w`` are positive weights with mean 1, so the log-likelihood ``sum_i w_i log p(z_i)`` is on
    the scale of ``n`` observations. With equal weights this is scikit-learn's
    ``GaussianMixture(covariance_type="diag", reg_covar=REG_COVAR)`` EM.
    """
    best, best_ll = None, -np.inf
    rng = np.random.default_rng(seed)
    for _ in range(n_init):
        params = _m_step(z, _kmeans_start(z, w, k, rng), w)
        ll_old = -np.inf
        for _ in range(max_iter):
            log_p = _log_densities(z, *params)
            norm = _logsumexp(log_p)
            ll = float(w @ norm)
            params = _m_step(z, np.exp(log_p - norm[:, None]), w)
            if abs(ll - ll_old) < EM_TOL * len(z):
                break
            ll_old = ll
        ll = float(w @ _logsumexp(_log_densities(z, *params)))
        if ll > best_ll:
            best_ll = ll
            best = dict(zip(("weights", "means", "variances"), params, strict=True))
    return best, best_ll


def cluster_segments(
    descriptions: np.ndarray,
    n_motifs: int | str = "auto",
    max_motifs: int = 12,
    random_state: int = 0,
    weights: np.ndarray | None = None,
    standardise: bool = False,
) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Cluster segment descriptions into motifs (see the module docstring for the rule).

    Parameters
    ----------
    descriptions : array, shape (n_segments, n_desc)
    n_motifs : int or "auto"
        Number of motifs, or "auto" for the BIC choice among ``1 .. max_motifs``.
    max_motifs : int
        Largest count tried by "auto".
    random_state : int
        Seed of the mixture initialisation.
    weights : array, shape (n_segments,), optional
        Segment durations (any unit); default equal weights.
    standardise : bool
        Scale every column to unit (weighted) SD first. Off by default: descriptions of
        standardised features are already in comparable units (means in SDs, the rest in logs),
        and per-column scaling would blow a pure-noise column up to the weight of an
        informative one.

    Returns
    -------
    labels : int64 array, shape (n_segments,)
        Motif of each segment, 0 = largest time budget.
    params : dict of arrays
        ``weights (k,)``, ``means (k, n_desc)``, ``variances (k, n_desc)`` (standardised units),
        ``center, scale (n_desc,)``, ``candidates, bic`` (the counts tried and their BIC).

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> d = np.r_[rng.normal(0, 1, (40, 2)), rng.normal(8, 1, (20, 2))]
    >>> labels, params = cluster_segments(d, random_state=0)
    >>> len(params["weights"]), np.bincount(labels).tolist()
    (2, [40, 20])
    """
    d = np.asarray(descriptions, dtype=np.float64)
    if d.ndim != 2 or len(d) == 0 or not np.isfinite(d).all():
        raise InputError(
            f"segment descriptions must be a finite, non-empty 2-D array; got shape {d.shape}"
        )
    n = len(d)
    w = np.ones(n) if weights is None else np.asarray(weights, dtype=np.float64).ravel()
    if len(w) != n or not np.isfinite(w).all() or (w <= 0).any():
        raise InputError(f"weights must be {n} positive durations; got {len(w)} values")
    n_distinct = len(np.unique(d, axis=0))
    if n_motifs == "auto":
        if not isinstance(max_motifs, (int, np.integer)) or max_motifs < 1:
            raise InputError(f"max_motifs must be an integer >= 1; got {max_motifs!r}")
        candidates = np.arange(1, min(int(max_motifs), n_distinct) + 1)
    elif (
        isinstance(n_motifs, (int, np.integer)) and not isinstance(n_motifs, bool) and n_motifs >= 1
    ):
        if n_motifs > n_distinct:
            raise InputError(
                f"asked for {n_motifs} motifs but only {n_distinct} distinct segments were found; "
                "ask for fewer motifs, lower the penalty, or give more data"
            )
        candidates = np.array([int(n_motifs)])
    else:
        raise InputError(f"n_motifs must be 'auto' or an integer >= 1; got {n_motifs!r}")
    wn = w / w.sum()
    center = wn @ d
    scale = np.sqrt(wn @ (d - center) ** 2) if standardise else np.ones(d.shape[1])
    scale[scale == 0] = 1.0
    z = (d - center) / scale
    wm = w / w.mean()
    fits, bic = [], []
    for k in candidates:
        fit, loglik = fit_weighted_mixture(z, wm, int(k), int(random_state))
        n_params = 2 * k * z.shape[1] + k - 1
        sizes = np.bincount(np.argmax(_log_densities(z, **fit), axis=1), minlength=k)
        too_small = len(candidates) > 1 and k > 1 and sizes.min() < MIN_SEGMENTS_PER_MOTIF
        bic.append(np.inf if too_small else -2.0 * loglik + n_params * np.log(n))
        fits.append(fit)
        if len(bic) - 1 - int(np.argmin(bic)) >= STOP_AFTER_WORSE:
            break  # BIC kept rising: larger counts are not tried
    candidates = candidates[: len(bic)]
    params = {**fits[int(np.argmin(bic))], "center": center, "scale": scale}
    labels = np.argmax(motif_probabilities(d, params), axis=1)
    params = _order_by_budget(params, labels, w)
    params["candidates"] = candidates.astype(np.int64)
    params["bic"] = np.asarray(bic, dtype=np.float64)
    return np.argmax(motif_probabilities(d, params), axis=1).astype(np.int64), params


def _order_by_budget(
    params: dict[str, np.ndarray], labels: np.ndarray, w: np.ndarray
) -> dict[str, np.ndarray]:
    k = len(params["weights"])
    budget = np.bincount(labels, weights=w, minlength=k)
    keys = [(-budget[i], *params["means"][i].round(12)) for i in range(k)]
    order = np.array(sorted(range(k), key=lambda i: keys[i]), dtype=np.int64)
    out = dict(params)
    for name in ("weights", "means", "variances"):
        out[name] = np.ascontiguousarray(params[name][order])
    return out


def motif_probabilities(descriptions: np.ndarray, params: dict[str, Any]) -> np.ndarray:
    """Posterior probability of each motif for each segment description.

    Parameters
    ----------
    descriptions : array, shape (n_segments, n_desc)
    params : dict from :func:`cluster_segments`

    Returns
    -------
    array, shape (n_segments, n_motifs), rows summing to 1
    """
    z = (np.asarray(descriptions, dtype=np.float64) - params["center"]) / params["scale"]
    log_p = _log_densities(z, params["weights"], params["means"], params["variances"])
    return np.exp(log_p - _logsumexp(log_p)[:, None])


SEGMENT_COLUMNS = ("session", "start", "stop", "motif", "probability")


def motif_table(table: pd.DataFrame, probabilities: np.ndarray) -> pd.DataFrame:
    """Segments with their most probable motif: ``session, start, stop, motif, probability``.

    Parameters
    ----------
    table : DataFrame from :func:`describe_segments`
    probabilities : array, shape (n_segments, n_motifs), from :func:`motif_probabilities`
    """
    labels = np.argmax(probabilities, axis=1)
    return pd.DataFrame(
        {
            "session": table["session"].to_numpy(np.int64),
            "start": table["start"].to_numpy(np.int64),
            "stop": table["stop"].to_numpy(np.int64),
            "motif": labels.astype(np.int64),
            "probability": probabilities[np.arange(len(labels)), labels],
        }
    )
