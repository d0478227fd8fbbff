"""Invented animals the simulator knows: the dune vole (2-D, top view) and glass minnow (3-D).

Both are made up for demonstration and tests; no real species or laboratory is described.
Positions are in mm in the body frame: forward, left (and up for the fish).
"""

from __future__ import annotations

import numpy as np

from ethoscribe.body_plans import DUNE_VOLE as DECLARED_VOLE
from ethoscribe.body_plans import GLASS_MINNOW as DECLARED_MINNOW
from ethoscribe.errors import InputError
from ethoscribe.simulate.plan import (
    Behaviour,
    BodyPlan,
    BoutDuration,
    GroupEffect,
    Rhythm,
    TrackingNoise,
)

VOLE_KEYPOINTS = DECLARED_VOLE.keypoints


def _vole_posture(nose, ear, neck, forepaw, hindpaw, tail, centre=(0.0, 0.0)):
    """A symmetric posture from (forward, half-width) of each part."""
    return {
        "nose": (nose, 0.0),
        "left_ear": (ear[0], ear[1]),
        "right_ear": (ear[0], -ear[1]),
        "neck": (neck, 0.0),
        "left_forepaw": (forepaw[0], forepaw[1]),
        "right_forepaw": (forepaw[0], -forepaw[1]),
        "body_centre": centre,
        "left_hindpaw": (hindpaw[0], hindpaw[1]),
        "right_hindpaw": (hindpaw[0], -hindpaw[1]),
        "tail_base": (tail, 0.0),
    }


_STRETCHED = _vole_posture(45, (30, 8), 24, (22, 11), (-22, 13), -40)
_ALERT = _vole_posture(40, (27, 8), 21, (18, 11), (-20, 13), -38)
_HUNCHED = _vole_posture(26, (18, 7), 14, (22, 5), (-12, 13), -26)
_CURLED = {
    "nose": (6.0, -16.0), "left_ear": (15.0, 5.0), "right_ear": (11.0, -8.0),
    "neck": (13.0, -1.0), "left_forepaw": (8.0, 5.0), "right_forepaw": (5.0, -8.0),
    "body_centre": (0.0, 0.0), "left_hindpaw": (-10.0, 10.0), "right_hindpaw": (-11.0, -9.0),
    "tail_base": (-17.0, -7.0),
}  # fmt: skip

# Trot: diagonal paws move together, the other diagonal half a cycle later.
_TROT = Rhythm(
    "stride",
    3.5,
    amplitude={k: (8.0, 0.0) for k in VOLE_KEYPOINTS if "paw" in k}
    | {"nose": (0.0, 1.5), "tail_base": (0.0, 2.0)},
    phase_offset={"right_forepaw": np.pi, "left_hindpaw": np.pi, "tail_base": np.pi},
)

_VOLE_BEHAVIOURS = (
    Behaviour(
        "resting", _CURLED, BoutDuration("lognormal", 6.0, 0.8), turn_noise=0.02,
        rhythms=(Rhythm("breathing", 2.0, {"left_hindpaw": (0.0, 0.6),
                                           "right_hindpaw": (0.0, -0.6)}),),
    ),
    Behaviour(
        "walking", _STRETCHED, BoutDuration("gamma", 2.5, 0.6), speed=(100.0, 300.0),
        speed_wobble=0.1, turn_noise=1.2, rhythms=(_TROT,),
    ),
    Behaviour(
        "grooming", _HUNCHED, BoutDuration("lognormal", 6.0, 0.9), turn_noise=0.05,
        rhythms=(Rhythm("face_wash", 6.0, {
            "nose": (4.0, 2.0), "left_ear": (2.5, 1.0), "right_ear": (2.5, 1.0),
            "neck": (1.0, 0.0), "left_forepaw": (5.0, 1.0), "right_forepaw": (5.0, -1.0)}),),
    ),
    Behaviour(
        "rearing", _vole_posture(12, (6, 7), 4, (8, 6), (-8, 12), -24),
        BoutDuration("gamma", 1.8, 0.3), turn_noise=0.1,
        rhythms=(Rhythm("sway", 0.5, {"nose": (0.0, 3.0), "left_ear": (0.0, 2.0),
                                      "right_ear": (0.0, 2.0)}),),
    ),
    Behaviour(
        "digging", _vole_posture(36, (24, 7), 18, (34, 7), (-18, 14), -34),
        BoutDuration("gamma", 2.0, 0.5), turn_noise=0.05,
        rhythms=(
            Rhythm("scrape", 4.0, {"left_forepaw": (7.0, 1.5), "right_forepaw": (7.0, -1.5),
                                   "nose": (1.0, 0.0)},
                   phase_offset={"right_forepaw": np.pi}),
            Rhythm("kick", 1.0, {"left_hindpaw": (-4.0, 0.0), "right_hindpaw": (-4.0, 0.0),
                                 "tail_base": (-1.5, 0.0)}),
        ),
    ),
    # Scanning and freezing share one mean posture; only their rhythms tell them apart.
    Behaviour(
        "scanning", _ALERT, BoutDuration("gamma", 2.5, 0.6), speed=(0.0, 15.0),
        turn_noise=0.4,
        rhythms=(
            Rhythm("head_sweep", 1.0, {"nose": (0.0, 9.0), "left_ear": (0.0, 5.0),
                                       "right_ear": (0.0, 5.0), "neck": (0.0, 2.5)}),
            Rhythm("nose_twitch", 8.0, {"nose": (1.2, 0.0)}),
        ),
    ),
    Behaviour("freezing", _ALERT, BoutDuration("lognormal", 2.5, 0.5), turn_noise=0.0),
    Behaviour(
        "approaching", _STRETCHED, BoutDuration("gamma", 2.0, 0.4), speed=(60.0, 220.0),
        turn_noise=0.3, rhythms=(_TROT,), social=True,
    ),
)  # fmt: skip

