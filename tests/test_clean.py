"""Tests of ethoscribe.clean: each step against a reference library, recovery of invented tracks,
the causal and streaming variants, errors, and the quality figure."""

from __future__ import annotations

import json
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
from scipy.ndimage import median_filter
from scipy.signal import medfilt, savgol_coeffs, savgol_filter
from scipy.stats import scoreatpercentile

from ethoscribe.clean import (
    CleanParams,
    StreamingCleaner,
    calibrate,
    clean,
    cleaned_again,
    estimate_max_speed,
    fill_gaps,
    mask_jumps,
    mask_low_confidence,
    repair_swaps,
    resample,
    smooth,
    streaming_cleaning,
)
from ethoscribe.clean.steps import (
    held_points,
    interpolated_points,
    placeholder_positions,
    repeated_frames,
)
from ethoscribe.errors import InputError, InputWarning
from ethoscribe.plots.quality import quality_figure
from ethoscribe.pose import PoseTracks

KEYPOINTS = ("nose", "left_ear", "right_ear", "tail_base")
BODY = np.array([[30.0, 0.0], [20.0, 8.0], [20.0, -8.0], [-40.0, 0.0]])  # mm, body frame
SEED = 20240611


def walking_track(n: int = 600, fps: float = 30.0) -> np.ndarray:
    """Invented scenario: an animal walking a sinusoidal path at 60 mm/s, shape (n, 1, 4, 2)."""
    t = np.arange(n) / fps
    centre = np.stack([60.0 * t, 40.0 * np.sin(2 * np.pi * 0.2 * t)], axis=-1)
    heading = np.arctan2(40.0 * 2 * np.pi * 0.2 * np.cos(2 * np.pi * 0.2 * t), 60.0)
    cos, sin = np.cos(heading)[:, None], np.sin(heading)[:, None]
    x = centre[:, None, 0] + cos * BODY[:, 0] - sin * BODY[:, 1]
    y = centre[:, None, 1] + sin * BODY[:, 0] + cos * BODY[:, 1]
    return np.stack([x, y], axis=-1)[:, None]


def corrupt(truth: np.ndarray, jitter: float, rng: np.random.Generator):
    """Jitter, left/right ear swaps, short gaps, low-confidence outliers, jumps, one long gap."""
    n = truth.shape[0]
    x = truth + rng.normal(0.0, jitter, truth.shape)
    conf = rng.uniform(0.8, 1.0, truth.shape[:3])
    swapped = np.zeros(n, bool)
    for start in rng.choice(np.arange(5, n - 20, 25), 10, replace=False):
        swapped[start : start + rng.integers(1, 9)] = True
    x[swapped, 0, 1], x[swapped, 0, 2] = x[swapped, 0, 2].copy(), x[swapped, 0, 1].copy()
    for _ in range(10):  # short gaps of 2-10 frames
        s, k = rng.integers(5, n - 15), rng.integers(0, 4)
        x[s : s + rng.integers(2, 11), 0, k] = np.nan
    for _ in range(20):  # low-confidence outliers
        f, k = rng.integers(0, n), rng.integers(0, 4)
        x[f, 0, k] += rng.uniform(-200, 200, 2)
        conf[f, 0, k] = 0.1
    for _ in range(10):  # confident jumps of 60-120 mm lasting 1-2 frames (nose, tail base)
        f, k = rng.integers(5, n - 5), rng.choice([0, 3])
        x[f : f + rng.integers(1, 3), 0, k] += rng.uniform(60, 120) * np.array([0.6, 0.8])
    x[300:360, 0, 3] = np.nan  # a 2 s gap: must stay missing
    return x, conf, swapped


@pytest.fixture(scope="module")
def scenario():
    print(f"seed {SEED}")
    rng = np.random.default_rng(SEED)
    truth = walking_track()
    x, conf, swapped = corrupt(truth, 0.5, rng)
    tracks = PoseTracks(x, conf, keypoints=KEYPOINTS, fps=30.0, units="mm", session="walk")
    return truth, tracks, swapped


def test_recovery_of_invented_walking_track(scenario):
    # recovery test on invented data (simulated walking animal, jitter sd 0.5 mm)
    truth, tracks, swapped = scenario
    cleaned, report = clean(tracks, swap_pairs=[("left_ear", "right_ear")])
    out = cleaned.coords
    ok = np.isfinite(out[..., 0])
    rms = np.sqrt(np.mean(np.sum((out - truth)[ok] ** 2, axis=-1) / 2))
    assert rms < 0.5  # below the jitter level
    both = ok[:, 0, 1] & ok[:, 0, 2]
    left = out[:, 0, 1]
    right_way = np.linalg.norm(left - truth[:, 0, 1], axis=-1) < np.linalg.norm(
        left - truth[:, 0, 2], axis=-1
    )
    assert right_way[swapped & both].mean() >= 0.95  # swapped frames repaired
    assert right_way[~swapped & both].mean() >= 0.99  # and correct frames left alone
    assert report.swaps_repaired >= 0.95 * swapped.sum()
    # the 2 s gap stays missing and its frames are flagged invalid, never invented
    assert np.isnan(out[300:360, 0, 3]).all()
    assert report.invalid[300:360, 0].all()
    assert report.invalid.mean() < 0.2
    row = report.per_keypoint.set_index("keypoint").loc["tail_base"]
    assert row.frac_missing_after >= 60 / 600
    assert report.per_keypoint.frac_low_confidence.sum() > 0
    assert report.per_keypoint.frac_jumps.sum() > 0
    # the causal variant repairs the same swaps from past frames only
    out = clean(tracks, swap_pairs=[("left_ear", "right_ear")], causal=True)[0].coords
    both = np.isfinite(out[:, 0, 1, 0]) & np.isfinite(out[:, 0, 2, 0]) & swapped
    left = out[both, 0, 1]
    closer = np.linalg.norm(left - truth[both, 0, 1], axis=-1) < np.linalg.norm(
        left - truth[both, 0, 2], axis=-1
    )
    assert closer.mean() >= 0.95


def test_causal_cleaning_equals_streaming_frame_by_frame(scenario):
    _, tracks, _ = scenario
    tracks = tracks.replace(coords=tracks.coords[:300], confidence=tracks.confidence[:300])
    params = CleanParams(swap_pairs=[("left_ear", "right_ear")], max_speed=900.0)
    for method in ("savgol", "median"):
        p = CleanParams(**{**params.to_dict(), "smooth": method})
        batch, _ = clean(tracks, p, causal=True)
        sc = StreamingCleaner(p, KEYPOINTS, fps=30.0, n_animals=1, n_dims=2, units="mm")
        stream = np.stack([sc.push(tracks.coords[i], tracks.confidence[i]) for i in range(300)])
        # same compiled kernel in both paths: bit-identical in practice, asserted to 1e-12
        np.testing.assert_allclose(stream, batch.coords, rtol=0, atol=1e-12)
        assert sc.n_frames_seen == 300


