"""The independent test-data generator of the validation bench (benchmarks/validity/
independent_sim): determinism, file layout, bout durations, frame rates and failure rates."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))

from benchmarks.validity.independent_sim import (  # noqa: E402
    BEHAVIOURS,
    FPS_CHOICES,
    KEYPOINTS,
    FaultConfig,
    plan_study,
    simulate_session,
    write_study,
)
from benchmarks.validity.independent_sim.__main__ import main  # noqa: E402
from benchmarks.validity.independent_sim.animal import (  # noqa: E402
    DURATIONS,
    LEG_PAIRS,
    draw_traits,
    transition_matrix,
)
from benchmarks.validity.independent_sim.bouts import draw_durations  # noqa: E402
from benchmarks.validity.independent_sim.tracking import (  # noqa: E402
    add_failures,
    place_episodes,
)

SEED = 11


def _runs(labels: np.ndarray):
    change = np.flatnonzero(labels[1:] != labels[:-1]) + 1
    start = np.r_[0, change]
    stop = np.r_[change, labels.size]
    return labels[start], start, stop


@pytest.fixture(scope="module")
def long_session():
    """One hour at 25 fps: enough bouts of every behaviour for the duration checks."""
    rng = np.random.default_rng(SEED)
    traits = draw_traits(np.random.default_rng(SEED + 1), "A")
    return simulate_session(rng, "long", traits, "A", 25, 3600.0, 2.5)


@pytest.fixture(scope="module")
def small_study(tmp_path_factory):
    out = tmp_path_factory.mktemp("study")
    manifest = write_study(out, n_sessions=4, duration_s=20.0, seed=SEED)
    return out, manifest


def test_same_seed_same_files_other_seed_differs(small_study, tmp_path):
    out, _ = small_study
    write_study(tmp_path / "again", n_sessions=4, duration_s=20.0, seed=SEED)
    write_study(tmp_path / "other", n_sessions=4, duration_s=20.0, seed=SEED + 1)
    for rel in ("manifest.csv", "truth/session_03.csv", "truth/session_03_faults.csv"):
        assert (out / rel).read_bytes() == (tmp_path / "again" / rel).read_bytes(), rel
    a = pd.read_parquet(out / "poses/session_02.parquet")
    pd.testing.assert_frame_equal(a, pd.read_parquet(tmp_path / "again/poses/session_02.parquet"))
    b = pd.read_parquet(tmp_path / "other/poses/session_02.parquet")
    assert not a.equals(b)
    # Session i has its own random stream: it does not depend on how many sessions are asked.
    write_study(tmp_path / "one", n_sessions=1, duration_s=20.0, seed=SEED)
    one = pd.read_csv(tmp_path / "one/truth/session_01.csv")
    assert one.equals(pd.read_csv(out / "truth/session_01.csv"))


def test_files_columns_and_shapes(small_study):
    out, manifest = small_study
    table = pd.read_csv(out / "manifest.csv")
    assert list(table.columns) == [
        "session", "path", "fps", "group", "subject", "px_per_unit", "units",
    ]  # fmt: skip
    assert table.equals(manifest.reset_index(drop=True))
    assert set(table["units"]) == {"mm"} and table["px_per_unit"].between(2.0, 3.0).all()
    for row in table.itertuples():
        poses = pd.read_parquet(out / row.path)
        n = round(20.0 * row.fps)
        assert list(poses.columns) == ["frame", "keypoint", "x", "y", "confidence"]
        assert len(poses) == n * len(KEYPOINTS)
        assert (poses.groupby("frame", observed=True).size() == len(KEYPOINTS)).all()
        assert set(poses["keypoint"].astype(str)) == set(KEYPOINTS)
        assert poses["confidence"].between(0.0, 1.0).all()
        assert (poses["x"].isna() == poses["y"].isna()).all()
        truth = pd.read_csv(out / "truth" / f"{row.session}.csv")
        assert list(truth.columns) == ["frame", "behaviour"]
        assert truth["frame"].tolist() == list(range(n))
        assert set(truth["behaviour"]) <= set(BEHAVIOURS)
        faults = pd.read_csv(out / "truth" / f"{row.session}_faults.csv")
        assert list(faults.columns) == ["keypoint", "kind", "start_frame", "stop_frame"]
    assert (out / "parameters.json").read_text().count(f'"seed": {SEED}') == 1


def test_frame_rates_and_study_plan():
    plan = plan_study(8, seed=3)
    assert sorted(plan["fps"]) == sorted(2 * list(FPS_CHOICES))  # 25, 30, 60, 120 twice each
    assert plan["subject"].value_counts().eq(2).all()  # each animal recorded twice
    assert plan.groupby("subject")["group"].nunique().eq(1).all()


def test_no_self_transitions_and_bouts_within_stated_ranges(long_session):
    fps = long_session.fps
    labels = long_session.truth["behaviour"].to_numpy()
    names, start, stop = _runs(labels)
    dur = (stop - start)[:-1] / fps  # the last bout is cut by the session end
    for b in BEHAVIOURS:
        d = dur[names[:-1] == b]
        assert d.size >= 20, b
        spec = DURATIONS[b]
        # Durations are rounded to whole frames: allow one frame either side.
        assert d.min() >= spec["low"] - 1 / fps and d.max() <= spec["high"] + 1 / fps, b


def _truncated(b: str):
    """Reference truncated distribution of a behaviour's bout duration, from scipy.stats."""
    spec = DURATIONS[b]
    if spec["family"] == "lognormal":
        dist = stats.lognorm(spec["sigma"], scale=spec["median"])
    elif spec["family"] == "gamma":
        dist = stats.gamma(spec["shape"], scale=spec["mean"] / spec["shape"])
    else:
        dist = stats.uniform(spec["low"], spec["high"] - spec["low"])
    mean = dist.expect(lambda x: x, lb=spec["low"], ub=spec["high"], conditional=True)
    second = dist.expect(lambda x: x * x, lb=spec["low"], ub=spec["high"], conditional=True)
    return mean, np.sqrt(second - mean**2)


