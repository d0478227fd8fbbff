"""Segment descriptions and their clustering into motifs.

Outside references: numpy per-segment statistics (a plain loop), scikit-learn's
``GaussianMixture`` (log-likelihood, posterior, BIC and EM fixed point with equal weights).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from sklearn.mixture import GaussianMixture

from ethoscribe.errors import InputError
from ethoscribe.segment.motifs import (
    REG_COVAR,
    _log_densities,
    _logsumexp,
    _m_step,
    cluster_segments,
    describe_segments,
    description_names,
    fit_weighted_mixture,
    motif_probabilities,
    motif_table,
)


def test_descriptions_match_a_plain_loop():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(250, 3)).cumsum(axis=0)
    lengths = np.array([100, 150])
    bounds = [np.array([10, 55]), np.array([1, 80, 149])]
    desc, table = describe_segments(X, bounds, fps=25.0, lengths=lengths, columns=["a", "b", "c"])
    assert list(table.columns[4:]) == description_names(["a", "b", "c"])
    floor = 1e-3 * X.std(axis=0)
    rows = []
    for s, (b, off) in enumerate(zip(bounds, [0, 100], strict=True)):
        edges = np.r_[0, b, lengths[s]]
        for a, z in itertools.pairwise(edges):
            seg = X[off + a : off + z]
            change = (np.diff(seg, axis=0) ** 2).mean(axis=0) if len(seg) > 1 else np.zeros(3)
            rows.append(
                np.r_[
                    seg.mean(axis=0),
                    np.log(seg.std(axis=0) + floor),
                    np.log(change + floor**2),
                    np.log(len(seg) / 25.0),
                ]
            )
    # Source: numpy mean/std/diff on each segment separately (cumulative sums lose ~1e-12).
    np.testing.assert_allclose(desc, np.array(rows), rtol=1e-7, atol=1e-7)
    assert table["duration_s"].sum() == pytest.approx(250 / 25.0)


def three_groups(seed: int = 0):
    rng = np.random.default_rng(seed)
    centers = np.array([[0.0, 0.0, 0.0], [4.0, 0.0, 1.0], [0.0, 5.0, -2.0]])
    labels = np.repeat([0, 1, 2], [30, 20, 10])
    return centers[labels] + rng.normal(0, 0.4, (60, 3)), labels


def test_equal_weight_mixture_is_scikit_learns():
    d, _ = three_groups()
    gm = GaussianMixture(
        3, covariance_type="diag", reg_covar=REG_COVAR, tol=1e-12, max_iter=5000, random_state=0
    ).fit(d)
    params = {"weights": gm.weights_, "means": gm.means_, "variances": gm.covariances_}
    log_p = _log_densities(d, **params)
    # Source: sklearn GaussianMixture.score (mean log-likelihood) and predict_proba.
    assert _logsumexp(log_p).sum() == pytest.approx(gm.score(d) * len(d), rel=1e-12)
    flat = {**params, "center": np.zeros(3), "scale": np.ones(3)}
    np.testing.assert_allclose(motif_probabilities(d, flat), gm.predict_proba(d), atol=1e-10)
    # sklearn's converged solution is a fixed point of our EM step (same algorithm).
    resp = np.exp(log_p - _logsumexp(log_p)[:, None])
    w, m, v = _m_step(d, resp, np.ones(len(d)))
    np.testing.assert_allclose(w, gm.weights_, atol=1e-7)
    np.testing.assert_allclose(m, gm.means_, atol=1e-7)
    np.testing.assert_allclose(v, gm.covariances_, atol=1e-7)
    # Our fit reaches the same optimum, and our BIC is sklearn's GaussianMixture.bic.
    _, loglik = fit_weighted_mixture(d, np.ones(len(d)), 3, seed=0)
    assert loglik == pytest.approx(gm.score(d) * len(d), rel=1e-6)
    _, fitted = cluster_segments(d, n_motifs=3, random_state=0)
    assert fitted["bic"][0] == pytest.approx(gm.bic(d), rel=1e-6)


def test_integer_weights_act_like_repeated_segments():
    d, _ = three_groups(1)
    counts = np.random.default_rng(2).integers(1, 4, len(d))
    start = {"weights": np.ones(2) / 2, "means": d[[0, -1]], "variances": np.ones((2, 3))}

    def one_step(data: np.ndarray, w: np.ndarray) -> np.ndarray:
        log_p = _log_densities(data, **start)
        step = _m_step(data, np.exp(log_p - _logsumexp(log_p)[:, None]), w)
        return np.concatenate([a.ravel() for a in step])

    repeated = np.repeat(d, counts, axis=0)
    np.testing.assert_allclose(
        one_step(d, counts.astype(float)), one_step(repeated, np.ones(len(repeated)))
    )


def test_bic_picks_three_groups_and_numbers_by_time_budget():
    d, labels = three_groups()
    labels_found, params = cluster_segments(d, random_state=0)
    assert len(params["weights"]) == 3
    # Group sizes 30/20/10 with equal durations: motif 0 is the biggest group.
    assert np.bincount(labels_found).tolist() == [30, 20, 10]
    # Long segments outweigh many short ones: group 2 (10 segments) lasts longest.
    durations = np.where(labels == 2, 20.0, 1.0)
    relabelled, _ = cluster_segments(d, random_state=0, weights=durations)
    assert (relabelled[labels == 2] == 0).all()
    again, _ = cluster_segments(d, random_state=0, weights=durations)
    np.testing.assert_array_equal(again, relabelled)


def test_motif_table_and_bad_input():
    d, _ = three_groups()
    _, params = cluster_segments(d, n_motifs=2, random_state=0)
    table = describe_segments(np.zeros((60, 1)), np.arange(1, 60), fps=1.0)[1]
    seg = motif_table(table, motif_probabilities(d, params))
    assert list(seg.columns) == ["session", "start", "stop", "motif", "probability"]
    assert seg["probability"].between(0.5, 1.0).all()
    with pytest.raises(InputError, match="only 1 distinct segments"):
        cluster_segments(np.zeros((5, 2)), n_motifs=2)
    with pytest.raises(InputError, match="n_motifs must be"):
        cluster_segments(d, n_motifs=0)
    with pytest.raises(InputError, match="positive durations"):
        cluster_segments(d, weights=-np.ones(60))
    with pytest.raises(InputError, match="finite"):
        cluster_segments(np.full((3, 2), np.nan))
    with pytest.raises(InputError, match="one boundary array per session"):
        describe_segments(np.zeros((10, 1)), [np.array([3])], fps=1.0, lengths=[5, 5])
