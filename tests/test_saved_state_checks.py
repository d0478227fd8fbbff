"""Saved states with the wrong types, and state counts the data cannot support (issue #7).

Data: invented Gaussian arrays and simulated sessions of the package's invented animals.
"""

from __future__ import annotations

import numpy as np
import pytest

from ethoscribe.errors import InputError
from ethoscribe.segment.changepoint import ChangePointSegmenter
from ethoscribe.segment.hmm import GaussianHMM, frames_needed
from ethoscribe.segment.select import choose_n_states, select_n_states


@pytest.fixture(scope="module")
def two_blobs() -> np.ndarray:
    rng = np.random.default_rng(0)
    return np.r_[rng.normal(0, 1, (200, 2)), rng.normal(6, 1, (200, 2))]


@pytest.fixture(scope="module")
def hmm_state(two_blobs):
    return GaussianHMM(n_states=2, n_restarts=1).fit(two_blobs).to_state()


@pytest.mark.parametrize(
    ("edit", "field"),
    [
        (lambda m: {**m, "params": "x"}, "params"),
        (lambda m: {**m, "params": {**m["params"], "evil": 1}}, "evil"),
        (lambda m: {**m, "params": {**m["params"], "n_iter": "many"}}, "n_iter"),
        (lambda m: {**m, "n_states": 10**12}, "n_states"),
        (lambda m: {**m, "n_features": "2"}, "n_features"),
        (lambda m: {**m, "log_likelihood": None}, "log_likelihood"),
        (lambda m: {**m, "converged": "yes"}, "converged"),
    ],
)
def test_hmm_state_with_a_wrong_field_names_it(hmm_state, edit, field):
    meta, arrays = hmm_state
    with pytest.raises(InputError, match=field):
        GaussianHMM.from_state(edit(meta), arrays)


def test_hmm_state_with_unusable_arrays_is_refused(hmm_state):
    meta, arrays = hmm_state
    for name, bad, text in (
        ("means", np.full((2, 2), np.nan), "NaN"),
        ("transmat", np.full((2, 2), 0.9), "transmat"),
        ("covars", -np.ones((2, 2, 2)), "positive definite"),
    ):
        with pytest.raises(InputError, match=text):
            GaussianHMM.from_state(meta, {**arrays, name: bad})
    rebuilt = GaussianHMM.from_state(meta, arrays)  # the untouched state still loads
    np.testing.assert_array_equal(rebuilt.means_, arrays["means"])


def test_change_point_state_with_a_wrong_field_names_it(two_blobs):
    X = np.repeat(two_blobs[[0, 300, 0, 300]], 60, axis=0) + 0.1 * two_blobs[:240]
    meta, arrays = ChangePointSegmenter(n_motifs=2).fit(X).to_state()
    for edited, text in (
        ({**meta, "params": {**meta["params"], "evil": 1}}, "evil"),
        ({**meta, "n_motifs": "two"}, "n_motifs"),
        ({**meta, "noise_variance": [1]}, "noise_variance"),
    ):
        with pytest.raises(InputError, match=text):
            ChangePointSegmenter.from_state(edited, arrays)
    with pytest.raises(InputError, match="missing"):
        ChangePointSegmenter.from_state(meta, {k: v for k, v in arrays.items() if k != "mean"})


def test_frames_needed_per_state():
    # A full covariance of D features needs D + 1 frames per state (rank of a sample
    # covariance of n points is at most n - 1); a diagonal one 2.
    assert frames_needed(4, 5) == 24 and frames_needed(4, 5, "diag") == 8


def test_hmm_refuses_more_states_than_the_frames_support(two_blobs):
    X = two_blobs[:20]  # 2 features: 3 frames per full-covariance state, so at most 6 states
    GaussianHMM(n_states=6, n_restarts=1).fit(X)
    with pytest.raises(InputError, match=r"n_states=7 .* at most 6"):
        GaussianHMM(n_states=7, n_restarts=1).fit(X)
    GaussianHMM(n_states=7, covariance_type="diag", n_restarts=1).fit(X)


def test_selection_skips_candidates_the_data_cannot_support():
    rng = np.random.default_rng(1)
    X = rng.normal(size=(120, 9)) + 5 * (np.arange(120)[:, None] // 20 % 2)
    # Blocks of 60 frames, so each fold trains on 60: 10 frames per state allow 6 states.
    sel = select_n_states(
        X, candidates=[2, 6, 7, 9], heldout="blocks", block_frames=60,
        model_params={"n_restarts": 1, "n_iter": 20},
    )  # fmt: skip
    assert sel.skipped == (7, 9) and sel.best in (2, 6)
    table = sel.table.set_index("n_states")
    assert table["fitted"].tolist() == [True, True, False, False]
    assert table.loc[[7, 9], "heldout_ll_per_frame"].isna().all()
    assert np.isfinite(table.loc[[2, 6], "heldout_ll_per_frame"]).all()
    assert not table.loc[[7, 9], "within_tolerance"].any()


def test_selection_without_a_feasible_candidate_says_so():
    # Two sessions of 60 frames: each fold trains on 60, fewer than 7 * (9 + 1).
    X = np.random.default_rng(2).normal(size=(120, 9))
    with pytest.raises(InputError, match=r"none of the candidate state counts \[7, 8\]"):
        choose_n_states(X, [60, 60], candidates=[7, 8], model_params={"fps": 10.0})
