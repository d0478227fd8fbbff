"""BehaviourModel: fit, label, the per-frame label table contract and the state round trip.

Data: short sessions of the package's own simulator (invented dune voles), seeds fixed below.
"""

from __future__ import annotations

import copy
import io
import json

import numpy as np
import pandas as pd
import pytest

from ethoscribe.errors import InputError, NotFittedError
from ethoscribe.segment.model import BehaviourModel, motif_name, stack_valid
from ethoscribe.simulate import simulate_session

QUICK = {"n_restarts": 1, "n_iter": 30}  # segmenter effort for the tests
COLUMNS = ["session", "animal", "frame", "time_s", "state", "motif", "probability", "body_seen"]


@pytest.fixture(scope="module")
def sessions():
    tracks = [simulate_session(duration_s=60, seed=s, session=f"s{s}")[0] for s in (1, 2)]
    first = tracks[0]
    coords = first.coords.copy()
    coords[300:360, 0, 0] = np.nan  # the nose lost for 2 s: longer than any gap filled
    return [first.replace(coords=coords), tracks[1]]


@pytest.fixture(scope="module")
def fitted(sessions):
    return BehaviourModel(n_states=4, segmenter=QUICK).fit(sessions)


def test_label_table_contract(fitted, sessions):
    labels = fitted.label(sessions)
    assert list(labels.columns) == COLUMNS
    assert len(labels) == sum(s.n_frames for s in sessions)
    first = labels[labels["session"] == "s1"]
    np.testing.assert_array_equal(first["frame"], np.arange(sessions[0].n_frames))
    np.testing.assert_allclose(first["time_s"], first["frame"] / sessions[0].fps)
    assert labels["state"].dtype == np.int64
    invalid = labels["state"] == -1
    # the lost nose: 9 of 10 keypoints seen, so the nose is filled and the frames scored
    lost = labels[labels["session"] == "s1"].iloc[300:360]
    assert (lost["state"] >= 0).all()
    np.testing.assert_allclose(lost["body_seen"], 0.9)
    assert (labels.loc[invalid, "motif"] == "").all()
    assert labels.loc[invalid, "probability"].isna().all()
    valid = labels[~invalid]
    assert set(valid["state"]) <= set(range(fitted.n_states_))
    assert (valid["motif"] == [motif_name(k) for k in valid["state"]]).all()
    assert valid["motif"].str.fullmatch(r"motif_\d\d").all()
    assert valid["probability"].between(0.0, 1.0).all()


@pytest.mark.parametrize("decoding", ["min_duration", "merge"])
def test_minimum_bout_duration_holds_in_the_labels(fitted, sessions, decoding):
    labels = _with(fitted, decoding=decoding).label(sessions)
    shortest = round(fitted.min_bout_s * fitted.fps_)
    for _, part in labels.groupby("session"):
        state = part["state"].to_numpy()
        cut = np.flatnonzero(np.diff(state) != 0) + 1
        bounds = np.r_[0, cut, len(state)]
        runs = pd.DataFrame({"state": state[bounds[:-1]], "size": np.diff(bounds)})
        # bouts cut by the recording's ends or by invalid frames (-1) may be shorter
        inside = (runs["state"].shift(1) >= 0) & (runs["state"].shift(-1) >= 0)
        assert (runs.loc[inside & (runs["state"] >= 0), "size"] >= shortest).all()


def _with(model: BehaviourModel, **params) -> BehaviourModel:
    """A copy of a fitted model with other labelling parameters."""
    out = copy.deepcopy(model)
    return out.set_params(**params)


def _low_share(labels: pd.DataFrame) -> float:
    """Share of scored frames whose own label has probability < 0.01."""
    scored = labels[labels["state"] >= 0]
    return float((scored["probability"] < 0.01).mean())


def test_probability_is_that_of_the_final_label(fitted, sessions):
    chain = _with(fitted, decoding="min_duration").label(sessions)
    merged = _with(fitted, decoding="merge").label(sessions)
    print("share < 0.01: min_duration", _low_share(chain), "merge", _low_share(merged))
    # the minimum-duration chain's posteriors back its own labels (the kernels are checked
    # against hmmlearn in test_duration.py); merged frames are left out of the evidence, so
    # their probability is no longer that of a label the HMM did not choose
    assert _low_share(chain) < 0.002
    assert _low_share(merged) < 0.002
    # without a minimum bout both decodings are the plain HMM
    pd.testing.assert_frame_equal(
        _with(fitted, min_bout_s=0.0, decoding="min_duration").label(sessions),
        _with(fitted, min_bout_s=0.0, decoding="merge").label(sessions),
    )


