"""Closed-loop labelling frame by frame equals offline forward filtering of the same session.

Data: the package's simulator (invented animal), without tracking noise and with it.
"""

from __future__ import annotations

import dataclasses
import time
import warnings

import numpy as np
import pytest

from ethoscribe.clean import clean
from ethoscribe.errors import InputError, InputWarning
from ethoscribe.segment.model import BehaviourModel
from ethoscribe.segment.streaming import StreamingLabeller, _keypoint_order
from ethoscribe.simulate import simulate_session


@pytest.fixture(scope="module")
def fitted():
    tracks, _ = simulate_session(duration_s=40, seed=3, noise=True)
    model = BehaviourModel(
        n_states=3, features={"causal": True}, cleaning={"max_speed": 3000.0}, min_bout_s=0
    ).fit([tracks])
    return model, tracks


def test_streamed_posteriors_equal_offline_forward_filtering(fitted):
    model, tracks = fitted
    # Offline reference: causal cleaning, causal features, then the HMM's forward filter
    # (GaussianHMM.filter, itself checked against the textbook recursions and hmmlearn).
    # Lost keypoints are filled per frame in both paths (the model's keypoint filler).
    cleaned, _ = clean(tracks, model.cleaning_, causal=True)
    [feats] = model.featurise_cleaned([cleaned])
    offline = model.segmenter_.filter(feats.values[feats.valid])
    live = StreamingLabeller(model)
    streamed, valid, times = [], [], []
    for t in range(tracks.n_frames):
        start = time.perf_counter()
        [label] = live.push(tracks.coords[t], tracks.confidence[t])
        times.append(time.perf_counter() - start)
        valid.append(label.state >= 0)
        if label.state >= 0:
            streamed.append(label.posterior)
    np.testing.assert_array_equal(np.array(valid), feats.valid)
    np.testing.assert_allclose(np.array(streamed), offline, atol=1e-8)
    print(
        f"\nstreaming labeller: p50 {np.percentile(times, 50) * 1e3:.3f} ms, "
        f"p99 {np.percentile(times, 99) * 1e3:.3f} ms per frame"
    )


def test_a_model_with_non_causal_features_is_refused(fitted):
    _, tracks = fitted
    offline = BehaviourModel(n_states=2).fit([tracks])
    with pytest.raises(InputError, match="causal"):
        StreamingLabeller(offline)


def test_a_causal_model_labels_offline_as_it_streams():
    # A model fitted through the causal path (causal cleaning with the automatic speed bound
    # fixed at fitting time, causal features, forward filter) labels a new session offline the
    # same way StreamingLabeller labels it frame by frame: the promise of the docs, >= 99 %.
    train, _ = simulate_session(duration_s=60, seed=11, noise=True)
    new, _ = simulate_session(duration_s=40, seed=12, noise=True)
    model = BehaviourModel(n_states=4, causal=True).fit([train])
    assert isinstance(model.cleaning_.max_speed, float)  # fixed, so streaming can use it
    offline = model.label([new])
    live = StreamingLabeller(model)
    streamed = np.array(
        [live.push(new.coords[t], new.confidence[t])[0].state for t in range(new.n_frames)]
    )
    agree = float(np.mean(streamed == offline["state"].to_numpy()))
    print(f"\ncausal model: streamed vs offline labels agree on {agree:.2%} of frames")
    assert agree >= 0.99
    assert (offline["state"] >= 0).mean() > 0.8  # most frames scored: not a vacuous match


def _zeros_for_lost(tracks):
    """``tracks`` exported with lost points (missing or confidence < 0.5) written as 0, 0."""
    lost = ~np.isfinite(tracks.coords).all(-1) | (tracks.confidence < 0.5)
    return tracks.replace(coords=np.where(lost[..., None], 0.0, tracks.coords), confidence=None)


def test_a_causal_model_masks_the_placeholders_of_its_sessions_when_streaming():
    # Invented animals whose lost points a tracker writes as 0, 0: the causal fit reads the
    # placeholder from its sessions and keeps it as a position, so streaming (which cannot
    # read it from a recording) masks it too, and labels as offline labelling does.
    train, _ = simulate_session(duration_s=60, seed=11, noise=True)
    new, _ = simulate_session(duration_s=40, seed=12, noise=True)
    train, new = _zeros_for_lost(train), _zeros_for_lost(new)
    model = BehaviourModel(n_states=4, causal=True).fit([train])
    assert model.cleaning_.placeholders == ((0.0, 0.0),)
    offline = model.label([new])
    live = StreamingLabeller(model)
    streamed = np.array([live.push(new.coords[t])[0].state for t in range(new.n_frames)])
    assert np.mean(streamed == offline["state"].to_numpy()) >= 0.99
    assert (offline["state"] >= 0).mean() > 0.8


