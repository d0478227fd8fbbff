"""Published segmentation benchmarks shipped inside a PyPI package (aeon).

Data: the Time Series Segmentation Benchmark (Ermshaus, Schaefer & Leser 2023; series from the UCR
archive) and the UEA multivariate archive (Bagnall et al. 2018), as loaded by ``aeon.datasets``.
Baselines (from /work/shared/EXTERNAL-CHECKS.md, "seen with plain library calls"): ElectricDevices
binary segmentation with the true count F1 0.75 at a 115-sample margin; BasicMotions trials in a
seeded random order (29 changes) kernel change points F1 0.73-0.83 at 1 s; GunPoint defeats
mean/variance methods (F1 0).

Our method on these univariate/accelerometer series: change points of the log local energy of the
values and of their first differences (``local_energy_features``), since their segments differ in
variability and roughness rather than in mean (the series are z-normalised per segment).
Install: ``pip install --no-deps aeon==1.6.0 Deprecated`` (aeon 1.6 pins numba<0.64 and
pandas<3.1; its dataset loaders need neither pin).
"""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import adjusted_rand_score

from ethoscribe.segment.boundaries import boundaries_from_labels, boundary_scores
from ethoscribe.segment.changepoint import (
    ChangePointSegmenter,
    detect_change_points,
)
from ethoscribe.segment.motifs import local_energy_features

datasets = pytest.importorskip("aeon.datasets")


def _f1(true, found, margin):
    return boundary_scores(true, found, margin)["f1"]


@pytest.mark.slow
def test_electric_devices_matches_the_binary_segmentation_baseline():
    series, period, true = datasets.load_electric_devices_segmentation()
    x = series.to_numpy()[:, None]
    width = 10 * period  # ten periods: a stable local energy
    energy = local_energy_features(x, width)
    k = len(true)
    found = detect_change_points(energy, n_change_points=k, min_size=width)
    greedy = detect_change_points(energy, method="binseg", n_change_points=k, min_size=width)
    auto = detect_change_points(energy, min_size=width, noise_block=width)
    raw = detect_change_points(x, method="binseg", n_change_points=k, min_size=period)
    print(
        f"\nElectricDevices F1 @115: kernel+count {_f1(true, found, 115):.2f} {found.tolist()}, "
        f"binseg+count {_f1(true, greedy, 115):.2f}, kernel auto penalty "
        f"{_f1(true, auto, 115):.2f} ({len(auto)} changes), binseg on raw values "
        f"{_f1(true, raw, 115):.2f}; true {true.tolist()}"
    )
    # Baseline: TSSB ElectricDevices, binary segmentation with the true count, F1 0.75 at a
    # 115-sample margin (EXTERNAL-CHECKS.md). We match it (3 of 4 changes), not beat it.
    assert _f1(true, found, 115) >= 0.75


def test_gun_point_runs_and_reports():
    series, period, true = datasets.load_gun_point_segmentation()
    x = series.to_numpy()[:, None]
    raw = detect_change_points(x, n_change_points=1, min_size=period)
    energy = local_energy_features(x, 5 * period)
    found = detect_change_points(energy, n_change_points=1, min_size=5 * period)
    auto = detect_change_points(energy, min_size=5 * period, noise_block=5 * period)
    print(
        f"\nGunPoint F1 @115: mean change on raw values {_f1(true, raw, 115):.2f} {raw.tolist()}, "
        f"local energy + count {_f1(true, found, 115):.2f} {found.tolist()}, local energy auto "
        f"{_f1(true, auto, 115):.2f} {auto.tolist()}; true {true.tolist()}"
    )
    # A known hard case (EXTERNAL-CHECKS.md: mean/variance methods get F1 0): only report.
    assert len(found) == 1 and 0 < found[0] < len(x)


def basic_motions_in_seeded_order(seed: int = 0):
    X, y = datasets.load_basic_motions(split="train")
    order = np.random.default_rng(seed).permutation(len(X))
    x = np.concatenate([X[i].T for i in order])  # (4000, 6) at 10 Hz
    _, labels = np.unique(np.repeat(y[order], X.shape[2]), return_inverse=True)
    return x, labels


def test_basic_motions_change_points_and_motifs():
    x, labels = basic_motions_in_seeded_order()
    true = boundaries_from_labels(labels)[0]
    assert len(true) == 29  # EXTERNAL-CHECKS.md: 29 activity changes in this order
    width = 20  # 2 s at 10 Hz
    energy = local_energy_features(x, width)
    found = detect_change_points(energy, min_size=width, noise_block=width)
    model = ChangePointSegmenter(fps=10.0, min_duration_s=2.0).fit(energy)
    ari = adjusted_rand_score(labels, model.predict(energy))
    pe = ChangePointSegmenter(method="prediction_error", fps=10.0, min_duration_s=2.0).fit(energy)
    pe_f1 = _f1(true, pe.boundaries_[0], 10)
    print(
        f"\nBasicMotions (train, seed 0) F1 @1 s: kernel auto {_f1(true, found, 10):.2f} "
        f"({len(found)} changes); segmenter {model.n_motifs_} motifs ARI {ari:.2f}; "
        f"prediction-error boundaries F1 {pe_f1:.2f}"
    )
    # Baseline: kernel change points F1 0.73-0.83 at a 1-s margin (EXTERNAL-CHECKS.md).
    assert _f1(true, found, 10) >= 0.73
    # Baseline: GaussianHMM(4) on rolling features ARI 0.56-0.75 (EXTERNAL-CHECKS.md).
    assert ari >= 0.56