@pytest.mark.parametrize("behaviour", BEHAVIOURS)
def test_duration_draws_match_the_stated_distribution(behaviour, long_session):
    # Reference: the mean of the truncated distribution by numerical integration in
    # scipy.stats (rv_continuous.expect with conditional=True).
    mean, sd = _truncated(behaviour)
    draws = draw_durations(np.random.default_rng(SEED), behaviour, 20000)
    assert abs(draws.mean() - mean) < 4 * sd / np.sqrt(draws.size)
    # The same through the per-frame labels of a long session.
    names, start, stop = _runs(long_session.truth["behaviour"].to_numpy())
    d = ((stop - start) / long_session.fps)[:-1][names[:-1] == behaviour]
    assert abs(d.mean() - mean) < 4 * sd / np.sqrt(d.size) + 1 / long_session.fps


def test_transitions_follow_the_matrix(long_session):
    names, _, _ = _runs(long_session.truth["behaviour"].to_numpy())
    idx = np.array([BEHAVIOURS.index(x) for x in names])
    counts = np.zeros((len(BEHAVIOURS),) * 2)
    np.add.at(counts, (idx[:-1], idx[1:]), 1)
    assert np.trace(counts) == 0
    expected = transition_matrix("A")
    for i in range(len(BEHAVIOURS)):
        if counts[i].sum() >= 60:
            # scipy.stats.chisquare goodness of fit on the non-zero cells of the row.
            keep = expected[i] > 0
            f_exp = expected[i][keep] * counts[i].sum()
            assert stats.chisquare(counts[i][keep], f_exp).pvalue > 1e-4
    assert transition_matrix("B")[0, 2] > transition_matrix("A")[0, 2]  # group B grooms more