def _forward_filled(tracks):
    """``tracks`` with lost points (missing or confidence < 0.5) held where last seen."""
    lost = ~np.isfinite(tracks.coords).all(-1) | (tracks.confidence < 0.5)
    x = tracks.coords.copy()
    for t in range(1, len(x)):
        x[t][lost[t]] = x[t - 1][lost[t]]
    return tracks.replace(coords=x, confidence=None)


def test_a_causal_model_sets_held_points_missing_when_streaming_as_offline():
    # Invented animals whose tracker holds a lost point where it last saw it: the causal fit
    # finds that repeats cannot be chance in its sessions, keeps held points on, and streaming
    # (one frame at a time) sets them missing as offline causal labelling does. Tracks in
    # whole units repeat by chance: there held points stay off, for streaming too.
    train, _ = simulate_session(duration_s=60, seed=11, noise=True)
    new, _ = simulate_session(duration_s=40, seed=12, noise=True)
    train, new = _forward_filled(train), _forward_filled(new)
    model = BehaviourModel(n_states=4, causal=True).fit([train])
    assert model.cleaning_.mask_held
    offline = model.label([new])
    live = StreamingLabeller(model)
    assert live.cleaner._held
    streamed = np.array([live.push(new.coords[t])[0].state for t in range(new.n_frames)])
    assert np.mean(streamed == offline["state"].to_numpy()) >= 0.99
    whole = train.replace(coords=np.round(train.coords))
    assert not BehaviourModel(n_states=4, causal=True).fit([whole]).cleaning_.mask_held


def test_causal_needs_a_streaming_method():
    with pytest.raises(InputError, match="causal=True"):
        BehaviourModel(method="changepoint", causal=True)._check_params()


def _stream(live, coords, confidence):
    return np.array([live.push(coords[t], confidence[t])[0].state for t in range(len(coords))])


def test_frames_in_the_trackers_keypoint_order_are_put_in_the_models(fitted):
    # A tracker that lists the keypoints in another order: pushed as they come, the labels
    # were silently wrong (reversed order: 24 % of frames agreed on a 2-minute example
    # session); with keypoints= the frames are reordered and give the same labels exactly.
    model, tracks = fitted
    n = 300
    reference = _stream(StreamingLabeller(model), tracks.coords[:n], tracks.confidence[:n])
    order = np.arange(len(tracks.keypoints))[::-1]
    names = [tracks.keypoints[i] for i in order] + ["ear_tag"]  # an extra point is ignored
    coords = np.concatenate([tracks.coords[:n][:, :, order], tracks.coords[:n][:, :, :1]], 2)
    conf = np.concatenate([tracks.confidence[:n][:, :, order], tracks.confidence[:n][:, :, :1]], 2)
    live = StreamingLabeller(model, keypoints=names)
    np.testing.assert_array_equal(_stream(live, coords, conf), reference)
    with pytest.raises(InputError, match="11 keypoints as given in keypoints="):
        live.push(tracks.coords[0], tracks.confidence[0])
    # fewer than 60 % of the model's keypoints (the rule of sessions read offline): refused
    with pytest.raises(InputError, match=r"at least 60 % of them \(5 of 10 given\)"):
        StreamingLabeller(model, keypoints=list(tracks.keypoints[:5]))
    # a model that does not fill lost keypoints (min_body_seen=None) needs every one
    with pytest.raises(InputError, match=r"\['tail_base'\].*without a keypoint filler"):
        _keypoint_order(model.keypoints_, list(tracks.keypoints[:-1]), fills=False)


@pytest.mark.filterwarnings("ignore:.*the model explains:UserWarning")  # 60-s model's note
def test_a_tracker_lacking_a_model_keypoint_streams_as_offline_labelling_reads_it():
    # A tracker without one of the model's keypoints (here the neck): streamed with the neck
    # never seen, one warning; the offline labels of the same session read without the neck
    # (model.label, the path of a session lacking a study keypoint) agree on >= 99 % of frames,
    # the promise of a causal model with every keypoint.
    train, _ = simulate_session(duration_s=60, seed=11, noise=True)
    new, _ = simulate_session(duration_s=40, seed=12, noise=True)
    model = BehaviourModel(n_states=4, causal=True).fit([train])
    keep = [i for i, k in enumerate(new.keypoints) if k != "neck"]
    assert len(keep) == len(new.keypoints) - 1
    lacking = new.replace(
        coords=new.coords[:, :, keep],
        confidence=new.confidence[:, :, keep],
        keypoints=[new.keypoints[i] for i in keep],
    )
    with pytest.warns(InputWarning, match=r"are lacking.*\(neck\)"):
        offline = model.label([lacking])
    with pytest.warns(InputWarning, match=r"lack the model's keypoints \['neck'\]"):
        live = StreamingLabeller(model, keypoints=lacking.keypoints)
    streamed = _stream(live, lacking.coords, lacking.confidence)
    agree = float(np.mean(streamed == offline["state"].to_numpy()))
    print(f"\nno neck: streamed vs offline labels agree on {agree:.2%} of frames")
    assert agree >= 0.99
    assert (streamed >= 0).mean() > 0.8  # the frames are scored, not all left out
    with_neck = model.label([new])["state"].to_numpy()
    assert np.mean(with_neck == streamed) > 0.8  # the neck's absence changes few labels


