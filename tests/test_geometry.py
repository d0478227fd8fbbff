"""Rotations, alignment, egocentric frames and circular statistics, checked against scipy and a
hand-worked Kabsch example. Random clouds use fixed seeds (given in each test)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.linalg import orthogonal_procrustes
from scipy.spatial.transform import Rotation
from scipy.stats import circmean

from ethoscribe.errors import InputError
from ethoscribe.geometry import (
    angular_velocity,
    circular_mean,
    horizontal_axes,
    kabsch,
    procrustes_align,
    rotate_to_axis,
    travel_alignment,
    unwrap_angles,
    wrap_angle,
)

SQUARE = np.array([[1.0, 1.0], [-1.0, 1.0], [-1.0, -1.0], [1.0, -1.0]])


def test_kabsch_square_rotated_by_90_degrees_worked_by_hand():
    # Kabsch (1976) by hand: Q = P rotated +90 degrees, (x, y) -> (-y, x), then moved by (3, -2).
    # Both centroids are 0 before the move, so H = sum p q^T = [[0, 4], [-4, 0]];
    # H = U S V^T with S = diag(4, 4), and R = V U^T = [[0, -1], [1, 0]], det +1, t = (3, -2).
    Q = SQUARE @ np.array([[0.0, 1.0], [-1.0, 0.0]]) + [3.0, -2.0]
    R, t = kabsch(SQUARE, Q)
    np.testing.assert_allclose(R, [[0.0, -1.0], [1.0, 0.0]], atol=1e-12)  # hand-worked above
    np.testing.assert_allclose(t, [3.0, -2.0], atol=1e-12)  # hand-worked above


def test_kabsch_recovers_rotation_like_scipy_align_vectors():
    rng = np.random.default_rng(1)  # seed 1
    P = rng.normal(size=(10, 3))
    true = Rotation.random(random_state=2)
    Q = true.apply(P) + np.array([1.0, -2.0, 0.5]) + rng.normal(0, 0.01, P.shape)
    R, t = kabsch(P, Q)
    Pc, Qc = P - P.mean(0), Q - Q.mean(0)
    # scipy Rotation.align_vectors(a, b) minimises |a - R b|: the same optimum for centred clouds.
    ref, _ = Rotation.align_vectors(Qc, Pc)
    np.testing.assert_allclose(R, ref.as_matrix(), atol=1e-10)  # scipy align_vectors
    np.testing.assert_allclose(P @ R.T + t, Q, atol=0.05)
    exact, _ = kabsch(P, true.apply(P))
    np.testing.assert_allclose(exact, true.as_matrix(), atol=1e-12)  # scipy Rotation (~1e-14)


def test_kabsch_matches_orthogonal_procrustes_and_fixes_its_reflection():
    rng = np.random.default_rng(3)  # seed 3
    P = rng.normal(size=(8, 3))
    Pc = P - P.mean(0)
    turn = Rotation.random(random_state=4).as_matrix()
    # scipy orthogonal_procrustes(A, B) gives Omega with A @ Omega ~ B: the transpose convention.
    omega, _ = orthogonal_procrustes(Pc, Pc @ turn.T)
    np.testing.assert_allclose(kabsch(Pc, Pc @ turn.T)[0], omega.T, atol=1e-10)
    mirrored = Pc * [1.0, 1.0, -1.0] @ turn.T  # a reflection: no rotation reproduces it
    omega, _ = orthogonal_procrustes(Pc, mirrored)
    assert np.linalg.det(omega) == pytest.approx(-1.0)  # scipy returns the reflection
    R, _ = kabsch(Pc, mirrored)
    assert np.linalg.det(R) == pytest.approx(1.0)
    best, _ = Rotation.align_vectors(mirrored, Pc)  # scipy: always a proper rotation
    np.testing.assert_allclose(R, best.as_matrix(), atol=1e-10)
    assert np.linalg.norm(Pc @ R.T - mirrored) >= np.linalg.norm(Pc @ omega - mirrored)


def test_kabsch_batched_and_nan_points_ignored():
    rng = np.random.default_rng(5)  # seed 5
    P = rng.normal(size=(6, 7, 3))
    Q = rng.normal(size=(6, 7, 3))
    R, t = kabsch(P, Q)
    for f in range(6):
        Rf, tf = kabsch(P[f], Q[f])
        np.testing.assert_allclose(R[f], Rf, atol=1e-12)
        np.testing.assert_allclose(t[f], tf, atol=1e-12)
    P[0, 2] = np.nan
    np.testing.assert_allclose(
        kabsch(P[0], Q[0])[0], kabsch(P[0, [0, 1, 3, 4, 5, 6]], Q[0, [0, 1, 3, 4, 5, 6]])[0]
    )
    assert np.isnan(kabsch(np.full((3, 2), np.nan), SQUARE[:3])[0]).all()


def test_procrustes_align_3d_frames_match_align_vectors():
    rng = np.random.default_rng(6)  # seed 6
    ref = rng.normal(size=(5, 3))
    turns = Rotation.random(4, random_state=7)
    frames = np.stack([turns[i].apply(ref) for i in range(4)]) + rng.normal(0, 0.01, (4, 5, 3))
    aligned, R = procrustes_align(frames, ref)
    np.testing.assert_allclose(aligned, np.broadcast_to(ref, aligned.shape), atol=0.05)
    for f in range(4):
        c = frames[f] - frames[f].mean(0)
        best, _ = Rotation.align_vectors(ref - ref.mean(0), c)
        np.testing.assert_allclose(R[f], best.as_matrix(), atol=1e-10)  # scipy align_vectors


def test_procrustes_align_2d_matches_orthogonal_procrustes():
    rng = np.random.default_rng(8)  # seed 8
    ref = rng.normal(size=(6, 2))
    frames = ref @ np.array([[0.6, -0.8], [0.8, 0.6]]) + rng.normal(0, 0.05, (3, 6, 2)) + 4.0
    aligned, R = procrustes_align(frames, ref)
    for f in range(3):
        a, b = frames[f] - frames[f].mean(0), ref - ref.mean(0)
        omega, _ = orthogonal_procrustes(a, b)  # scipy; no reflection here (det checked)
        assert np.linalg.det(omega) > 0
        np.testing.assert_allclose(R[f], omega.T, atol=1e-10)
        np.testing.assert_allclose(aligned[f], a @ omega + ref.mean(0), atol=1e-10)


def test_procrustes_yaw_only_keeps_heights():
    # Invented 3-D posture turned about z and lifted: yaw-only alignment must keep every height.
    rng = np.random.default_rng(9)  # seed 9
    ref = rng.normal(size=(5, 3))
    turn = Rotation.from_euler("z", [[0.3], [2.0], [-1.2]]).as_matrix()
    frames = np.einsum("fij,kj->fki", turn, ref) + np.array([0.0, 0.0, 0.7])
    aligned, R = procrustes_align(frames, ref, up_axis="z")
    np.testing.assert_array_equal(aligned[..., 2], frames[..., 2])
    np.testing.assert_allclose(aligned[..., :2], np.broadcast_to(ref[:, :2], (3, 5, 2)), atol=1e-12)
    np.testing.assert_allclose(R[:, 2], np.broadcast_to([0.0, 0.0, 1.0], (3, 3)))


def test_rotate_to_axis_2d_and_3d():
    rng = np.random.default_rng(10)  # seed 10
    pts = rng.normal(size=(4, 5, 2))
    origin = pts[:, 0]
    ego, heading = rotate_to_axis(pts, origin, pts[:, 1] - pts[:, 0])
    np.testing.assert_allclose(ego[:, 0], 0.0, atol=1e-12)
    np.testing.assert_allclose(ego[:, 1, 1], 0.0, atol=1e-12)
    assert (ego[:, 1, 0] > 0).all()
    dist = np.linalg.norm(pts[:, :, None] - pts[:, None], axis=-1)
    np.testing.assert_allclose(np.linalg.norm(ego[:, :, None] - ego[:, None], axis=-1), dist)
    d = pts[:, 1] - pts[:, 0]
    np.testing.assert_allclose(heading, np.arctan2(d[:, 1], d[:, 0]))
    p3 = rng.normal(size=(4, 5, 3))
    ego3, _ = rotate_to_axis(p3, p3[:, 0], p3[:, 1] - p3[:, 0])
    np.testing.assert_array_equal(ego3[..., 2], p3[..., 2])  # height kept
    egoy, _ = rotate_to_axis(p3, p3[:, 0], p3[:, 1] - p3[:, 0], up_axis="y")
    np.testing.assert_array_equal(egoy[..., 1], p3[..., 1])
    np.testing.assert_allclose(egoy[:, 1, 0], 0.0, atol=1e-12)  # axis lands on the z->x "x"


def test_circular_mean_matches_scipy_circmean():
    docs = [0.1, 2 * np.pi + 0.2, 6 * np.pi + 0.3]
    assert circular_mean(docs) == pytest.approx(0.2)  # scipy.stats.circmean docs example
    assert circmean(docs) == pytest.approx(0.2)
    deg = np.deg2rad([350.0, 10.0])
    assert wrap_angle(circular_mean(deg) - circmean(deg)) == pytest.approx(0.0, abs=1e-12)
    rng = np.random.default_rng(11)  # seed 11
    a = rng.vonmises(1.0, 2.0, size=(50, 3))
    a[4, 1] = np.nan
    ours = circular_mean(a, axis=0)
    ref = circmean(a, axis=0, nan_policy="omit")  # scipy.stats.circmean
    np.testing.assert_allclose(wrap_angle(ours - ref), 0.0, atol=1e-12)
    assert np.isnan(circular_mean([np.nan, np.nan]))


def test_unwrap_angles_matches_numpy_and_steps_over_nan():
    rng = np.random.default_rng(12)  # seed 12
    true = np.cumsum(rng.normal(0, 0.5, 200))
    wrapped = wrap_angle(true)
    np.testing.assert_allclose(unwrap_angles(wrapped), np.unwrap(wrapped))  # numpy.unwrap
    with_gap = wrapped.copy()
    with_gap[50:53] = np.nan
    out = unwrap_angles(with_gap)
    assert np.isnan(out[50:53]).all()
    steady = np.r_[np.unwrap(wrapped[:50]), np.nan * np.ones(3)]
    np.testing.assert_allclose(out[:53], steady)
    offset = out[53:] - true[53:]
    np.testing.assert_allclose(offset, offset[0], atol=1e-12)  # one constant 2*pi*k offset
    assert offset[0] / (2 * np.pi) == pytest.approx(round(offset[0] / (2 * np.pi)))


def test_angular_velocity_of_known_turning():
    fps = 50.0
    t = np.arange(500) / fps
    np.testing.assert_allclose(angular_velocity(wrap_angle(1.5 * t), fps), 1.5, atol=1e-9)
    theta = 0.8 * np.sin(2 * np.pi * 0.5 * t)  # analytic derivative 0.8 * pi * cos(pi t)
    w = angular_velocity(wrap_angle(theta), fps, window_s=0.1)
    np.testing.assert_allclose(w, 0.8 * np.pi * np.cos(np.pi * t), atol=0.025)  # 1% of peak
    causal = angular_velocity(wrap_angle(1.5 * t), fps, causal=True)
    assert np.isnan(causal[:4]).all()
    np.testing.assert_allclose(causal[4:], 1.5, atol=1e-9)


def test_travel_alignment_finds_the_forward_pair():
    # Invented: three points on a line moving along +x, the line pointing backwards.
    body = np.array([[2.0, 0.0], [1.0, 0.0], [0.0, 0.0]])
    pts = body + np.arange(20)[:, None, None] * [0.5, 0.0]
    score = travel_alignment(pts, np.tile([0.5, 0.0], (20, 1)))
    assert score[2, 0] == pytest.approx(1.0)
    assert score[0, 2] == pytest.approx(-1.0)
    assert np.isnan(np.diag(score)).all()


def test_bad_inputs_raise_input_errors():
    with pytest.raises(InputError, match="up_axis"):
        horizontal_axes(3, "w")
    with pytest.raises(InputError, match="one shape"):
        kabsch(np.zeros((3, 2)), np.zeros((4, 2)))
    with pytest.raises(InputError, match="reference"):
        procrustes_align(np.zeros((2, 3, 2)), np.zeros((4, 2)))