def test_causal_cleaning_uses_only_the_past(scenario):
    _, tracks, _ = scenario
    cut = 200
    changed = tracks.coords.copy()
    changed[cut:] += 50.0
    other = tracks.replace(coords=changed)
    kw = {"swap_pairs": [("left_ear", "right_ear")], "max_speed": 900.0, "causal": True}
    a, _ = clean(tracks, **kw)
    b, _ = clean(other, **kw)
    np.testing.assert_array_equal(a.coords[:cut], b.coords[:cut])


def test_savgol_equals_scipy_on_a_track_without_gaps():
    rng = np.random.default_rng(1)
    x = rng.normal(size=(200, 2, 3, 2)).cumsum(axis=0)
    for window_s, order, width in ((0.2, 2, 7), (0.3, 3, 9)):
        ours = smooth(x, fps=30, method="savgol", window_s=window_s, order=order)
        ref = savgol_filter(x, width, order, axis=0)  # reference: scipy.signal.savgol_filter
        np.testing.assert_allclose(ours, ref, rtol=0, atol=1e-9)


def test_savgol_five_point_quadratic_weights():
    # Savitzky & Golay (1964) 5-point quadratic table via scipy.signal.savgol_coeffs
    table = np.array([-3, 12, 17, 12, -3]) / 35
    np.testing.assert_allclose(savgol_coeffs(5, 2, use="dot"), table, atol=1e-14)
    impulse = np.zeros((21, 1, 1, 2))
    impulse[10] = 1.0
    response = smooth(impulse, fps=25, window_s=0.2, order=2)[:, 0, 0, 0]  # 5 frames at 25 fps
    np.testing.assert_allclose(response[8:13], table[::-1], atol=1e-14)
    np.testing.assert_allclose(response[:8], 0, atol=1e-14)


def test_savgol_keeps_missing_points_missing_and_smooths_each_run():
    rng = np.random.default_rng(2)
    x = rng.normal(size=(60, 1, 1, 2)).cumsum(axis=0)
    x[20:25] = np.nan
    x[40:43] = np.nan
    out = smooth(x, fps=30, window_s=0.2)
    np.testing.assert_array_equal(np.isnan(out), np.isnan(x))
    for lo, hi in ((0, 20), (25, 40), (43, 60)):  # reference: scipy.signal.savgol_filter per run
        ref = savgol_filter(x[lo:hi, 0, 0], 7, 2, axis=0)
        np.testing.assert_allclose(out[lo:hi, 0, 0], ref, atol=1e-9)


def test_median_equals_scipy_filters_inside_the_track():
    rng = np.random.default_rng(3)
    x = rng.normal(size=(100, 1, 2, 2))
    out = smooth(x, fps=30, method="median", window_s=0.2)  # 7 frames
    ref = median_filter(x, size=(7, 1, 1, 1), mode="nearest")  # reference: scipy.ndimage
    np.testing.assert_array_equal(out[3:-3], ref[3:-3])
    ref2 = medfilt(x[:, 0, 0, 0], 7)  # reference: scipy.signal.medfilt (zero-padded ends)
    np.testing.assert_array_equal(out[3:-3, 0, 0, 0], ref2[3:-3])
    x[50] = np.nan
    out = smooth(x, fps=30, method="median", window_s=0.2)
    assert np.isnan(out[50]).all() and np.isfinite(out[49]).all()
    valid_window = x[[46, 47, 48, 49, 51, 52], 0, 0]  # frame 50 is missing
    np.testing.assert_array_equal(out[49, 0, 0], np.median(valid_window, 0))  # ref: numpy.median


def test_resample_equals_numpy_interp():
    rng = np.random.default_rng(4)
    x = rng.normal(size=(91, 1, 2, 2)).cumsum(axis=0)
    t_in = np.arange(91) / 30
    for target in (25.0, 60.0, 7.0):
        out = resample(x, 30.0, target)
        t_out = np.arange(out.shape[0]) / target
        assert t_out[-1] <= t_in[-1] + 1e-12
        ref = np.interp(t_out, t_in, x[:, 0, 1, 0])  # reference: numpy.interp
        np.testing.assert_allclose(out[:, 0, 1, 0], ref, rtol=1e-12, atol=1e-12)


def test_resample_does_not_interpolate_across_missing_frames():
    v = np.array([0.0, 1.0, np.nan, 3.0, 4.0])
    out = resample(v, fps=1.0, target_fps=2.0)
    np.testing.assert_array_equal(out, [0.0, 0.5, 1.0, np.nan, np.nan, np.nan, 3.0, 3.5, 4.0])


def test_fill_gaps_interpolates_short_gaps_only():
    rng = np.random.default_rng(5)
    x = rng.normal(size=(100, 1, 1, 2)).cumsum(axis=0)
    gappy = x.copy()
    gappy[10:15] = np.nan  # 5 frames = 0.167 s: filled
    gappy[40:60] = np.nan  # 20 frames = 0.667 s: kept
    gappy[:3] = np.nan  # no valid point before: kept
    out, filled = fill_gaps(gappy, fps=30, max_gap_s=0.5)
    ref = np.interp(np.arange(10, 15), [9, 15], gappy[[9, 15], 0, 0, 0])  # reference: numpy.interp
    np.testing.assert_allclose(out[10:15, 0, 0, 0], ref, rtol=1e-12)
    assert np.isnan(out[40:60]).all() and np.isnan(out[:3]).all()
    assert filled[:, 0, 0].sum() == 5
    np.testing.assert_array_equal(out[~np.isnan(gappy)], gappy[~np.isnan(gappy)])


def test_causal_fill_holds_the_last_value():
    x = np.arange(20.0)[:, None, None, None].repeat(2, axis=-1)
    x[5:8] = np.nan
    x[10:20] = np.nan
    out, filled = fill_gaps(x, fps=10, max_gap_s=0.3, causal=True)
    np.testing.assert_array_equal(out[5:8, 0, 0, 0], [4, 4, 4])
    np.testing.assert_array_equal(out[10:13, 0, 0, 0], [9, 9, 9])  # start of a long gap
    assert np.isnan(out[13:]).all() and filled[:, 0, 0].sum() == 6


def test_low_confidence_is_masked_but_unknown_confidence_is_kept():
    x = np.ones((4, 1, 2, 2))
    conf = np.array([0.9, 0.2, np.nan, 0.5])[:, None, None].repeat(2, axis=2)
    out, masked = mask_low_confidence(x, conf, 0.5)
    assert masked[:, 0, 0].tolist() == [False, True, False, False]
    assert np.isnan(out[1]).all() and np.isfinite(out[2]).all()


