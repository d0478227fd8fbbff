"""Clips of one behaviour each: bench sources cut at their true bouts, every bout a session.

benchmarks/README.md, "Clips of one behaviour each".

Many studies record short trials, or keep only the clips in which something happens, so that
each session holds one behaviour. The validation bench's sources hold several behaviours per
session; this probe cuts each of them at its true bout boundaries (bouts of at least
``--min-s`` seconds, one animal per clip, truth-unlabelled stretches dropped) and scores with
the bench's own scoring (ARI; a clip holds no true boundary) ethoscribe's defaults, the
defaults with per-session offsets asked for (``segmenter={"session_offsets": True}``), and
the plain reference pipeline.

    python -m benchmarks.probe_clips                        # the recorded sources, seed 0
    python -m benchmarks.probe_clips --source own_voles --seed 1
"""

from __future__ import annotations

import argparse
import itertools
import warnings

import numpy as np
from benchmarks.validity import pipelines
from benchmarks.validity.scoring import score_units
from benchmarks.validity.sources import LOADERS, Source, _import_all

SOURCES = ["own_voles", "figure_sim", "real_hapt", "basic_motions", "real_exercise_mocap"]
VARIANTS = {"defaults": None, "offsets asked for": {"segmenter": {"session_offsets": True}}}


def clips_of(src: Source, min_s: float) -> Source:
    """Every true bout of at least ``min_s`` seconds its own one-animal session."""
    sessions, truth = [], {}
    for s in src.sessions:
        for animal in s.animals:
            codes = np.asarray(src.truth[(s.session, animal)])
            one = s.select_animal(animal) if s.n_animals > 1 else s
            edges = np.r_[0, np.flatnonzero(np.diff(codes)) + 1, len(codes)]
            for i, (a, b) in enumerate(itertools.pairwise(edges)):
                if codes[a] < 0 or b - a < min_s * s.fps:
                    continue
                name = f"{s.session}_{animal}_{i}"
                sessions.append(
                    one.replace(
                        coords=one.coords[a:b], confidence=one.confidence[a:b], session=name
                    )
                )
                truth[(name, one.animals[0])] = codes[a:b]
    details = {"clips_of": src.name, "min_s": min_s, "clips": len(sessions)}
    return Source(src.name, src.kind, sessions, truth, src.behaviours, details)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--source", action="append", choices=sorted(LOADERS))
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--min-s", type=float, default=2.0, help="shortest bout kept (s)")
    args = parser.parse_args(argv)
    _import_all()
    warnings.simplefilter("ignore")
    print("| source | clips | frames | variant | ARI | states (true) | lambda (state given clip) |")
    print("|---|---:|---:|---|---:|---|---:|")
    for name in args.source or SOURCES:
        src = clips_of(LOADERS[name](seed=args.seed), args.min_s)
        runs = {
            k: (lambda s, seed, p=p: pipelines.run_ethoscribe(s, seed, p))
            for k, p in VARIANTS.items()
        }
        runs["reference"] = pipelines.run_reference
        for label, run in runs.items():
            found, info = run(src, args.seed)
            r = score_units(src.truth, found, src.unit_fps)
            share = info.get("unit_lambda", float("nan"))
            cells = [name, len(src.sessions), f"{src.n_frames:,}", label, f"{r['ari']:.3f}"]
            cells += [f"{r['states_found']} ({r['states_true']})"]
            print("| " + " | ".join(map(str, [*cells, f"{share:.2f}"])) + " |", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
