"""The behaviour sequence and body path of one simulated animal, generated bout by bout.

Each bout draws its behaviour's duration, a travel speed, a side, a turn and a climb; the body's
heading and speed then evolve frame by frame within the bout (vectorised; speed and heading carry
over from bout to bout). A bout whose path would leave the arena is re-planned: the animal takes
the start turn, curvature and climb nearest the drawn ones that keep it inside. Bouts are made
lazily, in order, from their own random streams, so any chunking of a session gives one result.
"""

from __future__ import annotations

import bisect
from dataclasses import dataclass

import numpy as np
from scipy import signal

from ethoscribe.simulate.plan import BodyPlan, BoutDuration

SPEED_LAG_S = 0.15  # time constant of speeding up / slowing down between bouts
TURN_NOISE_S = 0.3  # correlation time of random turning
WOBBLE_S = 0.5  # correlation time of within-bout speed changes
START_TURN_S = 0.2  # time constant of the turn made at the start of a bout
PITCH_LAG_S = 0.4
STOP_DISTANCE = 1.0  # approaching stops this many body lengths from the partner
_TURN_OFFSETS = np.linspace(-np.pi, np.pi, 17)[:-1]
_CURVATURES = np.array([0.0, 1.5, -1.5, 3.0, -3.0, 4.5, -4.5])
_TAPE_BLOCK = 4096
# re-planning candidates: route = (start turn, curvature, climb as a multiple of the drawn climb)
_GRID_3D = np.array([(d, k, c) for d in _TURN_OFFSETS for k in _CURVATURES for c in (1, 0, -1)])
_GRID_2D = np.array([(d, k, 0.0) for d in _TURN_OFFSETS for k in _CURVATURES])


def free_area(plan: BodyPlan) -> tuple[np.ndarray, np.ndarray]:
    """Lowest and highest position (3,) of the body origin: the arena less the wall margin
    (z is 0 in 2-D)."""
    lo, hi = np.zeros(3), np.zeros(3)
    lo[: plan.dims] = plan.wall_margin
    hi[: plan.dims] = np.asarray(plan.arena) - plan.wall_margin
    return lo, hi


def _wrap(angle):
    return (np.asarray(angle) + np.pi) % (2 * np.pi) - np.pi


class NoiseTape:
    """Unit-variance AR(1) noise, one column per correlation time, made in fixed blocks so the
    values at a frame never depend on how the frames are asked for."""

    def __init__(self, rng: np.random.Generator, a: np.ndarray) -> None:
        self.rng, self.a = rng, np.asarray(a, dtype=float)
        self.buf = np.zeros((0, len(self.a)))
        self.first = 0  # absolute frame of buf[0]
        self.last = np.zeros(len(self.a))

    def take(self, f0: int, n: int) -> np.ndarray:
        """Noise of frames ``f0 .. f0 + n - 1``, shape (n, columns); frames must not go back."""
        self.buf, self.first = self.buf[f0 - self.first :], f0
        blocks = [self.buf]
        have = len(self.buf)
        while have < n:
            e = self.rng.standard_normal((_TAPE_BLOCK, len(self.a)))
            out = np.empty_like(e)
            for j, a in enumerate(self.a):
                zi = [a * self.last[j]]
                out[:, j] = signal.lfilter([np.sqrt(1 - a * a)], [1.0, -a], e[:, j], zi=zi)[0]
            self.last = out[-1].copy()
            blocks.append(out)
            have += _TAPE_BLOCK
        if len(blocks) > 1:
            self.buf = np.concatenate(blocks)
        return self.buf[:n]


@dataclass
class Bout:
    """One generated bout: frames ``start .. start + n - 1`` of one behaviour."""

    start: int
    state: int
    pos: np.ndarray  # (n, 3) body origin in arena coordinates
    yaw: np.ndarray  # (n,) heading, rad
    pitch: np.ndarray  # (n,) rad (0 in 2-D)
    rhythm_draw: float  # uniform draw setting this bout's rhythm frequency factors
    side: float  # +1 left, -1 right

    @property
    def end(self) -> int:
        return self.start + len(self.yaw)


