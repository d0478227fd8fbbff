"""Body plans of invented animals: keypoints, postures, rhythms and the behaviour process.

A :class:`BodyPlan` says everything the simulator needs about one kind of animal: its keypoints
and skeleton, which keypoints come in left/right pairs, a posture (keypoint positions in the
body frame) per behaviour, the rhythms laid on top of each posture, how fast each behaviour moves
the body, how long its bouts last, which behaviour follows which (a semi-Markov process), and what
differs between housing groups. Lengths are in the plan's physical unit (mm); the body frame has
axes (forward, left) in 2-D and (forward, left, up) in 3-D, origin at ``plan.origin``.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np
import pandas as pd
from scipy import optimize

from ethoscribe.errors import InputError

Vector = tuple[float, ...]


@dataclass(frozen=True)
class BoutDuration:
    """Distribution of one behaviour's bout durations, in seconds.

    ``kind`` is ``"gamma"`` (shape ``1/cv**2``, scale ``mean_s * cv**2``) or ``"lognormal"``
    (``sigma**2 = log(1 + cv**2)``, ``mu = log(mean_s) - sigma**2 / 2``); both have mean
    ``mean_s`` and coefficient of variation ``cv``.

    Examples
    --------
    >>> d = BoutDuration("gamma", mean_s=2.0, cv=0.5)
    >>> round(float(d.sample(np.random.default_rng(0), 20000).mean()), 1)
    2.0
    """

    kind: str
    mean_s: float
    cv: float

    def __post_init__(self) -> None:
        if self.kind not in ("gamma", "lognormal"):
            msg = f"bout duration kind must be 'gamma' or 'lognormal'; got {self.kind!r}"
            raise InputError(msg)
        if not (self.mean_s > 0 and self.cv > 0):
            msg = f"bout duration needs mean_s > 0 and cv > 0; got {self.mean_s}, {self.cv}"
            raise InputError(msg)

    def scaled(self, factor: float) -> BoutDuration:
        """The same shape with the mean multiplied by ``factor``."""
        return BoutDuration(self.kind, self.mean_s * factor, self.cv)

    def sample(self, rng: np.random.Generator, size: int | None = None) -> np.ndarray | float:
        """Draw durations in seconds."""
        if self.kind == "gamma":
            shape = 1.0 / self.cv**2
            return rng.gamma(shape, self.mean_s / shape, size)
        sigma2 = np.log1p(self.cv**2)
        return rng.lognormal(np.log(self.mean_s) - sigma2 / 2, np.sqrt(sigma2), size)


@dataclass(frozen=True)
class Rhythm:
    """A periodic movement of some keypoints, laid on a behaviour's posture.

    Keypoint ``k`` moves by ``amplitude[k] * sin(phase(t) + phase_offset[k])`` in the body frame,
    where ``phase`` advances at ``frequency_hz`` times a per-bout factor drawn uniformly in
    ``[1 - jitter, 1 + jitter]``.
    """

    name: str
    frequency_hz: float
    amplitude: Mapping[str, Vector]
    phase_offset: Mapping[str, float] = field(default_factory=dict)
    jitter: float = 0.05


@dataclass(frozen=True)
class Behaviour:
    """One behaviour state: posture, rhythms, movement and bout durations.

    Parameters
    ----------
    name : str
        Plain name (``"grooming"``).
    posture : mapping keypoint -> vector
        Mean body-frame position of every keypoint (physical units).
    duration : BoutDuration
        Bout duration distribution.
    speed : (low, high)
        Range of the per-bout travel speed (physical units per second); the speed within a bout
        wobbles by ``speed_wobble`` (relative) but stays in the range.
    turn_noise : float
        Standard deviation of random turning (rad/s).
    turn_rate : (low, high)
        Range of a deliberate turn rate (rad/s) to the bout's side (left or right, 50/50).
    bend : mapping keypoint -> vector
        Displacement toward the bout's side (a C-shaped bend while turning).
    rhythms : tuple of Rhythm
        Periodic movements during this behaviour.
    climb : float
        Largest pitch (rad) of travel in 3-D.
    social : bool
        Only occurs with several animals: the animal heads for its nearest partner.
    """

    name: str
    posture: Mapping[str, Vector]
    duration: BoutDuration
    speed: tuple[float, float] = (0.0, 0.0)
    speed_wobble: float = 0.0
    turn_noise: float = 0.05
    turn_rate: tuple[float, float] = (0.0, 0.0)
    bend: Mapping[str, Vector] = field(default_factory=dict)
    rhythms: tuple[Rhythm, ...] = ()
    climb: float = 0.0
    social: bool = False


@dataclass(frozen=True)
class TrackingNoise:
    """What a markerless tracker does to true positions (in the plan's coordinate units).

    Attributes
    ----------
    jitter : standard deviation per axis of every point's error; ``jitter_scale`` multiplies it
        per keypoint.
    good_confidence : (low, high) range of the confidence of correctly tracked points.
    low_confidence : (low, high) range of the confidence of outliers and guessed points.
    outlier_rate : probability that a point is thrown ``outlier_distance`` away.
    glitch_rate : probability per frame and animal that all its points jump together.
    occlusion_rate_per_s : rate of occlusion runs per keypoint (times ``occlusion_scale``).
    occlusion_mean_s : mean length of an occlusion run (exponential).
    occlusion_missing_share : share of occlusion runs given as NaN; the rest are guessed points
        spread by ``guess_spread`` with low confidence.
    swap_rate_per_s, swap_mean_s : left/right swaps of each pair in ``swap_pairs``.
    """

    jitter: float = 1.5
    jitter_scale: Mapping[str, float] = field(default_factory=dict)
    good_confidence: tuple[float, float] = (0.6, 1.0)
    low_confidence: tuple[float, float] = (0.02, 0.4)
    outlier_rate: float = 0.003
    outlier_distance: tuple[float, float] = (20.0, 150.0)
    glitch_rate: float = 0.001
    occlusion_rate_per_s: float = 0.03
    occlusion_scale: Mapping[str, float] = field(default_factory=dict)
    occlusion_mean_s: float = 0.5
    occlusion_missing_share: float = 0.5
    guess_spread: float = 8.0
    swap_rate_per_s: float = 0.02
    swap_mean_s: float = 0.25

    def __post_init__(self) -> None:
        bad = [
            name
            for name in ("jitter", "outlier_rate", "glitch_rate", "occlusion_rate_per_s",
                         "occlusion_mean_s", "guess_spread", "swap_rate_per_s", "swap_mean_s")
            if not getattr(self, name) >= 0
        ]  # fmt: skip
        bad += [n for n in ("outlier_rate", "glitch_rate", "occlusion_missing_share")
                if not getattr(self, n) <= 1]  # fmt: skip
        bad += [n for n in ("good_confidence", "low_confidence")
                if not 0 <= min(getattr(self, n)) <= max(getattr(self, n)) <= 1]  # fmt: skip
        if bad:
            msg = (
                f"tracking noise settings out of range: {bad}; rates, lengths and spreads must "
                "be >= 0, probabilities and shares at most 1, confidence ranges within [0, 1]"
            )
            raise InputError(msg)


@dataclass(frozen=True)
class GroupEffect:
    """A planted group difference: ``behaviour`` takes ``time_budget_ratio`` times the baseline
    group's expected share of time.

    With ``duration_ratio=None`` only that behaviour's bouts get longer (by the factor that gives
    the ratio); the transition matrix and every other bout distribution stay as in the baseline,
    so all other behaviours keep their relative shares. With a number, bouts are that much
    longer and the behaviour is entered more (or less) often to reach the ratio.
    """

    behaviour: str
    time_budget_ratio: float
    duration_ratio: float | None = None


@dataclass(frozen=True, eq=False)
class BodyPlan:
    """An invented animal: body, behaviours, behaviour process, arena, camera and tracking noise.

    ``transitions[a][b]`` is the relative weight of moving from behaviour ``a`` to ``b`` when a
    bout of ``a`` ends (rows are normalised; a behaviour never follows itself).
    ``groups[0]`` is the baseline; ``group_effects`` holds the planted differences of the others.
    ``arena`` is the free area of the centroid, (width, height[, depth]) in physical units.
    ``coordinate_units`` is what the tracks are given in (``"px"`` or the physical unit);
    ``px_per_unit`` is the nominal scale (varies by ``scale_spread`` between sessions).
    """

    name: str
    description: str
    keypoints: tuple[str, ...]
    skeleton: tuple[tuple[str, str], ...]
    swap_pairs: tuple[tuple[str, str], ...]
    origin: str
    axis: tuple[str, str]
    dims: int
    behaviours: tuple[Behaviour, ...]
    transitions: Mapping[str, Mapping[str, float]]
    groups: tuple[str, ...]
    group_effects: Mapping[str, GroupEffect]
    arena: tuple[float, ...]
    wall_margin: float
    noise: TrackingNoise
    physical_units: str = "mm"
    coordinate_units: str = "px"
    px_per_unit: float = 1.0
    scale_spread: float = 0.0
    placement_spread: float = 0.0
    body_size_sd: float = 0.06
    subject_prefix: str = "animal"

    def __post_init__(self) -> None:
        kp = set(self.keypoints)
        named = [self.origin, *self.axis, *(k for e in self.skeleton for k in e)]
        named += [k for p in self.swap_pairs for k in p]
        for b in self.behaviours:
            missing = sorted(kp - set(b.posture))
            if missing:
                raise InputError(f"body plan '{self.name}': '{b.name}' lacks posture {missing}")
            named += list(b.posture) + list(b.bend)
            named += [k for r in b.rhythms for k in r.amplitude]
        unknown = sorted(set(named) - kp)
        if unknown:
            raise InputError(f"body plan '{self.name}' names unknown keypoints {unknown}")
        for a, row in self.transitions.items():
            bad = sorted({a, *row} - set(self.behaviour_names))
            if bad:
                raise InputError(f"body plan '{self.name}': transitions name unknown {bad}")
        if self.dims not in (2, 3) or len(self.arena) != self.dims:
            raise InputError(f"body plan '{self.name}': dims must be 2 or 3 and match the arena")

    @property
    def behaviour_names(self) -> tuple[str, ...]:
        """Behaviour names in state order (state ``i`` is ``behaviour_names[i]``)."""
        return tuple(b.name for b in self.behaviours)

    @cached_property
    def postures(self) -> np.ndarray:
        """Mean postures, shape (behaviours, keypoints, 3), body frame, physical units."""
        return np.stack([self._vectors(b.posture) for b in self.behaviours])

    @cached_property
    def bends(self) -> np.ndarray:
        """Bend displacements toward the bout's side, shape (behaviours, keypoints, 3)."""
        return np.stack([self._vectors(b.bend) for b in self.behaviours])

    def _vectors(self, values: Mapping[str, Vector]) -> np.ndarray:
        out = np.zeros((len(self.keypoints), 3))
        for name, vec in values.items():
            out[self.keypoints.index(name), : len(vec)] = vec
        return out

    def rhythm_arrays(self) -> list[tuple[int, Rhythm, np.ndarray, np.ndarray, np.ndarray]]:
        """Per rhythm: (state, rhythm, moving keypoint indices, amplitudes (n, 3), offsets (n,))."""
        out = []
        for s, b in enumerate(self.behaviours):
            for r in b.rhythms:
                idx = np.array([self.keypoints.index(k) for k in r.amplitude])
                amp = self._vectors(r.amplitude)[idx]
                off = np.array([r.phase_offset.get(k, 0.0) for k in r.amplitude])
                out.append((s, r, idx, amp, off))
        return out


