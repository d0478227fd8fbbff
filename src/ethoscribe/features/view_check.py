"""Whether 2-D tracks were filmed from above or from the side, read from the tracks.

From above, an animal turns freely in the image plane: the long axis of its body takes every
direction in turn. From the side, gravity fixes the image's vertical: bodies stay mostly
level (a fish, a walking animal) or upright (a standing figure), so the long axis keeps to one
of the image's axes, and animals travel along the floor, far more across the image than up and
down it. Egocentric alignment must then keep the vertical (a rearing or diving body is not a
level one turned): side-view tracks are labelled as 3-D tracks with no depth (horizontal,
depth 0, vertical) whose body frame turns only about the vertical, i.e. mirrors the animal to
face one way, and keeps its height and pitch.

The statistic: per frame, the orientation ``theta`` of the keypoints' principal axis
(``0.5 atan2(2 c_xy, c_xx - c_yy)`` of their covariance), weighted by how elongated the body
is then (``(l1 - l2) / (l1 + l2)``); its axial concentration is the mean resultant length of
``2 theta`` (Mardia & Jupp 2000, "Directional Statistics", axial data). A uniform spread of
directions gives 0, one fixed direction 1.

An animal that cannot turn (a narrow runway filmed from above) also keeps its long axis to one
image axis. What tells the two views apart is what happens when it faces the other way: from
the side the image mirrors the body, so every keypoint keeps its height above or below the
body's centre (ears above, paws below); from above the body turns half round, so a keypoint on
the left of the body moves to the other side of the image axis. Each keypoint's mean offset
across the axis, taken apart by the way the body faces, splits into a part that keeps its sign
(``even``) and a part that turns it over (``odd``); a side view needs ``odd`` no larger than
``even``.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence

import numpy as np

from ethoscribe.errors import InputError, InputWarning, listed
from ethoscribe.pose import IN_SESSIONS, PoseTracks

VIEWS = ("auto", "above", "side")

SIDE_CONCENTRATION = 0.5
"""Axial concentration of the body's long axis from which 2-D tracks read as a side view. On
the validation bench at seed 0, filmed from above it is 0.05-0.13 (voles, pairs, the
independent simulator, the 3-D fish and upright figure projected onto their floor), from the
side 0.94 (the fish) and 0.98 (the figure, upright)."""

LEVEL_DEGREES = 20.0
"""A side view's mean body axis lies within this of an image axis (cameras are levelled);
otherwise the tracks show one fixed direction that gravity does not explain (a corridor)."""

RANGE_RATIO = 0.7
"""The vertical is the image axis along which the body's centre ranges least (5-95 %), less
than this fraction of the other: animals travel along the floor."""

MIN_CHECK_SECONDS = 60.0
"""Sessions shorter than this are not checked against a model's view one by one: in a few
seconds an animal may walk straight along an image axis, which looks like a side view."""

MIRROR_MIN = 0.05
"""The ``odd`` part (root mean square over keypoints, in units of the body's spread) from
which it counts against a side view when it exceeds the ``even`` part. Measured at seed 0
(even / odd): from the side the fish 0.175 / 0.008 and the figure 0.925 / 0.007; from above
0.02-0.19 / 0.09-0.32 on the bench's 2-D sources and the fish and figure projected on their
floor; the same turned to face along x only (a runway) 0.002-0.03 / 0.12-0.44."""

MIN_FACING_SHARE = 0.05
"""Both ways of facing must each hold this share of the frames for the mirror evidence."""

_MAX_FRAMES = 20_000


def view_evidence(sessions: Sequence[PoseTracks]) -> dict[str, float | list[float]]:
    """The statistics :func:`choose_view` reads from 2-D tracks: ``concentration`` (axial,
    0-1) and ``angle`` (degrees from the image's x axis, -90 to 90) of the body's long axis,
    ``range`` (x, y: the body centre's 5-95 % range, median over animals) and ``spread`` (the
    keypoints' root-mean-square distance from their centre, median over frames).

    Examples
    --------
    >>> from ethoscribe.io import from_arrays
    >>> c = np.zeros((30, 2, 2)); c[:, 1, 0] = 4.0; c[:, :, 0] += np.arange(30)[:, None]
    >>> e = view_evidence([from_arrays(c, keypoints=["a", "b"], fps=30)])
    >>> round(e["concentration"], 3), round(e["angle"], 1), e["range"], e["spread"]
    (1.0, 0.0, [26.1, 0.0], 2.0)
    """
    total, weight, ranges, spreads = 0j, 0.0, [], []
    for s in sessions:
        X = s.coords[:: max(1, s.n_frames // _MAX_FRAMES)]  # (F, A, K, 2)
        seen = np.isfinite(X).all(axis=-1)  # (F, A, K); lost keypoints left out
        n = np.maximum(seen.sum(axis=2), 1)  # frames with none seen give NaN below
        none = ~seen.any(axis=2)
        centroid = np.where(seen[..., None], X, 0.0).sum(axis=2) / n[..., None]
        centroid[none] = np.nan
        d = np.where(seen[..., None], X - centroid[:, :, None], 0.0)
        cxx, cyy, cxy = ((d[..., 0] ** 2).sum(-1) / n, (d[..., 1] ** 2).sum(-1) / n,
                         (d[..., 0] * d[..., 1]).sum(-1) / n)  # fmt: skip
        cxx[none] = np.nan
        spread = cxx + cyy
        gap = np.hypot(cxx - cyy, 2 * cxy)  # l1 - l2
        ok = np.isfinite(gap) & (spread > 0)
        w = np.where(ok, gap / np.where(ok, spread, 1.0), 0.0)  # elongation, 0-1
        doubled = np.where(ok, np.arctan2(2 * cxy, cxx - cyy), 0.0)  # 2 theta
        spreads.append(np.sqrt(spread[ok]))
        total += np.sum(w * np.exp(1j * doubled))
        weight += float(w.sum())
        for a in range(centroid.shape[1]):
            c = centroid[:, a][np.isfinite(centroid[:, a]).all(axis=-1)]
            if len(c) >= 2:
                ranges.append(np.percentile(c, 95, axis=0) - np.percentile(c, 5, axis=0))
    mean = total / weight if weight > 0 else 0j
    rng = np.median(ranges, axis=0) if ranges else np.zeros(2)
    size = np.concatenate(spreads) if spreads else np.zeros(0)
    return {
        "concentration": float(abs(mean)),
        "angle": float(np.degrees(np.angle(mean) / 2)),
        "range": [round(float(v), 3) for v in rng],
        "spread": round(float(np.median(size)), 3) if size.size else 0.0,
    }


def mirror_evidence(sessions: Sequence[PoseTracks], vertical: str) -> dict[str, float] | None:
    """How the keypoints' offsets across the horizontal image axis behave when the body faces
    the other way along it (module doc): ``even`` (kept, as from the side) and ``odd``
    (turned over, as from above), root mean square over keypoints in units of the body's
    spread, and ``facing`` (the share of frames facing one way). None when the bodies do not
    face both ways (each way at least ``MIN_FACING_SHARE`` of the frames) in at least 100
    frames with every keypoint seen.

    Which way a body faces is the sign of its keypoints' offsets along the horizontal axis
    projected on their first principal direction (the body's profile along its axis): a
    body facing the other way has that profile negated, whether mirrored or turned.

    Examples
    --------
    >>> from ethoscribe.io import from_arrays
    >>> side = np.array([[[2.0, 0.0], [-2.0, 0.0], [0.0, 1.0]],     # nose, tail, ear above
    ...                  [[-2.0, 0.0], [2.0, 0.0], [0.0, 1.0]]] * 60)  # facing back: mirrored
    >>> e = mirror_evidence([from_arrays(side[:, None], keypoints=list("nte"), fps=30)], "y")
    >>> (e["even"] > 0.2, e["odd"] < 1e-9)
    (True, True)
    >>> top = side.copy(); top[1::2, 2, 1] = -1.0                     # turned: the ear flips
    >>> e = mirror_evidence([from_arrays(top[:, None], keypoints=list("nte"), fps=30)], "y")
    >>> (e["even"] < 1e-9, e["odd"] > 0.2)
    (True, True)
    """
    h, v = (0, 1) if vertical == "y" else (1, 0)
    rows = []
    for s in sessions:
        X = s.coords[:: max(1, s.n_frames // _MAX_FRAMES)]
        X = X.reshape(-1, *X.shape[2:])  # (frames x animals, K, 2)
        X = X[np.isfinite(X).all(axis=(1, 2))]
        rows.append(X - X.mean(axis=1, keepdims=True))
    d = np.concatenate(rows) if rows else np.zeros((0, 0, 2))
    if len(d) < 100 or d.shape[1] < 2:
        return None
    profile = np.linalg.svd(d[..., h], full_matrices=False)[2][0]
    facing = d[..., h] @ profile > 0
    share = float(facing.mean())
    if min(share, 1 - share) < MIN_FACING_SHARE:
        return None
    one, other = d[facing, :, v].mean(axis=0), d[~facing, :, v].mean(axis=0)
    spread = float(np.sqrt(np.median((d**2).sum(-1).mean(axis=1))))
    if spread <= 0:
        return None
    rms = lambda a: float(np.sqrt(np.mean(a**2)) / spread)  # noqa: E731
    return {"even": rms((one + other) / 2), "odd": rms((one - other) / 2), "facing": share}


def choose_view(sessions: Sequence[PoseTracks]) -> tuple[str, str | None, str]:
    """``("side", vertical, why)`` when 2-D tracks read as filmed from the side (the body's
    long axis keeps to an image axis, concentration >= ``SIDE_CONCENTRATION`` within
    ``LEVEL_DEGREES``), with the vertical the image axis along which the body centre ranges
    least (< ``RANGE_RATIO`` of the other), unless the keypoints cross the body's axis when it
    faces the other way (:func:`mirror_evidence`: a runway seen from above); where the ranges
    are alike, the axis across a level body, if its keypoints keep their side then; else
    ``("above", None, why)``, also when the animals do not travel their body's spread
    (tethered or head-fixed: a fixed body axis gives the same body frame either way)."""
    e = view_evidence(sessions)
    r, angle, (rx, ry) = e["concentration"], float(np.round(e["angle"])) + 0.0, e["range"]
    off_axis = min(abs(angle), abs(abs(angle) - 90.0))
    said = (
        f"the body's long axis keeps to {angle:.0f} degrees from the image's x axis with "
        f"concentration {r:.2f}; the body centre ranges {rx:.3g} along x, {ry:.3g} along y"
    )
    if r < SIDE_CONCENTRATION or off_axis > LEVEL_DEGREES:
        return "above", None, said
    if max(rx, ry) < e["spread"]:  # tethered or head-fixed: both frames nearly alike
        return "above", None, f"{said}, less than the body's spread: no sign of gravity"
    vertical = "y" if ry < RANGE_RATIO * rx else "x" if rx < RANGE_RATIO * ry else None
    if vertical is None:
        # The ranges do not tell (a fish swims the tank's whole height): a level body lies
        # across the vertical, and from the side its keypoints keep their side of the body's
        # axis when it faces the other way (a dorsal fin stays above).
        vertical = "y" if abs(angle) <= LEVEL_DEGREES else "x"
        m = mirror_evidence(sessions, vertical)
        if m is None or m["even"] < MIRROR_MIN or m["even"] <= m["odd"]:
            return "above", None, said
        return (
            "side",
            vertical,
            (
                f"{said}, alike; the keypoints keep their side of the body's axis when it faces "
                f"the other way (kept {m['even']:.2f}, turned over {m['odd']:.2f} of the body's "
                "spread): a level body seen from the side"
            ),
        )
    m = mirror_evidence(sessions, vertical)
    if m is not None and m["odd"] >= MIRROR_MIN and m["odd"] > m["even"]:
        return (
            "above",
            None,
            (
                f"{said}; but the keypoints cross the body's axis when it faces the other way "
                f"(turned over {m['odd']:.2f}, kept {m['even']:.2f} of the body's spread): a body "
                "turned half round, seen from above (a runway)"
            ),
        )
    return "side", vertical, said


def resolve_view(sessions: Sequence[PoseTracks], view: str) -> tuple[str, str | None, str]:
    """The camera's view of 2-D tracks, its vertical image axis and how it was chosen:
    ``view`` itself when given ("above"; "side" with y as the vertical, the image's rows,
    unless the animals range less than ``RANGE_RATIO`` as far along x as along y), else
    (``"auto"``) :func:`choose_view`'s. 3-D tracks: ``("above", None, "")``."""
    if view not in VIEWS:
        raise InputError(f"view must be one of {list(VIEWS)}; got {view!r}")
    if not sessions or sessions[0].n_dims != 2:
        return "above", None, ""
    if view == "above":
        read, _, why = choose_view(sessions)
        if read == "side":
            warnings.warn(
                f"view='above' is given, but the tracks read as filmed from the side ({why}): "
                "from above the body frame turns the animal freely, so a rearing or diving "
                "body reads as a level one turned. If the camera looked from the side, pass "
                "view='side' (command line: --view side)",
                InputWarning,
                stacklevel=3,
            )
        return "above", None, "from above (given)"
    if view == "side":
        # Given side: the vertical is still read (a camera turned a quarter has x vertical),
        # from the ranges alone; y, the image's rows, unless the animals clearly range less
        # along x.
        rx, ry = view_evidence(sessions)["range"]
        if rx < RANGE_RATIO * ry:
            why = f"the body centre ranges {rx:.3g} along x, {ry:.3g} along y"
            return "side", "x", f"from the side (given), x vertical (read from the tracks: {why})"
        return "side", "y", "from the side, y vertical (given)"
    chosen, vertical, why = choose_view(sessions)
    if chosen == "side":
        return "side", vertical, f"from the side, {vertical} vertical (read from the tracks: {why})"
    return "above", None, f"from above (read from the tracks: {why})"


def image_rows_down(sessions: Sequence[PoseTracks], vertical: str | None) -> bool:
    """Whether a side view's ``vertical`` grows downwards: y of image coordinates (in pixels,
    or calibrated from pixels, ``meta["calibration"]``), whose -y then points up. An image's
    x has no such convention (a camera turned a quarter either way gives x up or down)."""
    return vertical == "y" and any(
        s.units == "px" or (s.meta.get("calibration") or {}).get("from") == "px" for s in sessions
    )


def lift_side_view(tracks: PoseTracks, vertical: str, flip: bool = False) -> PoseTracks:
    """2-D side-view tracks as 3-D ones (horizontal, depth 0, vertical): the body frame of a
    3-D study (turns about z only) then mirrors the animal to face one way and keeps its
    height and pitch. ``flip``: the vertical axis grows downwards (image rows,
    :func:`image_rows_down`), so z is its negative.

    Examples
    --------
    >>> from ethoscribe.io import from_arrays
    >>> t = from_arrays(np.array([[[1.0, 2.0]], [[3.0, 4.0]]]), keypoints=["a"], fps=30)
    >>> lift_side_view(t, "y").coords[:, 0, 0].tolist()
    [[1.0, 0.0, 2.0], [3.0, 0.0, 4.0]]
    >>> lift_side_view(t, "y", flip=True).coords[:, 0, 0].tolist()
    [[1.0, 0.0, -2.0], [3.0, 0.0, -4.0]]
    """
    if tracks.n_dims != 2:
        raise InputError(f"only 2-D tracks are lifted; '{tracks.session}' is {tracks.n_dims}-D")
    return tracks.replace(coords=lift_side_coords(tracks.coords, vertical, flip))


def lift_side_coords(coords: np.ndarray, vertical: str, flip: bool = False) -> np.ndarray:
    """:func:`lift_side_view` of bare coordinates ``(..., 2)`` -> ``(..., 3)``: also one
    streamed frame ``(animals, keypoints, 2)``, lifted as its session would be."""
    h, v = (0, 1) if vertical == "y" else (1, 0)
    c = np.asarray(coords, dtype=np.float64)
    up = -c[..., v] if flip else c[..., v]
    return np.stack([c[..., h], np.zeros_like(c[..., h]), up], axis=-1)


def warn_other_view(sessions: Sequence[PoseTracks], fitted: str) -> list[str]:
    """Warn (``InputWarning``) naming 2-D sessions that look filmed otherwise than the model's
    training tracks (``fitted``: "above" or "side"), as a cohort filmed by another camera would;
    returns their names. From above: a session that reads as a side view (:func:`choose_view`).
    From the side: a session whose body turns freely in the image (concentration below
    ``SIDE_CONCENTRATION``); one that merely does not travel is not named, nor one shorter
    than ``MIN_CHECK_SECONDS``."""
    odd = []
    for s in sessions:
        if s.n_dims != 2 or s.n_frames < MIN_CHECK_SECONDS * s.fps:
            continue
        if fitted == "above" and choose_view([s])[0] == "side":
            odd.append(s.session)
        elif fitted == "side" and view_evidence([s])["concentration"] < SIDE_CONCENTRATION:
            odd.append(s.session)
    if odd:
        seen = "from the side" if fitted == "above" else "from above (the body turns freely)"
        warnings.warn(
            f"tracks that look filmed {seen}, but the model was fitted on tracks filmed "
            f"from {fitted}: its body frame does not suit them (features.view_check); fit a "
            f"model on such tracks{IN_SESSIONS}{listed(repr(n) for n in odd)}",
            InputWarning,
            stacklevel=3,
        )
    return odd
