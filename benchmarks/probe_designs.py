"""The same recordings as another lab would hand them over: bench sources changed in ways that
say nothing about behaviour, scored beside the plain reference pipeline.

benchmarks/README.md, "The same recordings handed over differently".

A tool that finds behaviours should not care which way the coordinate axes point, what the
keypoints are called, whether coordinates are in pixels, or (within reason) the frame rate;
fewer keypoints lose information, and how much is worth knowing. Trackers and cameras differ
too: jittery positions, confidences that run lower, a video's frame rate raised by repeating
images, a narrow runway where the animal cannot turn round. Each change is applied to every
session of a source (a change the engine refuses is reported as such), then ethoscribe's
defaults and the plain reference pipeline run on it and are scored with the bench's own
scoring (ARI, boundary F1 within 0.2 s, states found).

    python -m benchmarks.probe_designs                                # the recorded rows, seed 0
    python -m benchmarks.probe_designs --source own_fish --change "y up"
"""

from __future__ import annotations

import argparse
import warnings
from collections.abc import Callable

import numpy as np
import pandas as pd
from benchmarks.validity import pipelines
from benchmarks.validity.scoring import score_units
from benchmarks.validity.sources import LOADERS, Source, _import_all

from ethoscribe.errors import InputError
from ethoscribe.pose import PoseTracks


def _axes(order: list[int]) -> Callable[[PoseTracks], PoseTracks]:
    return lambda s: s.replace(coords=s.coords[..., order].copy())


def _evenly(n: int) -> Callable[[PoseTracks], PoseTracks]:
    """``n`` keypoints evenly spaced along the listed order (first and last kept)."""

    def keep(s: PoseTracks) -> PoseTracks:
        idx = np.unique(np.linspace(0, s.n_keypoints - 1, n).round().astype(int))
        kept = tuple(s.keypoints[i] for i in idx)
        coords, confidence = s.coords[:, :, idx], s.confidence[:, :, idx]
        return s.replace(coords=coords, confidence=confidence, keypoints=kept)

    return keep


def _jitter(fraction: float) -> Callable[[PoseTracks], PoseTracks]:
    """Independent Gaussian noise on every coordinate, its SD ``fraction`` of the body's size
    (median over frames of the keypoints' RMS distance from their centroid), seeded by the
    session's length so a source gets the same noise every run."""

    def shake(s: PoseTracks) -> PoseTracks:
        c = s.coords
        centred = c - np.nanmean(c, axis=2, keepdims=True)
        size = float(np.nanmedian(np.sqrt(np.nanmean((centred**2).sum(-1), axis=2))))
        rng = np.random.default_rng(len(c))
        return s.replace(coords=c + rng.normal(0, fraction * size, c.shape))

    return shake


def _tripled(s: PoseTracks) -> PoseTracks:
    """Frames at three times the rate: linearly between the recorded ones, then a 3-frame
    moving average (a quadratic B-spline through them: linear pieces alone would put a kink,
    an acceleration spike, at every recorded frame, which no camera at that rate shows);
    confidence the lower of the two neighbours."""
    n = len(s.coords)
    t = np.arange(3 * n - 2) / 3
    lo = np.minimum(t.astype(int), n - 2)
    w = (t - lo)[:, None, None, None]
    coords = (1 - w) * s.coords[lo] + w * s.coords[lo + 1]
    coords[1:-1] = (coords[:-2] + coords[1:-1] + coords[2:]) / 3
    confidence = np.minimum(s.confidence[lo], s.confidence[lo + 1])
    return s.replace(coords=coords, confidence=confidence, fps=s.fps * 3)


def _runway(s: PoseTracks) -> PoseTracks:
    """Each frame turned about the body's centre to face along x, one way or the other (its
    first keypoint ahead of its last), and the path squeezed to a tenth across: an animal that
    cannot turn round in a narrow runway filmed from above (2-D only)."""
    c = s.coords
    centre = np.nanmean(c, axis=2, keepdims=True)
    d = c - centre
    head = d[:, :, 0] - d[:, :, -1]
    angle = np.arctan2(head[..., 1], head[..., 0])
    turn = (np.where(np.cos(angle) >= 0, 0.0, np.pi) - angle)[..., None]
    cos, sin = np.cos(turn), np.sin(turn)
    x = d[..., 0] * cos - d[..., 1] * sin + centre[..., 0]
    y = d[..., 0] * sin + d[..., 1] * cos + 0.1 * centre[..., 1]
    return s.replace(coords=np.stack([x, y], axis=-1))