class AnimalMotion:
    """Generates one animal's bouts (semi-Markov) and body path, on demand.

    Parameters
    ----------
    plan : BodyPlan
    transition : array (behaviours, behaviours)
        Jump-chain transition matrix of the animal's group.
    durations : list of BoutDuration
        Bout durations of the animal's group.
    fps : float
    rng_bouts, rng_moves : numpy Generators
        Separate streams for bout-level and frame-level draws.
    start : dict
        ``state`` (int), ``pos`` (3,), ``yaw`` (float) at frame 0.
    body_length : float
        This animal's length (physical units), used to stop short of a partner.
    """

    def __init__(
        self,
        plan: BodyPlan,
        transition: np.ndarray,
        durations: list[BoutDuration],
        fps: float,
        rng_bouts: np.random.Generator,
        rng_moves: np.random.Generator,
        start: dict,
        body_length: float,
    ) -> None:
        self.plan, self.durations, self.fps = plan, durations, fps
        self.cum_P = np.cumsum(transition, axis=1)
        self.rng = rng_bouts
        self.tape = NoiseTape(rng_moves, np.exp(-1.0 / (np.array([TURN_NOISE_S, WOBBLE_S]) * fps)))
        self.state = int(start["state"])
        self.pos = np.asarray(start["pos"], dtype=float)
        self.yaw, self.pitch, self.speed = float(start["yaw"]), 0.0, 0.0
        self.body_length = body_length
        self.frontier = 0
        self.bouts: list[Bout] = []
        self.lo, self.hi = free_area(plan)
        self.a = {
            k: np.exp(-1.0 / (tau * fps))
            for k, tau in (("speed", SPEED_LAG_S), ("start", START_TURN_S), ("pitch", PITCH_LAG_S))
        }
        self._powers: dict[str, np.ndarray] = {k: np.zeros(0) for k in self.a}

    def powers(self, name: str, n: int) -> np.ndarray:
        """``a ** (1 .. n)`` of the lag ``name``, or frame times ``(1 .. n) / fps`` for
        ``"time"`` (cached: every bout needs them)."""
        p = self._powers.get(name, np.zeros(0))
        if len(p) < n:
            k = np.arange(1.0, 2 * n + 1)
            p = self._powers[name] = k / self.fps if name == "time" else self.a[name] ** k
        return p[:n]

    def position_at(self, frame: int) -> np.ndarray:
        """Body origin at ``frame`` (clamped to the generated range)."""
        if not self.bouts or frame >= self.frontier:
            return self.pos.copy()
        i = max(0, bisect.bisect_right([b.start for b in self.bouts], frame) - 1)
        b = self.bouts[i]
        return b.pos[min(max(frame - b.start, 0), len(b.yaw) - 1)].copy()

    def extend(self, partners: list[AnimalMotion]) -> None:
        """Generate the next bout (partners are read only by social behaviours)."""
        state = self.state
        beh = self.plan.behaviours[state]
        n = max(1, round(float(self.durations[state].sample(self.rng)) * self.fps))
        u = self.rng.random(7)
        nxt = int(np.searchsorted(self.cum_P[state], u[6] * self.cum_P[state, -1]))
        self.state = min(nxt, len(self.plan.behaviours) - 1)
        noise = self.tape.take(self.frontier, n)
        side = 1.0 if u[2] < 0.5 else -1.0
        lo, hi = beh.speed
        cruise = lo + (hi - lo) * u[0]
        decay = self.powers("speed", n)
        turn = side * (beh.turn_rate[0] + (beh.turn_rate[1] - beh.turn_rate[0]) * u[3])
        base_yaw = self.yaw + np.cumsum(turn + beh.turn_noise * noise[:, 0]) / self.fps
        route = np.array([(2 * u[4] - 1) * (0.8 if hi > 0 else 0.3), 0.0, 0.0])
        if self.plan.dims == 3:
            route[2] = beh.climb * (2 * u[5] - 1)
        search = hi > 0
        if beh.social and partners:
            route[0], target = self._approach(partners, np.full(n, cruise))
            base_yaw = np.full(n, self.yaw)
            speed = signal.lfilter(
                [1 - self.a["speed"]],
                [1.0, -self.a["speed"]],
                target,
                zi=[self.a["speed"] * self.speed],
            )[0]
            search = False
        else:
            # a first-order lag from the last speed to this bout's cruising speed
            speed = cruise + (self.speed - cruise) * decay
            if beh.speed_wobble > 0 and cruise > 0:
                wobble = np.clip(1 + beh.speed_wobble * noise[:, 1], lo / cruise, hi / cruise)
                speed = speed * wobble
        speed[speed < 1e-3] = 0.0  # ends the exponential slowing down
        self.speed = float(speed[-1])
        pos, yaw, pitch = self._paths(speed, base_yaw, route[None])
        if search and self._overshoot(pos)[0] > 1.0:
            route = self._replan(speed, base_yaw, route)
            pos, yaw, pitch = self._paths(speed, base_yaw, route[None])
        pos = np.clip(pos[0], self.lo, self.hi)
        bout = Bout(self.frontier, state, pos, yaw[0], pitch[0], float(u[1]), side)
        self.bouts.append(bout)
        self.pos, self.yaw, self.pitch = pos[-1].copy(), float(_wrap(yaw[0, -1])), pitch[0, -1]
        self.frontier = bout.end

    def _approach(self, partners: list[AnimalMotion], target: np.ndarray):
        """Turn toward the nearest partner and close in, stopping a body length short."""
        spots = [p.position_at(min(self.frontier, p.frontier - 1)) for p in partners]
        gaps = [float(np.hypot(*(s - self.pos)[:2])) for s in spots]
        aim = spots[int(np.argmin(gaps))] - self.pos
        turn = float(_wrap(np.arctan2(aim[1], aim[0]) - self.yaw))
        reach = max(min(gaps) - STOP_DISTANCE * self.body_length, 1e-9)
        # exponential approach: covers at most ``reach``, never overshooting the partner
        return turn, target * np.exp(-np.cumsum(target) / self.fps / reach)

    def _paths(self, speed: np.ndarray, base_yaw: np.ndarray, routes: np.ndarray, every: int = 1):
        """Paths (routes, m, 3), yaw and pitch (routes, m) for routes of (start turn, curvature,
        climb); ``every > 1`` gives a coarse path at every ``every``-th frame (for searching)."""
        n = len(speed)
        idx = slice(None) if every == 1 else np.arange(0, n, every)
        tt = self.powers("time", n)[idx]
        yaw = (
            base_yaw[idx] + routes[:, :1] * (1 - self.powers("start", n)[idx]) + routes[:, 1:2] * tt
        )
        step = (speed if every == 1 else np.add.reduceat(speed, idx)) / self.fps
        pitch = np.zeros_like(yaw)
        if self.plan.dims == 3:
            pitch = routes[:, 2:3] + (self.pitch - routes[:, 2:3]) * self.powers("pitch", n)[idx]
        pos = np.empty((*yaw.shape, 3))
        pos[...] = self.pos
        # only the frames up to the last moving one need trigonometry (still animals have none)
        m = int(np.flatnonzero(step)[-1]) + 1 if step.any() else 0
        if m:
            s, y, p = step[:m], yaw[:, :m], pitch[:, :m]
            flat = s * np.cos(p) if self.plan.dims == 3 else s
            pos[:, :m, 0] += np.cumsum(flat * np.cos(y), axis=1)
            pos[:, :m, 1] += np.cumsum(flat * np.sin(y), axis=1)
            if self.plan.dims == 3:
                pos[:, :m, 2] += np.cumsum(s * np.sin(p), axis=1)
            pos[:, m:] = pos[:, m - 1 : m]
        return pos, yaw, pitch

    def _replan(self, speed: np.ndarray, base_yaw: np.ndarray, route: np.ndarray) -> np.ndarray:
        """The route nearest the drawn one whose path stays inside the free area."""
        grid = _GRID_3D * [1.0, 1.0, route[2]] if self.plan.dims == 3 else _GRID_2D
        pos = self._paths(speed, base_yaw, grid, every=max(1, len(speed) // 24))[0]
        cost = np.abs(_wrap(grid[:, 0] - route[0])) + 0.3 * np.abs(grid[:, 1])
        cost += np.abs(grid[:, 2] - route[2]) + 1e3 * self._overshoot(pos)
        return grid[int(np.argmin(cost))]

    def _overshoot(self, pos: np.ndarray) -> np.ndarray:
        """How far paths (plans, m, 3) leave the free area, summed over points."""
        out = np.maximum(self.lo - pos, 0.0) + np.maximum(pos - self.hi, 0.0)
        return out.sum(axis=(1, 2))

    def take(self, f0: int, f1: int) -> dict[str, np.ndarray]:
        """Per-frame arrays for frames ``f0 .. f1 - 1`` (generated beforehand); frees old bouts.

        Returns ``state`` (n,), ``pos`` (n, 3), ``yaw`` (n,), ``pitch`` (n,), ``rhythm_draw``
        (n,) and ``side`` (n,).
        """
        used = [b for b in self.bouts if b.end > f0 and b.start < f1]
        cuts = [slice(max(f0 - b.start, 0), min(f1, b.end) - b.start) for b in used]
        sizes = [c.stop - c.start for c in cuts]
        out = {
            "state": np.repeat([b.state for b in used], sizes).astype(np.int64),
            "pos": np.concatenate([b.pos[c] for b, c in zip(used, cuts, strict=True)]),
            "yaw": np.concatenate([b.yaw[c] for b, c in zip(used, cuts, strict=True)]),
            "pitch": np.concatenate([b.pitch[c] for b, c in zip(used, cuts, strict=True)]),
            "rhythm_draw": np.repeat([b.rhythm_draw for b in used], sizes),
            "side": np.repeat([b.side for b in used], sizes),
        }
        self.bouts = [b for b in self.bouts if b.end > f1] or self.bouts[-1:]
        return out