def test_all_points_below_threshold_is_a_clear_error():
    x = np.ones((10, 1, 2, 2))
    with pytest.raises(InputError, match=r"all 20 tracked points .* min_confidence=0.5.*lower"):
        mask_low_confidence(x, np.full((10, 1, 2), 0.3), 0.5)


def test_a_tracker_whose_confidences_run_low_is_masked_on_its_own_scale(scenario):
    # The scenario's confidences (0.8-1 tracked, 0.1 for outliers) as a tracker rating on
    # 0-0.5 or 0-0.3 would write them: the same points are masked as on the 0-1 scale, where
    # 0.5 would take every tracked point for lost. The scale is the confidences' 90th
    # percentile to two decimals, scipy's scoreatpercentile the outside reference.
    _, tracks, _ = scenario
    full, report = clean(tracks)
    assert report.params["confidence_scale"] == 1.0  # 90th percentile 0.98: the 0-1 scale
    seen = ~np.isnan(tracks.coords[..., 0])
    for factor in (0.5, 0.3):
        low = tracks.replace(confidence=tracks.confidence * factor)
        cleaned, said = clean(low)
        scale = round(scoreatpercentile(low.confidence[seen], 90), 2)  # to two decimals
        assert said.params["confidence_scale"] == scale
        assert said.params["confidence_threshold"] == pytest.approx(0.5 * scale)
        np.testing.assert_allclose(cleaned.coords, full.coords, rtol=0, atol=1e-9)
        with pytest.raises(InputError, match=r"all \d+ tracked points .* below"):
            clean(low, confidence_scale=1)  # the threshold as given
    # causal cleaning reads the scale too; streaming takes it as a setting, as the median
    # of the recordings' (a model for streaming is fitted so)
    low = tracks.replace(coords=tracks.coords[:300], confidence=tracks.confidence[:300] / 2)
    params = CleanParams(swap_pairs=[("left_ear", "right_ear")], max_speed=900.0)
    batch, said = clean(low, params, causal=True)
    fixed = streaming_cleaning(params, [said.params, {"confidence_scale": 1.0}, said.params])
    assert fixed.confidence_scale == said.params["confidence_scale"] < 0.5
    # a recording read on another scale than the fixed one must be cleaned again
    assert cleaned_again(params, fixed, [said.params, {"confidence_scale": 1.0}])
    assert not cleaned_again(params, fixed, [said.params])
    sc = StreamingCleaner(fixed, KEYPOINTS, fps=30.0, n_dims=2, units="mm")
    stream = np.stack([sc.push(low.coords[i], low.confidence[i]) for i in range(300)])
    np.testing.assert_allclose(stream, batch.coords, rtol=0, atol=1e-12)
    with pytest.raises(InputError, match=r"confidence_scale must be 'auto' or a number in"):
        CleanParams(confidence_scale=1.5)
    with pytest.raises(InputError, match=r"confidence_scale must be"):
        CleanParams(confidence_scale="low")


def test_a_spike_masks_the_outlier_not_its_neighbours():
    x = np.linspace(0, 10, 30)[:, None, None, None].repeat(2, axis=-1)
    x[12] += 40.0
    x[20:23] += 40.0  # a block of three outliers
    _, masked = mask_jumps(x, fps=30, max_speed=100.0)
    assert np.flatnonzero(masked[:, 0, 0]).tolist() == [12, 20, 21, 22]
    causal = mask_jumps(x, fps=30, max_speed=100.0, causal=True)[1]
    np.testing.assert_array_equal(causal, masked)


def test_an_outlier_on_the_first_frame_is_masked():
    x = np.linspace(0, 10, 30)[:, None, None, None].repeat(2, axis=-1)
    x[0] += 40.0
    masked = mask_jumps(x, fps=30, max_speed=100.0)[1]
    assert np.flatnonzero(masked[:, 0, 0]).tolist() == [0]


def test_a_left_right_exchange_is_not_a_jump():
    x = np.zeros((10, 1, 2, 2))
    x[:, 0, 1, 0] = 20.0
    x[4:6] = x[4:6, :, ::-1]
    masked = mask_jumps(x, 30, 100.0, ["left", "right"], [("left", "right")])[1]
    assert not masked.any()
    assert mask_jumps(x, 30, 100.0)[1].sum() == 4  # without the pair they are jumps
    out, _, swapped = repair_swaps(x, None, ["left", "right"], [("left", "right")], fps=30)
    assert np.flatnonzero(swapped[:, 0, 0]).tolist() == [4, 5]
    np.testing.assert_array_equal(out[:, 0, 1, 0], 20.0)


def test_labels_win_over_weak_continuity_after_a_joint_gap():
    # a pair turns by 120 degrees while both points are unseen for 30 frames: continuity mildly
    # favours exchanging, but the tracker's labels are right and must not stay overridden
    t = np.arange(90)
    angle = np.where(t < 30, 0.0, np.where(t < 60, np.nan, 2 * np.pi / 3))
    x = np.zeros((90, 1, 2, 2))
    x[:, 0, 0] = 10 * np.stack([np.cos(angle), np.sin(angle)], axis=-1)
    x[:, 0, 1] = -x[:, 0, 0]
    pair = [("left", "right")]
    assert not repair_swaps(x, None, ["left", "right"], pair, fps=30)[2].any()
    swapped = repair_swaps(x, None, ["left", "right"], pair, fps=30, causal=True)[2]
    assert 0 < swapped.sum() <= 5 and not swapped[70:].any()


def pacing_feet(n: int = 900, fps: float = 30.0) -> np.ndarray:
    """Invented scenario: an animal walking round a circle of 80 mm radius with pauses, its two
    forefeet (24 mm apart) swinging 15 mm fore and aft at 2.5 Hz while it walks; (n, 1, 2, 2)."""
    t = np.arange(n) / fps
    walking = (np.sin(2 * np.pi * t / 7) > -0.3).astype(float)
    arc = np.cumsum(150.0 * walking) / fps / 80.0  # 150 mm/s while walking
    centre = 80.0 * np.stack([np.cos(arc), np.sin(arc)], axis=-1)
    fwd = np.stack([-np.sin(arc), np.cos(arc)], axis=-1)
    side = np.stack([-fwd[:, 1], fwd[:, 0]], axis=-1)
    phase = np.cumsum(2 * np.pi * 2.5 * walking) / fps
    feet = [
        centre + fwd * (20 + 15 * np.sin(phase + shift))[:, None] + s * side
        for shift, s in ((0.0, 12.0), (np.pi, -12.0))
    ]
    return np.stack(feet, axis=1)[:, None] + np.random.default_rng(3).normal(0, 0.5, (n, 1, 2, 2))