def _repeated_index(n_frames: int, n: int) -> np.ndarray:
    return np.repeat(np.arange(n_frames), np.where(np.arange(n_frames) % n == n - 1, 2, 1))


def _repeat_every(n: int) -> Callable[[PoseTracks], PoseTracks]:
    """Every ``n``-th frame shown twice, the rate raised to match (a 25-fps camera written to
    a 30-fps file with ``n`` = 5: the tracker sees the same image twice, so it reports the
    same pose twice)."""

    def repeat(s: PoseTracks) -> PoseTracks:
        idx = _repeated_index(s.n_frames, n)
        return s.replace(
            coords=s.coords[idx], confidence=s.confidence[idx], fps=s.fps * (n + 1) / n
        )

    return repeat


def _placeholder(value: float) -> Callable[[PoseTracks], PoseTracks]:
    """Lost points (missing, or confidence below 0.5) written as ``value`` in every coordinate
    and no confidence column: an export that keeps a number in every cell."""

    def write(s: PoseTracks) -> PoseTracks:
        lost = ~np.isfinite(s.coords).all(-1) | (s.confidence < 0.5)
        return s.replace(coords=np.where(lost[..., None], value, s.coords), confidence=None)

    return write


def _placeholder_one(value: float) -> Callable[[PoseTracks], PoseTracks]:
    """As :func:`_placeholder` for the keypoint lost most often only; the other keypoints' lost
    points left empty: a placeholder that one keypoint alone takes."""

    def write(s: PoseTracks) -> PoseTracks:
        lost = ~np.isfinite(s.coords).all(-1) | (s.confidence < 0.5)
        most = np.zeros(s.n_keypoints, bool)
        most[np.argmax(lost.sum(axis=(0, 1)))] = True
        coords = np.where(lost[..., None], np.nan, s.coords)
        coords[lost & most] = value
        return s.replace(coords=coords, confidence=None)

    return write


def _forward_filled(s: PoseTracks) -> PoseTracks:
    """Lost points (missing, or confidence below 0.5) held at their last seen position (the
    first ones at their first), no confidence column: ``DataFrame.ffill()`` before export."""
    lost = ~np.isfinite(s.coords).all(-1) | (s.confidence < 0.5)
    flat = np.where(lost[..., None], np.nan, s.coords).reshape(s.n_frames, -1)
    filled = pd.DataFrame(flat).ffill().bfill().to_numpy().reshape(s.coords.shape)
    return s.replace(coords=filled, confidence=None)


def _whole_pixels(per_unit: float) -> Callable[[PoseTracks], PoseTracks]:
    """Coordinates in whole pixels (``per_unit`` pixels per unit, offset 812), as some
    trackers and exports write them."""
    return lambda s: s.replace(coords=np.round(s.coords * per_unit + 812.0), units="px")


def _interpolated(method: str) -> Callable[[PoseTracks], PoseTracks]:
    """Lost points (missing, or confidence below 0.5) filled in between the points seen either
    side, no confidence column: ``DataFrame.interpolate(method)`` before export ("linear":
    straight lines, and lost points after the last seen one keep its position; "cubic",
    "pchip": cubic curves, lost points before the first and after the last seen one left
    empty)."""

    def fill(s: PoseTracks) -> PoseTracks:
        lost = ~np.isfinite(s.coords).all(-1) | (s.confidence < 0.5)
        table = pd.DataFrame(np.where(lost[..., None], np.nan, s.coords).reshape(s.n_frames, -1))
        if method == "linear":
            table = table.interpolate()
        else:
            table = table.interpolate(method=method, limit_area="inside")
        return s.replace(coords=table.to_numpy().reshape(s.coords.shape), confidence=None)

    return fill


def _flicker(share: float) -> Callable[[PoseTracks], PoseTracks]:
    """A tracker that loses points on single frames: each point lost (confidence 0) with
    probability ``share``, independently (a generator seeded by the session's length), on top
    of the losses recorded."""

    def lose(s: PoseTracks) -> PoseTracks:
        rng = np.random.default_rng(s.n_frames)
        lost = rng.random(s.confidence.shape) < share
        return s.replace(confidence=np.where(lost, 0.0, s.confidence))

    return lose