def test_loss_rates_are_as_configured(long_session):
    n = len(long_session.truth)
    poses = long_session.poses
    faults = long_session.faults
    lost = faults[faults["kind"].str.startswith("lost")]
    frac = FaultConfig().loss_fraction
    x = poses["x"].to_numpy().reshape(n, len(KEYPOINTS))
    conf = poses["confidence"].to_numpy().reshape(n, len(KEYPOINTS))
    for c, name in enumerate(KEYPOINTS):
        mine = lost[lost["keypoint"] == name]
        covered = int((mine["stop_frame"] - mine["start_frame"]).sum())
        assert covered == round(frac.get(name, 0.0) * n), name
        secs = (mine["stop_frame"] - mine["start_frame"]) / long_session.fps
        if len(mine) > 1:
            assert secs.between(0.8, 5.0).all(), name  # 1-4 s, rescaled a little
        missing = np.zeros(n, bool)
        for r in mine[mine["kind"] == "lost_missing"].itertuples():
            missing[r.start_frame : r.stop_frame] = True
        assert np.array_equal(np.isnan(x[:, c]), missing), name
        for r in mine[mine["kind"] == "lost_low_confidence"].itertuples():
            assert conf[r.start_frame : r.stop_frame, c].max() <= 0.2, name
    shares = pd.Series(np.isnan(x).mean(axis=0), index=KEYPOINTS)
    assert shares[["thorax", "head", "snout", "abdomen", "tail_base"]].eq(0).all()
    assert shares["leg_mid_left"] > 0.05


def test_place_episodes_covers_exactly_and_never_touches():
    rng = np.random.default_rng(SEED)
    for n, total in ((1000, 150), (500, 0), (200, 180), (30, 29)):
        starts, stops = place_episodes(rng, n, total, 25, 100)
        assert int((stops - starts).sum()) == total
        assert (starts[1:] > stops[:-1]).all() and (starts >= 0).all() and (stops <= n).all()


def test_swaps_exchange_a_leg_pair_and_jumps_move_points():
    n, fps = 6000, 50.0
    xy = np.zeros((n, len(KEYPOINTS), 2))
    xy[..., 0] = np.arange(len(KEYPOINTS)) * 100.0  # each point sits at its own place
    cfg = FaultConfig(
        jitter_px_body=0.0,
        jitter_px_limbs=0.0,
        loss_fraction={},
        jumps_per_minute=3.0,
        swaps_per_minute=2.0,
    )
    out, _, log = add_failures(
        np.random.default_rng(SEED), xy, np.ones((n, len(KEYPOINTS))), fps, cfg
    )
    swaps = log[log["kind"] == "swap"]
    jumps = log[log["kind"] == "jump"]
    assert len(swaps) > 0 and len(jumps) > 0
    assert set(swaps["keypoint"]) <= {k for pair in LEG_PAIRS for k in pair}
    moved = np.hypot(*(out - xy).transpose(2, 0, 1))
    for r in jumps.itertuples():
        d = moved[r.start_frame : r.stop_frame, KEYPOINTS.index(r.keypoint)]
        assert (d >= 15.0 - 1e-9).all() or r.keypoint in swaps["keypoint"].values
    assert 1 <= (jumps["stop_frame"] - jumps["start_frame"]).max() <= 3
    left, right = LEG_PAIRS[0]
    r = swaps[swaps["keypoint"] == left].iloc[0]
    i, j = KEYPOINTS.index(left), KEYPOINTS.index(right)
    frames = slice(r.start_frame, r.stop_frame)
    jumped = jumps[jumps["keypoint"].isin([left, right])]
    if not ((jumped["start_frame"] < r.stop_frame) & (jumped["stop_frame"] > r.start_frame)).any():
        assert np.allclose(out[frames, i], xy[frames, j])


def test_command_writes_a_csv_study(tmp_path, capsys):
    assert (
        main(["--out", str(tmp_path), "--sessions", "2", "--duration-s", "3", "--format", "csv"])
        == 0
    )
    table = pd.read_csv(tmp_path / "manifest.csv")
    assert table["path"].str.endswith(".csv").all()
    poses = pd.read_csv(tmp_path / table["path"][0])
    assert len(poses) == round(3 * table["fps"][0]) * len(KEYPOINTS)
    assert "wrote 2 sessions" in capsys.readouterr().out
