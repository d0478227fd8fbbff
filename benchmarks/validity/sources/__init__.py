"""Sources of the validation bench: each a loader returning tracks, per-frame truth and fps.

A loader is registered with :func:`source` under a plain name and returns a :class:`Source`.
Pose sources give ``PoseTracks`` read as ``ethoscribe.workspace.discover`` reads them; sensor
and single-series sources are turned into tracks by :func:`channels_as_heights` (see there),
so that both pipelines (ethoscribe and the plain reference) take the same input.
"""

from __future__ import annotations

import importlib.util
import math
import os
import subprocess
import sys
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ethoscribe.pose import PoseTracks

REPO = Path(__file__).resolve().parents[3]


@dataclass
class Source:
    """Tracks and truth of one bench source.

    ``truth`` maps (session, animal) to an int array with one entry per frame of that
    session: the true behaviour's code, or -1 where the truth gives no label (left out of
    every score). ``behaviours`` names the codes. ``details`` says what was loaded (package,
    dataset, sizes, trimming) and is written to the results JSON.
    """

    name: str
    kind: str
    sessions: list[PoseTracks]
    truth: dict[tuple[str, str], np.ndarray]
    behaviours: list[str]
    details: dict[str, Any] = field(default_factory=dict)

    @property
    def unit_fps(self) -> dict[tuple[str, str], float]:
        """Frame rate of every (session, animal) unit."""
        return {(s.session, a): float(s.fps) for s in self.sessions for a in s.animals}

    @property
    def fps_text(self) -> str:
        rates = sorted({float(s.fps) for s in self.sessions})
        return f"{rates[0]:g}" if len(rates) == 1 else f"{rates[0]:g}-{rates[-1]:g}"

    @property
    def n_frames(self) -> int:
        return int(sum(s.n_frames * s.n_animals for s in self.sessions))

    @property
    def n_behaviours(self) -> int:
        codes = np.concatenate([v[v >= 0] for v in self.truth.values()])
        return len(np.unique(codes))


LOADERS: dict[str, Callable[..., Source]] = {}
DESCRIPTIONS: dict[str, str] = {}


def source(name: str, description: str):
    """Register a loader ``f(seed) -> Source`` under ``name``."""

    def register(func: Callable[..., Source]) -> Callable[..., Source]:
        LOADERS[name] = func
        DESCRIPTIONS[name] = description
        return func

    return register


# Frame rate below which a source is interpolated up (see ``upsample``): ethoscribe's default
# band amplitudes go up to 8 Hz and need frames well above 16 Hz.
MIN_FPS = 25.0


def channels_as_heights(
    channels: np.ndarray, fps: float, session: str, names: list[str], scale: Mapping | None = None
) -> PoseTracks:
    """Sensor channels as 3-D tracks: channel c is keypoint ``names[c]``, its value the height.

    Each channel becomes one keypoint standing at a fixed place on a circle of radius 20
    (x, y in mm) with the channel's value as its height z; one more keypoint, ``base``, stays
    at the centre at height 0 (so a single series still has two keypoints). Rotations about
    the vertical (ethoscribe's body frame) and horizontal centring (the reference) then
    leave the values untouched, with their signs, whatever body axis is chosen. Values are
    standardised per channel with ``scale`` (mean and sd pooled over the whole source, so
    differences between activities stay) and multiplied by 10: millimetre-sized numbers.

    channels : (frames, C) float array
    """
    x = np.asarray(channels, dtype=np.float64)
    if scale is not None:
        x = (x - scale["mean"]) / scale["sd"] * 10.0
    n, c = x.shape
    angle = 2 * math.pi * np.arange(c) / c
    coords = np.zeros((n, 1, c + 1, 3))  # the last keypoint, "base", stays at the centre
    coords[:, 0, :c, 0] = 20 * np.cos(angle)
    coords[:, 0, :c, 1] = 20 * np.sin(angle)
    coords[:, 0, :c, 2] = x
    confidence = np.ones((n, 1, c + 1))
    confidence[:, 0, :c][~np.isfinite(x)] = np.nan
    return PoseTracks(
        coords=coords,
        confidence=confidence,
        keypoints=[*names, "base"],
        fps=fps,
        units="mm",
        session=session,
    )


def pooled_scale(series: list[np.ndarray]) -> dict[str, np.ndarray]:
    """Per-channel mean and sd over every frame of every series (NaN ignored)."""
    x = np.concatenate(series)
    sd = np.nanstd(x, axis=0)
    return {"mean": np.nanmean(x, axis=0), "sd": np.where(sd > 0, sd, 1.0)}


