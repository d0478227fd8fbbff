"""Declared body plans: the keypoints of an animal and the skeleton drawn between them.

Users declare the animals they track (:func:`declare_body_plan`); the bundled example animals
(the invented dune vole and glass minnow of ``example_sessions``) are declared here too, so
drawings find their skeleton without importing the simulator. A set of keypoints with no
declared plan gets a skeleton derived from the data (the workspace's posture figures).

Examples
--------
>>> declare_body_plan("three_dots", ["a", "b", "c"], [("a", "b"), ("b", "c")]).skeleton
(('a', 'b'), ('b', 'c'))
>>> body_plan_for(["c", "b", "a"]).name
'three_dots'
>>> forget_body_plan("three_dots")
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from ethoscribe.errors import InputError


@dataclass(frozen=True)
class DeclaredBodyPlan:
    """Keypoint names, skeleton edges and left/right pairs of one kind of animal."""

    name: str
    keypoints: tuple[str, ...]
    skeleton: tuple[tuple[str, str], ...]
    swap_pairs: tuple[tuple[str, str], ...] = ()


_PLANS: dict[str, DeclaredBodyPlan] = {}


def declare_body_plan(
    name: str,
    keypoints: Sequence[str],
    skeleton: Sequence[tuple[str, str]],
    swap_pairs: Sequence[tuple[str, str]] = (),
) -> DeclaredBodyPlan:
    """Declare (or replace) the body plan ``name``; edges must join declared keypoints."""
    kps = tuple(str(k) for k in keypoints)
    edges = tuple((str(a), str(b)) for a, b in skeleton)
    pairs = tuple((str(a), str(b)) for a, b in swap_pairs)
    unknown = sorted({k for e in (*edges, *pairs) for k in e} - set(kps))
    if unknown or len(set(kps)) != len(kps):
        msg = (
            f"body plan {name!r}: keypoints must be distinct and the skeleton and swap pairs "
            f"may only name them; unknown {unknown}, keypoints {list(kps)}"
        )
        raise InputError(msg)
    plan = DeclaredBodyPlan(str(name), kps, edges, pairs)
    _PLANS[plan.name] = plan
    return plan


def forget_body_plan(name: str) -> None:
    """Remove a declared body plan (no error if there is none)."""
    _PLANS.pop(name, None)


def body_plan_for(keypoints: Sequence[str]) -> DeclaredBodyPlan | None:
    """The declared plan with exactly these keypoints (in any order), or None."""
    names = {str(k) for k in keypoints}
    return next((p for p in _PLANS.values() if set(p.keypoints) == names), None)


def declared_body_plans() -> dict[str, DeclaredBodyPlan]:
    """Every declared plan by name."""
    return dict(_PLANS)


# --- the bundled example animals (invented; see example_sessions/README.md) ---------------
DUNE_VOLE = declare_body_plan(
    "dune_vole",
    keypoints=(
        "nose", "left_ear", "right_ear", "neck", "left_forepaw", "right_forepaw",
        "body_centre", "left_hindpaw", "right_hindpaw", "tail_base",
    ),
    skeleton=(
        ("nose", "left_ear"), ("nose", "right_ear"), ("left_ear", "neck"), ("right_ear", "neck"),
        ("neck", "body_centre"), ("neck", "left_forepaw"), ("neck", "right_forepaw"),
        ("body_centre", "left_hindpaw"), ("body_centre", "right_hindpaw"),
        ("body_centre", "tail_base"),
    ),
    swap_pairs=(
        ("left_ear", "right_ear"), ("left_forepaw", "right_forepaw"),
        ("left_hindpaw", "right_hindpaw"),
    ),
)  # fmt: skip
GLASS_MINNOW = declare_body_plan(
    "glass_minnow",
    keypoints=(
        "snout", "head", "left_fin", "right_fin", "dorsal_fin", "trunk", "rear_trunk",
        "tail_stem", "tail_tip",
    ),
    skeleton=(
        ("snout", "head"), ("head", "trunk"), ("trunk", "rear_trunk"), ("rear_trunk", "tail_stem"),
        ("tail_stem", "tail_tip"), ("head", "left_fin"), ("head", "right_fin"),
        ("trunk", "dorsal_fin"),
    ),
    swap_pairs=(("left_fin", "right_fin"),),
)  # fmt: skip
