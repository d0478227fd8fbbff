"""``FeaturePipeline(posture_baseline="session")``: postures measured from each animal's own
median posture over its session. Checked against numpy (median, quantile) and scikit-learn's
PCA on invented tracks; seeds are fixed in each call."""

from __future__ import annotations

import json

import numpy as np
import pytest
from sklearn.decomposition import PCA

from ethoscribe.errors import InputError
from ethoscribe.features import FeaturePipeline
from ethoscribe.pose import PoseTracks

N_CHANNELS = 4


def raised_points(heights: np.ndarray, session: str) -> PoseTracks:
    """3-D tracks of points standing still on a circle whose heights are ``heights`` (F, C),
    plus a fixed ``base`` point at the centre: only the heights move."""
    n, c = heights.shape
    angle = 2 * np.pi * np.arange(c) / c
    coords = np.zeros((n, 1, c + 1, 3))
    coords[:, 0, :c, 0] = 20 * np.cos(angle)
    coords[:, 0, :c, 1] = 20 * np.sin(angle)
    coords[:, 0, :c, 2] = heights
    names = [f"p{i}" for i in range(c)] + ["base"]
    return PoseTracks(coords, keypoints=names, fps=25.0, units="mm", session=session)


def two_sessions(seed: int = 3) -> tuple[np.ndarray, np.ndarray]:
    """Heights of two invented sessions: the same two postures held in turn (5 s each) with
    noise, the second session seen with a constant offset of every point (a sensor or marker
    placed elsewhere)."""
    rng = np.random.default_rng(seed)
    postures = np.array([[0.0, 2.0, -1.0, 0.5], [3.0, -1.0, 0.0, 1.0]])
    which = np.repeat(np.arange(24) % 2, 125)  # 24 bouts of 5 s at 25 fps: 3,000 frames
    first = postures[which] + rng.normal(0, 0.3, (len(which), N_CHANNELS))
    second = postures[which] + rng.normal(0, 0.3, (len(which), N_CHANNELS))
    return first, second + np.array([4.0, -3.0, 2.0, 6.0])


KW = {"axis": ("base", "p0"), "n_components": 3, "standardise": False, "social": False}


def test_session_baseline_is_the_pca_of_postures_minus_their_session_median():
    a, b = two_sessions()
    sessions = [raised_points(a, "a"), raised_points(b, "b")]
    pipe = FeaturePipeline(posture_baseline="session", **KW).fit(sessions)
    # Reference (numpy + scikit-learn): the shape is the heights of all points (the base's is
    # 0) minus their mean (the body centroid's height, vertical="separate"); each session's
    # median shape is taken off and the mean of the two medians put back; scikit-learn's PCA
    # of all of it.
    points = [np.c_[h, np.zeros(len(h))] for h in (a, b)]
    shapes = [p - p.mean(1, keepdims=True) for p in points]
    medians = [np.median(s, axis=0) for s in shapes]
    typical = np.mean(medians, axis=0)
    moved = [s - m + typical for s, m in zip(shapes, medians, strict=True)]
    pca = PCA(n_components=3).fit(np.vstack(moved))
    z = slice(2, 3 * (N_CHANNELS + 1), 3)  # the z coordinates of the flattened posture
    np.testing.assert_allclose(np.asarray(pipe.baseline_posture_)[z], typical, atol=1e-12)
    np.testing.assert_allclose(pipe.explained_variance_, pca.explained_variance_, rtol=1e-9)
    for shape, fs in zip(moved, (pipe.transform(s)[0] for s in sessions), strict=True):
        expected = pca.transform(shape)
        got = fs.values[:, :3]
        got = got * np.sign((got * expected).sum(0))  # PCA signs are a convention
        np.testing.assert_allclose(got, expected, atol=1e-8)
    # Height: the centroid's height minus its session median plus the mean of the medians,
    # above the 1 % quantile (numpy.quantile) of those.
    centroid = [p.mean(1) for p in points]
    med = [np.median(c) for c in centroid]
    level = [c - m + np.mean(med) for c, m in zip(centroid, med, strict=True)]
    floor = np.quantile(np.concatenate(level), 0.01)
    assert pipe.baseline_height_ == pytest.approx(np.mean(med))
    assert pipe.height_floor_ == pytest.approx(floor)
    j = pipe.columns_.index("height_mm")
    for c, s in zip(level, sessions, strict=True):
        np.testing.assert_allclose(pipe.transform(s)[0].values[:, j], c - floor, atol=1e-9)


def test_an_offset_that_lasts_the_session_leaves_the_features():
    a, b = two_sessions()
    same = [raised_points(a, "a"), raised_points(a, "b")]  # the second session without offset
    moved = [raised_points(a, "a"), raised_points(b, "b")]
    fixed = FeaturePipeline(posture_baseline="session", **KW).fit(moved)
    plain = FeaturePipeline(**KW).fit(moved)
    cols = [i for i, c in enumerate(fixed.columns_) if c.startswith(("posture", "height"))]
    # The two postures in turn: session b's posture and height columns differ from those of
    # the same movement without the offset by noise only (the noise draws differ).
    ref = FeaturePipeline(posture_baseline="session", **KW).fit(same)
    x = fixed.transform(moved[1])[0].values[:, cols]
    y = ref.transform(same[1])[0].values[:, cols]
    assert np.abs(np.abs(x).mean(0) - np.abs(y).mean(0)).max() < 0.3
    # Measured from the fitted mean, the offset stays: the two sessions lie apart.
    p, q = plain.transform(moved[0])[0].values[:, cols], plain.transform(moved[1])[0].values
    gap = np.abs(np.median(p, 0) - np.median(q[:, cols], 0)).max()
    f, g = fixed.transform(moved[0])[0].values[:, cols], fixed.transform(moved[1])[0].values
    assert gap > 3.0 and np.abs(np.median(f, 0) - np.median(g[:, cols], 0)).max() < 0.3


def test_posture_baseline_is_checked_and_saved(tmp_path):
    a, b = two_sessions()
    sessions = [raised_points(a, "a"), raised_points(b, "b")]
    pipe = FeaturePipeline(posture_baseline="session", **KW).fit(sessions)
    meta, arrays = pipe.to_state()
    np.savez(tmp_path / "f.npz", **arrays)
    with np.load(tmp_path / "f.npz", allow_pickle=False) as saved:
        loaded = FeaturePipeline.from_state(json.loads(json.dumps(meta)), dict(saved))
    assert loaded.posture_baseline == "session"
    np.testing.assert_array_equal(
        loaded.transform(sessions[1])[0].values, pipe.transform(sessions[1])[0].values
    )
    meta["fitted"]["baseline_posture_"] = None
    with pytest.raises(InputError, match=r"lacks \['baseline_posture_'\]"):
        FeaturePipeline.from_state(meta, arrays)
    # A state saved before the option computes what it computed then: from the fitted mean.
    old = FeaturePipeline(**KW).fit(sessions)
    meta, arrays = old.to_state()
    del meta["params"]["posture_baseline"]
    del meta["fitted"]["baseline_posture_"], meta["fitted"]["baseline_height_"]
    loaded = FeaturePipeline.from_state(meta, arrays)
    assert loaded.posture_baseline == "fitted"
    np.testing.assert_array_equal(
        loaded.transform(sessions[1])[0].values, old.transform(sessions[1])[0].values
    )
    with pytest.raises(InputError, match="posture_baseline must be 'fitted' or 'session'"):
        FeaturePipeline(posture_baseline="animal").fit(sessions)
    with pytest.raises(InputError, match="needs the whole session"):
        FeaturePipeline(posture_baseline="session", causal=True).fit(sessions)
