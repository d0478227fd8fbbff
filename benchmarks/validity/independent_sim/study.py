"""Sessions and studies: simulate, then write poses, truth, failure logs, manifest and
parameters.

Layout written under ``out``::

    manifest.csv                       session, path, fps, group, subject, px_per_unit, units
    parameters.json                    seed, command options, body plan, traits, faults
    poses/<session>.parquet (or .csv)  frame, keypoint, x, y, confidence (pixels)
    truth/<session>.csv                frame, behaviour (one row per frame)
    truth/<session>_faults.csv         keypoint, kind, start_frame, stop_frame
"""

from __future__ import annotations

import json
import os
import platform
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from . import animal
from .animal import BEHAVIOURS, KEYPOINTS, Traits, draw_traits, transition_matrix
from .body import path, posture, visibility
from .bouts import sample_bouts
from .drivers import build_drivers
from .tracking import FaultConfig, add_failures

VERSION = "1.0"
FPS_CHOICES = (25, 30, 60, 120)
ARENA_RADIUS_MM = 150.0
MARGIN_MM = 10.0


@dataclass
class Session:
    """One simulated recording: tidy pose table, per-frame truth and the failure log."""

    name: str
    fps: float
    px_per_mm: float
    poses: pd.DataFrame
    truth: pd.DataFrame
    faults: pd.DataFrame


def simulate_session(
    rng: np.random.Generator,
    name: str,
    traits: Traits,
    group: str,
    fps: float,
    duration_s: float,
    px_per_mm: float,
    faults: FaultConfig | None = None,
) -> Session:
    """Simulate one session of ``duration_s`` seconds at ``fps`` frames per second."""
    n = round(duration_s * fps)
    bouts = sample_bouts(rng, transition_matrix(group), n, fps)
    d = build_drivers(rng, bouts, traits)
    start = rng.uniform(-0.5, 0.5, 2) * ARENA_RADIUS_MM
    pos, heading = path(bouts, d, traits, ARENA_RADIUS_MM, start, rng.uniform(-np.pi, np.pi))
    pos = pos + d["rock"][:, None] * traits.size * np.c_[np.cos(heading), np.sin(heading)]
    local = posture(d) * traits.size
    c, s = np.cos(heading)[:, None], np.sin(heading)[:, None]
    wx = pos[:, :1] + c * local[..., 0] - s * local[..., 1]
    wy = pos[:, 1:] + s * local[..., 0] + c * local[..., 1]
    # Pixels: origin at the image's top-left corner, y pointing down.
    half = ARENA_RADIUS_MM + MARGIN_MM
    xy = np.stack([(wx + half) * px_per_mm, (half - wy) * px_per_mm], axis=-1)
    tracked, conf, log = add_failures(rng, xy, visibility(d), fps, faults or FaultConfig())
    k = len(KEYPOINTS)
    poses = pd.DataFrame(
        {
            "frame": np.repeat(np.arange(n), k),
            "keypoint": pd.Categorical.from_codes(np.tile(np.arange(k), n), KEYPOINTS),
            "x": np.round(tracked[..., 0].ravel(), 3),
            "y": np.round(tracked[..., 1].ravel(), 3),
            "confidence": np.round(conf.ravel(), 4),
        }
    )
    behaviour = pd.Categorical.from_codes(bouts.labels, BEHAVIOURS)
    truth = pd.DataFrame({"frame": np.arange(n), "behaviour": behaviour})
    return Session(name, float(fps), float(px_per_mm), poses, truth, log.reset_index(drop=True))