def check_group(plan: BodyPlan, group: str) -> None:
    """Raise a clear error when ``group`` is not one of the plan's groups."""
    if group not in plan.groups:
        msg = (
            f"body plan '{plan.name}' has groups {list(plan.groups)}; got group {group!r}. "
            "Pick one of those."
        )
        raise InputError(msg)


def _stationary(P: np.ndarray) -> np.ndarray:
    """Stationary distribution of the embedded jump chain (pi P = pi, sum 1)."""
    n = P.shape[0]
    A = np.vstack([P.T - np.eye(n), np.ones(n)])
    b = np.zeros(n + 1)
    b[-1] = 1.0
    pi = np.linalg.lstsq(A, b, rcond=None)[0]
    pi[pi < 1e-12] = 0.0  # unreachable states (e.g. social ones for a single animal)
    return pi / pi.sum()


def _budget(P: np.ndarray, means: np.ndarray) -> np.ndarray:
    # Semi-Markov long-run share of time: pi_i m_i / sum_j pi_j m_j (renewal-reward theorem).
    w = _stationary(P) * means
    return w / w.sum()


def _with_entry_weight(P: np.ndarray, state: int, weight: float) -> np.ndarray:
    Q = P.copy()
    Q[:, state] *= weight
    Q[state, state] = 0.0
    return Q / Q.sum(axis=1, keepdims=True)


