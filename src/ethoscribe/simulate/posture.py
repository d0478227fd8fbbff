"""Keypoints from a body path: blended postures, rhythms, bends, body frame and camera.

The posture of each frame is the mean posture of each behaviour weighted by a smoothed one-hot
state (so a change of behaviour takes ~0.1 s), plus each behaviour's rhythms gated by the same
weights, plus its bend toward the bout's side. The body frame follows the path's heading (and
pitch in 3-D); the camera scales arena millimetres to pixels and places the arena in the image.
"""

from __future__ import annotations

import numpy as np
from scipy import signal

from ethoscribe.simulate.plan import BodyPlan

BLEND_S = 0.06  # time constant of each of the two lags that blend postures between behaviours


class PostureMaker:
    """Turns per-frame kinematics of one animal into true keypoint positions (arena units).

    State (posture blend filter, rhythm phases) carries from call to call, so consecutive chunks
    join without a seam.
    """

    def __init__(self, plan: BodyPlan, fps: float, body_scale: float, first_state: int) -> None:
        self.plan, self.fps, self.scale = plan, fps, body_scale
        a = np.exp(-1.0 / (BLEND_S * fps))
        # two cascaded first-order lags: a smooth, non-overshooting blend
        self.b, self.a = np.array([(1 - a) ** 2]), np.array([1.0, -2 * a, a * a])
        S = len(plan.behaviours)
        # behaviours with a bend get a second, signed weight (+ left, - right)
        self.bent = np.flatnonzero(np.abs(plan.bends).sum(axis=(1, 2)) > 0)
        x0 = np.zeros(S + len(self.bent))
        x0[first_state] = 1.0
        self.zi = signal.lfilter_zi(self.b, self.a)[:, None] * x0[None, :]
        rhythms = plan.rhythm_arrays()
        self.rhythm_state = np.array([r[0] for r in rhythms], dtype=np.int64)
        self.freq = np.array([r[1].frequency_hz for r in rhythms])
        self.jitter = np.array([r[1].jitter for r in rhythms])
        self.phase = np.zeros(len(rhythms))
        # sin(phase + offset) = sin(phase) cos(offset) + cos(phase) sin(offset): every rhythm
        # becomes two rows of one matrix product with the gated sin and cos of its phase
        K, D = len(plan.keypoints), plan.dims  # a 2-D body frame has no "up"
        waves = np.zeros((2 * len(rhythms), K, 3))
        for i, (_, _, idx, amp, off) in enumerate(rhythms):
            waves[2 * i, idx] = amp * np.cos(off)[:, None]
            waves[2 * i + 1, idx] = amp * np.sin(off)[:, None]
        basis = np.concatenate([plan.postures, plan.bends[self.bent], waves])
        self.basis = basis[..., :D].reshape(len(basis), K * D)

    def keypoints(self, kin: dict[str, np.ndarray], camera: Camera | None = None) -> np.ndarray:
        """True keypoints, shape (n, keypoints, dims), from :meth:`AnimalMotion.take` output,
        in arena units or, with a ``camera``, in image coordinates (the camera then moves,
        turns and scales the body frame, cheaper than transforming every keypoint)."""
        state, n = kin["state"], len(kin["state"])
        S, K, B = len(self.plan.behaviours), len(self.plan.keypoints), len(self.bent)
        mix = np.zeros((n, len(self.basis)))
        mix[np.arange(n), state] = 1.0
        if B:
            mix[:, S : S + B] = mix[:, self.bent] * kin["side"][:, None]
        mix[:, : S + B], self.zi = signal.lfilter(
            self.b, self.a, mix[:, : S + B], axis=0, zi=self.zi
        )
        draw = 2 * kin["rhythm_draw"][:, None] - 1
        phase = self.phase + (2 * np.pi / self.fps) * np.cumsum(
            self.freq * (1.0 + self.jitter * draw), axis=0
        )  # (n, rhythms)
        self.phase = phase[-1] % (2 * np.pi)
        gate = mix[:, self.rhythm_state]
        mix[:, S + B :: 2] = gate * np.sin(phase)
        mix[:, S + B + 1 :: 2] = gate * np.cos(phase)
        body = (mix @ self.basis).reshape(n, K, self.plan.dims)
        pos, yaw, scale = kin["pos"], kin["yaw"], self.scale
        if camera is not None:
            pos = np.zeros_like(pos)
            pos[:, : self.plan.dims] = camera(kin["pos"][:, : self.plan.dims])
            yaw, scale = yaw + camera.angle, scale * camera.px_per_unit
        body *= scale
        return self._to_arena(body, pos, yaw, kin["pitch"])

    def _to_arena(
        self, body: np.ndarray, pos: np.ndarray, yaw: np.ndarray, pitch: np.ndarray
    ) -> np.ndarray:
        cy, sy = np.cos(yaw)[:, None], np.sin(yaw)[:, None]
        f, left = body[..., 0], body[..., 1]
        if self.plan.dims == 2:
            # arena axes as in an image seen from above (y down): the animal's left is
            # its heading turned by -90 degrees
            x = pos[:, None, 0] + f * cy + left * sy
            y = pos[:, None, 1] + f * sy - left * cy
            return np.stack([x, y], axis=-1)
        cp, sp = np.cos(pitch)[:, None], np.sin(pitch)[:, None]
        up = body[..., 2]
        # right-handed, z up: forward u, left (-sin yaw, cos yaw, 0), up = u x left
        x = pos[:, None, 0] + f * cp * cy - left * sy - up * sp * cy
        y = pos[:, None, 1] + f * cp * sy + left * cy - up * sp * sy
        z = pos[:, None, 2] + f * sp + up * cp
        return np.stack([x, y, z], axis=-1)


class Camera:
    """Places the arena in the image: ``image = ppu * R(angle) (p - c) + ppu * c + shift``.

    ``c`` is the arena centre; 3-D z is only scaled. Parameters are drawn per session.
    """

    def __init__(self, plan: BodyPlan, rng: np.random.Generator) -> None:
        u = rng.random(4)
        self.dims = plan.dims
        self.px_per_unit = float(
            round(plan.px_per_unit * (1 + plan.scale_spread * (2 * u[0] - 1)), 4)
        )
        spread = plan.placement_spread
        self.angle = 0.04 * (2 * u[1] - 1) if spread > 0 else 0.0
        self.shift = 1.5 * spread + spread * (2 * u[2:4] - 1)
        self.centre = np.asarray(plan.arena[:2]) / 2

    def __call__(self, p: np.ndarray) -> np.ndarray:
        """Image coordinates of arena points ``p`` (..., dims)."""
        c, s = np.cos(self.angle), np.sin(self.angle)
        xy = p[..., :2] - self.centre
        x = c * xy[..., 0] - s * xy[..., 1]
        y = s * xy[..., 0] + c * xy[..., 1]
        out = [self.px_per_unit * (x + self.centre[0]) + self.shift[0]]
        out.append(self.px_per_unit * (y + self.centre[1]) + self.shift[1])
        if self.dims == 3:
            out.append(self.px_per_unit * p[..., 2])
        return np.stack(out, axis=-1)

    def corners(self, arena: tuple[float, ...]) -> list[list[float]]:
        """Arena floor corners in image coordinates (for metadata)."""
        w, h = arena[0], arena[1]
        pts = np.array([[0, 0], [w, 0], [w, h], [0, h]], dtype=float)
        if self.dims == 3:
            pts = np.column_stack([pts, np.zeros(4)])
        return np.round(self(pts)[:, :2], 3).tolist()