def plan_study(n_sessions: int, seed: int) -> pd.DataFrame:
    """Who is recorded when: each animal twice (alternating groups A/B), frame rates drawn
    from 25, 30, 60 and 120 fps in equal shares, a camera scale per session."""
    rng = np.random.default_rng(np.random.SeedSequence([seed, 1]))
    n_subjects = max(1, (n_sessions + 1) // 2)
    fps = np.resize(np.array(FPS_CHOICES), n_sessions)
    rng.shuffle(fps)
    subject = np.arange(n_sessions) % n_subjects
    return pd.DataFrame(
        {
            "session": [f"session_{i + 1:02d}" for i in range(n_sessions)],
            "fps": fps,
            "group": np.where(subject % 2 == 0, "A", "B"),
            "subject": [f"animal_{j + 1:02d}" for j in subject],
            "px_per_unit": np.round(rng.uniform(2.0, 3.0, n_sessions), 3),
            "units": "mm",
        }
    )


def _atomic_write(target: Path, write) -> None:
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=target.parent, prefix=f".{target.name}.", suffix=".tmp")
    os.close(fd)
    try:
        write(tmp)
        os.chmod(tmp, 0o644)  # mkstemp makes the file private; these are shareable outputs
        os.replace(tmp, target)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def write_study(
    out: str | os.PathLike,
    n_sessions: int = 8,
    duration_s: float = 240.0,
    seed: int = 0,
    file_format: str = "parquet",
    faults: FaultConfig | None = None,
) -> pd.DataFrame:
    """Simulate a study and write it under ``out``; returns the manifest table.

    Deterministic given ``seed``: session i uses its own random stream, so it does not depend
    on how many sessions are asked for.
    """
    if file_format not in ("parquet", "csv"):
        raise ValueError(f"file_format must be 'parquet' or 'csv'; got {file_format!r}")
    if n_sessions < 1 or duration_s <= 0:
        msg = f"need at least one session of positive length; got {n_sessions} x {duration_s} s"
        raise ValueError(msg)
    out = Path(out)
    faults = faults or FaultConfig()
    plan = plan_study(n_sessions, seed)
    subjects = plan.drop_duplicates("subject")
    traits = {
        row.subject: draw_traits(
            np.random.default_rng(np.random.SeedSequence([seed, 2, i])), row.group
        )
        for i, row in enumerate(subjects.itertuples())
    }
    paths = []
    for i, row in enumerate(plan.itertuples()):
        rng = np.random.default_rng(np.random.SeedSequence([seed, 3, i]))
        ses = simulate_session(
            rng, row.session, traits[row.subject], row.group, row.fps, duration_s,
            row.px_per_unit, faults,
        )  # fmt: skip
        rel = f"poses/{row.session}.{file_format}"
        if file_format == "parquet":
            _atomic_write(out / rel, lambda p, s=ses: s.poses.to_parquet(p, index=False))
        else:
            _atomic_write(out / rel, lambda p, s=ses: s.poses.to_csv(p, index=False))
        _atomic_write(
            out / "truth" / f"{row.session}.csv", lambda p, s=ses: s.truth.to_csv(p, index=False)
        )
        _atomic_write(
            out / "truth" / f"{row.session}_faults.csv",
            lambda p, s=ses: s.faults.to_csv(p, index=False),
        )
        paths.append(rel)
    manifest = plan.assign(path=paths)[
        ["session", "path", "fps", "group", "subject", "px_per_unit", "units"]
    ]
    _atomic_write(out / "manifest.csv", lambda p: manifest.to_csv(p, index=False))
    params = {
        "generator": "independent_sim",
        "version": VERSION,
        "seed": seed,
        "n_sessions": n_sessions,
        "duration_s": duration_s,
        "file_format": file_format,
        "numpy": np.__version__,
        "python": platform.python_version(),
        "arena_radius_mm": ARENA_RADIUS_MM,
        "image_margin_mm": MARGIN_MM,
        "keypoints": list(KEYPOINTS),
        "behaviours": list(BEHAVIOURS),
        "transitions": {g: transition_matrix(g).round(6).tolist() for g in ("A", "B")},
        "durations_s": animal.DURATIONS,
        "group_effect": animal.GROUP_EFFECT,
        "traits": {k: v.as_dict() for k, v in traits.items()},
        "faults": {k: list(v) if isinstance(v, tuple) else v for k, v in faults.as_dict().items()},
        "sessions": manifest.to_dict(orient="records"),
    }
    text = json.dumps(params, indent=2, default=lambda o: o.item() if hasattr(o, "item") else o)
    _atomic_write(out / "parameters.json", lambda p: Path(p).write_text(text + "\n"))
    return manifest