DUNE_VOLE = BodyPlan(
    name="dune_vole",
    description=(
        "Invented burrowing rodent, nose to tail base ~85 mm, filmed from above in a 400 x 400 mm "
        "open arena at ~2.5 px/mm"
    ),
    keypoints=VOLE_KEYPOINTS,
    skeleton=DECLARED_VOLE.skeleton,
    swap_pairs=DECLARED_VOLE.swap_pairs,
    origin="body_centre",
    axis=("tail_base", "neck"),
    dims=2,
    behaviours=_VOLE_BEHAVIOURS,
    transitions={
        "resting": {"walking": 0.4, "grooming": 0.3, "scanning": 0.3},
        "walking": {
            "scanning": 0.3,
            "rearing": 0.2,
            "digging": 0.35,
            "grooming": 0.1,
            "resting": 0.1,
            "freezing": 0.15,
            "approaching": 0.1,
        },
        "grooming": {"walking": 0.4, "resting": 0.3, "scanning": 0.3},
        "rearing": {"walking": 0.5, "scanning": 0.4, "grooming": 0.1},
        "digging": {"walking": 0.5, "scanning": 0.3, "grooming": 0.2},
        "scanning": {
            "walking": 0.45,
            "rearing": 0.25,
            "digging": 0.35,
            "freezing": 0.15,
            "approaching": 0.1,
        },
        "freezing": {"scanning": 0.5, "walking": 0.5},
        "approaching": {"scanning": 0.5, "walking": 0.3, "grooming": 0.2},
    },
    groups=("standard", "enriched"),
    group_effects={"enriched": GroupEffect("digging", time_budget_ratio=1.8, duration_ratio=1.3)},
    arena=(400.0, 400.0),
    wall_margin=50.0,
    noise=TrackingNoise(
        jitter=1.5,
        jitter_scale={k: 1.6 for k in VOLE_KEYPOINTS if "paw" in k},
        outlier_distance=(20.0, 150.0),
        occlusion_scale={k: 3.0 for k in VOLE_KEYPOINTS if "paw" in k},
        guess_spread=8.0,
    ),
    physical_units="mm",
    coordinate_units="px",
    px_per_unit=2.5,
    scale_spread=0.04,
    placement_spread=40.0,
    subject_prefix="vole",
)

FISH_KEYPOINTS = DECLARED_MINNOW.keypoints
_FISH_FORWARD = {"snout": 16.0, "head": 10.0, "left_fin": 7.0, "right_fin": 7.0,
                 "dorsal_fin": 0.0, "trunk": 0.0, "rear_trunk": -6.0, "tail_stem": -11.0,
                 "tail_tip": -17.0}  # fmt: skip


def _fish_posture(fin_width: float, fin_down: float) -> dict[str, tuple[float, float, float]]:
    p = {k: (u, 0.0, 0.0) for k, u in _FISH_FORWARD.items()}
    p["dorsal_fin"] = (0.0, 0.0, 4.0)
    p["left_fin"] = (7.0, fin_width, -fin_down)
    p["right_fin"] = (7.0, -fin_width, -fin_down)
    return p