def test_a_foot_lost_for_seconds_does_not_take_the_other_feet_slot():
    # the left foot is unseen for 15 s while the animal walks in a small arena: the right foot
    # stays the right foot. Before the fix the lone right point was moved into the long-empty
    # left slot (a side's cost is divided by the time since it was seen) on 157 of these 450
    # frames, batch and causal: the right foot went from 0 to 17.4 % missing (14.2 % cleaned)
    x = pacing_feet()
    x[150:600, 0, 0] = np.nan
    names, pair = ["foot_l", "foot_r"], [("foot_l", "foot_r")]
    for causal in (False, True):
        out, _, swapped = repair_swaps(x, None, names, pair, fps=30, causal=causal)
        assert not swapped.any()
        np.testing.assert_array_equal(out, x)
    tracks = PoseTracks(x, keypoints=names, fps=30.0, units="mm")
    for causal in (False, True):
        cleaned, report = clean(tracks, swap_pairs=pair, causal=causal)
        plain = clean(tracks, causal=causal)[0]
        assert report.swaps_repaired == 0
        np.testing.assert_array_equal(np.isnan(cleaned.coords), np.isnan(plain.coords))


def test_a_true_swap_with_one_point_briefly_lost_is_repaired():
    # the tracker exchanges the feet for 1 s while walking, and loses one of them for 7 frames
    # inside it: the lone point is still put back on its own side, in batch and causally
    truth = pacing_feet()
    x = truth.copy()
    x[300:330] = x[300:330, :, ::-1]
    x[310:317, 0, 0] = np.nan  # the left-labelled point (the right foot) is lost
    names, pair = ["foot_l", "foot_r"], [("foot_l", "foot_r")]
    for causal in (False, True):
        out, _, swapped = repair_swaps(x, None, names, pair, fps=30, causal=causal)
        assert np.flatnonzero(swapped[:, 0, 0]).tolist() == list(range(300, 330))
        seen = np.isfinite(out[..., 0])
        own = np.linalg.norm(out - truth, axis=-1)[seen]
        assert (own < np.linalg.norm(out - truth[:, :, ::-1], axis=-1)[seen]).all()
        assert np.isnan(out[310:317, 0, 1]).all() and seen[310:317, 0, 0].all()


def test_keypoints_exchanged_between_two_animals_are_given_back():
    # Invented scenario: two animals walking the same path 150 mm apart (the second larger),
    # tracking jitter 0.5 mm; a tracker gives the first animal's nose the second animal's for
    # 40 frames and back (with four keypoints, two exchanged would be as much the other two:
    # the body's other keypoints decide by their median). Reference: the exchanged points, by
    # construction. The animals as tracked keep every point; cleaning counts the stretch.
    from ethoscribe.clean.steps import part_exchanges

    rng = np.random.default_rng(SEED)
    walk = walking_track(300)[:, 0]
    centre = walk.mean(axis=1, keepdims=True)
    second = (walk - centre) * 1.2 + centre + np.array([0.0, 150.0])
    tracked = np.stack([walk, second], axis=1) + rng.normal(0.0, 0.5, (300, 2, 4, 2))
    owner, handed = part_exchanges(tracked)
    assert handed == 0 and (owner == np.arange(2)[None, :, None]).all()
    exchanged = tracked.copy()
    exchanged[100:140, [0, 1], 0] = tracked[100:140, [1, 0], 0]
    owner, handed = part_exchanges(exchanged)
    back = np.take_along_axis(exchanged, owner[..., None], axis=1)
    np.testing.assert_array_equal(back, tracked)
    assert handed == 1
    tracks = PoseTracks(exchanged, keypoints=KEYPOINTS, fps=30.0, units="mm")
    cleaned, report = clean(tracks, smooth=None, max_gap_s=0)
    assert report.params["part_exchanges"] == 1
    np.testing.assert_allclose(cleaned.coords, tracked)
    kept = clean(tracks, smooth=None, max_gap_s=0, repair_identities=False)[1]
    assert kept.params["part_exchanges"] == 0


def test_the_median_misfit_kernel_matches_numpy():
    # Reference: numpy's norm, minimum and median of the clipped misfits over the body's other
    # keypoints seen (odd and even counts, one keypoint unseen, ties at the clip), on invented
    # random points; and scipy's cdist for the kernel's distance matrices.
    from scipy.spatial.distance import cdist

    from ethoscribe.clean._kernels import _distances, _median_misfit

    rng = np.random.default_rng(SEED)
    x = rng.normal(0.0, 20.0, (3, 2, 6, 2))
    x[1, 0, 4] = np.nan
    ref = rng.uniform(5.0, 40.0, (2, 6, 6))
    for clip in (10.0, 1.0):  # 1: most misfits tie at the clip
        scale = rng.uniform(1.0, 4.0, (6, 6))
        point = np.array([3.0, -7.0])
        for t, a, k in [(0, 0, 0), (1, 0, 2), (2, 1, 5), (0, 1, 3)]:
            others = [m for m in range(6) if m != k and np.isfinite(x[t, a, m, 0])]
            dist = np.linalg.norm(point - x[t, a, others], axis=-1)
            misfit = np.minimum(np.abs(dist - ref[a, k, others]) / scale[k, others], clip)
            row = np.linalg.norm(point - x[t, a], axis=-1)  # NaN where unseen
            found = _median_misfit(row, k, ref[a, k], scale[k], clip, np.empty(6))
            assert found == pytest.approx(np.median(misfit), rel=1e-12)
    off_diagonal = ~np.eye(6, dtype=bool)  # a symmetric call leaves the diagonal unwritten
    for symmetric, q in [(True, x[0, 0]), (False, x[0, 1])]:
        out = np.empty((6, 6))
        _distances(x[0, 0], q, out, symmetric)
        cells = off_diagonal if symmetric else np.ones((6, 6), dtype=bool)
        np.testing.assert_allclose(out[cells], cdist(x[0, 0], q)[cells], rtol=1e-12)


def test_auto_max_speed_rule_is_reported():
    x = np.arange(200.0)[:, None, None, None].repeat(2, axis=-1) * 3.0
    # every frame moves 3*sqrt(2) mm at 10 fps: 2 x 99th percentile = 2 x 42.43 mm/s
    assert estimate_max_speed(x, 10.0) == pytest.approx(2 * 3 * np.sqrt(2) * 10)
    tracks = PoseTracks(x, keypoints=["nose"], fps=30.0, units="mm")
    _, report = clean(tracks)
    assert report.params["max_speed"] == pytest.approx(2 * 3 * np.sqrt(2) * 30)
    assert report.params["max_speed_rule"].startswith("auto")


