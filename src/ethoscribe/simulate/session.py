"""Simulated sessions and studies: tracks plus frame-level behaviour truth.

One :class:`SessionSimulator` per session owns the random streams, one bout generator and one
posture maker per animal, the camera and the tracker noise; it hands out consecutive chunks with
continuous state. :func:`simulate_session` is one chunk; :func:`simulate_chunks` streams a long
session in bounded memory; :func:`simulate_study` makes groups of sessions with a manifest.
"""

from __future__ import annotations

import itertools
from collections.abc import Iterator, Sequence

import numpy as np
import pandas as pd

from ethoscribe.errors import InputError
from ethoscribe.pose import PoseTracks
from ethoscribe.simulate.animals import get_body_plan
from ethoscribe.simulate.motion import AnimalMotion, free_area
from ethoscribe.simulate.noise import Tracker
from ethoscribe.simulate.plan import BodyPlan, TrackingNoise, expected_time_budget, group_parameters
from ethoscribe.simulate.posture import Camera, PostureMaker

BLOCK_FRAMES = 32_768


class SessionSimulator:
    """State of one simulated session; call :meth:`chunk` with consecutive frame ranges."""

    def __init__(
        self,
        plan: BodyPlan,
        fps: float,
        group: str,
        n_animals: int,
        noise: bool | TrackingNoise,
        seed: int,
        session: str,
    ) -> None:
        self.plan, self.fps, self.group, self.session = plan, fps, group, session
        P, durations = group_parameters(plan, group, n_animals)
        budget = expected_time_budget(plan, group, n_animals).to_numpy()
        streams = np.random.SeedSequence(seed).spawn(2 + 2 * n_animals)
        rng = np.random.Generator(np.random.PCG64(streams[0]))
        self.camera = Camera(plan, rng)
        lo, hi = free_area(plan)
        length = float(np.ptp(plan.postures[:, :, 0]))
        self.animals, self.makers, self.scales = [], [], []
        for a in range(n_animals):
            scale = float(np.exp(plan.body_size_sd * rng.standard_normal()))
            start = {
                "state": int(rng.choice(len(budget), p=budget)),
                "pos": lo + (hi - lo) * rng.random(3),
                "yaw": float(2 * np.pi * rng.random() - np.pi),
            }
            gens = [np.random.Generator(np.random.PCG64(s)) for s in streams[2 + 2 * a : 4 + 2 * a]]
            self.animals.append(
                AnimalMotion(plan, P, durations, fps, *gens, start, body_length=length * scale)
            )
            self.makers.append(PostureMaker(plan, fps, scale, start["state"]))
            self.scales.append(round(scale, 6))
        config = plan.noise if noise is True else noise
        self.tracker = Tracker(plan, config, fps, n_animals, streams[1]) if config else None
        self.ids = tuple(f"animal{a}" for a in range(n_animals))
        self.meta = {
            "simulated": True,
            "body_plan": plan.name,
            "group": group,
            "seed": int(seed),
            # tracks already in physical units have no pixel scale (as manifests say it)
            "px_per_unit": self.camera.px_per_unit if plan.coordinate_units == "px" else None,
            "physical_units": plan.physical_units,
            "body_scale": self.scales,
            "arena_size": list(plan.arena),
            "arena_corners": self.camera.corners(plan.arena),
            "noise": bool(config),
        }

    def arrays(self, f0: int, f1: int) -> tuple[np.ndarray, np.ndarray | None, np.ndarray]:
        """Coordinates (n, A, K, D), confidence (n, A, K) or None, states (n, A) of frames
        ``f0 .. f1 - 1``; call with consecutive ranges."""
        while min(m.frontier for m in self.animals) < f1:
            i = int(np.argmin([m.frontier for m in self.animals]))
            self.animals[i].extend([m for j, m in enumerate(self.animals) if j != i])
        kins = [m.take(f0, f1) for m in self.animals]
        coords = np.stack(
            [mk.keypoints(k, self.camera) for mk, k in zip(self.makers, kins, strict=True)], 1
        )
        conf = None
        if self.tracker is not None:
            coords, conf = self.tracker(coords, f0)
        return coords, conf, np.stack([k["state"] for k in kins], axis=1)

    def tracks(self, coords: np.ndarray, conf: np.ndarray | None, f0: int) -> PoseTracks:
        """Wrap arrays of frames from ``f0`` as PoseTracks."""
        return PoseTracks(
            coords,
            conf,
            keypoints=self.plan.keypoints,
            animals=self.ids,
            fps=self.fps,
            units=self.plan.coordinate_units,
            session=self.session,
            meta={**self.meta, "first_frame": int(f0)},
        )

    def truth(self, states: np.ndarray, f0: int) -> pd.DataFrame:
        """Frame-level truth table of states (n, A) of frames from ``f0``."""
        n, A = states.shape
        return pd.DataFrame(
            {
                "frame": np.repeat(np.arange(f0, f0 + n, dtype=np.int64), A),
                "animal": pd.Categorical.from_codes(np.tile(np.arange(A), n), self.ids),
                "behaviour": pd.Categorical.from_codes(states.ravel(), self.plan.behaviour_names),
                "state": states.ravel(),
            }
        )

    def chunk(self, f0: int, f1: int) -> tuple[PoseTracks, pd.DataFrame]:
        """Tracks and truth of frames ``f0 .. f1 - 1`` (call with consecutive ranges)."""
        coords, conf, states = self.arrays(f0, f1)
        return self.tracks(coords, conf, f0), self.truth(states, f0)


