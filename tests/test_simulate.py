"""Tests of the simulator of invented animals (ethoscribe.simulate).

Outside references: scipy.stats (distributions, kstest), scipy.signal.welch,
scipy.linalg.null_space; facts of the trade marked "(common practice, from memory)".
Seeds are fixed and named in each test.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import linalg, signal, stats

from ethoscribe.errors import InputError
from ethoscribe.simulate import (
    BODY_PLANS,
    TrackingNoise,
    expected_rates,
    expected_time_budget,
    group_parameters,
    main,
    simulate_chunks,
    simulate_session,
    simulate_study,
    write_example_sessions,
)

VOLE = BODY_PLANS["dune_vole"]
FISH = BODY_PLANS["glass_minnow"]
FPS_LONG = 5


def bouts(truth: pd.DataFrame) -> pd.DataFrame:
    """Runs of one state per animal, without the first and last (cut by the session's edges)."""
    out = []
    for _, part in truth.groupby("animal", observed=True):
        s = part["state"].to_numpy()
        starts = np.flatnonzero(np.r_[True, np.diff(s) != 0])
        ends = np.r_[starts[1:], len(s)]
        out.append(pd.DataFrame({"state": s[starts], "start": starts, "n": ends - starts})[1:-1])
    return pd.concat(out, ignore_index=True)


@pytest.fixture(scope="module")
def long_truth() -> dict[str, pd.DataFrame]:
    # two hours per group at 5 fps, true positions only (seed 11): many bouts, little time
    return {
        g: simulate_session(duration_s=7200, fps=FPS_LONG, group=g, noise=False, seed=11)[1]
        for g in VOLE.groups
    }


@pytest.fixture(scope="module")
def vole_pair() -> tuple:
    # ten minutes at 30 fps, the same seed (4) with and without tracking noise
    clean, truth = simulate_session(duration_s=600, noise=False, seed=4)
    noisy, truth2 = simulate_session(duration_s=600, noise=True, seed=4)
    return clean, noisy, truth, truth2


def test_same_seed_same_session_and_noise_free_truth_behind_noisy():
    a, ta = simulate_session(duration_s=20, seed=7)
    b, tb = simulate_session(duration_s=20, seed=7)
    c, _ = simulate_session(duration_s=20, seed=8)
    np.testing.assert_array_equal(a.coords, b.coords)
    np.testing.assert_array_equal(a.confidence, b.confidence)
    pd.testing.assert_frame_equal(ta, tb)
    assert not np.allclose(np.nan_to_num(a.coords), np.nan_to_num(c.coords))


def test_shapes_names_and_truth_table():
    tracks, truth = simulate_session(duration_s=10, fps=30, seed=1)
    assert tracks.coords.shape == (300, 1, 10, 2)
    assert tracks.keypoints == VOLE.keypoints and tracks.units == "px"
    assert list(truth.columns) == ["frame", "animal", "behaviour", "state"]
    assert len(truth) == 300 and truth["frame"].tolist() == list(range(300))
    names = np.array(VOLE.behaviour_names)
    assert (names[truth["state"]] == truth["behaviour"].astype(str)).all()
    assert tracks.meta["simulated"] and tracks.meta["px_per_unit"] > 0
    fish, _ = simulate_session("glass_minnow", duration_s=4, fps=50, seed=1)
    assert fish.coords.shape == (200, 1, 9, 3) and fish.units == "mm"
    pair, ptruth = simulate_session(duration_s=4, n_animals=2, seed=1)
    assert pair.coords.shape == (120, 2, 10, 2) and len(ptruth) == 240
    assert ptruth["animal"].astype(str).tolist()[:2] == ["animal0", "animal1"]


def test_chunks_join_into_the_session():
    whole, truth = simulate_session(duration_s=40, n_animals=2, seed=5)
    parts = list(simulate_chunks(duration_s=40, n_animals=2, seed=5, chunk_frames=337))
    assert [p.n_frames for p, _ in parts][-1] >= 2 and sum(p.n_frames for p, _ in parts) == 1200
    assert [p.meta["first_frame"] for p, _ in parts][:2] == [0, 337]
    coords = np.concatenate([p.coords for p, _ in parts])
    # equal up to float rounding of phases accumulated chunk by chunk
    np.testing.assert_allclose(coords, whole.coords, atol=1e-6)
    np.testing.assert_array_equal(np.isnan(coords), np.isnan(whole.coords))
    joined = pd.concat([t for _, t in parts], ignore_index=True)
    pd.testing.assert_frame_equal(joined, truth)
    # a one-frame tail folds into the chunk before, as PoseTracks needs 2 frames
    sizes = [p.n_frames for p, _ in simulate_chunks(n_frames=201, chunk_frames=100, noise=False)]
    assert sizes == [100, 101]


def test_expected_budget_uses_the_chain_stationary_distribution():
    P, durations = group_parameters(VOLE, "standard")
    # reference: the left null vector of P - I from scipy.linalg.null_space
    pi = linalg.null_space(P.T - np.eye(len(P)))[:, 0]
    pi = pi / pi.sum()
    m = np.array([d.mean_s for d in durations])
    np.testing.assert_allclose(
        expected_time_budget(VOLE, "standard"), pi * m / (pi @ m), atol=1e-12
    )
    base, rich = expected_time_budget(VOLE, "standard"), expected_time_budget(VOLE, "enriched")
    assert rich["digging"] / base["digging"] == pytest.approx(1.8)  # the planted ratio
    # digging bouts 1.3 times as long, and digging entered more often from every behaviour
    P0, d0 = group_parameters(VOLE, "standard")
    P1, d1 = group_parameters(VOLE, "enriched")
    assert d1[4].mean_s == pytest.approx(1.3 * d0[4].mean_s)
    into = P0[:, 4] > 0
    assert (P1[into, 4] > P0[into, 4]).all()
    # transitions among the other behaviours keep their relative weights
    rest = [i for i in range(len(P0)) if i != 4]
    for i in rest:
        np.testing.assert_allclose(
            P1[i, rest] / P1[i, rest].sum(), P0[i, rest] / P0[i, rest].sum(), atol=1e-12
        )
    assert expected_time_budget(VOLE, "standard")["approaching"] == 0.0


def test_planted_group_difference_shows_in_the_truth(long_truth):
    share = {g: (t["behaviour"] == "digging").mean() for g, t in long_truth.items()}
    assert 1.4 < share["enriched"] / share["standard"] < 2.3  # planted 1.8
    # and over several 10-minute sessions (seeds 0-4): enriched digs more on average
    per_seed = {
        g: [
            (
                simulate_session(duration_s=600, fps=5, group=g, noise=False, seed=s)[1].state == 4
            ).mean()
            for s in range(5)
        ]
        for g in VOLE.groups
    }
    assert np.mean(per_seed["enriched"]) > np.mean(per_seed["standard"])


def test_time_budget_recovers_the_expected(long_truth):
    empirical = long_truth["standard"]["behaviour"].value_counts(normalize=True)
    expected = expected_time_budget(VOLE, "standard")
    for name, share in expected.items():
        assert abs(empirical.get(name, 0.0) - share) < 0.035, name


@pytest.mark.parametrize("name", ["grooming", "rearing", "walking"])
def test_bout_durations_follow_the_configured_distribution(long_truth, name):
    s = VOLE.behaviour_names.index(name)
    b = bouts(long_truth["standard"])
    rng = np.random.default_rng(0)
    # durations are whole frames: spread each over its frame to undo the rounding
    n = b.loc[b.state == s, "n"].to_numpy()
    d = (n + rng.uniform(-0.5, 0.5, len(n))) / FPS_LONG
    cfg = VOLE.behaviours[s].duration
    if cfg.kind == "gamma":  # scipy.stats parameterisation: shape a, scale
        ref = stats.gamma(a=1 / cfg.cv**2, scale=cfg.mean_s * cfg.cv**2)
    else:  # scipy.stats.lognorm: s = sigma, scale = exp(mu)
        sigma2 = np.log1p(cfg.cv**2)
        ref = stats.lognorm(s=np.sqrt(sigma2), scale=cfg.mean_s * np.exp(-sigma2 / 2))
    assert len(d) > 100
    assert stats.kstest(d, ref.cdf).pvalue > 0.001  # scipy.stats.kstest
    assert abs(d.mean() - ref.mean()) < 4 * ref.std() / np.sqrt(len(d))


def test_enriched_digging_bouts_are_longer(long_truth):
    b = bouts(long_truth["enriched"])
    mean = b.loc[b.state == 4, "n"].mean() / FPS_LONG
    planted = group_parameters(VOLE, "enriched")[1][4].mean_s
    assert planted == pytest.approx(VOLE.behaviours[4].duration.mean_s * 1.3)
    assert mean == pytest.approx(planted, rel=0.15)


def test_noise_rates_match_the_configuration():
    # a higher swap rate than the default so that a 10 min session (seed 2) measures it well
    config = TrackingNoise(
        swap_rate_per_s=0.2,
        jitter_scale=VOLE.noise.jitter_scale,
        occlusion_scale=VOLE.noise.occlusion_scale,
    )
    clean, _ = simulate_session(duration_s=600, noise=False, seed=2)
    noisy, _ = simulate_session(duration_s=600, noise=config, seed=2)
    want = expected_rates(VOLE, config)
    missing = np.isnan(noisy.coords[..., 0]).mean()
    low = (noisy.confidence < 0.5).mean()
    assert missing == pytest.approx(want["missing"], rel=0.35)
    assert low == pytest.approx(want["low_confidence"], rel=0.35)
    swapped = []
    for a, b in VOLE.swap_pairs:
        i, j = noisy.keypoint_index(a), noisy.keypoint_index(b)
        ok = (noisy.confidence[:, 0, i] > 0.5) & (noisy.confidence[:, 0, j] > 0.5)
        own = np.linalg.norm(noisy.coords[:, 0, i] - clean.coords[:, 0, i], axis=1)
        other = np.linalg.norm(noisy.coords[:, 0, i] - clean.coords[:, 0, j], axis=1)
        swapped.append((other < own)[ok].mean())
    assert np.mean(swapped) == pytest.approx(want["swapped"], rel=0.3)
    # jitter: the error of good, unswapped nose points has the configured spread
    k = noisy.keypoint_index("nose")
    err = (noisy.coords[:, 0, k] - clean.coords[:, 0, k])[noisy.confidence[:, 0, k] > 0.5]
    robust_sd = stats.median_abs_deviation(err, axis=0, scale="normal")  # scipy.stats
    np.testing.assert_allclose(robust_sd, config.jitter, rtol=0.1)


def test_walking_speed_in_physical_units(vole_pair):
    clean, _, truth, _ = vole_pair
    mm_per_px = 1 / clean.meta["px_per_unit"]
    centre = clean.coords[:, 0, clean.keypoint_index("body_centre")]
    speed = np.linalg.norm(np.diff(centre, axis=0), axis=1) * clean.fps * mm_per_px
    b = bouts(truth)
    inner = np.concatenate(
        [np.arange(r.start + 15, r.start + r.n - 1) for r in b[b.state == 1].itertuples()]
    )
    v = speed[inner]
    # open-field walking 10-30 cm/s (common practice, from memory)
    assert 100 < np.median(v) < 300
    lo, hi = VOLE.behaviours[1].speed
    assert np.mean((v > lo * 0.97) & (v < hi * 1.03)) > 0.98
    still = np.concatenate(
        [np.arange(r.start + 15, r.start + r.n - 1) for r in b[b.state == 2].itertuples()]
    )
    assert np.median(speed[still]) < 1.0  # grooming keeps the centroid still


def _peak_frequency(tracks, truth, state, keypoint, origin, min_s=4.0, nperseg=128):
    """Welch peak (scipy.signal.welch) of the keypoint's distance from the body centre, averaged
    over the long bouts of ``state``."""
    b = bouts(truth)
    fps = tracks.fps
    k, c = tracks.keypoint_index(keypoint), tracks.keypoint_index(origin)
    reach = np.linalg.norm(tracks.coords[:, 0, k] - tracks.coords[:, 0, c], axis=1)
    psd = []
    for r in b[(b.state == state) & (b.n >= min_s * fps)].itertuples():
        x = reach[r.start + 5 : r.start + r.n - 5]
        f, p = signal.welch(x - x.mean(), fs=fps, nperseg=min(nperseg, len(x)))
        if len(x) >= nperseg:
            psd.append(p)
    assert psd, "no long bouts"
    return f[np.argmax(np.mean(psd, axis=0))]


def test_grooming_head_rhythm_frequency_by_welch(vole_pair):
    clean, _, truth, _ = vole_pair
    rhythm = VOLE.behaviours[2].rhythms[0]
    peak = _peak_frequency(clean, truth, 2, "nose", VOLE.origin)
    # resolution fps / nperseg = 0.23 Hz plus the per-bout frequency spread of 5 %
    assert abs(peak - rhythm.frequency_hz) < 0.25 + rhythm.jitter * rhythm.frequency_hz


def test_fish_is_three_dimensional_and_beats_its_tail():
    tracks, truth = simulate_session("glass_minnow", duration_s=300, fps=50, noise=False, seed=3)
    assert tracks.n_dims == 3 and tracks.units == "mm" and tracks.meta["px_per_unit"] is None
    z = tracks.coords[:, 0, :, 2]
    assert np.ptp(z) > 20  # it changes depth
    peak = _peak_frequency(tracks, truth, 1, "tail_tip", FISH.origin, min_s=3.0)
    # tail beat: tail_tip's distance from the trunk oscillates at twice the body wave frequency
    assert abs(peak - 2 * FISH.behaviours[1].rhythms[0].frequency_hz) < 0.6


def test_two_animals_approach_each_other():
    tracks, truth = simulate_session(duration_s=900, n_animals=2, noise=False, seed=6)
    c = tracks.coords[:, :, tracks.keypoint_index("body_centre")]
    gap = np.linalg.norm(c[:, 0] - c[:, 1], axis=1)
    closer = []
    for a in (0, 1):
        s = truth.loc[truth.animal == f"animal{a}", "state"].to_numpy()
        b = bouts(truth[truth.animal == f"animal{a}"])
        for r in b[b.state == 7].itertuples():
            closer.append(gap[r.start + r.n - 1] < gap[r.start])
        assert s.max() <= 7
    assert len(closer) >= 5 and np.mean(closer) > 0.7


def test_study_manifest():
    sessions, truths, manifest = simulate_study(n_per_group=2, duration_s=3, seed=1)
    cols = ["session", "path", "fps", "group", "subject", "px_per_unit", "units"]
    assert list(manifest.columns) == cols and len(sessions) == len(truths) == 4
    assert manifest["group"].tolist() == ["standard"] * 2 + ["enriched"] * 2
    assert manifest["path"].is_unique and manifest["subject"].is_unique
    assert [s.meta["subject"] for s in sessions] == manifest["subject"].tolist()
    assert [s.session for s in sessions] == manifest["session"].tolist()
    assert (manifest["units"] == "mm").all() and (manifest["px_per_unit"] > 2).all()
    fish = simulate_study("glass_minnow", n_per_group=1, duration_s=1, fps=50)[2]
    assert fish["px_per_unit"].isna().all() and (fish["units"] == "mm").all()


def test_written_examples_read_back(tmp_path):
    folders = write_example_sessions(
        tmp_path,
        n_per_group=1,
        duration_s=3,
        fish_per_group=1,
        fish_duration_s=2,
        pairs_per_group=1,
        pairs_duration_s=2,
    )
    assert [f.name for f in folders] == [tmp_path.name, "glass_minnow", "dune_vole_pairs"]
    manifest = pd.read_csv(tmp_path / "manifest.csv")
    table = pd.read_parquet(tmp_path / manifest["path"][0])
    assert list(table.columns) == ["frame", "keypoint", "x", "y", "confidence"]
    assert len(table) == 90 * 10 and table["x"].dtype == np.float32
    fish = pd.read_parquet(folders[1] / "session_01.parquet")
    assert list(fish.columns) == ["frame", "keypoint", "x", "y", "z", "confidence"]
    pair = pd.read_parquet(folders[2] / "session_01.parquet")
    assert list(pair.columns)[-1] == "animal" and pair["animal"].nunique() == 2
    frames = pd.read_parquet(tmp_path / "truth" / "frames.parquet")
    assert list(frames.columns) == ["session", "frame", "animal", "behaviour", "state"]
    assert len(frames) == 2 * 90
    bout_rows = pd.read_csv(tmp_path / "truth" / "bouts.csv")
    assert bout_rows.groupby("session")["duration_s"].sum().round(6).tolist() == [3.0, 3.0]
    assert not list(tmp_path.rglob("*.tmp"))
    assert (
        main(
            [
                "--out",
                str(tmp_path / "cli"),
                "--sessions",
                "1",
                "--duration",
                "2",
                "--fish-sessions",
                "0",
                "--pair-sessions",
                "0",
            ]
        )
        == 0
    )
    assert len(pd.read_csv(tmp_path / "cli" / "manifest.csv")) == 2


def test_written_coordinates_match_the_simulation(tmp_path):
    write_example_sessions(
        tmp_path, n_per_group=1, duration_s=2, fish_per_group=0, pairs_per_group=0, seed=3
    )
    sessions, _, manifest = simulate_study(n_per_group=1, duration_s=2, seed=3)
    table = pd.read_parquet(tmp_path / manifest["path"][0])
    x = table["x"].to_numpy().reshape(60, 10)
    np.testing.assert_allclose(x, sessions[0].coords[:, 0, :, 0], atol=1 / 64, equal_nan=True)


@pytest.mark.parametrize(
    ("kwargs", "words"),
    [
        ({"body_plan": "dune_rat"}, "known body plans"),
        ({"group": "deluxe"}, "standard"),
        ({"duration_s": 0.01}, "at least 2 frames"),
        ({"n_animals": 0}, "n_animals"),
        ({"fps": "fast"}, "numbers"),
    ],
)
def test_clear_errors(kwargs, words):
    with pytest.raises(InputError, match=words):
        simulate_session(**kwargs)
    with pytest.raises(InputError, match="chunk_frames"):
        next(simulate_chunks(chunk_frames=1))


def test_noise_settings_are_checked():
    with pytest.raises(InputError, match="outlier_rate"):
        TrackingNoise(outlier_rate=2.0)
    with pytest.raises(InputError, match="low_confidence"):
        TrackingNoise(low_confidence=(0.5, 1.5))