def test_an_animal_still_on_almost_every_frame_keeps_its_one_movement():
    # Invented scenario: positions repeat exactly (integer pixels) except one 20-frame walk at
    # 60 px/s in 3000 frames (0.7 % of steps). The 99th percentile of all steps is 0; a bound of
    # 0 masked the whole walk as jumps. Reference by hand: the moving steps are all 2 px/frame.
    x = np.zeros((3000, 1, 2, 2))
    x[:, 0, 1, 0] = 10.0
    x[2900:2920, 0, :, 0] += np.arange(20)[:, None] * 2.0
    x[2920:, 0, :, 0] += 40.0
    assert estimate_max_speed(x, 30.0) == pytest.approx(2 * 2.0 * 30)
    assert estimate_max_speed(np.zeros((100, 1, 2, 2)), 30.0) is None  # nothing moves
    cleaned, report = clean(PoseTracks(x, keypoints=["a", "b"], fps=30.0, units="mm"))
    assert report.params["max_speed"] > 0
    assert np.isfinite(cleaned.coords).all()


def test_repeated_images_are_filled_from_their_neighbours():
    # Invented scenario: a 25-fps walk written at 30 fps by showing every fifth image twice
    # (the tracker reports the same pose twice). Reference: numpy.interp between the frames
    # either side of each repeat (the gap filler's linear interpolation).
    walk = walking_track(300)
    idx = np.repeat(np.arange(300), np.where(np.arange(300) % 5 == 4, 2, 1))
    tracks = PoseTracks(walk[idx], keypoints=KEYPOINTS, fps=30.0, units="mm")
    repeats = np.flatnonzero(np.r_[False, idx[1:] == idx[:-1]])[:-1]  # the last ends it: kept
    cleaned, report = clean(tracks, CleanParams(smooth=None, max_speed=None))
    assert report.params["repeated_frames"] == len(repeats) == 59
    t = np.arange(len(idx))
    keep = np.setdiff1d(t, repeats)
    expected = np.interp(t[repeats], keep, tracks.coords[keep, 0, 0, 0])
    np.testing.assert_allclose(cleaned.coords[repeats, 0, 0, 0], expected)
    assert np.isnan(cleaned.confidence[repeats]).all()  # filled, not measured
    kept, report = clean(tracks, CleanParams(smooth=None, max_speed=None, fill_repeated=False))
    np.testing.assert_array_equal(kept.coords, tracks.coords)
    assert report.params["repeated_frames"] == 0
    # causal cleaning cannot know a repeat ends (the next frame): it keeps them
    assert clean(tracks, CleanParams(max_speed=None), causal=True)[1].params["repeated_frames"] == 0
    # one channel written with few digits repeats by chance: a ramp of half a unit per frame
    # repeats every other value, as frames shown twice would; too few moving values: kept
    ramp = np.round(np.arange(600) / 2.0 + 0.25)
    series = np.stack([ramp, np.zeros(600)], -1)[:, None, None]
    assert np.mean(series[1:, 0, 0, 0] == series[:-1, 0, 0, 0]) == pytest.approx(0.5, abs=0.01)
    assert not repeated_frames(series).any()
    # the same values as two keypoints moving apart: all of them repeating is no chance
    both = np.repeat(ramp[:, None], 2, axis=1)[:, None, None]  # (600, 1, 1, 2): x = y
    two = np.concatenate([both, both + 10.0], axis=2)
    assert repeated_frames(two).sum() == 299
    with pytest.raises(InputError, match="fill_repeated must be True or False"):
        CleanParams(fill_repeated="yes")


def test_lost_points_written_as_a_placeholder_are_missing():
    # Invented scenario: a walk (500 mm from the image's corner) whose lost points an export
    # wrote as 0, 0 with no confidence column. Reference: the points lost, by construction.
    walk = walking_track(300) + 500.0
    lost = np.zeros(walk.shape[:3], bool)
    lost[40:70, 0, 0] = lost[100:130, 0, 2] = lost[200:205, 0, :] = True  # the last: all lost
    written = np.where(lost[..., None], 0.0, walk)
    tracks = PoseTracks(written, keypoints=KEYPOINTS, fps=30.0, units="px")
    held, places = placeholder_positions(tracks.coords)
    np.testing.assert_array_equal(held, lost)
    assert places == [[0.0, 0.0]]
    cleaned, report = clean(tracks, CleanParams(smooth=None, max_speed=None, max_gap_s=0))
    np.testing.assert_array_equal(np.isnan(cleaned.coords[..., 0]), lost)
    assert report.params["placeholder_points"] == lost.sum() == 80
    assert report.params["placeholders"] == [[0.0, 0.0]]
    assert report.per_keypoint.frac_missing_raw.tolist() == pytest.approx(
        [35 / 300, 5 / 300, 35 / 300, 5 / 300]
    )
    # given positions: exactly those; None: none (the points stay where the file put them)
    minus = PoseTracks(np.where(lost[..., None], -1.0, walk), keypoints=KEYPOINTS, fps=30.0)
    given = clean(minus, CleanParams(smooth=None, max_speed=None, placeholders=[(-1, -1)]))[1]
    assert given.params["placeholder_points"] == 80
    # (runs of them are also points held still, test below: both kept here)
    keep = CleanParams(smooth=None, max_speed=None, placeholders=None, mask_held=False)
    kept, report = clean(tracks, keep)
    np.testing.assert_array_equal(kept.coords, tracks.coords)
    assert report.params["placeholder_points"] == 0
    # streaming masks given positions frame by frame, as causal cleaning of the recording does
    p = CleanParams(max_speed=None, placeholders=[(0.0, 0.0)])
    offline, _ = clean(tracks, p, causal=True)
    stream = StreamingCleaner(p, KEYPOINTS, fps=30.0, units="px")
    pushed = np.stack([stream.push(frame) for frame in tracks.coords])
    np.testing.assert_allclose(pushed, offline.coords, equal_nan=True)
    assert json.loads(json.dumps(p.to_dict()))["placeholders"] == [[0.0, 0.0]]
    assert CleanParams.from_dict(json.loads(json.dumps(p.to_dict()))) == p
    with pytest.raises(InputError, match="placeholders must be 'auto', None or positions"):
        CleanParams(placeholders=[(0, 0, 0, 0)])


def test_a_keypoint_at_rest_or_a_fixed_landmark_is_no_placeholder():
    # Invented scenarios, integer coordinates. A body resting on one pixel for long, whose
    # other keypoints pass that pixel as it walks off: no placeholder (they pass by its own
    # body). Two landmarks written as keypoints at fixed places: one keypoint each, kept.
    rest = np.zeros((400, 1, 3, 2))
    rest[:, 0, :, 0] = [0.0, 3.0, 6.0]  # tail, mid, nose on a line
    rest[300:, 0, :, 0] += np.arange(100)[:, None]  # walks off along x, one pixel a frame
    assert placeholder_positions(rest)[1] == []
    walk = np.round(walking_track(300) * 4)
    marks = np.broadcast_to(np.array([[[5.0, 5.0], [900.0, 5.0]]]), (300, 1, 2, 2))
    assert placeholder_positions(np.concatenate([walk, marks], axis=2))[1] == []


