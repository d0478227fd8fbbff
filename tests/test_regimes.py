"""Slow regimes of the state mix (ethoscribe.segment.regimes) and their use by BehaviourModel.

References: scipy ``pdist`` (squared Euclidean distances between windows), pandas centred
``rolling`` means (window shares), scikit-learn ``GaussianMixture`` with spherical covariances
(regime posteriors), scipy ``multivariate_normal`` (the regime chain's evidence),
scikit-learn ``adjusted_rand_score``. The recovery cases are invented
label sequences; the end-to-end case is the TSSB GunPoint series shipped inside aeon.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.spatial.distance import pdist
from scipy.stats import permutation_test
from sklearn.metrics import adjusted_rand_score
from sklearn.mixture import GaussianMixture

from ethoscribe.segment.regimes import (
    ONE_CHANGE,
    SlowRegimes,
    persistence,
    persistence_p_value,
    residual_persistence,
    window_shares,
)


def _shares(states, window, k):
    m = len(states) // window
    return np.stack([(states[: m * window].reshape(m, window) == j).mean(1) for j in range(k)], 1)


def _alternating(rng, pairs, stretch, bout):
    """Stretches of ``stretch`` frames, each alternating between the two states of one pair in
    bouts of 1..2*bout frames; the pair of each stretch in turn."""
    states, regime = [], []
    for i, pair in enumerate(pairs):
        n = 0
        while n < stretch:
            b = int(rng.integers(1, 2 * bout))
            states.append(np.full(b, pair[len(states) % 2]))
            regime.append(np.full(b, i))
            n += b
    return np.concatenate(states), np.concatenate(regime)


def test_persistence_equals_its_definition_with_scipy_distances():
    rng = np.random.default_rng(0)
    states = np.repeat(rng.integers(0, 4, 300), rng.integers(1, 20, 300))[:2000]
    window = 50
    s = _shares(states, window, 4)
    mixed = s.max(1) <= 0.8
    assert 3 < mixed.sum() < len(s)  # both kinds of window occur
    # Definition (module doc): over mixed windows, 1 - mean squared step between consecutive
    # mixed windows / mean squared distance over all pairs of mixed windows; scipy pdist gives
    # each unordered pair once.
    pairs = mixed[1:] & mixed[:-1]
    near = np.sum(np.diff(s, axis=0) ** 2, axis=1)[pairs].mean()
    expected = 1 - near / pdist(s[mixed], "sqeuclidean").mean()
    assert persistence(states, [len(states)], 4, window) == pytest.approx(expected, rel=1e-12)


def test_permutation_p_value_agrees_with_scipy_permutation_test():
    rng = np.random.default_rng(6)
    # a weak drift of the mix over 20 windows of 30 frames: p neither tiny nor large
    p_one = np.clip(np.linspace(0.35, 0.65, 600) + rng.normal(0, 0.05, 600), 0, 1)
    states = (rng.random(600) < p_one).astype(np.int64)
    window = 30
    ours = persistence_p_value(states, [600], 2, window, n_permutations=4999, random_state=1)
    s = _shares(states, window, 2)

    # scipy.stats.permutation_test, one sample's order permuted ("pairings"), one-sided: the
    # statistic of the windows in a given order, from the same persistence on re-ordered labels
    idx = np.arange(len(s))
    blocks = states[: len(s) * window].reshape(len(s), window)

    def statistic(order):
        return persistence(blocks[order].ravel(), [len(s) * window], 2, window)

    ref = permutation_test(
        (idx,), statistic, permutation_type="pairings", alternative="greater",
        n_resamples=4999, random_state=2,
    ).pvalue  # fmt: skip
    assert 0.001 < ref < 0.5
    assert ours == pytest.approx(ref, abs=0.03)  # two random draws of 4,999 orders


def test_a_few_windows_never_count_as_persistent():
    # three windows of two sequences: 6 orders each; even a perfect order is not evidence
    # windows with 25 %, 50 % and 75 % of state 1, in that order: the middle one in the middle
    # (steps 0.125 and 0.125 against a mean pair distance of 0.25: persistence 0.5, by hand)
    states = np.r_[np.repeat([1, 0], [10, 30]), np.repeat([1, 0], 20), np.repeat([1, 0], [30, 10])]
    both = np.r_[states, states]
    assert persistence(both, [120, 120], 2, 40) == pytest.approx(0.5)
    assert persistence_p_value(both, [120, 120], 2, 40) > 0.01
    assert not SlowRegimes(window_s=1.0).fit(both, [120, 120], 2, 40.0).used_


def test_rest_between_active_spells_is_not_a_regime():
    rng = np.random.default_rng(7)
    # Invented home-cage-like labels, 30 fps, 4 sessions of 30 min: rest (state 5) for 2-5 min,
    # then 2-5 min of behaviours 0-4 in random order, bouts of 1-6 s.
    units = []
    for _ in range(4):
        parts = []
        while sum(map(len, parts)) < 54000:
            parts.append(np.full(int(rng.integers(120, 300)) * 30, 5))
            spell = int(rng.integers(120, 300)) * 30
            bouts = [np.full(int(rng.integers(30, 180)), rng.integers(0, 5)) for _ in range(200)]
            parts.append(np.concatenate(bouts)[:spell])
        units.append(np.concatenate(parts))
    states, lengths = np.concatenate(units), [len(u) for u in units]
    # over every window the rest windows alone look persistent; over the mixed ones nothing is
    every = _shares(units[0], 480, 6)
    steps = np.sum(np.diff(every, axis=0) ** 2, axis=1).mean()
    assert 1 - steps / pdist(every, "sqeuclidean").mean() > 0.5
    assert abs(persistence(states, lengths, 6, 480)) < 0.2
    assert not SlowRegimes().fit(states, lengths, 6, 30.0).used_


def test_window_shares_equal_centred_rolling_means():
    rng = np.random.default_rng(1)
    states = rng.integers(-1, 3, 500)
    lengths = [200, 300]
    got = window_shares(states, lengths, 3, 21)
    parts = np.split(states, [200])
    for j in range(3):
        # pandas: centred rolling mean, shorter windows at the ends (min_periods=1)
        ref = np.concatenate(
            [pd.Series((p == j).astype(float)).rolling(21, center=True, min_periods=1).mean()
             for p in parts]
        )  # fmt: skip
        np.testing.assert_allclose(got[:, j], ref, atol=1e-12)


def test_regime_posteriors_equal_a_spherical_gaussian_mixture():
    rng = np.random.default_rng(2)
    reg = SlowRegimes()
    reg.centres_ = rng.random((3, 4))
    reg.variance_ = 0.02
    x = rng.random((50, 4))
    # scikit-learn GaussianMixture, spherical covariances all equal, equal weights
    gm = GaussianMixture(3, covariance_type="spherical")
    gm.weights_ = np.full(3, 1 / 3)
    gm.means_ = reg.centres_
    gm.covariances_ = np.full(3, reg.variance_)
    gm.precisions_cholesky_ = 1 / np.sqrt(gm.covariances_)
    np.testing.assert_allclose(reg.predict_proba(x), gm.predict_proba(x), atol=1e-10)


def test_stretches_of_alternating_states_are_found_as_regimes():
    rng = np.random.default_rng(3)
    # 30 fps: stretches of 2 min alternating 0/1, then 2/3, then 0/1, then 2/3 in ~1 s bouts
    states, truth = _alternating(rng, [(0, 1), (2, 3), (0, 1), (2, 3)], 3600, 30)
    reg = SlowRegimes(random_state=0).fit(states, [len(states)], 4, 30.0)
    assert reg.used_ and reg.persistence_ > 0.8
    found, prob = reg.label(states, [len(states)], 30.0)
    assert reg.n_regimes_ == 2
    assert adjusted_rand_score(truth % 2, found) > 0.9
    assert np.array_equal(found, prob.argmax(1))  # the label is the most probable regime


def test_regime_bouts_hold_the_window_and_their_probabilities_back_them():
    # Reference for the chain's evidence: scipy.stats.multivariate_normal log-densities of
    # the window shares (spherical, variance_ * I), divided by the window; they differ from
    # label_bouts' by a constant per frame, which changes no posterior. The chain's kernels
    # are checked against hmmlearn in test_duration.py.
    from scipy.stats import multivariate_normal

    from ethoscribe.segment import duration

    rng = np.random.default_rng(3)
    # 2-min stretches of 0/1 and 2/3, and a 12-s stretch of 2/3 inside the second 0/1 one:
    # shorter than the 16-s window, so no window holds its mix alone (argmax, then merging
    # short regime bouts, left frames at probability 5e-24 of their label)
    states, truth = _alternating(rng, [(0, 1), (2, 3), (0, 1)], 3600, 30)
    states[9000:9360] = np.where(states[9000:9360] == 0, 2, 3)
    lengths = [len(states)]
    reg = SlowRegimes(random_state=0).fit(states, lengths, 4, 30.0)
    regime, prob = reg.label_bouts(states, lengths, 30.0)
    window = reg.window(30.0)
    runs = np.diff(np.r_[0, np.flatnonzero(np.diff(regime)) + 1, len(regime)])
    assert reg.n_regimes_ == 2 and runs.min() >= window and len(runs) == 5  # one window long
    assert adjusted_rand_score(truth % 2, regime) > 0.8
    own = prob[np.arange(len(regime)), regime]
    assert own.min() > 0.1 and np.median(own) > 0.99
    shares = window_shares(states, lengths, 4, window)
    log_b = np.column_stack(
        [multivariate_normal(c, reg.variance_ * np.eye(4)).logpdf(shares) for c in reg.centres_]
    )
    trans = np.array([[1 - 1 / window, 1 / window], [1 / window, 1 - 1 / window]])
    ref = duration.forward_backward(log_b / window, np.full(2, 0.5), trans, window, lengths)
    np.testing.assert_allclose(prob, ref.gamma, atol=1e-9)


def test_regime_chain_on_steps_of_frames_at_a_high_frame_rate(monkeypatch):
    # At 120 fps the 16-s window is 1,920 frames and the chain runs on steps of 4 frames:
    # compared with the chain on every frame (the steps turned off), the same labels and
    # probabilities to within the steps' resolution, on sessions of uneven lengths.
    from ethoscribe.segment import regimes

    rng = np.random.default_rng(5)
    states, _ = _alternating(rng, [(0, 1), (2, 3), (0, 1), (2, 3)] * 2, 14400, 120)
    lengths = [len(states) - 10_003, 10_000, 3]
    reg = SlowRegimes(random_state=0).fit(states, lengths, 4, 120.0)
    assert reg.used_ and reg.window(120.0) // regimes.STEPS_PER_WINDOW == 4
    stepped, p_stepped = reg.label_bouts(states, lengths, 120.0)
    monkeypatch.setattr(regimes, "STEPS_PER_WINDOW", 10**9)
    every, p_every = reg.label_bouts(states, lengths, 120.0)
    assert stepped.shape == every.shape == (len(states),) and p_stepped.shape == p_every.shape
    assert (stepped == every).mean() > 0.999
    assert np.abs(p_stepped - p_every).mean() < 0.001


def test_behaviours_of_seconds_are_left_as_they_are():
    rng = np.random.default_rng(4)
    # bouts of 1-6 s among 5 states in random order for 10 min: nothing holds for minutes
    states = np.repeat(rng.integers(0, 5, 400), rng.integers(30, 180, 400))[:18000]
    reg = SlowRegimes().fit(states, [len(states)], 5, 30.0)
    assert not reg.used_ and abs(reg.persistence_) < 0.2
    assert reg.n_regimes_ == 0


def test_short_sequences_give_no_persistence():
    states = np.zeros(100, dtype=np.int64)
    assert np.isnan(persistence(states, [100], 2, 50))
    assert not SlowRegimes().fit(states, [100], 2, 30.0).used_


def test_residual_persistence_equals_its_definition():
    rng = np.random.default_rng(7)
    states = np.repeat(rng.integers(0, 4, 300), rng.integers(1, 20, 300))[:2000]
    states[1100:] = np.where(states[1100:] == 0, 3, states[1100:])  # one change of the mix
    window = 50
    s = _shares(states, window, 4)
    # The best single split by brute force: every split point, each part's squared distances
    # to its mean (numpy), the least total kept.
    cost = [((s[:b] - s[:b].mean(0)) ** 2).sum() + ((s[b:] - s[b:].mean(0)) ** 2).sum()
            for b in range(1, len(s))]  # fmt: skip
    b = 1 + int(np.argmin(cost))
    r = s.copy()
    r[:b] -= s[:b].mean(0)
    r[b:] -= s[b:].mean(0)
    mixed = s.max(1) <= 0.8
    pairs = mixed[1:] & mixed[:-1]
    near = np.sum(np.diff(r, axis=0) ** 2, axis=1)[pairs].mean()
    expected = 1 - near / pdist(r[mixed], "sqeuclidean").mean()  # reference: scipy pdist
    ours = residual_persistence(states, [len(states)], 4, window)
    assert ours == pytest.approx(expected, rel=1e-10)


def _two_sides(rng, n_units, minutes, fps=30):
    """Invented sessions whose mix changes once, at a random point: states 0-2 in bouts of
    1-6 s, then states 3-4 (a treatment given during the session)."""
    units = []
    for _ in range(n_units):
        n = int(minutes * 60 * fps)
        cut = int(rng.uniform(0.3, 0.7) * n)
        first = np.repeat(rng.integers(0, 3, 400), rng.integers(fps, 6 * fps, 400))[:cut]
        second = np.repeat(rng.integers(3, 5, 400), rng.integers(fps, 6 * fps, 400))[: n - cut]
        units.append(np.concatenate([first, second]))
    return units


def test_one_change_per_recording_is_told_apart_from_regimes_that_recur():
    rng = np.random.default_rng(8)
    units = _two_sides(rng, 6, 10)
    states, lengths = np.concatenate(units), [len(u) for u in units]
    once = SlowRegimes(random_state=0).fit(states, lengths, 5, 30.0)
    assert once.used_ and once.one_change_
    assert once.residual_persistence_ < ONE_CHANGE
    # the same mixes coming back, A B A B in 2-min stretches: slow regimes, not one change
    states, _ = _alternating(rng, [(0, 1), (2, 3)] * 3, 3600, 30)
    recur = SlowRegimes(random_state=0).fit(states, [len(states)], 4, 30.0)
    assert recur.used_ and not recur.one_change_ and recur.residual_persistence_ > 0.5


def test_one_change_with_slow_structure_on_each_side_is_still_one_change():
    # Invented: three 8-min recordings, each states 0-2 then states 3-4 (two recordings of
    # different days joined in one file), each side's mix also swaying every 48 s. The sway
    # leaves a residual persistence above ONE_CHANGE after one change, but the labelled
    # regimes change once per recording: said as one change (the simulated fish's two
    # sessions joined into one file did this: residual 0.13, regimes 1.0 change, no warning).
    rng = np.random.default_rng(3)
    fps = 30

    def side(states, n, mixes):
        out, t = [], 0
        while t < n:
            pick = rng.choice(states, p=mixes[int(t // (48 * fps)) % 2])
            out.append(np.full(rng.integers(fps, 6 * fps), pick))
            t += len(out[-1])
        return np.concatenate(out)[:n]

    n = 8 * 60 * fps
    units = [
        np.concatenate([side([0, 1, 2], n // 2, [(0.6, 0.3, 0.1), (0.2, 0.3, 0.5)]),
                        side([3, 4], n - n // 2, [(0.7, 0.3), (0.3, 0.7)])])
        for _ in range(3)
    ]  # fmt: skip
    reg = SlowRegimes(random_state=0).fit(np.concatenate(units), [n] * 3, 5, float(fps))
    assert reg.used_ and reg.residual_persistence_ > ONE_CHANGE
    assert reg.changes_per_recording_ == 1.0 and reg.one_change_
    meta, arrays = reg.to_state()
    assert SlowRegimes.from_state(meta, arrays).changes_per_recording_ == 1.0


def test_saved_regimes_give_the_same_labels():
    rng = np.random.default_rng(5)
    states, _ = _alternating(rng, [(0, 1), (2, 3), (0, 1)], 3000, 20)
    reg = SlowRegimes(random_state=1).fit(states, [len(states)], 4, 25.0)
    meta, arrays = reg.to_state()
    back = SlowRegimes.from_state(meta, arrays)
    a, pa = reg.label(states, [len(states)], 25.0)
    b, pb = back.label(states, [len(states)], 25.0)
    assert np.array_equal(a, b) and np.allclose(pa, pb)
    a, pa = reg.label_bouts(states, [len(states)], 25.0)  # what the model labels with
    b, pb = back.label_bouts(states, [len(states)], 25.0)
    assert np.array_equal(a, b) and np.allclose(pa, pb)
    assert back.residual_persistence_ == reg.residual_persistence_
    del meta["residual_persistence"]  # a model saved before it was measured still loads
    assert np.isnan(SlowRegimes.from_state(meta, arrays).residual_persistence_)


# The series is mapped to keypoint heights that never move sideways: the body-axis and
# vertical-axis checks rightly have nothing to go on there.
@pytest.mark.filterwarnings("ignore::ethoscribe.errors.InputWarning")
@pytest.mark.filterwarnings("ignore:unreliable automatic body axis")
def test_the_model_labels_slow_regimes_of_gun_point_and_saves_them(tmp_path):
    pytest.importorskip("aeon.datasets")
    from benchmarks.validity.sources.aeon_series import gun_point

    from ethoscribe.cli import command_line_message
    from ethoscribe.errors import InputError, InputWarning
    from ethoscribe.io.bundle import write_bundle
    from ethoscribe.segment.model import BehaviourModel, labels_like_model, stack_valid
    from ethoscribe.workspace.files import load_model

    src = gun_point(seed=0)
    with pytest.warns(InputWarning, match="changes about once in each recording") as said:
        model = BehaviourModel(random_state=0).fit(src.sessions)
    (once,) = [str(w.message) for w in said if "about once" in str(w.message)]
    assert "--no-slow-regimes keeps the behaviours" in command_line_message(once)
    assert model.regimes_.used_ and model.n_states_ == model.regimes_.n_regimes_
    labels = model.label(src.sessions)
    truth = np.concatenate([src.truth[k] for k in sorted(src.truth)])
    # TSSB GunPoint: 2 segments; the states alone scored ARI 0.09-0.13 on the bench
    assert adjusted_rand_score(truth, labels["state"]) > 0.5
    assert set(labels["state"]) <= set(range(model.n_states_))
    assert labels["fine_state"].max() < model.regimes_.n_states_in_
    assert "regimes of the mix" in model.selection_.reason
    # the stability check labels the model's own fit as it writes its labels: regimes held
    # the window (99.5 % of frames the same; its states have no minimum bout; window argmax
    # without the hold agreed on 96.3 %)
    feats, _ = model.transform_features(src.sessions)
    X, lengths = stack_valid(feats)
    own = labels_like_model(model, model.segmenter_, own=True).predict(X, lengths)
    assert (own == labels["state"].to_numpy()).mean() > 0.99
    # GunPoint's mix changes once: the model says regimes may be two sides of one change
    assert model.regimes_.one_change_ and "changes about once" in model.selection_.reason
    off = BehaviourModel(random_state=0, slow_regimes="off").fit(src.sessions)
    assert off.regimes_ is None and off.n_states_ == model.regimes_.n_states_in_
    write_bundle(tmp_path / "m", *model.to_state())
    back = load_model(tmp_path / "m")
    again = back.label(src.sessions)
    assert np.array_equal(again["state"], labels["state"])
    # a hand-edited regime window is refused with the file named, not used
    meta, arrays = model.to_state()
    meta["regimes"]["window_s"] = -16.0
    write_bundle(tmp_path / "edited", meta, arrays)
    with pytest.raises(InputError, match="model"):
        load_model(tmp_path / "edited")


@pytest.mark.filterwarnings("ignore::ethoscribe.errors.InputWarning")
@pytest.mark.filterwarnings("ignore:unreliable automatic body axis")
def test_the_command_line_can_keep_the_states(tmp_path):
    pytest.importorskip("aeon.datasets")
    from benchmarks.validity.sources.aeon_series import gun_point

    from ethoscribe.cli import main
    from ethoscribe.simulate.examples import tidy_table
    from ethoscribe.workspace import Workspace

    src = gun_point(seed=0)
    tidy_table(src.sessions[0]).to_csv(tmp_path / "series.csv", index=False)
    common = [str(tmp_path / "series.csv"), "--fps", "30", "--no-stability-check", "--quiet"]
    assert main(["discover", *common, "--out", str(tmp_path / "a")]) == 0
    assert main(["discover", *common, "--no-slow-regimes", "--out", str(tmp_path / "b")]) == 0
    with_regimes, without = Workspace(tmp_path / "a").model(), Workspace(tmp_path / "b").model()
    assert with_regimes.regimes_.used_ and without.regimes_ is None
    assert without.n_states_ == with_regimes.regimes_.n_states_in_
