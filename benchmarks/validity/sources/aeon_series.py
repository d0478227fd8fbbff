"""The segmentation benchmarks of the tests, loaded from files inside aeon's wheel (no download).

- ``basic_motions``: UEA BasicMotions (Bagnall et al. 2018), real smartwatch recordings: 3-D
  accelerometer + 3-D gyroscope at 10 Hz, 10 s per trial, four activities (badminton, running,
  standing, walking). Trials are concatenated in a seeded random order, as in
  ``tests/test_segmentation_benchmark.py``: the train split (40 trials, 29 changes with seed 0)
  and the test split (40 trials) make two sessions of 4,000 frames.
- ``tssb_electric_devices``, ``tssb_gun_point``: the Time Series Segmentation Benchmark
  (Ermshaus, Schaefer & Leser 2023) series with their change points. They have no frame rate;
  one period of the series is taken as one second (10 values a second for both).

Series below 25 frames a second are interpolated up (``upsample``) for both pipelines.
Install: ``pip install --no-deps aeon==1.6.0 Deprecated``.
"""

from __future__ import annotations

import numpy as np
from benchmarks.validity.sources import (
    Source,
    channels_as_heights,
    pooled_scale,
    source,
    upsample,
    upsample_factor,
)


def _datasets():
    try:
        from aeon import datasets
    except ImportError as exc:
        raise RuntimeError(
            "this source needs aeon's bundled datasets: pip install --no-deps aeon==1.6.0 "
            "Deprecated"
        ) from exc
    return datasets


def _from_series(
    name: str,
    parts: list[tuple[str, np.ndarray, np.ndarray]],
    fps: float,
    channel_names: list[str],
    behaviours: list[str],
    details: dict,
) -> Source:
    factor = upsample_factor(fps)
    scale = pooled_scale([x for _, x, _ in parts])
    sessions, truth = [], {}
    for session, x, labels in parts:
        x_up, labels_up = upsample(x, labels, factor)
        tracks = channels_as_heights(x_up, fps * factor, session, channel_names, scale)
        sessions.append(tracks)
        truth[(session, tracks.animals[0])] = labels_up.astype(np.int64)
    details = {**details, "native_fps": fps, "upsampled_by": factor, "fps": fps * factor}
    return Source(name, details.pop("kind"), sessions, truth, behaviours, details)


@source(
    "basic_motions",
    "UEA BasicMotions (aeon): real smartwatch IMU, 4 activities, trials "
    "concatenated in a seeded order",
)
def basic_motions(seed: int = 0) -> Source:
    datasets = _datasets()
    parts, names = [], None
    for split in ("train", "test"):
        X, y = datasets.load_basic_motions(split=split)
        order = np.random.default_rng(seed).permutation(len(X))
        x = np.concatenate([X[i].T for i in order])  # (4000, 6) at 10 Hz
        names = sorted(np.unique(y).tolist())
        labels = np.repeat([names.index(v) for v in y[order]], X.shape[2])
        parts.append((f"basic_motions_{split}", x, labels))
    channels = ["accel_x", "accel_y", "accel_z", "gyro_x", "gyro_y", "gyro_z"]
    details = {
        "kind": "real recordings (concatenated trials)",
        "package": "aeon 1.6.0, aeon.datasets.load_basic_motions",
        "dataset": "UEA BasicMotions (Bagnall et al. 2018)",
        "sessions": [p[0] for p in parts],
        "trial_order_seed": seed,
    }
    return _from_series("basic_motions", parts, 10.0, channels, names, details)


def _tssb(name: str, loader: str, dataset: str) -> Source:
    datasets = _datasets()
    series, period, change_points = getattr(datasets, loader)()
    x = series.to_numpy(dtype=np.float64)[:, None]
    labels = np.zeros(len(x), dtype=np.int64)
    for i, cp in enumerate(np.sort(np.asarray(change_points, dtype=np.int64))):
        labels[cp:] = i + 1
    # Segments are numbered in order; TSSB segments are distinct classes.
    behaviours = [f"segment_{i + 1}" for i in range(labels.max() + 1)]
    details = {
        "kind": "benchmark series",
        "package": f"aeon 1.6.0, aeon.datasets.{loader}",
        "dataset": dataset,
        "values": len(x),
        "period": int(period),
        "change_points": [int(c) for c in change_points],
        "note": "no frame rate: one period taken as one second",
        "sessions": [name],
    }
    return _from_series(name, [(name, x, labels)], float(period), ["value"], behaviours, details)


@source("tssb_electric_devices", "TSSB ElectricDevices (aeon): 11,532 values, 5 segments")
def electric_devices(seed: int = 0) -> Source:
    return _tssb(
        "tssb_electric_devices",
        "load_electric_devices_segmentation",
        "TSSB ElectricDevices (Ermshaus, Schaefer & Leser 2023; UCR archive)",
    )


@source("tssb_gun_point", "TSSB GunPoint (aeon): 1,875 values, 2 segments (a known hard case)")
def gun_point(seed: int = 0) -> Source:
    return _tssb(
        "tssb_gun_point",
        "load_gun_point_segmentation",
        "TSSB GunPoint (Ermshaus, Schaefer & Leser 2023; UCR archive)",
    )