def test_a_placeholder_only_one_keypoint_takes_is_found_a_held_point_is_not():
    # Invented scenario: a walk (500 mm from the image's corner) of which only the nose is ever
    # lost, written as 0, 0 with no confidence: found, as it leaps there from the body.
    # Reference: the points lost, by construction.
    walk = walking_track(900) + 500.0
    lost = np.zeros(walk.shape[:3], bool)
    lost[100:130, 0, 0] = lost[400:700, 0, 0] = True
    written = np.where(lost[..., None], 0.0, walk)
    held, places = placeholder_positions(written)
    np.testing.assert_array_equal(held, lost)
    assert places == [[0.0, 0.0]]
    tracks = PoseTracks(written, keypoints=KEYPOINTS, fps=30.0, units="mm")
    report = clean(tracks, CleanParams(smooth=None, max_speed=None))[1]
    assert report.params["placeholder_points"] == lost.sum() == 330
    # The same losses forward-filled: the nose stays where it was lost while the body walks
    # 600 mm on (beyond two body lengths on most held frames), reached by an ordinary step:
    # no placeholder, points held still instead.
    filled = written.copy()
    for t in np.flatnonzero(lost[:, 0, 0]):
        filled[t, 0, 0] = filled[t - 1, 0, 0]
    assert placeholder_positions(filled)[1] == []
    np.testing.assert_array_equal(held_points(filled)[0], lost)
    # A landmark written as a keypoint, moved once (two exact positions): no placeholder.
    mark = np.zeros((900, 1, 1, 2))
    mark[:300], mark[300:] = [5.0, 5.0], [900.0, 5.0]
    assert placeholder_positions(np.concatenate([walk, mark], axis=2))[1] == []


def test_points_held_where_the_tracker_lost_them_are_missing():
    # Invented scenario: a walk whose lost points were forward-filled before export (each held
    # at its last seen position). Reference: the points lost, by construction.
    walk = walking_track(300)
    lost = np.zeros(walk.shape[:3], bool)
    lost[40:70, 0, 0] = lost[100:103, 0, 2] = lost[150, 0, 1] = lost[200:260, 0, :] = True
    held = walk.copy()
    for t in range(1, len(held)):
        held[t][lost[t]] = held[t - 1][lost[t]]
    expected = lost
    np.testing.assert_array_equal(held_points(held)[0], expected)
    tracks = PoseTracks(held, keypoints=KEYPOINTS, fps=30.0, units="mm")
    p = CleanParams(smooth=None, max_speed=None, max_gap_s=0)
    cleaned, report = clean(tracks, p)
    np.testing.assert_array_equal(np.isnan(cleaned.coords[..., 0]), expected)
    assert report.params["held_points"] == expected.sum() == 30 + 3 + 1 + 4 * 60
    kept, report = clean(tracks, CleanParams(smooth=None, max_speed=None, mask_held=False))
    assert report.params["held_points"] == 0 and np.isfinite(kept.coords).all()
    # causal cleaning too: a held point is known on its own frame; streaming, told so, cleans
    # every frame as causal cleaning of the recording does (with low-confidence points too)
    conf = np.where(np.random.default_rng(3).random(lost.shape) < 0.05, 0.2, 0.9)
    seen = tracks.replace(confidence=conf)
    offline, report = clean(seen, CleanParams(max_speed=None), causal=True)
    assert report.params["held_looked_for"] and report.params["held_points"] > 250
    stream = StreamingCleaner(CleanParams(max_speed=None), KEYPOINTS, 30.0, units="mm", held=True)
    pushed = np.stack([stream.push(x, c) for x, c in zip(seen.coords, conf, strict=True)])
    np.testing.assert_allclose(pushed, offline.coords, equal_nan=True)
    # in whole numbers (integer pixels) an animal at rest repeats by chance: nothing held
    rest = np.round(walk[:1] + np.random.default_rng(2).normal(0, 0.4, walk.shape))
    assert (rest[1:] == rest[:-1]).all(-1).mean() > 0.05  # the chance repeats
    assert held_points(rest)[1] is False and not held_points(rest)[0].any()
    # a keypoint that moves along one axis only (a sensor channel drawn as a height) is left
    # alone, as is one that never moves (a landmark)
    channel = np.zeros((300, 1, 2, 3))
    channel[:, 0, 0, 2] = np.repeat(np.random.default_rng(1).normal(size=100), 3)
    assert not held_points(channel)[0].any()
    with pytest.raises(InputError, match="mask_held must be True or False"):
        CleanParams(mask_held=1)


def test_held_points_in_whole_units_are_told_by_the_leap_that_ends_them():
    # Invented scenario in whole units (a walk in whole millimetres after 5 s at rest, where a
    # point keeps its value by chance, so single repeats are no evidence): the nose lost for a
    # second while walking and forward-filled (pandas' ffill, the outside reference for the
    # filling) is held until it leaps to where the animal went; the rest ends with an
    # ordinary step and stays.
    rng = np.random.default_rng(SEED)
    walk = walking_track(600)
    walk[:150] = walk[150] + rng.normal(0.0, 0.2, walk[:150].shape)  # resting, jitter 0.2 mm
    walk = np.round(walk)
    lost = np.zeros(walk.shape[:3], bool)
    lost[400:430, 0, 0] = True
    flat = np.where(lost[..., None], np.nan, walk).reshape(len(walk), -1)
    filled = pd.DataFrame(flat).ffill().to_numpy().reshape(walk.shape)
    same = (filled[1:] == filled[:-1]).all(-1)
    assert same[:149].mean() > 0.5  # chance repeats at rest
    held, looked = held_points(filled)
    assert not looked  # repeats can be chance: only holds that end in a leap
    np.testing.assert_array_equal(held, lost)
    assert not held_points(filled, leaps=False)[0].any()  # causal: the end is a later frame
    tracks = PoseTracks(filled, keypoints=KEYPOINTS, fps=30.0, units="mm")
    assert clean(tracks)[1].params["held_points"] == 30
    assert clean(tracks, causal=True, max_speed=None)[1].params["held_points"] == 0
    # a speed bound the user gives is the leap's too: above the walk's leap, nothing is held
    leap = np.linalg.norm(filled[430, 0, 0] - filled[429, 0, 0]) * 30.0  # mm/s
    assert clean(tracks, max_speed=2 * leap)[1].params["held_points"] == 0
    assert clean(tracks, max_speed=leap / 2)[1].params["held_points"] == 30
    assert clean(tracks, max_speed=None)[1].params["held_points"] == 30  # no test: automatic