def _exchanged(n: int, gap: int = 0) -> Callable[[PoseTracks], PoseTracks]:
    """A multi-animal tracker exchanging two animals' tracks ``n`` times per session, each time
    on a frame among the tenth where the two are nearest (chosen by a generator seeded by the
    session's length), with both tracks lost for ``gap`` frames around it. The truth stays
    with the animals."""

    def exchange(s: PoseTracks) -> PoseTracks:
        x, c = s.coords.copy(), s.confidence.copy()
        if s.n_animals < 2:
            return s
        rng = np.random.default_rng(s.n_frames)
        for _ in range(n):
            i, j = rng.choice(s.n_animals, 2, replace=False)
            centre = np.nanmean(x[:, [i, j]], axis=2)
            apart = np.linalg.norm(centre[:, 0] - centre[:, 1], axis=-1)
            near = np.flatnonzero(apart < np.nanquantile(apart, 0.1))
            t = int(rng.choice(near[(near > gap) & (near < len(x) - gap)]))
            x[t:, [i, j]], c[t:, [i, j]] = x[t:, [j, i]], c[t:, [j, i]]
            x[t - gap // 2 : t + (gap + 1) // 2, [i, j]] = np.nan
        return s.replace(coords=x, confidence=c)

    return exchange


def _exchanged_heads(n: int) -> Callable[[PoseTracks], PoseTracks]:
    """Part of two animals exchanged: the first three keypoints (nose and ears in the pairs)
    of two animals given each other's positions for 1-3 s, ``n`` times per session, each from
    a frame among the tenth where the two are nearest (a generator seeded by the session's
    length). The truth stays with the animals."""

    def exchange(s: PoseTracks) -> PoseTracks:
        x, c = s.coords.copy(), s.confidence.copy()
        if s.n_animals < 2:
            return s
        rng = np.random.default_rng(s.n_frames)
        head = slice(0, 3)
        for _ in range(n):
            i, j = rng.choice(s.n_animals, 2, replace=False)
            centre = np.nanmean(x[:, [i, j]], axis=2)
            apart = np.linalg.norm(centre[:, 0] - centre[:, 1], axis=-1)
            near = np.flatnonzero(apart < np.nanquantile(apart, 0.1))
            t = int(rng.choice(near))
            u = min(len(x), t + int(rng.uniform(1.0, 3.0) * s.fps))
            for values in (x, c):
                a, b = values[t:u, i, head].copy(), values[t:u, j, head].copy()
                values[t:u, i, head], values[t:u, j, head] = b, a
        return s.replace(coords=x, confidence=c)

    return exchange


CHANGES: dict[str, Callable[[PoseTracks], PoseTracks]] = {
    "as recorded": lambda s: s,
    "y up": _axes([0, 2, 1]),
    "x up": _axes([2, 1, 0]),
    "keypoints renamed": lambda s: s.replace(
        keypoints=tuple(f"point{i}" for i in range(s.n_keypoints))
    ),
    "pixels": lambda s: s.replace(coords=s.coords * 37.0 + 812.0, units="px"),
    # 2-D: filmed from above (the floor plane) or from the side (a wall: x and the vertical)
    "filmed from above": _axes([0, 1]),
    "filmed from the side": _axes([0, 2]),
    "5 keypoints": _evenly(5),
    "3 keypoints": _evenly(3),
    "jittery tracking": _jitter(0.1),
    "in a runway, from above": _runway,
    # a tracker whose confidences run lower for the same positions
    "confidence halved": lambda s: s.replace(confidence=s.confidence * 0.5),
    # ... or spread lower for good positions while the best stay near 1
    "confidence cubed": lambda s: s.replace(confidence=s.confidence**3),
    "lost points written as 0, 0": _placeholder(0.0),
    "lost points written as -1, -1": _placeholder(-1.0),
    "one keypoint's lost points written as 0, 0": _placeholder_one(0.0),
    "lost points forward-filled": _forward_filled,
    "whole pixels (37 per unit)": _whole_pixels(37.0),
    "whole pixels (37 per unit), lost points forward-filled": lambda s: _forward_filled(
        _whole_pixels(37.0)(s)
    ),
    "whole pixels (2.5 per unit)": _whole_pixels(2.5),
    "whole pixels (2.5 per unit), lost points forward-filled": lambda s: _forward_filled(
        _whole_pixels(2.5)(s)
    ),
    "lost points interpolated": _interpolated("linear"),
    "lost points interpolated (cubic)": _interpolated("cubic"),
    "lost points interpolated (pchip)": _interpolated("pchip"),
    "3 % of points lost on single frames": _flicker(0.03),
    "3 % of points lost on single frames, interpolated": lambda s: _interpolated("linear")(
        _flicker(0.03)(s)
    ),
    # several animals: a tracker exchanging their identities where they come close
    "animals exchanged 4 times": _exchanged(4),
    "animals exchanged 4 times, both lost 6 frames": _exchanged(4, 6),
    "heads exchanged 8 times": _exchanged_heads(8),
}
REPEATED = "every fifth frame repeated"
THINNED = "a third of the frame rate"
TRIPLED = "three times the frame rate"
_TWO_D = [
    "as recorded",
    "keypoints renamed",
    "pixels",
    THINNED,
    "5 keypoints",
    "3 keypoints",
    "jittery tracking",
    TRIPLED,
    REPEATED,
    "confidence halved",
    "in a runway, from above",
    "lost points written as 0, 0",
    "one keypoint's lost points written as 0, 0",
    "lost points forward-filled",
    "lost points interpolated",
    "lost points interpolated (cubic)",
    "lost points interpolated (pchip)",
]
RECORDED = {
    "own_fish": ["as recorded", "y up", "x up", "filmed from above", "filmed from the side"],
    "figure_sim": ["as recorded", "y up", "x up", "filmed from above", "filmed from the side"],
    "own_voles": _TWO_D,
    "independent_sim": _TWO_D,
    "own_pairs": [
        "as recorded",
        "animals exchanged 4 times",
        "animals exchanged 4 times, both lost 6 frames",
        "heads exchanged 8 times",
    ],
}


def _defaults(src: Source, seed: int) -> tuple[dict, dict]:
    return pipelines.run_ethoscribe(src, seed, None)


def changed(src: Source, change: str) -> Source:
    """``src`` with ``change`` applied to every session (the truth thinned with the frames)."""
    if change == THINNED:
        sessions = [
            s.replace(coords=s.coords[::3], confidence=s.confidence[::3], fps=s.fps / 3)
            for s in src.sessions
        ]
        truth = {k: np.asarray(v)[::3] for k, v in src.truth.items()}
    elif change == REPEATED:
        sessions = [_repeat_every(5)(s) for s in src.sessions]
        truth = {k: np.asarray(v)[_repeated_index(len(v), 5)] for k, v in src.truth.items()}
    elif change == TRIPLED:
        sessions = [_tripled(s) for s in src.sessions]
        truth = {k: np.repeat(np.asarray(v), 3)[: 3 * len(v) - 2] for k, v in src.truth.items()}
    else:
        sessions, truth = [CHANGES[change](s) for s in src.sessions], src.truth
    details = {**src.details, "change": change}
    return Source(src.name, src.kind, sessions, truth, src.behaviours, details)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--source", action="append", choices=sorted(LOADERS))
    parser.add_argument("--change", action="append", choices=[*CHANGES, THINNED, TRIPLED, REPEATED])
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args(argv)
    _import_all()
    warnings.simplefilter("ignore")
    print("| source | change | ethoscribe ARI / boundary F1 (states) | reference | states true |")
    print("|---|---|---|---|---:|")
    for name in args.source or RECORDED:
        base = LOADERS[name](seed=args.seed)
        for change in args.change or RECORDED.get(name, ["as recorded"]):
            src = changed(base, change)
            cells, true = [name, change], "?"
            for run in (_defaults, pipelines.run_reference):
                try:
                    r = score_units(src.truth, run(src, args.seed)[0], src.unit_fps)
                except InputError as exc:  # a refusal is a result too: say it, go on
                    cells.append(f"refused: {str(exc)[:60]}...")
                    continue
                cells.append(f"{r['ari']:.3f} / {r['boundary_f1']:.2f} ({r['states_found']})")
                true = str(r["states_true"])
            cells.append(true)
            print("| " + " | ".join(cells) + " |", flush=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