def _setup(body_plan, duration_s, fps, group, n_animals, noise, seed, session, n_frames):
    """Check the arguments shared by the session functions; a simulator and the frame count."""
    plan = get_body_plan(body_plan)
    if group is None:
        group = plan.groups[0]
    try:
        fps = float(fps)
        n_frames = round(float(duration_s) * fps) if n_frames is None else int(n_frames)
    except (TypeError, ValueError):
        msg = f"fps and duration_s must be numbers; got fps={fps!r}, duration_s={duration_s!r}"
        raise InputError(msg) from None
    if not (np.isfinite(fps) and fps > 0) or n_frames < 2:
        msg = (
            f"a session needs fps > 0 and at least 2 frames; got fps={fps!r} and "
            f"{n_frames} frames (duration_s={duration_s!r}). Give a longer duration."
        )
        raise InputError(msg)
    if not isinstance(n_animals, (int, np.integer)) or n_animals < 1:
        raise InputError(f"n_animals must be a positive integer; got {n_animals!r}")
    if not isinstance(noise, (bool, TrackingNoise)):
        msg = f"noise must be True, False or a TrackingNoise; got {type(noise).__name__}"
        raise InputError(msg)
    session = session or f"{plan.name}_{group}_seed{seed}"
    sim = SessionSimulator(plan, fps, group, int(n_animals), noise, int(seed), str(session))
    return sim, n_frames


def simulate_chunks(
    body_plan: str | BodyPlan = "dune_vole",
    duration_s: float = 300.0,
    fps: float = 30.0,
    group: str | None = None,
    n_animals: int = 1,
    noise: bool | TrackingNoise = True,
    seed: int = 0,
    session: str | None = None,
    chunk_frames: int = 100_000,
    n_frames: int | None = None,
) -> Iterator[tuple[PoseTracks, pd.DataFrame]]:
    """Stream a long simulated session as consecutive chunks with continuous state.

    Parameters are those of :func:`simulate_session`, plus ``chunk_frames`` (frames per chunk;
    the last chunk may be up to one frame longer so none has fewer than 2 frames) and
    ``n_frames`` (overrides ``duration_s``). The chunks joined end to end equal
    ``simulate_session`` with the same arguments (to float rounding, ~1e-9). Each chunk's
    ``meta["first_frame"]`` and its truth's ``frame`` column give absolute frame numbers.
    Memory is bounded by one chunk (about 350 MB peak at 100,000 frames of one vole), so
    ``simulate_chunks(n_frames=20_000_000)`` streams a 185-hour session.

    Yields
    ------
    tracks : PoseTracks, shape (chunk frames, animals, keypoints, dims)
    truth : DataFrame with columns frame, animal, behaviour, state

    Examples
    --------
    >>> chunks = simulate_chunks(duration_s=20, chunk_frames=250, seed=1)
    >>> [t.n_frames for t, _ in chunks]
    [250, 250, 100]
    """
    if int(chunk_frames) < 2:
        raise InputError(f"chunk_frames must be at least 2; got {chunk_frames!r}")
    sim, total = _setup(
        body_plan, duration_s, fps, group, n_animals, noise, seed, session, n_frames
    )
    edges = [*range(0, total, int(chunk_frames)), total]
    if len(edges) > 2 and edges[-1] - edges[-2] < 2:
        edges.pop(-2)  # fold a one-frame tail into the chunk before
    for f0, f1 in itertools.pairwise(edges):
        yield sim.chunk(f0, f1)


