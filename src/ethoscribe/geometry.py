"""Rigid geometry of keypoint clouds: Kabsch rotations, Procrustes alignment, egocentric frames,
circular statistics of headings, and the automatic choice of a body axis.

Conventions: points are row vectors, shape ``(..., K, D)`` with ``D`` 2 or 3. A rotation ``R``
maps a point ``p`` to ``R @ p``. In 3-D the vertical axis is named by ``up_axis`` ("x", "y" or
"z"); rotations "about the vertical" leave heights unchanged. Angles are radians.
"""

from __future__ import annotations

import numpy as np

from ethoscribe.errors import InputError

# Horizontal plane (first, second axis) for each vertical axis, in right-handed cyclic order.
_HORIZONTAL = {"z": (0, 1), "x": (1, 2), "y": (2, 0)}
_UP_INDEX = {"x": 0, "y": 1, "z": 2}


def horizontal_axes(n_dims: int, up_axis: str = "z") -> tuple[int, int]:
    """Indices of the two horizontal coordinates: ``(0, 1)`` in 2-D, the plane normal to
    ``up_axis`` in 3-D.

    Examples
    --------
    >>> horizontal_axes(3, "y")
    (2, 0)
    """
    if n_dims == 2:
        return (0, 1)
    if up_axis not in _HORIZONTAL:
        msg = f"up_axis must be one of {sorted(_HORIZONTAL)} for 3-D tracks; got {up_axis!r}"
        raise InputError(msg)
    return _HORIZONTAL[up_axis]