def upsample_factor(fps: float) -> int:
    """Integer factor that lifts ``fps`` to at least :data:`MIN_FPS` (1 if already there)."""
    return max(1, math.ceil(MIN_FPS / fps - 1e-9))


def upsample(series: np.ndarray, labels: np.ndarray, factor: int) -> tuple[np.ndarray, np.ndarray]:
    """Linear interpolation of ``series`` (frames, C) to ``factor`` times the rate; labels of
    the new frames are those of the nearest original frame before them (repetition)."""
    if factor == 1:
        return series, labels
    n = len(series)
    t_new = np.arange(n * factor) / factor
    t_old = np.arange(n)
    cols = [np.interp(t_new, t_old, series[:, c]) for c in range(series.shape[1])]
    return np.stack(cols, 1), np.repeat(labels, factor)


def packaged_file(package: str, relative: str, sha256: str, install: str, what: str) -> Path:
    """A data file shipped inside an installed package, found without importing the package,
    its SHA-256 checked (a changed file is refused, never read). ``install``: the command that
    installs it; ``what``: the source, for the message."""
    import hashlib

    spec = importlib.util.find_spec(package)
    if spec is None or not spec.submodule_search_locations:
        raise RuntimeError(f"the {what} source needs the package that ships it: {install}")
    path = Path(next(iter(spec.submodule_search_locations))) / relative
    if not path.exists():
        raise RuntimeError(f"{path} is missing: reinstall with {install}")
    digest = hashlib.sha256(path.read_bytes()).hexdigest()
    if digest != sha256:
        raise RuntimeError(f"{path}: SHA-256 {digest} is not the expected {sha256}")
    return path


def simulate_once(module: str, folder: Path, args: list[str]) -> None:
    """Run a simulator's command ``python -m <module> --out <folder> <args>`` into ``folder``
    (once: a folder that holds a manifest is kept for reruns). Only the command and its files
    are used, never the simulator's code."""
    if (folder / "manifest.csv").exists():
        return
    folder.parent.mkdir(parents=True, exist_ok=True)
    if importlib.util.find_spec(module) is None:
        raise RuntimeError(f"{module} is not in this checkout: update it (git rebase main)")
    cmd = [sys.executable, "-m", module, "--out", str(folder), *args]
    path = [str(REPO), str(REPO / "src"), os.environ.get("PYTHONPATH", "")]
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(filter(None, path))}
    done = subprocess.run(cmd, cwd=REPO, env=env, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise RuntimeError(f"{' '.join(cmd)} failed: {done.stderr.strip()[-800:]}")


def read_simulated_study(
    folder: Path, label: str
) -> tuple[list[PoseTracks], dict[tuple[str, str], np.ndarray], list[str]]:
    """A simulator's study as ``ethoscribe.workspace.discover`` reads it (manifest fps and
    calibration), with per-frame truth codes from ``truth/<session>.csv`` (``frame``, the
    ``label`` column, and ``animal`` where a session has several; -1 where the truth says
    nothing) and the names of the codes."""
    from ethoscribe.workspace.reading import read_sessions

    manifest = folder / "manifest.csv"
    paths = [folder / p for p in pd.read_csv(manifest)["path"]]
    sessions, _ = read_sessions(paths, manifest=manifest, progress=False)
    tables = {s.session: pd.read_csv(folder / "truth" / f"{s.session}.csv") for s in sessions}
    names = sorted({str(b) for t in tables.values() for b in t[label].unique()})
    code = {b: i for i, b in enumerate(names)}
    truth = {}
    for s in sessions:
        t = tables[s.session]
        for a in s.animals:
            part = t if "animal" not in t.columns or s.n_animals == 1 else t[t["animal"] == a]
            labels = np.full(s.n_frames, -1, dtype=np.int64)
            frames = part["frame"].to_numpy()
            ok = (frames >= 0) & (frames < s.n_frames)
            labels[frames[ok]] = part[label].astype(str).map(code).to_numpy()[ok]
            truth[(s.session, a)] = labels
    return sessions, truth, names


def _import_all() -> None:
    import importlib

    # Registration order is the table's row order.
    modules = (
        "own_simulator",
        "independent",
        "figure",
        "real_activity",
        "aeon_series",
        "exercise_mocap",
    )
    for module in modules:
        importlib.import_module(f"benchmarks.validity.sources.{module}")


_import_all()