def group_parameters(
    plan: BodyPlan, group: str, n_animals: int = 1
) -> tuple[np.ndarray, list[BoutDuration]]:
    """Jump-chain transition matrix (behaviours, behaviours) and bout durations of one group.

    Social behaviours are switched off for single animals. A group's :class:`GroupEffect` is
    applied so that the behaviour's expected time budget is ``time_budget_ratio`` times the
    baseline's (the entry weight, when needed, is solved with Brent's method).
    """
    check_group(plan, group)
    names = plan.behaviour_names
    S = len(names)
    W = np.zeros((S, S))
    for a, row in plan.transitions.items():
        for b, w in row.items():
            W[names.index(a), names.index(b)] = w
    np.fill_diagonal(W, 0.0)
    if n_animals < 2:
        social = [i for i, b in enumerate(plan.behaviours) if b.social]
        W[:, social] = 0.0
        W[social, :] = 0.0
        W[social, 0] = 1.0  # unreachable rows; any valid row keeps the matrix stochastic
    P = W / W.sum(axis=1, keepdims=True)
    durations = [b.duration for b in plan.behaviours]
    effect = plan.group_effects.get(group)
    if effect is None or group == plan.groups[0]:
        return P, durations
    d = names.index(effect.behaviour)
    means = np.array([x.mean_s for x in durations])
    base = _budget(P, means)[d]
    ratio = effect.time_budget_ratio
    if not 0 < ratio * base < 1:
        msg = (
            f"body plan '{plan.name}': group '{group}' asks for {ratio} x the baseline share of "
            f"'{effect.behaviour}' ({base:.3f}), which is not a share between 0 and 1"
        )
        raise InputError(msg)
    if effect.duration_ratio is None:
        # share f -> c f / (c f + 1 - f) when only this behaviour's bouts are c times as long
        factor = ratio * (1 - base) / (1 - ratio * base)
        durations[d] = durations[d].scaled(factor)
        return P, durations
    durations[d] = durations[d].scaled(effect.duration_ratio)
    means[d] *= effect.duration_ratio
    target = ratio * base

    def gap(log_w: float) -> float:
        return _budget(_with_entry_weight(P, d, np.exp(log_w)), means)[d] - target

    log_w = optimize.brentq(gap, -20.0, 20.0, xtol=1e-12)
    return _with_entry_weight(P, d, np.exp(log_w)), durations


def expected_time_budget(plan: BodyPlan, group: str, n_animals: int = 1) -> pd.Series:
    """Long-run share of time in each behaviour for one group, indexed by behaviour name.

    Examples
    --------
    >>> from ethoscribe.simulate import BODY_PLANS
    >>> plan = BODY_PLANS["dune_vole"]
    >>> b = expected_time_budget(plan, "standard")
    >>> e = expected_time_budget(plan, "enriched")
    >>> round(float(e["digging"] / b["digging"]), 3)  # the plan's planted time-budget ratio
    1.8
    """
    P, durations = group_parameters(plan, group, n_animals)
    budget = _budget(P, np.array([d.mean_s for d in durations]))
    return pd.Series(budget, index=list(plan.behaviour_names), name="time_budget")
