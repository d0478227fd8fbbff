"""Power of the example study's planned test, by simulation.

Usage: ``python benchmarks/bench_power.py [--studies 2000] [--seed 0] [--per-group 8]``.

Simulates many studies like the bundled example (dune voles, ``--per-group`` standard and as
many enriched animals, 5 minutes at 30 fps each) from the body plan's behaviour process alone:
the semi-Markov sequence of behaviours of each group (``group_parameters``: jump-chain
transition matrix and bout-duration distributions, with the planted effect), no keypoints. For
each study it runs the planned comparisons of the README -- the time budget and the bout rate of
digging, exact two-sided permutation tests of the mean difference, Holm-corrected together --
and counts how often the planned set finds the planted difference (any Holm-adjusted p < 0.05),
and how often each test alone has p < 0.05. It then does the same with no planted effect
(enriched simulated as standard) to show the false-positive rate.

These are powers on the true behaviour: the pipeline (discovery, then curation) sees digging
through a discovered motif, which loses some of it; the end-to-end result on the bundled study is
in example_sessions/README.md.
"""

from __future__ import annotations

import argparse
import dataclasses
import time

import numpy as np

from ethoscribe.effects import holm, permutation_test
from ethoscribe.simulate import BODY_PLANS
from ethoscribe.simulate.plan import BodyPlan, expected_time_budget, group_parameters

FPS, DURATION_S, BEHAVIOUR = 30.0, 300.0, "digging"


def session_values(
    P: np.ndarray, durations: list, start: np.ndarray, target: int, rng: np.random.Generator
) -> tuple[float, float]:
    """(share of time, bouts per minute) of ``target`` in one simulated session."""
    n_total = round(DURATION_S * FPS)
    cum = np.cumsum(P, axis=1)
    state = int(rng.choice(len(start), p=start))
    t = frames = bouts = 0
    while t < n_total:
        n = min(max(1, round(float(durations[state].sample(rng)) * FPS)), n_total - t)
        if state == target:
            frames, bouts = frames + n, bouts + 1
        t += n
        state = min(int(np.searchsorted(cum[state], rng.random() * cum[state, -1])), len(P) - 1)
    return frames / n_total, bouts / (DURATION_S / 60)


def power(plan: BodyPlan, per_group: int, studies: int, seed: int) -> dict[str, float]:
    target = plan.behaviour_names.index(BEHAVIOUR)
    setup = {}
    for g in plan.groups:
        P, durations = group_parameters(plan, g)
        start = expected_time_budget(plan, g).to_numpy()
        setup[g] = (P, durations, start / start.sum())
    rng = np.random.default_rng(seed)
    hits = np.zeros(3)
    for _ in range(studies):
        v = {
            g: np.array([session_values(*setup[g], target, rng) for _ in range(per_group)])
            for g in plan.groups
        }
        base, other = v[plan.groups[0]], v[plan.groups[1]]
        p = np.array([permutation_test(other[:, k], base[:, k]).p_value for k in (0, 1)])
        hits += [p[0] < 0.05, p[1] < 0.05, (holm(p) < 0.05).any()]
    return dict(zip(("time_budget", "bout_rate", "planned_set"), hits / studies, strict=True))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--studies", type=int, default=2000, help="simulated studies")
    parser.add_argument("--seed", type=int, default=0, help="random seed")
    parser.add_argument("--per-group", type=int, default=8, help="sessions per group")
    args = parser.parse_args()
    plan = BODY_PLANS["dune_vole"]
    effect = plan.group_effects[plan.groups[1]]
    print(f"planted: {effect}; {args.per_group} vs {args.per_group} sessions of {DURATION_S} s")
    print(f"{args.studies} simulated studies, seed {args.seed}")
    null = dataclasses.replace(plan, group_effects={})
    for name, p in (("planted effect", plan), ("no effect", null)):
        t0 = time.perf_counter()
        found = power(p, args.per_group, args.studies, args.seed)
        text = ", ".join(f"{k} {v:.3f}" for k, v in found.items())
        print(f"{name}: share of studies with p < 0.05: {text} ({time.perf_counter() - t0:.0f} s)")


if __name__ == "__main__":
    main()
