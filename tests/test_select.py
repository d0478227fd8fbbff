"""Choosing the number of states on invented data with a known count."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from ethoscribe.errors import InputError
from ethoscribe.plots.model import state_count_figure
from ethoscribe.segment.select import _choose, choose_n_states, kneedle, select_n_states
from test_hmm_sampling import sample_sticky_hmm

FAST = {"n_restarts": 2, "n_iter": 50}


@pytest.fixture(scope="module")
def four_states():
    # invented data: 4-state sticky Gaussian HMM, 4 sessions
    return sample_sticky_hmm(seed=3, lengths=(400,) * 4)


def test_heldout_sessions_pick_the_true_count(four_states):
    X, _, lengths = four_states
    sel = select_n_states(X, lengths, candidates=range(2, 7), model_params=FAST)
    assert sel.best == 4 and sel.criterion == "heldout"
    table = sel.table.set_index("n_states")
    assert list(table.index) == [2, 3, 4, 5, 6]
    assert table["within_tolerance"].idxmax() == 4  # smallest K within tolerance
    assert table.loc[4, "heldout_gap"] <= table.loc[4, "tolerance"]
    assert table.loc[3, "heldout_gap"] > table.loc[3, "tolerance"]
    assert np.isfinite(table[["bic", "train_ll_per_frame", "heldout_gap_se"]]).all().all()
    fig = state_count_figure(sel)
    assert any(t.name == "chosen: 4 states" for t in fig.data)
    assert fig.layout.shapes[0].x0 == 4  # the vertical marker
    # the title names the criterion in words, not by its option value
    assert "held-out likelihood, held-out sessions" in fig.layout.title.text


def test_blocks_inside_one_session_and_bic(four_states):
    X, _, lengths = four_states
    one = select_n_states(
        X, candidates=[3, 4, 5], heldout="blocks", model_params=FAST, block_frames=200
    )
    assert one.best == 4
    bic = select_n_states(X, lengths, candidates=[3, 4, 5], criterion="bic", model_params=FAST)
    assert bic.best == 4 and bic.table["heldout_ll_per_frame"].isna().all()
    assert bic.table.set_index("n_states")["bic"].idxmin() == 4
    assert "BIC" in state_count_figure(bic).layout.yaxis.title.text
    assert "held-out blocks" in state_count_figure(one).layout.title.text


def test_rule_prefers_the_smaller_count_within_one_standard_error():
    # hand-made per-unit log-likelihoods for K = 2, 3, 4 (4 units of 100 frames): K=4 is best
    # by 0.01 per frame, but the paired per-unit gaps (.04, -.04, .06, -.02) have a standard
    # error of sqrt(4/3 * sum(w^2 (d - .01)^2)) = 0.0238, so K=3 is chosen
    n = np.full(4, 100)
    ll = np.array(
        [[-300.0] * 4, [-200.0, -199.0, -201.0, -200.0], [-196.0, -203.0, -195.0, -202.0]]
    )
    rule = _choose(ll, n, [2, 3, 4])
    assert rule["best"] == 3
    np.testing.assert_allclose(rule["gap"], [1.01, 0.01, 0.0], atol=1e-12)
    assert rule["se"][1] == pytest.approx(np.sqrt(4 / 3 * 0.0625 * 0.0068), rel=1e-9)
    assert rule["ok"].tolist() == [False, True, True]


def test_bad_requests_are_explained(four_states):
    X, _, lengths = four_states
    with pytest.raises(InputError, match="heldout='blocks'"):
        select_n_states(X, candidates=[2], model_params=FAST)
    with pytest.raises(InputError, match="n_states"):
        select_n_states(X, lengths, candidates=[2], model_params={"n_states": 3})
    with pytest.raises(InputError, match="criterion"):
        select_n_states(X, lengths, candidates=[2], criterion="aic")
    with pytest.raises(InputError, match="candidates"):
        select_n_states(X, lengths, candidates=[])


def test_split_half_agreement_is_recorded_beside_the_curve():
    # Two well separated regimes: both halves' models find the same 2 states (ARI 1 checked
    # with scikit-learn's adjusted_rand_score inside agreement.adjusted_rand); at 1 state the
    # labelings are constant, which scikit-learn scores 1 as well.
    rng = np.random.default_rng(0)
    X = rng.normal(0, 1, (1200, 1)) + 8 * (np.arange(1200)[:, None] // 100 % 2)
    sel = select_n_states(X, [300] * 4, candidates=[1, 2], model_params={"n_restarts": 1})
    ari = sel.table.set_index("n_states")["split_half_ari"]
    assert ari[2] == pytest.approx(1.0)
    assert ari[1] == pytest.approx(1.0)


def test_early_stop_chooses_what_the_whole_search_chooses(four_states):
    # invented data with 4 true states: the elbow of every candidate 2..9 and of the search that
    # stops two candidates past the elbow are the same count, and the larger ones are not fitted
    X, _, lengths = four_states
    args = dict(candidates=range(2, 10), model_params=FAST, rule="elbow")
    full = select_n_states(X, lengths, **args)
    early = select_n_states(X, lengths, stop_after=2, **args)
    assert full.best == early.best == 4
    # rounds hold one candidate per two threads: with more cores a round may fit one more
    left = early.not_needed
    assert full.not_needed == () and left and left == tuple(range(left[0], 10)) and left[0] >= 7
    table = early.table.set_index("n_states")
    assert not table.loc[list(left), "fitted"].any() and table.loc[2:6, "fitted"].all()
    shared = full.table.set_index("n_states").loc[2:6, "heldout_ll_per_frame"]
    np.testing.assert_allclose(table.loc[2:6, "heldout_ll_per_frame"], shared)
    assert early.reason.startswith("4 states: the elbow") and "not fitted" in early.reason


def test_kneedle_finds_the_knee_of_the_papers_figure_2():
    # Satopaa, Albrecht, Irwin & Raghavan (2011), "Finding a 'Kneedle' in a haystack", Figure 2:
    # ten points of a concave increasing curve, x evenly spaced on [0, 1]; the knee is at
    # x = 0.222 (y = 1.897), the values as reproduced in the kneed package's documentation
    # (KneeLocator(x, y, S=1.0, curve="concave", direction="increasing").knee == 0.222).
    x = np.linspace(0, 1, 10)
    y = np.array([-5.0, 0.263, 1.897, 2.692, 3.163, 3.475, 3.696, 3.861, 3.989, 4.091])
    at = kneedle(y, x)
    assert round(x[at], 3) == 0.222 and y[at] == 1.897
    # by hand: the scaled difference y_n - x_n at the knee, 6.897 / 9.091 - 2 / 9 = 0.5365
    # (largest), beats the neighbours 0.4679 and 0.5128
    # a straight line has no knee (Kneedle's threshold is never crossed): its last point
    assert kneedle(2.0 * x, x) == len(x) - 1
    # a curve whose best fit is its first point: the smallest candidate
    assert kneedle(np.array([-1.0, -2.0, -1.5, -3.0]), [3, 4, 5, 6]) == 0


def test_kneedle_reads_the_envelope_up_to_the_best_fit():
    # invented held-out curve that rises to K=6 and then falls (more states only lose):
    # Kneedle reads K=3..6; its envelope values scaled to [0, 1] are 0, .75, .95, 1 against
    # x = 0, 1/3, 2/3, 1, largest difference (.4167) at K=4
    curve = np.array([-10.0, -7.0, -6.2, -6.0, -6.5, -8.0])
    assert [3, 4, 5, 6, 7, 8][kneedle(curve, [3, 4, 5, 6, 7, 8])] == 4


def test_kneedle_rule_and_held_out_blocks_through_the_quick_search(four_states):
    X, _, lengths = four_states
    sel = choose_n_states(
        X, lengths, candidates=range(2, 9), model_params=FAST, rule="kneedle", heldout="blocks"
    )
    assert sel.rule == "kneedle" and sel.heldout == "blocks"
    assert sel.best == 4 and "knee" in sel.reason
    with pytest.raises(InputError, match="heldout must be 'sessions' or 'blocks'"):
        choose_n_states(X, lengths, candidates=[2, 3], heldout="animals")
    with pytest.raises(InputError, match="rule"):
        choose_n_states(X, lengths, candidates=[2, 3], rule="knee")


def test_model_takes_the_rule_and_held_out_units_as_state_count_options():
    from ethoscribe.segment.model import BehaviourModel

    BehaviourModel(state_count_options={"rule": "kneedle", "heldout": "blocks"})._check_params()
    with pytest.raises(InputError, match="state_count_options"):
        BehaviourModel(state_count_options={"criterion": "bic"})._check_params()


def test_reason_says_when_the_held_out_curve_only_falls():
    # hand-made per-unit log-likelihoods for K = 3, 4, 5 (2 units of 100 frames) that fall with
    # every added state, as on the simulated pairs: the elbow has nothing to read, and the
    # reason says the smallest count was kept because no larger one fitted better
    from ethoscribe.segment.select import _reason

    n = np.full(2, 100)
    ll = np.array([[-3500.0, -3600.0], [-3700.0, -3650.0], [-4300.0, -4400.0]])
    chosen = _choose(ll, n, [3, 4, 5], "elbow")
    assert chosen["best"] == 3
    table = pd.DataFrame(
        {
            "n_states": [3, 4, 5],
            "heldout_ll_per_frame": chosen["curve"],
            "heldout_gain": chosen["gain"],
        }
    )
    text = _reason(table, 3, "elbow", 2, (6, 7))
    assert text.startswith("3 states: the smallest candidate") and "falls" in text
    assert "after the best fit already fitted less well" in text


def test_heldout_sessions_read_each_sessions_offset_once(four_states, monkeypatch):
    # With per-session offsets (the "hmm" method's default) each fold's model estimates every
    # session's offset once, for its labels and both its scores. Both folds' scores together
    # cover every session under both models: held-out + training log-likelihood per frame is
    # the two models' scores of all sessions, each session's frames minus its offset
    # (reference library: hmmlearn 0.3.3 GaussianHMM, implementation="scaling"). Held-out
    # sessions scored with their offsets plugged in ("map"; the default integrates them out,
    # checked in test_offset_marginal.py).
    from hmmlearn.hmm import GaussianHMM as ReferenceHMM

    import ethoscribe.segment.hmm as hmm_module

    X, _, lengths = four_states
    calls = []
    original = hmm_module.label_offsets
    monkeypatch.setattr(hmm_module, "label_offsets", lambda *a: calls.append(1) or original(*a))
    sel = select_n_states(X, lengths, candidates=[3, 4], model_params=FAST, offset_scoring="map")
    assert len(calls) == 2 * 2  # two candidates, two folds, one estimate each
    monkeypatch.setattr(hmm_module, "label_offsets", original)
    table = sel.table.set_index("n_states")
    for k in (3, 4):
        total = 0.0
        for m in sel.fold_models[k]:
            assert m.session_offsets
            ref = ReferenceHMM(k, covariance_type="full", implementation="scaling", init_params="")
            ref.startprob_, ref.transmat_ = m.startprob_, m.transmat_
            ref.means_, ref.covars_ = m.means_, m.covars_
            moved = X - np.repeat(m.offsets(X, lengths), lengths, axis=0)
            total += ref.score(moved, lengths)
        both = table.loc[k, "heldout_ll_per_frame"] + table.loc[k, "train_ll_per_frame"]
        assert both == pytest.approx(total / len(X), rel=1e-9)


def test_the_reason_says_a_next_state_that_fits_worse_without_a_negative_share():
    # An invented 3-D study read "one more state adds -116 % of the largest gain per state,
    # below 20 %": a next state that fits the held-out sessions less well is said so.
    from ethoscribe.segment.select import _reason

    table = pd.DataFrame({"n_states": [3, 4, 5], "heldout_ll_per_frame": [-5.0, -3.0, -5.3],
                          "heldout_gain": [np.nan, 2.0, -2.3]})  # fmt: skip
    text = _reason(table, 4, "elbow", None, ())
    assert text == (
        "4 states: the elbow of the held-out curve (one more state fits the held-out "
        "sessions less well)"
    )
    table.loc[2, "heldout_gain"] = 0.2
    assert "(one more state adds 10 % of the largest gain per state, below 20 %)" in _reason(
        table, 4, "elbow", None, ()
    )