def test_merged_frames_probability_is_the_posterior_without_their_evidence(fitted, sessions):
    # Reference: hmmlearn 0.3.3's log-space forward-backward (_hmmc.forward_log and
    # backward_log) on scipy.stats.multivariate_normal log-densities of each frame minus its
    # session's offset, the rows of the frames the merge relabelled set to 0 (no evidence).
    from hmmlearn import _hmmc
    from scipy.special import logsumexp
    from scipy.stats import multivariate_normal

    from ethoscribe.segment.lumping import membership
    from ethoscribe.segment.postprocess import enforce_min_bout

    model = _with(fitted, decoding="merge")
    labels = model.label(sessions)
    seg = model.segmenter_
    feats, _ = model.transform_features(sessions)
    X, lengths = stack_valid(feats)
    offsets = seg.offsets(X, lengths)
    groups = np.arange(model.n_states_) if model.phase_groups_ is None else model.phase_groups_
    join = membership(np.asarray(groups))  # fitted states -> labelled (phases joined)
    plain = np.asarray(groups)[seg.predict(X, lengths, offsets=offsets)]
    scored = labels[labels["state"] >= 0]
    final = scored["state"].to_numpy()
    shortest = round(model.min_bout_s * model.fps_)
    posterior = seg.predict_proba(X, lengths, offsets=offsets) @ join
    np.testing.assert_array_equal(final, enforce_min_bout(plain, shortest, lengths, posterior))
    moved = final != plain
    assert 0 < moved.sum() < 0.2 * len(final)
    Z = X - np.repeat(offsets, lengths, axis=0)
    log_b = np.column_stack(
        [
            multivariate_normal(seg.means_[k], seg.covars_[k]).logpdf(Z)
            for k in range(len(seg.means_))
        ]
    )
    log_b[moved] = 0.0
    ref = []
    for a, b in zip(np.r_[0, np.cumsum(lengths)[:-1]], np.cumsum(lengths), strict=True):
        _, fwd = _hmmc.forward_log(seg.startprob_, seg.transmat_, log_b[a:b])
        bwd = _hmmc.backward_log(seg.startprob_, seg.transmat_, log_b[a:b])
        ref.append(np.exp(fwd + bwd - logsumexp(fwd[-1])))
    ref = np.concatenate(ref) @ join
    np.testing.assert_allclose(scored["probability"], ref[np.arange(len(final)), final], atol=1e-8)
    # the relabelled frames now carry the probability their neighbours give their new label
    assert np.median(ref[moved, final[moved]]) > 0.5


def test_models_saved_before_the_decoding_option_keep_merging(fitted):
    meta, arrays = _with(fitted, decoding="min_duration").to_state()
    assert meta["params"]["decoding"] == "min_duration"
    assert BehaviourModel.from_state(meta, arrays).decoding == "min_duration"
    older = {**meta, "params": {k: v for k, v in meta["params"].items() if k != "decoding"}}
    assert BehaviourModel.from_state(older, arrays).decoding == "merge"
    bad = {**meta, "params": {**meta["params"], "decoding": "smooth"}}
    with pytest.raises(InputError, match="decoding"):
        BehaviourModel.from_state(bad, arrays)


def test_state_round_trip_through_json_and_npz(fitted, sessions):
    meta, arrays = fitted.to_state()
    text = json.dumps(meta)
    buffer = io.BytesIO()
    np.savez(buffer, **arrays)
    buffer.seek(0)
    with np.load(buffer, allow_pickle=False) as npz:
        loaded = {k: npz[k] for k in npz.files}
    rebuilt = BehaviourModel.from_state(json.loads(text), loaded)
    assert rebuilt.get_params() == fitted.get_params()
    assert rebuilt.n_states_ == fitted.n_states_ and rebuilt.keypoints_ == fitted.keypoints_
    pd.testing.assert_frame_equal(rebuilt.label(sessions), fitted.label(sessions))
    with pytest.raises(InputError, match="format version"):
        BehaviourModel.from_state({**meta, "format_version": 99}, loaded)


def test_refit_with_the_same_seed_is_identical(fitted, sessions):
    again = BehaviourModel(n_states=4, segmenter=QUICK).fit(sessions)
    pd.testing.assert_frame_equal(again.label(sessions), fitted.label(sessions))


def test_automatic_state_count_reads_the_elbow_of_the_heldout_blocks(sessions):
    model = BehaviourModel(state_range=(2, 4), segmenter=QUICK).fit(sessions)
    table = model.selection_.table
    assert (model.selection_.rule, model.selection_.heldout) == ("elbow", "blocks")
    assert table["n_states"].tolist() == [2, 3, 4]
    # joined states (phases, units) can only lower the labelled count below the fitted one
    assert 2 <= model.n_states_ <= model.selection_.best <= 4
    assert np.isfinite(table["heldout_ll_per_frame"]).all()
    meta, _ = model.to_state()
    saved = json.loads(json.dumps(meta))["selection"]
    # the selection records how the count was read, whatever the defaults become
    assert (saved["rule"], saved["heldout"]) == ("elbow", "blocks")
    assert saved["best"] == model.selection_.best


def test_bad_parameters_and_unfitted_use_are_explained(sessions):
    with pytest.raises(NotFittedError):
        BehaviourModel().label(sessions)
    for params, text in (
        ({"n_states": 0}, "n_states"),
        ({"method": "magic"}, "method"),
        ({"state_range": (5, 2)}, "state_range"),
        ({"min_bout_s": -1.0}, "min_bout_s"),
        ({"decoding": "smooth"}, "decoding"),
    ):
        with pytest.raises(InputError, match=text):
            BehaviourModel(**params).fit(sessions)