def test_points_interpolated_over_the_trackers_gaps_are_missing():
    # Invented scenario: a walk whose lost points were filled in before export with pandas'
    # linear interpolation (``DataFrame.interpolate``, the outside reference for the filling).
    # Reference: the points lost, by construction.
    walk = walking_track(300)
    lost = np.zeros(walk.shape[:3], bool)
    lost[40:70, 0, 0] = lost[100:103, 0, 2] = lost[150, 0, 1] = lost[200:260, 0, :] = True
    flat = np.where(lost[..., None], np.nan, walk).reshape(len(walk), -1)
    filled = pd.DataFrame(flat).interpolate().to_numpy().reshape(walk.shape)
    expected = lost
    lined, looked = interpolated_points(filled)
    np.testing.assert_array_equal(lined, expected)
    assert looked
    tracks = PoseTracks(filled, keypoints=KEYPOINTS, fps=30.0, units="mm")
    p = CleanParams(smooth=None, max_speed=None, max_gap_s=0)
    cleaned, report = clean(tracks, p)
    np.testing.assert_array_equal(np.isnan(cleaned.coords[..., 0]), expected)
    assert report.params["interpolated_points"] == expected.sum() == 30 + 3 + 1 + 4 * 60
    assert report.params["held_points"] == 0
    # cubic curves (pandas' cubic interpolation, a scipy spline): every gap of three frames or
    # more, with its first and last frames; a gap of one frame has no cubic of its own
    table = pd.DataFrame(flat).interpolate(method="cubic", limit_area="inside")
    curved = expected.copy()
    curved[150, 0, 1] = False
    np.testing.assert_array_equal(
        interpolated_points(table.to_numpy().reshape(walk.shape))[0], curved
    )
    kept, report = clean(tracks, replace(p, mask_interpolated=False))
    assert report.params["interpolated_points"] == 0 and np.isfinite(kept.coords).all()
    # causal cleaning cannot see a line before its next frame: nothing is looked for
    causal = clean(tracks, CleanParams(max_speed=None), causal=True)[1].params
    assert causal["interpolated_points"] == 0 and not causal["interpolated_looked_for"]
    # The walk as tracked (no point on a line): nothing. A track that moves in straight lines
    # nearly all the time was made so: left alone. In whole numbers (the walk in half
    # millimetres, 4 units a frame) a point moves on a line by chance, often for one frame
    # alone: nothing is looked for.
    assert not interpolated_points(walk)[0].any()
    ramp = np.arange(200.0)[:, None, None, None].repeat(2, axis=-1) * 3.0
    assert not interpolated_points(ramp)[0].any()
    coarse = np.round(walking_track(900) * 2)
    x = coarse
    chance = (x[:-2] - 2 * x[1:-1] + x[2:] == 0).all(-1) & (x[2:] != x[1:-1]).any(-1)
    assert chance.mean() > 0.1  # the chance lines
    assert interpolated_points(coarse)[1] is False and not interpolated_points(coarse)[0].any()
    # A tracker that loses 5 % of the points on single frames, interpolated: as many single
    # points on lines as chance gives in whole numbers, but on lines, not one grid step beside
    # them (every one found; before, nothing was looked for). Rounded to whole numbers, the
    # chance lines beside them keep the check off.
    rng = np.random.default_rng(SEED)
    tracked = walk + rng.normal(0.0, 0.3, walk.shape)
    flicker = lost | (rng.random(lost.shape) < 0.05)
    flat = np.where(flicker[..., None], np.nan, tracked).reshape(len(walk), -1)
    filled = pd.DataFrame(flat).interpolate().to_numpy().reshape(walk.shape)
    singles = flicker & ~np.roll(flicker, 1, 0) & ~np.roll(flicker, -1, 0)
    assert singles.mean() > 0.03  # single points on lines: 3.8 % of all, above HELD_CHANCE
    lined, looked = interpolated_points(filled)
    assert looked
    np.testing.assert_array_equal(lined, flicker)
    assert interpolated_points(np.round(filled * 2))[1] is False
    with pytest.raises(InputError, match="mask_interpolated must be True or False"):
        CleanParams(mask_interpolated="no")


def test_the_curve_kernel_matches_numpy_differences():
    # Reference: numpy.diff (n = 2 and 4) with the same tolerance and the same "moves" rule, on
    # invented random points with a planted line, a planted cubic and a missing point; points
    # one grid step (1.5, against rounding) off a curve, and the grid as the smallest positive
    # step, the same way.
    from ethoscribe.clean._kernels import NEAR_CURVE, ON_CURVE, grid_step, on_curves
    from ethoscribe.clean.steps import LINE_TOLERANCE

    x = np.random.default_rng(5).normal(100.0, 10.0, (60, 2, 3, 2))
    t = np.arange(10.0)[:, None]
    x[10:20, 0, 1] = 5.0 + t * [2.0, 3.0]
    x[30:40, 1, 2] = 1.0 + t + 0.5 * t**2 - 0.1 * t**3
    x[5, 0, 0, 1] = np.nan
    flat = x.reshape(len(x), -1)
    assert grid_step(flat, 0.99) == 0.0  # all their digits: no grid
    grid = np.round(flat * 64) / 64 + 3.0  # 1/64 mm, moved
    steps = np.abs(np.diff(grid, axis=0))
    assert np.nanmin(steps[steps > 0]) == 3 / 64  # the smallest step spans three
    assert grid_step(grid, 0.99) == 1 / 64
    assert grid_step(np.round(flat) / 2.54, 0.99) == pytest.approx(1 / 2.54)  # pixels in mm
    grid = 4.0  # a coarse grid: some points near a curve
    for order in (2, 4):
        half = order // 2
        here = x[half : len(x) - half]
        bound = LINE_TOLERANCE * np.maximum(np.abs(here), 1.0)
        with np.errstate(invalid="ignore"):
            difference = np.abs(np.diff(x, n=order, axis=0))
            small, close = difference <= bound, difference <= bound + 1.5 * grid
        moved = (x[half + 1 : len(x) - half + 1] != here).any(-1)
        on = small.all(-1) & moved
        near = close.all(-1) & moved & ~on
        codes = on_curves(x, LINE_TOLERANCE, order, grid)
        np.testing.assert_array_equal(codes == ON_CURVE, on)
        np.testing.assert_array_equal(codes == NEAR_CURVE, near)
        assert near.any() and set(np.unique(codes)) == {0, ON_CURVE, NEAR_CURVE}
        np.testing.assert_array_equal(on_curves(x, LINE_TOLERANCE, order) == ON_CURVE, on)
        assert on[10 : 20 - order, 0, 1].all()  # the line's inner frames
    assert (on_curves(x, LINE_TOLERANCE, 4)[30 : 40 - 4, 1, 2] == ON_CURVE).all()  # the cubic's


