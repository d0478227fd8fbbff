"""The third test-data generator of the validation bench (benchmarks/validity/figure_sim):
determinism, files the tidy reader accepts, truth covering the eight movements, and the
body's proportions and recording faults within their stated ranges."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from benchmarks.validity.figure_sim import (  # noqa: E402
    FPS_CHOICES,
    MARKERS,
    MOVEMENTS,
    simulate_study,
)
from benchmarks.validity.figure_sim.__main__ import main  # noqa: E402
from benchmarks.validity.sources import read_simulated_study  # noqa: E402

from ethoscribe.io import read_tidy  # noqa: E402

SEED = 5
SUBJECTS, DURATION_S = 2, 45.0


@pytest.fixture(scope="module")
def study(tmp_path_factory):
    out = tmp_path_factory.mktemp("figure_sim")
    args = ["--out", str(out), "--seed", str(SEED), "--subjects", str(SUBJECTS)]
    assert main([*args, "--duration-s", str(DURATION_S)]) == 0
    return out


def test_same_seed_same_takes_other_seed_other_takes():
    a = simulate_study(SEED, SUBJECTS, DURATION_S)
    b = simulate_study(SEED, SUBJECTS, DURATION_S)
    c = simulate_study(SEED + 1, SUBJECTS, DURATION_S)
    for x, y in zip(a, b, strict=True):
        assert np.array_equal(x.coords, y.coords, equal_nan=True)
        assert np.array_equal(x.confidence, y.confidence)
        assert np.array_equal(x.truth, y.truth)
    assert not np.array_equal(a[0].truth, c[0].truth)
    # A subject's take does not depend on how many subjects were asked for.
    more = simulate_study(SEED, SUBJECTS + 1, DURATION_S)
    assert np.array_equal(more[1].coords, a[1].coords, equal_nan=True)


def test_files_are_read_by_the_tidy_reader_and_the_bench(study):
    manifest = pd.read_csv(study / "manifest.csv")
    assert list(manifest["session"]) == ["subject_01", "subject_02"]
    assert set(manifest["fps"]) <= set(FPS_CHOICES)
    sessions, truth, names = read_simulated_study(study, "label")
    assert names == sorted(MOVEMENTS)
    takes = simulate_study(SEED, SUBJECTS, DURATION_S)
    for s, take, fps in zip(sessions, takes, manifest["fps"], strict=True):
        assert s.fps == fps and s.units == "mm" and list(s.keypoints) == MARKERS
        assert s.coords.shape == (round(DURATION_S * fps), 1, len(MARKERS), 3)
        # Written with 0.1 mm and 0.001 precision; lost markers come back empty (NaN).
        assert np.array_equal(np.isnan(s.coords[:, 0]), np.isnan(take.coords))
        np.testing.assert_allclose(s.coords[:, 0], take.coords, atol=0.051)
        np.testing.assert_allclose(s.confidence[:, 0], take.confidence, atol=0.0005)
        assert np.array_equal(
            truth[(s.session, s.animals[0])], np.searchsorted(names, MOVEMENTS)[take.truth]
        )
    one = read_tidy(study / "subject_01.csv", fps=float(manifest["fps"][0]))
    assert one.n_frames == sessions[0].n_frames and one.n_dims == 3


def test_truth_covers_every_movement_in_every_take():
    for take in simulate_study(SEED, 3, DURATION_S):
        fps = take.subject.fps
        assert set(np.unique(take.truth)) == set(range(len(MOVEMENTS)))
        b = take.bouts
        assert np.all(np.diff(b.code) != 0)  # never the same movement twice in a row
        lengths = np.diff(np.r_[b.start, b.n_frames]) / fps
        assert lengths[:-1].min() >= 3.0 - 1 / fps and lengths.max() <= 20.0 + 1 / fps
        assert np.all((b.ramp[1:] >= 0.3 * fps - 1) & (b.ramp[1:] <= 1.0 * fps + 1))


def test_body_and_recording_within_their_ranges():
    take = simulate_study(SEED, 1, 120.0)[0]
    body, c = take.subject.body, take.coords
    assert 1.5 <= body.height <= 1.95
    # Hip joints at about 0.53 of standing height (Drillis & Contini 1966 segment ratios,
    # from memory); the hip markers here are the joint centres.
    standing = take.truth == MOVEMENTS.index("standing")
    hips = [MARKERS.index("hip_left"), MARKERS.index("hip_right")]
    ratio = np.nanmedian(c[standing][:, hips, 2]) / 1000 / body.height
    assert 0.48 < ratio < 0.58
    lost = np.isnan(c[..., 0])
    assert 0.003 < lost.mean() < 0.05 and np.all(take.confidence[lost] == 0)
    seen = take.confidence >= 0.9
    assert seen.mean() > 0.9
    # The whole figure moves across the room by metres, within its walls.
    centre = np.nanmean(c[:, hips, :2], 1) / 1000
    extent = np.nanmax(centre, 0) - np.nanmin(centre, 0)
    assert extent.max() > 2.0 and np.nanmin(centre) > -0.5 and np.nanmax(centre) < 9.5