def simulate_session(
    body_plan: str | BodyPlan = "dune_vole",
    duration_s: float = 300.0,
    fps: float = 30.0,
    group: str | None = None,
    n_animals: int = 1,
    noise: bool | TrackingNoise = True,
    seed: int = 0,
    session: str | None = None,
) -> tuple[PoseTracks, pd.DataFrame]:
    """Simulate one session of invented animals with known behaviour.

    Parameters
    ----------
    body_plan : str or BodyPlan
        ``"dune_vole"`` (2-D, pixels) or ``"glass_minnow"`` (3-D, mm), or a custom plan.
    duration_s, fps : float
        Length in seconds and frame rate.
    group : str, optional
        Housing group (default: the plan's baseline, e.g. ``"standard"``).
    n_animals : int
        Animals in the arena; with 2 or more, social behaviours (approaching) can occur.
    noise : bool or TrackingNoise
        ``True`` for the plan's tracking noise, ``False`` for true positions (confidence 1),
        or a custom configuration.
    seed : int
        Same seed, same session (tracks and truth). Noise has its own streams, so
        ``noise=False`` gives the true positions behind ``noise=True``.
    session : str, optional
        Session name; defaults to ``"<plan>_<group>_seed<seed>"``.

    Returns
    -------
    tracks : PoseTracks
        coords (frames, animals, keypoints, dims) in ``plan.coordinate_units``; ``meta`` has
        ``px_per_unit`` (None when the tracks are already in mm), ``physical_units``,
        ``group``, ``seed``, arena corners and body scale.
    truth : DataFrame, (frames * animals) rows
        ``frame`` (int), ``animal`` and ``behaviour`` (categorical), ``state`` (int index of
        the behaviour in ``plan.behaviour_names``), frame-major.

    Examples
    --------
    >>> tracks, truth = simulate_session(duration_s=10, seed=3)
    >>> tracks.coords.shape, list(truth.columns)
    ((300, 1, 10, 2), ['frame', 'animal', 'behaviour', 'state'])
    """
    sim, total = _setup(body_plan, duration_s, fps, group, n_animals, noise, seed, session, None)
    # work in cache-sized blocks (the result does not depend on the block size)
    A, K, D = len(sim.ids), len(sim.plan.keypoints), sim.plan.dims
    coords = np.empty((total, A, K, D))
    conf = np.ones((total, A, K)) if sim.tracker is None else np.empty((total, A, K))
    states = np.empty((total, A), dtype=np.int64)
    for f0 in range(0, total, BLOCK_FRAMES):
        f1 = min(f0 + BLOCK_FRAMES, total)
        c, q, s = sim.arrays(f0, f1)
        coords[f0:f1], states[f0:f1] = c, s
        if q is not None:
            conf[f0:f1] = q
    return sim.tracks(coords, conf, 0), sim.truth(states, 0)


def session_seeds(seed: int, n: int) -> list[int]:
    """Independent per-session seeds derived from a study seed."""
    return [int(c.generate_state(1)[0]) for c in np.random.SeedSequence(seed).spawn(n)]


def simulate_study(
    body_plan: str | BodyPlan = "dune_vole",
    n_per_group: int = 8,
    groups: Sequence[str] | None = None,
    duration_s: float = 300.0,
    fps: float = 30.0,
    seed: int = 0,
    n_animals: int = 1,
    noise: bool | TrackingNoise = True,
) -> tuple[list[PoseTracks], list[pd.DataFrame], pd.DataFrame]:
    """Simulate ``n_per_group`` sessions (one subject each) per group.

    Returns
    -------
    sessions : list of PoseTracks (``meta`` adds ``subject``)
    truths : list of truth DataFrames (see :func:`simulate_session`), one per session
    manifest : DataFrame with columns session, path, fps, group, subject, px_per_unit, units
        (``path`` is the Parquet file name :func:`write_study` gives the session; ``units`` is
        the physical unit that ``px_per_unit`` refers to; for tracks already in physical
        units, such as the fish's mm, ``px_per_unit`` is NaN and ``units`` is that unit).

    Examples
    --------
    >>> s, t, m = simulate_study(n_per_group=1, duration_s=5)
    >>> m[["session", "group"]].to_numpy().tolist()
    [['session_01', 'standard'], ['session_02', 'enriched']]
    """
    plan = get_body_plan(body_plan)
    groups = tuple(plan.groups if groups is None else groups)
    n = int(n_per_group) * len(groups)
    if n < 1:
        raise InputError(f"n_per_group must be at least 1; got {n_per_group!r}")
    seeds = session_seeds(seed, n)
    sessions, truths, rows = [], [], []
    for i, (group, s) in enumerate(zip(np.repeat(groups, n_per_group), seeds, strict=True)):
        name, subject = f"session_{i + 1:02d}", f"{plan.subject_prefix}_{i + 1:02d}"
        tracks, truth = simulate_session(
            plan, duration_s, fps, str(group), n_animals, noise, s, name
        )
        tracks = tracks.replace(meta={"subject": subject})
        sessions.append(tracks)
        truths.append(truth)
        rows.append(
            (
                name,
                f"{name}.parquet",
                float(fps),
                str(group),
                subject,
                tracks.meta["px_per_unit"] or np.nan,
                plan.physical_units,
            )
        )
    columns = ["session", "path", "fps", "group", "subject", "px_per_unit", "units"]
    return sessions, truths, pd.DataFrame(rows, columns=columns)