def test_calibration_converts_and_records_units():
    t = PoseTracks(np.full((3, 1, 1, 2), 40.0), keypoints=["nose"], fps=30)
    mm = calibrate(t, px_per_unit=4.0, unit="mm")
    assert mm.units == "mm" and mm.coords[0, 0, 0, 0] == 10.0
    assert mm.meta["calibration"]["divisor"] == 4.0
    assert calibrate(mm, unit="cm").coords[0, 0, 0, 0] == pytest.approx(1.0)
    assert calibrate(t) is t  # pixels without a factor stay pixels
    with pytest.raises(InputError, match="already in mm"):
        calibrate(mm, px_per_unit=4.0)
    cleaned, report = clean(t, {"px_per_unit": 4.0, "unit": "cm"}, max_speed=None)
    assert cleaned.units == "cm" and report.params["units"] == "cm"


def test_params_round_trip_and_errors():
    p = CleanParams(
        swap_pairs=[("l", "r")], smooth="median", max_speed=300, smooth_order=np.int64(3)
    )
    d = json.loads(json.dumps(p.to_dict()))
    assert CleanParams.from_dict(d) == p
    with pytest.raises(InputError, match="max_speed must be 'auto', None or a number"):
        CleanParams(max_speed="fast")
    with pytest.raises(InputError, match="unknown cleaning parameters"):
        CleanParams.from_dict({**d, "speed": 3})
    with pytest.raises(InputError, match="smooth_window_s must be a positive"):
        CleanParams(smooth_window_s=0)
    with pytest.raises(InputError, match="smooth must be one of"):
        CleanParams(smooth="gauss")
    with pytest.raises(InputError, match="more than one swap pair"):
        CleanParams(swap_pairs=[("a", "b"), ("b", "c")])
    with pytest.raises(InputError, match=r"must lie in \[0, 1\], e\.g\. 0\.5; got 50 .*"
                       r"percent are read as fractions.*0 or None masks no point"):  # fmt: skip
        CleanParams(min_confidence=50)


def test_a_confidence_threshold_of_0_masks_no_point():
    # The messages offer 0 (the command line's way) or None to switch masking off.
    coords = np.ones((3, 1, 2, 2))
    conf = np.array([[[0.0, 0.2]], [[np.nan, 1.0]], [[0.01, 0.0]]])
    for off in (0.0, None):
        x, masked = mask_low_confidence(coords, conf, off)
        assert not masked.any() and not np.isnan(x).any()
    assert mask_low_confidence(coords, conf, 0.5)[1].sum() == 4  # the ones below 0.5


def test_input_errors_name_the_problem_and_the_fix():
    x = np.zeros((30, 1, 4, 2))
    tracks = PoseTracks(x, keypoints=KEYPOINTS, fps=30.0, units="mm", session="s1")
    with pytest.raises(InputError, match=r"s1.*\['left_paw'\].*known keypoints.*'nose'"):
        clean(tracks, swap_pairs=[("left_paw", "right_ear")])
    # too few frames at a low rate: widened to the shortest window that smooths, and said
    with pytest.warns(
        InputWarning, match=r"needs at least 5 frames to smooth: 5 frames \(0.5 s\) are used"
    ):
        assert smooth(x, fps=10, window_s=0.2, order=2).shape == x.shape
    with pytest.raises(InputError, match="must be a positive"):
        smooth(x, fps=30, window_s=-1)
    with pytest.raises(InputError, match="unknown cleaning parameters"):
        clean(tracks, max_gap=3)
    with pytest.raises(InputError, match="cannot resample"):
        clean(tracks, causal=True, target_fps=25)
    with pytest.raises(InputError, match="fixed max_speed"):
        StreamingCleaner(CleanParams(), KEYPOINTS, fps=30)
    sc = StreamingCleaner(CleanParams(max_speed=None), KEYPOINTS, fps=30, units="mm")
    with pytest.raises(InputError, match=r"frame 0: coords must have shape \(1, 4, 2\)"):
        sc.push(np.zeros((4, 2)))


def test_report_fractions_summary_and_figure(scenario):
    _, tracks, _ = scenario
    x = np.zeros((100, 1, 2, 2))
    conf = np.ones((100, 1, 2))
    x[:10, 0, 0] = np.nan  # 10 % missing at the start: never filled
    conf[50:55, 0, 1] = 0.1  # 5 % low confidence, then filled
    t = PoseTracks(x, conf, keypoints=["nose", "tail"], fps=30.0, units="mm", session="tiny")
    cleaned, report = clean(t, target_fps=15.0)
    table = report.per_keypoint
    assert list(table.columns) == [
        "session", "animal", "keypoint", "frac_missing_raw", "frac_low_confidence",
        "frac_jumps", "frac_filled", "frac_missing_after",
    ]  # fmt: skip
    assert table.frac_missing_raw.tolist() == [0.1, 0.0]
    assert table.frac_low_confidence.tolist() == [0.0, 0.05]
    assert table.frac_filled.tolist() == [0.0, 0.05]
    assert cleaned.n_frames == 50 and report.invalid.shape == (50, 1)
    assert report.invalid[:5, 0].all() and not report.invalid[5:].any()
    assert np.isnan(cleaned.confidence[25:28, 0, 1]).all()  # filled points have no confidence
    summary = json.loads(json.dumps(report.summary()))
    assert summary["frac_invalid"] == pytest.approx(0.1) and summary["fps"] == 15.0
    assert report.to_frame().frac_invalid_frames.tolist() == [0.1, 0.1]
    _, walk = clean(tracks, swap_pairs=[("left_ear", "right_ear")])
    fig = quality_figure([report, walk.to_frame()])
    assert len(fig.data) == 6
    assert list(fig.data[-1].y) == ["tiny", "walk"]  # sessions as horizontal bars
    assert list(fig.data[0].x) == ["nose", "tail", "left_ear", "right_ear", "tail_base"]
    with pytest.raises(InputError, match="QualityReport"):
        quality_figure([42])


def test_quality_figure_of_many_sessions_shows_those_with_the_most_missing():
    import pandas as pd

    from ethoscribe.plots.quality import MAX_SESSIONS_SHOWN

    rows = []
    for i in range(100):  # a study of 100 short clips: session i misses i % 7 of 100 frames
        frac = (i % 7) / 100
        rows.append({"session": f"c{i:03d}", "animal": "a", "keypoint": "nose",
                     "frac_missing_raw": frac, "frac_low_confidence": 0.0, "frac_jumps": 0.0,
                     "frac_filled": 0.0, "frac_missing_after": frac, "frac_invalid_frames": frac,
                     "frac_unscored_frames": 0.0})  # fmt: skip
    fig = quality_figure(pd.DataFrame(rows))
    shown = list(fig.data[-1].y)
    assert len(shown) == MAX_SESSIONS_SHOWN and fig.layout.height < 1400
    # the 14 sessions missing 6 %, then the 14 missing 5 %, then 2 of those missing 4 %
    values = dict(zip(fig.data[-2].y, fig.data[-2].x, strict=True))
    assert sorted(values.values(), reverse=True) == list(values.values())
    assert min(values.values()) == 0.04 and max(values.values()) == 0.06
    assert "30 of 100" in fig.layout.annotations[1].text
