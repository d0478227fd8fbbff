"""Slow regimes against a change of condition inside the session.

benchmarks/README.md, "Slow regimes", "One change per recording".

Invented sessions of the package's dune voles (6 sessions, one animal each, 30 fps) whose
behaviour budget changes during the session, as after a treatment given halfway (``step``) or
as an animal settles over the whole session (``gradual``): transitions into resting and
grooming are weighted up by ``strength`` and those into walking, rearing, scanning and digging
down by it. For each scenario the model is fitted with the defaults and with
``slow_regimes="off"``; printed: the persistence of the state mix and its p-value, whether
regimes were labelled, the residual persistence after one change per recording, and the
adjusted Rand index of each model's labels with the simulated behaviours (scikit-learn).

    python -m benchmarks.probe_condition_change             # the recorded scenarios, ~6 min
    python -m benchmarks.probe_condition_change --scenario step 10 10
"""

from __future__ import annotations

import argparse
import warnings

import numpy as np
from sklearn.metrics import adjusted_rand_score

from ethoscribe.segment.model import BehaviourModel
from ethoscribe.segment.regimes import residual_persistence
from ethoscribe.simulate.animals import DUNE_VOLE
from ethoscribe.simulate.plan import group_parameters
from ethoscribe.simulate.session import _setup

SCENARIOS = [
    ("step", 3.0, 10.0),
    ("step", 5.0, 10.0),
    ("step", 10.0, 4.0),
    ("step", 10.0, 10.0),
    ("step", 5.0, 20.0),
    ("gradual", 10.0, 20.0),
    ("gradual", 30.0, 20.0),
]
UP, DOWN = ("resting", "grooming"), ("walking", "rearing", "scanning", "digging")
FPS = 30.0
PIECES = 12  # a gradual change: the budget moves in this many equal steps


def _weighted(P: np.ndarray, gain: float) -> np.ndarray:
    names = DUNE_VOLE.behaviour_names
    out = P.copy()
    out[:, [names.index(b) for b in UP]] *= gain
    out[:, [names.index(b) for b in DOWN]] /= gain
    np.fill_diagonal(out, 0.0)
    return out / out.sum(axis=1, keepdims=True)


def sessions(kind: str, strength: float, minutes: float, n_sessions: int = 6):
    """Tracks and per-frame behaviour codes of the scenario's sessions."""
    P, _ = group_parameters(DUNE_VOLE, "standard", 1)
    n = int(minutes * 60 * FPS)
    pieces = PIECES if kind == "gradual" else 2
    tracks, truth = [], []
    for seed in range(n_sessions):
        sim, _ = _setup("dune_vole", minutes * 60, FPS, None, 1, True, seed, f"s{seed}", None)
        parts = []
        for i in range(pieces):
            share = i / (pieces - 1)  # step: 0 then 1; gradual: evenly in log strength
            # The simulator draws each bout's successor from this cumulative matrix (its own
            # attribute, set here between consecutive stretches of frames).
            sim.animals[0].cum_P = np.cumsum(_weighted(P, strength**share), axis=1)
            parts.append(sim.arrays(i * n // pieces, (i + 1) * n // pieces))
        coords, conf, states = (np.concatenate(x) for x in zip(*parts, strict=True))
        tracks.append(sim.tracks(coords, conf, 0))
        truth.append(states[:, 0])
    return tracks, np.concatenate(truth)


def run(kind: str, strength: float, minutes: float) -> dict:
    tracks, truth = sessions(kind, strength, minutes)
    out = {"scenario": f"{kind} x{strength:g}, {minutes:g} min"}
    for regimes in ("auto", "off"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            model = BehaviourModel(random_state=0, slow_regimes=regimes).fit(tracks)
            table = model.label(tracks)
            labels = table["state"].to_numpy()
        ok = labels >= 0
        out[f"ari_{regimes}"] = adjusted_rand_score(truth[ok], labels[ok])
        out[f"states_{regimes}"] = int(model.n_states_)
        r = model.regimes_
        if regimes == "auto":
            # measured on the states under any regimes, whether or not regimes were labelled
            fine = table["fine_state" if r.used_ else "state"].to_numpy()
            lengths = [t.n_frames for t in tracks]
            window = r.window(FPS)
            residual = residual_persistence(fine, lengths, int(fine.max()) + 1, window)
            out.update(persistence=r.persistence_, p=r.p_value_, used=r.used_, residual=residual)
    return out


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scenario", nargs=3, metavar=("KIND", "STRENGTH", "MINUTES"))
    args = parser.parse_args(argv)
    todo = SCENARIOS
    if args.scenario:
        todo = [(args.scenario[0], float(args.scenario[1]), float(args.scenario[2]))]
    for kind, strength, minutes in todo:
        r = run(kind, strength, minutes)
        print(
            f"{r['scenario']:22s} persistence {r['persistence']:.2f} (p {r['p']:.3f}), regimes "
            f"{'labelled' if r['used'] else 'not used'}, residual {r['residual']:.2f}; ARI "
            f"defaults {r['ari_auto']:.3f} ({r['states_auto']} states), regimes off "
            f"{r['ari_off']:.3f} ({r['states_off']})",
            flush=True,
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
