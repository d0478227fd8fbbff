"""Speed of the ethogram tables and of the group comparison on invented label tables.

Usage: ``python benchmarks/bench_ethogram.py [n_frames ...]`` (default 1e6 and 1e7 frames).
Each size is split over 16 sessions of one animal, 10 motifs with geometric bout lengths
(mean 25 frames) and 1% invalid frames. Timed once each: ``bout_table``, ``time_budget``,
``transition_table`` (on the bouts), and ``bout_table`` on the same rows shuffled (the worst
case: it sorts). Then ``session_metrics`` + ``compare_groups`` for 16 sessions (8 vs 8) x 10
motifs at 36 000 frames each. Prints wall and CPU seconds.
"""

from __future__ import annotations

import sys
import time

import numpy as np
import pandas as pd

from ethoscribe.ethogram import bout_table, time_budget, transition_table
from ethoscribe.stats import compare_groups, session_metrics

N_SESSIONS, N_MOTIFS, FPS = 16, 10, 30.0


def invented_labels(n: int, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    per = n // N_SESSIONS
    lengths = rng.geometric(1 / 25, size=n // 10)
    states = np.repeat(rng.integers(0, N_MOTIFS, size=len(lengths)), lengths)[: per * N_SESSIONS]
    states[rng.random(len(states)) < 0.01] = -1
    names = np.array([f"motif_{i + 1:02d}" for i in range(N_MOTIFS)] + [""], dtype=object)
    frame = np.tile(np.arange(per), N_SESSIONS)
    return pd.DataFrame(
        {
            "session": np.repeat([f"s{i:02d}" for i in range(N_SESSIONS)], per),
            "animal": "vole",
            "frame": frame,
            "time_s": frame / FPS,
            "state": states,
            "motif": names[states],
            "probability": np.where(states >= 0, 0.9, np.nan),
        }
    )


def timed(label: str, func, *args, **kwargs):
    wall, cpu = time.perf_counter(), time.process_time()
    out = func(*args, **kwargs)
    wall, cpu = time.perf_counter() - wall, time.process_time() - cpu
    print(f"  {label:<34} wall {wall:7.3f} s   cpu {cpu:7.3f} s   ({len(out):,} rows out)")
    return out


def main() -> None:
    sizes = [int(float(a)) for a in sys.argv[1:]] or [1_000_000, 10_000_000]
    for n in sizes:
        labels = invented_labels(n)
        print(f"{n:,} frames, {N_SESSIONS} sessions, {N_MOTIFS} motifs")
        bouts = timed("bout_table", bout_table, labels, fps=FPS)
        timed("time_budget", time_budget, labels, fps=FPS)
        timed("transition_table", transition_table, bouts)
        shuffled = labels.sample(frac=1.0, random_state=0)
        timed("bout_table (rows shuffled)", bout_table, shuffled, fps=FPS)
        del labels, shuffled
    rng = np.random.default_rng(1)
    parts = []
    for i in range(N_SESSIONS):
        one = invented_labels(36_000 * N_SESSIONS, seed=i)
        parts.append(one[one["session"] == "s00"].assign(session=f"s{i:02d}"))
    labels = pd.concat(parts, ignore_index=True)
    sessions = pd.DataFrame(
        {
            "session": [f"s{i:02d}" for i in range(N_SESSIONS)],
            "group": rng.permutation(["a"] * 8 + ["b"] * 8),
        }
    )
    print(f"group comparison: {N_SESSIONS} sessions x 36,000 frames, {N_MOTIFS} motifs")
    bouts = bout_table(labels, fps=FPS)
    metrics = timed("session_metrics", session_metrics, labels, bouts, sessions, fps=FPS)
    budget = metrics[metrics["metric"] == "time_budget"]
    timed("compare_groups (time budgets)", compare_groups, budget)
    out = timed("compare_groups (all metrics)", compare_groups, metrics)
    print(f"  tests: {len(out)}, {out['test'].iloc[0]}")


if __name__ == "__main__":
    main()