def test_pixel_frames_for_a_model_fitted_in_mm_need_the_calibration():
    # discover with px_per_unit in the manifest fits in mm; a tracker streams pixels. Pushed
    # as they were, pixel frames were read as mm (17 % of frames agreed with the saved labels
    # on an example session); units="px" with px_per_unit calibrates them as offline
    # cleaning does, and leaving px_per_unit out is refused.
    tracks, _ = simulate_session(duration_s=40, seed=3, noise=True)
    px_per_mm = float(tracks.meta["px_per_unit"])
    in_mm = dataclasses.replace(tracks, coords=tracks.coords / px_per_mm, units="mm")
    model = BehaviourModel(n_states=3, causal=True, min_bout_s=0).fit([in_mm])
    assert model.features_.units_ == "mm"
    n = 400
    reference = _stream(StreamingLabeller(model), in_mm.coords[:n], in_mm.confidence[:n])
    live = StreamingLabeller(model, units="px", px_per_unit=px_per_mm)
    streamed = _stream(live, tracks.coords[:n], tracks.confidence[:n])
    assert np.mean(streamed == reference) >= 0.99  # the same up to float rounding
    assert (reference >= 0).mean() > 0.8
    with pytest.raises(InputError, match="give px_per_unit"):
        StreamingLabeller(model, units="px")
    cm = StreamingLabeller(model, units="cm")  # other physical units are converted
    np.testing.assert_array_equal(
        _stream(cm, in_mm.coords[:n] / 10, in_mm.confidence[:n]), reference
    )


def test_frames_the_model_explains_poorly_are_counted_and_warned_about_once():
    # Pixel frames pushed as mm (a calibration left out) were labelled without a word. The
    # labeller counts scored frames below the model's poor-fit threshold (1st percentile of
    # its training frames' best-state log-likelihood, as fit_shares reads a session) and warns
    # once after POOR_FIT_CHECK_S seconds when more than half are.
    from ethoscribe.segment.model import best_state_log_likelihood
    from ethoscribe.segment.streaming import POOR_FIT_CHECK_S

    train, _ = simulate_session(duration_s=60, seed=3, noise=True)
    model = BehaviourModel(n_states=4, causal=True).fit([train])
    tracks, _ = simulate_session(duration_s=30, seed=5, noise=True)  # another animal
    n = int(POOR_FIT_CHECK_S * model.fps_) + 60
    live = StreamingLabeller(model)
    with warnings.catch_warnings():
        warnings.simplefilter("error", InputWarning)  # an animal like the training one: quiet
        _stream(live, tracks.coords[:n], tracks.confidence[:n])
    # reference: the model's own offline best-state log-likelihood of the same causal features
    cleaned, _ = clean(tracks, model.cleaning_, causal=True)
    [feats] = model.featurise_cleaned([cleaned])
    valid = feats.valid[:n]
    ll = best_state_log_likelihood(model.segmenter_, feats.values[:n][valid])
    scored, poor = live.poorly_explained
    assert scored == int(valid.sum())
    assert poor == int(np.count_nonzero(ll < model.poor_fit_threshold_))
    assert poor / scored < 0.5

    # the same frames five times larger (pixels read as mm); some are masked as jumps, so the
    # whole session is pushed to reach the check's scored frames
    scaled = StreamingLabeller(model)
    with pytest.warns(InputWarning, match="explains .* of the first .* streamed frames poorly"):
        _stream(scaled, tracks.coords * 5, tracks.confidence)
    assert scaled.poorly_explained[0] >= POOR_FIT_CHECK_S * model.fps_
    assert scaled.poorly_explained[1] / scaled.poorly_explained[0] > 0.9
    with warnings.catch_warnings():
        warnings.simplefilter("error", InputWarning)  # said once, not on every frame after
        _stream(scaled, tracks.coords[:60] * 5, tracks.confidence[:60])