def _body_wave(name: str, frequency: float, gain: float) -> Rhythm:
    """A travelling wave down the body: amplitude grows toward the tail, one wave per body."""
    amp = {"snout": 0.4, "head": 0.3, "left_fin": 0.3, "right_fin": 0.3, "dorsal_fin": 0.4,
           "trunk": 0.5, "rear_trunk": 1.0, "tail_stem": 2.0, "tail_tip": 3.5}  # fmt: skip
    wavelength = 30.0
    return Rhythm(
        name,
        frequency,
        {k: (0.0, gain * a, 0.0) for k, a in amp.items()},
        {k: -2 * np.pi * (16.0 - _FISH_FORWARD[k]) / wavelength for k in amp},
    )


_C_BEND = {k: (0.0, 0.02 * u**2, 0.0) for k, u in _FISH_FORWARD.items()}

GLASS_MINNOW = BodyPlan(
    name="glass_minnow",
    description=(
        "Invented small schooling fish, standard length ~33 mm, tracked in 3-D (mm) in a "
        "240 x 160 x 100 mm tank"
    ),
    keypoints=FISH_KEYPOINTS,
    skeleton=DECLARED_MINNOW.skeleton,
    swap_pairs=DECLARED_MINNOW.swap_pairs,
    origin="trunk",
    axis=("tail_stem", "head"),
    dims=3,
    behaviours=(
        Behaviour(
            "hovering",
            _fish_posture(3.5, 1.0),
            BoutDuration("lognormal", 4.0, 0.8),
            speed=(0.0, 4.0),
            turn_noise=0.3,
            rhythms=(
                Rhythm(
                    "fin_scull", 5.0, {"left_fin": (1.2, 0.0, 0.8), "right_fin": (1.2, 0.0, 0.8)}
                ),
                _body_wave("slow_wave", 1.0, 0.15),
            ),
        ),
        Behaviour(
            "cruising",
            _fish_posture(1.5, 0.5),
            BoutDuration("gamma", 3.0, 0.6),
            speed=(30.0, 70.0),
            speed_wobble=0.1,
            turn_noise=0.6,
            climb=0.25,
            rhythms=(_body_wave("body_wave", 3.0, 1.0),),
        ),
        Behaviour(
            "burst",
            _fish_posture(1.0, 0.3),
            BoutDuration("gamma", 0.6, 0.4),
            speed=(150.0, 300.0),
            turn_noise=1.0,
            climb=0.3,
            rhythms=(_body_wave("fast_wave", 9.0, 1.6),),
        ),
        Behaviour(
            "turning",
            _fish_posture(2.5, 0.8),
            BoutDuration("gamma", 0.5, 0.3),
            speed=(10.0, 40.0),
            turn_noise=0.5,
            turn_rate=(4.0, 8.0),
            bend=_C_BEND,
        ),
    ),
    transitions={
        "hovering": {"cruising": 0.6, "turning": 0.3, "burst": 0.1},
        "cruising": {"hovering": 0.4, "turning": 0.4, "burst": 0.2},
        "burst": {"cruising": 0.6, "hovering": 0.2, "turning": 0.2},
        "turning": {"cruising": 0.5, "hovering": 0.3, "burst": 0.2},
    },
    groups=("bare_tank", "planted_tank"),
    group_effects={
        "planted_tank": GroupEffect("hovering", time_budget_ratio=1.4, duration_ratio=1.0)
    },
    arena=(240.0, 160.0, 100.0),
    wall_margin=20.0,
    noise=TrackingNoise(
        jitter=0.25,
        jitter_scale={"left_fin": 2.0, "right_fin": 2.0, "tail_tip": 1.5},
        outlier_rate=0.002,
        outlier_distance=(5.0, 30.0),
        occlusion_rate_per_s=0.02,
        occlusion_scale={"left_fin": 3.0, "right_fin": 3.0},
        guess_spread=2.0,
        swap_rate_per_s=0.03,
    ),
    physical_units="mm",
    coordinate_units="mm",
    px_per_unit=1.0,
    subject_prefix="minnow",
)

BODY_PLANS: dict[str, BodyPlan] = {p.name: p for p in (DUNE_VOLE, GLASS_MINNOW)}


def get_body_plan(body_plan: str | BodyPlan) -> BodyPlan:
    """The body plan named ``body_plan`` (or the plan itself when one is given).

    Examples
    --------
    >>> get_body_plan("glass_minnow").dims
    3
    """
    if isinstance(body_plan, BodyPlan):
        return body_plan
    if body_plan not in BODY_PLANS:
        msg = f"unknown body plan {body_plan!r}; known body plans: {sorted(BODY_PLANS)}"
        raise InputError(msg)
    return BODY_PLANS[body_plan]