def kabsch(
    P: np.ndarray, Q: np.ndarray, weights: np.ndarray | None = None, translate: bool = True
) -> tuple[np.ndarray, np.ndarray]:
    """Optimal proper rotation and translation mapping points ``P`` onto ``Q`` (Kabsch 1976).

    Minimises ``sum_i w_i |R p_i + t - q_i|^2`` over rotations with ``det R = +1``: a reflection
    that would fit better (mirrored data) is refused by flipping the weakest singular direction.

    Parameters
    ----------
    P, Q : arrays, shape (..., N, D)
        Corresponding points; leading axes are batch axes (e.g. frames). Points with a NaN in
        either set get weight 0.
    weights : array, shape (..., N), optional
        Non-negative point weights (default 1).
    translate : bool
        False: rotation about the coordinate origin only (``t = 0``).

    Returns
    -------
    R : array, shape (..., D, D)
    t : array, shape (..., D)
        NaN where a batch item has no usable point.

    Examples
    --------
    >>> square = np.array([[1.0, 1], [-1, 1], [-1, -1], [1, -1]])
    >>> R, t = kabsch(square, square @ np.array([[0.0, 1], [-1, 0]]))
    >>> np.round(R, 12) + 0.0
    array([[ 0., -1.],
           [ 1.,  0.]])
    """
    P = np.asarray(P, dtype=np.float64)
    Q = np.asarray(Q, dtype=np.float64)
    if P.shape != Q.shape or P.ndim < 2:
        msg = f"kabsch needs two point sets of one shape (..., N, D); got {P.shape} and {Q.shape}"
        raise InputError(msg)
    ok = np.isfinite(P).all(-1) & np.isfinite(Q).all(-1)
    w = ok.astype(np.float64) if weights is None else np.where(ok, weights, 0.0)
    wsum = w.sum(-1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        wn = (w / wsum)[..., None]
    P0 = np.where(ok[..., None], P, 0.0)
    Q0 = np.where(ok[..., None], Q, 0.0)
    cp = (wn * P0).sum(-2)
    cq = (wn * Q0).sum(-2)
    if not translate:
        cp, cq = np.zeros_like(cp), np.zeros_like(cq)
    H = np.einsum("...ni,...nj->...ij", wn * (P0 - cp[..., None, :]), Q0 - cq[..., None, :])
    good = np.isfinite(H).all((-1, -2))
    H = np.where(good[..., None, None], H, 0.0)
    U, _, Vt = np.linalg.svd(H)
    V = np.swapaxes(Vt, -1, -2)
    d = np.sign(np.linalg.det(V @ np.swapaxes(U, -1, -2)))
    d = np.where(d == 0, 1.0, d)
    V[..., :, -1] *= d[..., None]  # reflection fix: det(R) = +1
    R = V @ np.swapaxes(U, -1, -2)
    t = cq - np.einsum("...ij,...j->...i", R, cp)
    R = np.where(good[..., None, None], R, np.nan)
    t = np.where(good[..., None], t, np.nan)
    return R, t


def _horizontal(P: np.ndarray, i: int, j: int) -> np.ndarray:
    """Horizontal coordinates as complex ``P[..., i] + 1j * P[..., j]`` (a view in 2-D)."""
    if P.shape[-1] == 2 and P.strides[-1] == P.itemsize:
        try:
            return P.view(np.complex128)[..., 0]
        except ValueError:  # a layout numpy cannot reinterpret: build the numbers instead
            pass
    return P[..., i] + 1j * P[..., j]


def _planar_rotation(angle: np.ndarray, n_dims: int, up_axis: str) -> np.ndarray:
    """Rotation matrices (..., D, D) by ``angle`` about the vertical (2-D: in the plane)."""
    i, j = horizontal_axes(n_dims, up_axis)
    c, s = np.cos(angle), np.sin(angle)
    R = np.zeros((*np.shape(angle), n_dims, n_dims))
    if n_dims == 3:
        R[..., _UP_INDEX[up_axis], _UP_INDEX[up_axis]] = 1.0
    R[..., i, i], R[..., i, j], R[..., j, i], R[..., j, j] = c, -s, s, c
    return R


def procrustes_align(
    points: np.ndarray,
    reference: np.ndarray,
    *,
    center: bool = True,
    up_axis: str | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Rotate (and translate) every frame's keypoints onto a reference posture.

    Parameters
    ----------
    points : array, shape (F, K, D)
        Keypoints per frame; NaN points are ignored when fitting and stay NaN.
    reference : array, shape (K, D)
        Target posture.
    center : bool
        True: remove each frame's centroid and put it on the reference centroid (classic
        Procrustes). False: rotate about the coordinate origin only.
    up_axis : {"x", "y", "z"}, optional
        3-D only: rotate about this vertical axis only (yaw), so heights are kept; translation is
        then horizontal only. None allows any 3-D rotation (batched SVD).

    Returns
    -------
    aligned : array, shape (F, K, D)
    rotations : array, shape (F, D, D)
        ``aligned[f, k] = rotations[f] @ (points[f, k] - c_f) + c_ref``.

    Examples
    --------
    >>> ref = np.array([[0.0, 0], [1, 0], [0, 2]])
    >>> rot = np.array([[0.0, -1], [1, 0]])
    >>> aligned, R = procrustes_align((ref @ rot.T)[None], ref)
    >>> bool(np.allclose(aligned[0], ref))
    True
    """
    X = np.asarray(points, dtype=np.float64)
    ref = np.asarray(reference, dtype=np.float64)
    if X.ndim != 3 or ref.shape != X.shape[1:]:
        msg = f"points must be (frames, K, D) and reference (K, D); got {X.shape}, {ref.shape}"
        raise InputError(msg)
    n_dims = X.shape[-1]
    planar = n_dims == 2 or up_axis is not None
    h = list(horizontal_axes(n_dims, up_axis or "z"))
    moved = h if planar else list(range(n_dims))  # coordinates the translation changes
    ok = np.isfinite(X).all(-1)
    cx, cr = np.zeros((len(X), len(moved))), np.zeros(len(moved))
    if center:
        with np.errstate(invalid="ignore"):
            cx = np.where(ok[..., None], X, 0.0)[..., moved].sum(1) / ok.sum(1)[:, None]
        cr = ref[:, moved].mean(0)
    if not planar:
        R, _ = kabsch(X - cx[:, None], np.broadcast_to(ref - cr, X.shape), translate=False)
        return np.einsum("fij,fkj->fki", R, X - cx[:, None]) + cr, R
    a = _horizontal(X, *h) - (cx[:, 0] + 1j * cx[:, 1])[:, None]
    b = _horizontal(ref, *h) - (cr[0] + 1j * cr[1])
    # Closed-form 2-D Kabsch: the best rotation angle is arg(sum conj(a) * b).
    angle = np.angle(np.where(ok, np.conj(a) * b, 0.0).sum(1))
    angle[~ok.any(1)] = np.nan
    z = a * np.exp(1j * angle)[:, None] + (cr[0] + 1j * cr[1])
    R = _planar_rotation(angle, n_dims, up_axis or "z")
    if n_dims == 2:
        return np.ascontiguousarray(z).view(np.float64).reshape(X.shape), R
    aligned = X.copy()
    aligned[..., h[0]], aligned[..., h[1]] = z.real, z.imag
    return aligned, R


def heading_angle(direction: np.ndarray, up_axis: str = "z") -> np.ndarray:
    """Heading of direction vectors (..., D) in the horizontal plane, radians in (-pi, pi]."""
    d = np.asarray(direction, dtype=np.float64)
    i, j = horizontal_axes(d.shape[-1], up_axis)
    return np.arctan2(d[..., j], d[..., i])


def rotate_to_axis(
    points: np.ndarray, origin: np.ndarray, direction: np.ndarray, up_axis: str = "z"
) -> tuple[np.ndarray, np.ndarray]:
    """Egocentric coordinates: move ``origin`` to 0 and turn ``direction`` onto +x.

    The rotation is about the vertical axis only. In 3-D only the horizontal position of the
    origin is removed, so the vertical coordinate stays the height above the floor.

    Parameters
    ----------
    points : array, shape (..., K, D)
    origin : array, shape (..., D)
    direction : array, shape (..., D)
        Body axis (tail side to head side); only its horizontal part is used.
    up_axis : {"x", "y", "z"}
        Vertical axis for 3-D points (ignored in 2-D).

    Returns
    -------
    ego : array, shape (..., K, D)
        Forward along +x (first horizontal axis), sideways along the second.
    heading : array, shape (...)
        World angle of ``direction`` in radians.

    Examples
    --------
    >>> ego, th = rotate_to_axis(np.array([[0.0, 2.0]]), np.zeros(2), np.array([0.0, 1.0]))
    >>> np.round(ego, 12) + 0.0, float(np.round(th, 6))
    (array([[2., 0.]]), 1.570796)
    """
    P = np.asarray(points, dtype=np.float64)
    i, j = horizontal_axes(P.shape[-1], up_axis)
    theta = heading_angle(direction, up_axis)
    o = np.asarray(origin, dtype=np.float64)
    # Horizontal plane as complex numbers: rotating by -theta is one complex product.
    z = _horizontal(P, i, j) - (o[..., i] + 1j * o[..., j])[..., None]
    z *= np.exp(-1j * theta)[..., None]
    if P.shape[-1] == 2:
        return np.ascontiguousarray(z).view(np.float64).reshape(P.shape), theta
    ego = P.copy()
    ego[..., i], ego[..., j] = z.real, z.imag
    return ego, theta


def travel_alignment(points: np.ndarray, travel: np.ndarray, up_axis: str = "z") -> np.ndarray:
    """Mean cosine between every keypoint-to-keypoint direction and the direction of travel.

    Used to find a body axis: on a moving animal the tail-to-head vector points where it goes.

    Parameters
    ----------
    points : array, shape (n, K, D)
        Keypoints on frames of movement.
    travel : array, shape (n, D)
        Velocity of the body on the same frames; only horizontal parts are used.

    Returns
    -------
    array, shape (K, K)
        ``[i, j]`` for the vector from keypoint i to keypoint j (so ``[j, i] = -[i, j]``); NaN on
        the diagonal and where no frame defines it.

    Examples
    --------
    >>> pts = np.array([[[0.0, 0], [1, 0]]] * 3)
    >>> travel_alignment(pts, np.array([[2.0, 0]] * 3))[0, 1]
    np.float64(1.0)
    """
    P = np.asarray(points, dtype=np.float64)
    T = np.asarray(travel, dtype=np.float64)
    h = list(horizontal_axes(P.shape[-1], up_axis))
    P, T = P[..., h], T[..., h]
    with np.errstate(invalid="ignore", divide="ignore"):
        u = T / np.linalg.norm(T, axis=-1, keepdims=True)
        out = np.full((P.shape[1], P.shape[1]), np.nan)
        for i in range(P.shape[1]):
            v = P - P[:, i : i + 1]
            cos = (v * u[:, None, :]).sum(-1) / np.linalg.norm(v, axis=-1)
            ok = np.isfinite(cos)
            out[i] = np.where(ok, cos, 0.0).sum(0) / ok.sum(0)
    np.fill_diagonal(out, np.nan)
    return out


def wrap_angle(angle: np.ndarray) -> np.ndarray:
    """Map angles to [-pi, pi)."""
    return (np.asarray(angle, dtype=np.float64) + np.pi) % (2 * np.pi) - np.pi


def circular_mean(
    angles: np.ndarray, axis: int | None = None, weights: np.ndarray | None = None
) -> np.ndarray | float:
    """Mean direction of angles (radians), ignoring NaN; result in [-pi, pi).

    NaN where no finite angle is given or the resultant vector is zero.

    Examples
    --------
    >>> round(float(circular_mean([0.1, 2 * np.pi + 0.2, 6 * np.pi + 0.3])), 12)
    0.2
    """
    a = np.asarray(angles, dtype=np.float64)
    w = np.ones_like(a) if weights is None else np.broadcast_to(weights, a.shape)
    ok = np.isfinite(a) & np.isfinite(w)
    s = np.where(ok, w * np.sin(np.where(ok, a, 0.0)), 0.0).sum(axis)
    c = np.where(ok, w * np.cos(np.where(ok, a, 0.0)), 0.0).sum(axis)
    mean = np.where((s == 0) & (c == 0), np.nan, wrap_angle(np.arctan2(s, c)))
    return float(mean) if np.ndim(mean) == 0 else mean


def unwrap_angles(angles: np.ndarray, axis: int = 0) -> np.ndarray:
    """Remove 2*pi jumps along ``axis``, stepping over NaN (which stay NaN).

    Each finite angle is moved by a multiple of 2*pi so that it differs from the previous finite
    angle of the same series by less than pi.

    Examples
    --------
    >>> np.round(unwrap_angles([3.0, np.nan, -3.0]), 4)
    array([3.    ,    nan, 3.2832])
    """
    a = np.moveaxis(np.asarray(angles, dtype=np.float64), axis, 0)
    flat = a.reshape(len(a), -1)
    out = np.full_like(flat, np.nan)
    for c in range(flat.shape[1]):
        ok = np.isfinite(flat[:, c])
        vals = flat[ok, c]
        if vals.size:
            step = wrap_angle(np.diff(vals))
            out[ok, c] = vals[0] + np.concatenate(([0.0], np.cumsum(step)))
    return np.moveaxis(out.reshape(a.shape), 0, axis)


def angular_velocity(
    angles: np.ndarray, fps: float, window_s: float = 0.1, causal: bool = False
) -> np.ndarray:
    """Rate of turning in rad/s: Savitzky-Golay derivative of the unwrapped angles.

    Parameters
    ----------
    angles : array, shape (F,) or (F, C)
    fps : float
    window_s : float
        Fitting window in seconds (see ``filters.derivative``).
    causal : bool
        Use past frames only (trailing fit).

    Examples
    --------
    >>> t = np.arange(60) / 30
    >>> w = angular_velocity(np.angle(np.exp(2j * t)), 30)
    >>> bool(np.allclose(w, 2.0))
    True
    """
    from ethoscribe.filters import derivative  # filters never imports geometry: no cycle

    return derivative(unwrap_angles(angles), fps, window_s=window_s, causal=causal)
