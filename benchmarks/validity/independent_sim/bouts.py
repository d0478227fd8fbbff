"""Semi-Markov bout sequences: a behaviour, a duration drawn from its distribution, the next
behaviour from the transition matrix, and so on; then one label per frame."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .animal import BEHAVIOURS, DURATIONS


def draw_durations(rng: np.random.Generator, behaviour: str, n: int) -> np.ndarray:
    """``n`` bout durations (s) of ``behaviour``, truncated to the range in ``DURATIONS``."""
    spec = DURATIONS[behaviour]
    out = np.empty(0)
    while out.size < n:
        m = 2 * (n - out.size) + 8
        if spec["family"] == "lognormal":
            d = rng.lognormal(np.log(spec["median"]), spec["sigma"], m)
        elif spec["family"] == "gamma":
            d = rng.gamma(spec["shape"], spec["mean"] / spec["shape"], m)
        else:
            d = rng.uniform(spec["low"], spec["high"], m)
        out = np.concatenate([out, d[(d >= spec["low"]) & (d <= spec["high"])]])
    return out[:n]


@dataclass(frozen=True)
class Bouts:
    """Bouts of one session, in frames.

    ``states`` (n_bouts,) behaviour indices; ``start``, ``stop`` (n_bouts,) frame ranges
    [start, stop); ``labels`` (n_frames,) behaviour index per frame.
    """

    states: np.ndarray
    start: np.ndarray
    stop: np.ndarray
    labels: np.ndarray
    fps: float

    def per_frame(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Bout index, seconds since the bout began and seconds until it ends, per frame."""
        n = self.labels.size
        index = np.repeat(np.arange(self.states.size), self.stop - self.start)[:n]
        frame = np.arange(n)
        t_in = (frame - self.start[index]) / self.fps
        t_left = (self.stop[index] - 1 - frame) / self.fps
        return index, t_in, t_left


def sample_bouts(
    rng: np.random.Generator, transmat: np.ndarray, n_frames: int, fps: float
) -> Bouts:
    """Draw bouts until ``n_frames`` are covered; the last bout is cut at the session end."""
    n_states = len(BEHAVIOURS)
    # Durations are drawn in batches per behaviour (fewer generator calls than one per bout).
    pool = {b: list(draw_durations(rng, b, 64)) for b in BEHAVIOURS}
    states, durs, total = [], [], 0.0
    s = int(rng.integers(n_states))
    while total < n_frames / fps:
        name = BEHAVIOURS[s]
        if not pool[name]:
            pool[name] = list(draw_durations(rng, name, 64))
        d = pool[name].pop()
        states.append(s)
        durs.append(d)
        total += d
        s = int(rng.choice(n_states, p=transmat[s]))
    edges = np.round(np.concatenate([[0.0], np.cumsum(durs)]) * fps).astype(np.int64)
    start, stop = edges[:-1], np.minimum(edges[1:], n_frames)
    keep = stop > start
    states_a = np.asarray(states, dtype=np.int64)[keep]
    start, stop = start[keep], stop[keep]
    labels = np.repeat(states_a, stop - start)
    return Bouts(states=states_a, start=start, stop=stop, labels=labels, fps=float(fps))
