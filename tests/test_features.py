"""Feature pipeline: fitted attributes, PCA against numpy/scikit-learn, recovery tests on
invented animals, causal/online equality, state round trip and bad input.

Invented data: ``walking`` makes animals whose body (six keypoints on a bending line) points
where they go; seeds are fixed and given in each call.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from sklearn.base import clone
from sklearn.decomposition import PCA

from ethoscribe.errors import InputError, InputWarning, NotFittedError
from ethoscribe.features import FeaturePipeline, FeatureSet
from ethoscribe.geometry import rotate_to_axis
from ethoscribe.pose import PoseTracks

NAMES = ["tail_base", "mid", "neck", "nose", "ear_left", "ear_right"]
DETAILED = {"feature_set": "detailed", "band_components": 3}  # the per-keypoint column set
BODY = np.array([[-4.0, 0.0], [0.0, 0.0], [2.5, 0.0], [4.5, 0.0], [3.0, 0.8], [3.0, -0.8]])


def _smooth(x: np.ndarray, n: int) -> np.ndarray:
    return np.convolve(x, np.ones(n) / n, mode="same")


def walking(n=600, animals=1, seed=0, dims=2, fps=30.0, session="walk") -> PoseTracks:
    """Invented animals walking with a bending body; 3-D adds heights and rearing."""
    rng = np.random.default_rng(seed)
    coords = np.empty((n, animals, len(NAMES), dims))
    for a in range(animals):
        heading = np.cumsum(_smooth(rng.normal(0, 0.3, n), 15)) / fps * 5 + rng.uniform(-3, 3)
        speed = np.clip(10 + 48 * _smooth(rng.normal(0, 1, n), 30), 0, None)
        step = speed[:, None] * np.c_[np.cos(heading), np.sin(heading)] / fps
        pos = np.cumsum(step, 0) + rng.uniform(-20, 20, 2)
        local = np.repeat(BODY[None], n, 0)
        local[:, :, 1] += 2 * _smooth(rng.normal(0, 1, n), 20)[:, None] * local[:, :, 0] ** 2 / 40
        c, s = np.cos(heading)[:, None], np.sin(heading)[:, None]
        coords[:, a, :, 0] = pos[:, :1] + c * local[..., 0] - s * local[..., 1]
        coords[:, a, :, 1] = pos[:, 1:] + s * local[..., 0] + c * local[..., 1]
        if dims == 3:
            rear = 3 * np.clip(_smooth(rng.normal(0, 1, n), 30), 0, None)[:, None]
            coords[:, a, :, 2] = np.array([1.0, 2.0, 2.5, 2.0, 2.8, 2.8]) + rear * [
                0,
                0,
                1,
                2,
                1,
                1,
            ]
    coords += rng.normal(0, 0.05, coords.shape)
    return PoseTracks(coords, keypoints=NAMES, fps=fps, units="cm", session=session)


def turned(tracks: PoseTracks, angle: float, shift=(5.0, -3.0)) -> PoseTracks:
    """The same scene rotated about the vertical axis and moved."""
    c, s = np.cos(angle), np.sin(angle)
    xy = tracks.coords[..., :2] @ np.array([[c, s], [-s, c]]) + np.asarray(shift)
    coords = tracks.coords.copy()
    coords[..., :2] = xy
    return tracks.replace(coords=coords)


def test_fit_chooses_and_reports_the_body_axis():
    sessions = [walking(seed=1), walking(seed=2, session="b")]
    compact = FeaturePipeline().fit(sessions)
    assert compact.columns_ == (
        *(f"posture_pc{i}" for i in range(1, compact.n_components_ + 1)),
        "log_centroid_speed_cm_s", "log_turning_speed_rad_s", "log_posture_speed_cm_s",
        *(f"log_posture_band_{f}hz" for f in ("0.5", "1", "2", "4", "8")),
    )  # fmt: skip
    logged = np.array([c.startswith("log_") for c in compact.columns_])
    assert (compact.log_offset_[logged] > 0).all() and (compact.log_offset_[~logged] == 0).all()
    pipe = FeaturePipeline(**DETAILED).fit(sessions)
    assert pipe.axis_ == compact.axis_ == ("tail_base", "nose")
    assert pipe.origin_ is None
    assert "tail_base -> nose" in pipe.axis_report_ and "centroid" in pipe.axis_report_
    assert pipe.axis_details_["rule"] == "travel"
    assert pipe.axis_details_["mean_cosine"] > 0.9
    json.dumps(pipe.axis_details_)
    assert pipe.keypoints_ == tuple(NAMES) and pipe.n_dims_ == 2
    assert pipe.columns_[:2] == ("posture_pc1", "posture_pc2")
    assert not pipe.log_offset_.any()  # the detailed set stays linear
    assert "centroid_speed_cm_s" in pipe.columns_
    assert "nose_ego_speed_cm_s" in pipe.columns_
    assert "posture_pc1_band_0.5hz" in pipe.columns_ and "posture_pc3_band_8hz" in pipe.columns_
    assert "posture_pc1_std_0.5s" in pipe.columns_
    assert not any(c.startswith("dist_to") for c in pipe.columns_)  # one animal: not social
    assert pipe.scaler_mean_.shape == pipe.scaler_scale_.shape == (len(pipe.columns_),)


def test_posture_pca_recovers_known_covariance_and_matches_sklearn():
    # Invented postures: tail at 0 and nose at (5, 0) exactly, four other keypoints with
    # body-frame offsets drawn from a known covariance; world frames turned and moved.
    rng = np.random.default_rng(3)  # seed 3
    n = 20000
    A = rng.normal(size=(8, 8))
    cov = A @ A.T / 8 + np.diag(np.linspace(0.1, 0.8, 8))
    body = np.zeros((n, 6, 2))
    body[:, 3, 0] = 5.0
    body[:, [1, 2, 4, 5]] = (rng.multivariate_normal(np.ones(8), cov, n)).reshape(n, 4, 2)
    heading = rng.uniform(-np.pi, np.pi, n)
    c, s = np.cos(heading)[:, None], np.sin(heading)[:, None]
    world = np.stack([c * body[..., 0] - s * body[..., 1], s * body[..., 0] + c * body[..., 1]], -1)
    world += np.cumsum(rng.normal(0, 1, (n, 1, 2)), 0)
    tracks = PoseTracks(world[:, None], keypoints=NAMES, fps=30.0, units="cm")
    pipe = FeaturePipeline(origin="tail_base", axis=("tail_base", "nose"), n_components=8)
    pipe.fit([tracks])
    known = np.linalg.eigh(cov)[0][::-1]  # numpy.linalg.eigh of the known covariance
    np.testing.assert_allclose(pipe.explained_variance_, known, rtol=0.06)
    ego, _ = rotate_to_axis(world, world[:, 0], world[:, 3] - world[:, 0])
    flat = ego.reshape(n, -1)
    sample = np.linalg.eigh(np.cov(flat, rowvar=False))[0][::-1][:8]  # numpy.linalg.eigh
    np.testing.assert_allclose(pipe.explained_variance_, sample, rtol=1e-9)
    ref = PCA(n_components=8).fit(flat)  # scikit-learn PCA
    np.testing.assert_allclose(pipe.explained_variance_, ref.explained_variance_, rtol=1e-9)
    np.testing.assert_allclose(
        pipe.explained_variance_ratio_, ref.explained_variance_ratio_, rtol=1e-9
    )
    dots = np.abs(np.sum(pipe.pca_components_ * ref.components_, axis=1))
    np.testing.assert_allclose(dots, 1.0, atol=1e-6)


def test_transform_one_featureset_per_animal_and_invalid_frames_kept():
    tracks = walking(n=400, animals=2, seed=4)
    coords = tracks.coords.copy()
    coords[200, 0, 3] = np.nan  # a nose still missing after cleaning
    tracks = tracks.replace(coords=coords)
    pipe = FeaturePipeline()
    sets = pipe.fit_transform([tracks, walking(n=300, animals=2, seed=5, session="b")])
    assert [(f.session, f.animal) for f in sets] == [
        ("walk", "animal0"),
        ("walk", "animal1"),
        ("b", "animal0"),
        ("b", "animal1"),
    ]
    first = sets[0]
    assert first.values.shape == (400, len(pipe.columns_))
    assert not first.valid[200] and np.isnan(first.values[200]).all()
    assert np.isfinite(first.values[first.valid]).all()
    assert first.valid.sum() > 380
    # Its partner's position (social features) is undefined there: the animal's own features
    # still count, the social ones take the fitted mean (0 after standardising).
    assert sets[1].valid[200]
    assert (sets[1].values[200, -8:] == 0).all() and np.isfinite(sets[1].values[200]).all()
    alone = FeaturePipeline(social=False).fit_transform([tracks])
    assert alone[1].valid[200] and not alone[0].valid[200]
    assert "log_dist_to_nearest_cm" in pipe.columns_ and "facing_nearest_cos" in pipe.columns_
    again = pipe.transform(tracks)
    np.testing.assert_array_equal(again[0].values, first.values)
    # Standardised over the fitted frames: those with every feature measured (frames whose
    # partner was missing carry the social features' fitted mean, exactly 0, and were not fitted).
    measured = [f.valid & ~(f.values[:, -8:] == 0).all(1) for f in sets]
    stacked = np.vstack([f.values[m] for f, m in zip(sets, measured, strict=True)])
    np.testing.assert_allclose(stacked.mean(0), 0.0, atol=1e-9)  # standardised over fit data
    np.testing.assert_allclose(stacked.std(0), 1.0, atol=1e-9)
    frame = first.to_frame()
    assert list(frame.columns[:5]) == ["session", "animal", "frame", "time_s", "valid"]
    assert frame.shape == (400, 5 + len(pipe.columns_))


def test_features_do_not_change_when_the_arena_is_turned():
    # Egocentric features must not depend on where the arena's axes point (2-D and 3-D).
    for dims, align in ((2, "rotate"), (2, "procrustes"), (3, "rotate"), (3, "procrustes")):
        tracks = walking(n=300, seed=6, dims=dims)
        pipe = FeaturePipeline(align=align, axis=("tail_base", "nose")).fit([tracks])
        a = pipe.transform(tracks)[0]
        b = pipe.transform(turned(tracks, 1.1))[0]
        np.testing.assert_array_equal(a.valid, b.valid)
        np.testing.assert_allclose(a.values, b.values, atol=1e-7, err_msg=f"{dims}-D {align}")


@pytest.mark.parametrize("vertical", ["posture", "separate"])
def test_3d_heights_are_kept_under_rotation_about_z(vertical):
    # Invented 3-D animal: height columns equal the raw z coordinates, whatever the heading.
    tracks = walking(n=300, seed=7, dims=3)
    pipe = FeaturePipeline(standardise=False, axis=("tail_base", "nose"), vertical=vertical)
    fs = pipe.set_params(**DETAILED).fit([tracks]).transform(turned(tracks, 2.0))[0]
    cols = [pipe.columns_.index(f"height_{k}_cm") for k in NAMES]
    ok = fs.valid
    np.testing.assert_allclose(fs.values[ok][:, cols], tracks.coords[ok, 0, :, 2], atol=1e-12)
    z = tracks.coords[:, 0, :, 2]
    if vertical == "separate":  # the shape: heights relative to the centroid's
        z = z - z.mean(1, keepdims=True)
    np.testing.assert_allclose(pipe.mean_posture_[:, 2], z.mean(0), atol=1e-12)


def _rhythm(freq: float, seed: int, session: str) -> PoseTracks:
    """Invented still animal whose head sways sideways at ``freq`` Hz (mean posture the same)."""
    rng = np.random.default_rng(seed)
    n, fps = 1800, 30.0
    t = np.arange(n) / fps
    coords = np.repeat(BODY[None, None], n, 0).copy()
    sway = 0.8 * np.sin(2 * np.pi * freq * t + rng.uniform(0, 6))
    coords[:, 0, 2:, 1] += sway[:, None] * np.array([0.5, 1.0, 0.7, 0.7])
    coords += rng.normal(0, 0.02, coords.shape)
    return PoseTracks(coords, keypoints=NAMES, fps=fps, units="cm", session=session)


def test_rhythmic_and_slow_movement_separate_in_band_power():
    # Recovery test on invented data: same mean posture, sway at 4 Hz versus 0.5 Hz.
    fast, slow = _rhythm(4.0, 8, "fast"), _rhythm(0.5, 9, "slow")
    pipe = FeaturePipeline(origin="mid", axis=("tail_base", "mid"), n_components=2, **DETAILED)
    sets = pipe.fit_transform([fast, slow])
    np.testing.assert_allclose(
        fast.coords.mean(0), slow.coords.mean(0), atol=0.05
    )  # same mean posture
    hi, lo = (
        pipe.columns_.index("posture_pc1_band_4hz"),
        pipe.columns_.index("posture_pc1_band_0.5hz"),
    )
    inner = slice(150, -150)
    f_hi, s_hi = sets[0].values[inner, hi], sets[1].values[inner, hi]
    f_lo, s_lo = sets[0].values[inner, lo], sets[1].values[inner, lo]
    assert f_hi.min() > s_hi.max() and s_lo.min() > f_lo.max()
    pc1 = pipe.columns_.index("posture_pc1")
    assert abs(sets[0].values[:, pc1].mean() - sets[1].values[:, pc1].mean()) < 0.1


def test_social_features_of_two_placed_animals():
    # Invented: animal 0 at the origin facing +x, animal 1 ten cm ahead facing +y.
    n = 200
    a0 = BODY.copy()
    a1 = BODY[:, ::-1] * [-1, 1] + [10.0, 0.0]  # turned by +90 degrees
    rng = np.random.default_rng(10)  # seed 10
    coords = np.stack([a0, a1])[None].repeat(n, 0) + rng.normal(0, 1e-3, (n, 2, 6, 2))
    tracks = PoseTracks(coords, keypoints=NAMES, fps=30.0, units="cm")
    pipe = FeaturePipeline(axis=("tail_base", "nose"), standardise=False, n_components=2)
    pipe.set_params(**DETAILED)
    fs0, fs1 = pipe.fit_transform([tracks])
    col = {c: i for i, c in enumerate(pipe.columns_)}
    row0, row1 = fs0.values[100], fs1.values[100]
    centroid = BODY.mean(0)
    other = a1.mean(0)
    assert row0[col["dist_to_nearest_cm"]] == pytest.approx(
        np.linalg.norm(other - centroid), abs=0.01
    )
    toward = other - centroid  # animal 0 faces +x: the facing angle is that of this vector
    facing = np.arctan2(toward[1], toward[0])
    assert row0[col["facing_nearest_cos"]] == pytest.approx(np.cos(facing), abs=1e-3)
    assert row0[col["facing_nearest_sin"]] == pytest.approx(np.sin(facing), abs=1e-3)
    assert row0[col["nearest_heading_sin"]] == pytest.approx(1.0, abs=1e-3)
    assert row1[col["nearest_heading_sin"]] == pytest.approx(-1.0, abs=1e-3)
    nose0 = a0[3]
    nearest_body = np.linalg.norm(a1 - nose0, axis=1).min()
    assert row0[col["head_to_nearest_body_cm"]] == pytest.approx(nearest_body, abs=0.01)
    assert abs(row0[col["nearest_approach_speed_cm_s"]]) < 0.5


def test_causal_features_use_only_past_frames():
    tracks = walking(n=300, seed=11)
    pipe = FeaturePipeline(causal=True).fit([tracks])
    coords = tracks.coords.copy()
    coords[200:] += np.random.default_rng(12).normal(0, 3, coords[200:].shape)  # seed 12
    a = pipe.transform(tracks)[0].values
    b = pipe.transform(tracks.replace(coords=coords))[0].values
    np.testing.assert_array_equal(a[:200], b[:200])
    assert not np.allclose(a[200:], b[200:], equal_nan=True)


@pytest.mark.parametrize("align", ["rotate", "procrustes"])
def test_stream_reproduces_causal_transform(align):
    tracks = walking(n=300, animals=2, seed=13)
    coords = tracks.coords.copy()
    coords[100:104, 1, 2] = np.nan
    coords[0:3, 0] = np.nan
    tracks = tracks.replace(coords=coords)
    pipe = FeaturePipeline(causal=True, align=align).fit([tracks])
    expected = pipe.transform(tracks)
    stream = pipe.stream(2)
    rows = np.stack([stream.push(frame) for frame in tracks.coords], axis=1)
    for a in range(2):
        np.testing.assert_array_equal(np.isnan(rows[a]), np.isnan(expected[a].values))
        np.testing.assert_allclose(rows[a], expected[a].values, atol=1e-9, equal_nan=True)
    assert not expected[0].valid[:3].any() and expected[0].valid[20:100].all()
    # The partner's missing neck leaves the social features undefined: own features still count.
    assert expected[0].valid[100:104].all()
    assert (expected[0].values[100:104, -8:] == 0).all()


def test_state_round_trip_rebuilds_an_identical_pipeline(tmp_path):
    tracks = walking(n=300, animals=2, seed=14, dims=3)
    pipe = FeaturePipeline(align="procrustes", frequencies=(1, 3), causal=True).fit([tracks])
    meta, arrays = pipe.to_state()
    text = json.dumps(meta)
    np.savez(tmp_path / "features.npz", **arrays)
    with np.load(tmp_path / "features.npz", allow_pickle=False) as saved:
        loaded = FeaturePipeline.from_state(json.loads(text), dict(saved))
    assert loaded.get_params() == pipe.get_params()
    for name in ("axis_", "columns_", "keypoints_", "axis_report_", "n_components_", "social_"):
        assert getattr(loaded, name) == getattr(pipe, name)
    np.testing.assert_array_equal(
        loaded.transform(tracks)[1].values, pipe.transform(tracks)[1].values
    )
    with pytest.raises(InputError, match="lacks"):
        FeaturePipeline.from_state(meta, {k: v for k, v in arrays.items() if k != "pca_mean_"})
    with pytest.raises(InputError, match="not a FeaturePipeline"):
        FeaturePipeline.from_state({"estimator": "other"}, arrays)


def test_estimator_conventions():
    pipe = FeaturePipeline(n_components=3)
    assert clone(pipe).get_params() == pipe.get_params()
    with pytest.raises(NotFittedError):
        pipe.transform(walking(n=50))
    with pytest.raises(NotFittedError):
        pipe.to_state()
    tracks = walking(n=200, seed=15)
    first = pipe.fit_transform([tracks])[0].values
    again = FeaturePipeline(n_components=3).fit_transform([tracks])[0].values
    np.testing.assert_array_equal(first, again)
    assert pipe.get_params()["n_components"] == 3
    with pytest.raises(InputError):
        pipe.set_params(align="sideways").fit([tracks])
    with pytest.raises(NotFittedError):  # a failed refit leaves no stale fitted state
        pipe.transform(tracks)


def test_two_keypoint_body_and_optional_blocks():
    # Any body plan with >= 2 keypoints; a fancy-indexed (non-contiguous) coordinate array.
    tracks = walking(n=200, seed=19)
    pair = PoseTracks(tracks.coords[:, :, [0, 3]], keypoints=["tail", "head"], fps=30.0)
    assert not pair.coords.flags.c_contiguous
    pipe = FeaturePipeline(origin="tail", **DETAILED)
    sets = pipe.fit_transform([pair])
    assert pipe.n_components_ == 1  # body length is the only posture left
    assert "tail_ego_speed_px_s" not in pipe.columns_ and "head_ego_speed_px_s" in pipe.columns_
    assert sets[0].valid.all()
    bare = FeaturePipeline(frequencies=(), band_components=0, causal=True).fit([tracks])
    assert not any("_band_" in c for c in bare.columns_)
    assert bare.transform(tracks)[0].valid[20:].all()


@pytest.mark.filterwarnings("ignore:the keypoints .* never move:UserWarning")  # a rigid body
def test_speeds_are_in_units_per_second_at_any_frame_rate():
    # Invented straight walk at 12 cm/s along +x, heading +x: checked at 30 and 60 fps.
    for fps in (30.0, 60.0):
        t = np.arange(int(4 * fps)) / fps
        coords = BODY[None, None] + (12.0 * t)[:, None, None, None] * np.array([1.0, 0.0])
        tracks = PoseTracks(coords, keypoints=NAMES, fps=fps, units="cm")
        pipe = FeaturePipeline(standardise=False, n_components=1, **DETAILED).fit([tracks])
        fs = pipe.transform(tracks)[0]
        col = {c: i for i, c in enumerate(pipe.columns_)}
        np.testing.assert_allclose(fs.values[:, col["centroid_speed_cm_s"]], 12.0, atol=1e-9)
        np.testing.assert_allclose(fs.values[:, col["forward_velocity_cm_s"]], 12.0, atol=1e-9)
        np.testing.assert_allclose(fs.values[:, col["lateral_velocity_cm_s"]], 0.0, atol=1e-9)
        np.testing.assert_allclose(fs.values[:, col["heading_velocity_rad_s"]], 0.0, atol=1e-9)


def test_bad_input_is_named():
    tracks = walking(n=100, seed=16)
    # named as the option, not the class (the command line read "FeaturePipeline: ..."),
    # with the close name (difflib's get_close_matches)
    said = r"^the origin keypoint 'snout' \(origin=\) is not one of the tracks' keypoints \["
    with pytest.raises(InputError, match=said + r".*'nose'.*\]; name one of them"):
        FeaturePipeline(origin="snout").fit([tracks])
    with pytest.raises(InputError, match=r"\('nose'\?\)$"):
        FeaturePipeline(origin="nosee").fit([tracks])
    with pytest.raises(InputError, match=r"axis keypoint 'head'.*tracks' keypoints"):
        FeaturePipeline(axis=("tail_base", "head")).fit([tracks])
    single = PoseTracks(tracks.coords[:, :, :1], keypoints=["nose"], fps=30.0)
    with pytest.raises(InputError, match=r"only 1 \(\['nose'\]\)"):
        FeaturePipeline(axis=("nose", "nose2")).fit([single])
    pipe = FeaturePipeline().fit([tracks])
    fewer = PoseTracks(tracks.coords[:, :, :5], keypoints=NAMES[:5], fps=30.0, units="cm")
    with pytest.raises(InputError, match=r"missing \['ear_right'\]"):
        pipe.transform(fewer)
    with pytest.raises(InputError, match="causal=True"):
        pipe.stream(1)
    with pytest.raises(InputError, match="align must be"):
        FeaturePipeline(align="mirror").fit([tracks])
    with pytest.raises(InputError, match="n_components"):
        FeaturePipeline(n_components=0).fit([tracks])
    with pytest.raises(InputError, match=r"session 'slow'.*Nyquist"):  # a given list is strict
        FeaturePipeline(frequencies=(1, 4)).fit([tracks.replace(fps=10.0, session="slow")])
    # no frame with every keypoint tracked: the message names how often each is missing
    gappy = tracks.coords.copy()
    gappy[0::2, :, 4], gappy[1::2, :, 5] = np.nan, np.nan
    with pytest.raises(InputError, match=r"missing on .*'ear_left' 50%.*confidence threshold"):
        FeaturePipeline(axis=("tail_base", "nose")).fit([tracks.replace(coords=gappy)])
    # solo and pair sessions in one study: social features left out, said, not refused
    pair = walking(n=100, animals=2, seed=17, session="pair")
    with pytest.warns(InputWarning, match=r"left out: sessions have 1 or 2 animals.*'walk'"):
        mixed = FeaturePipeline().fit([tracks, pair])
    assert not mixed.social_ and "1 or 2 animals" in mixed.social_report_
    assert mixed.transform(pair)[0].values.shape[1] == len(mixed.columns_)
    pairs_only = FeaturePipeline().fit([pair])
    assert pairs_only.social_  # all pairs: kept
    with pytest.raises(InputError, match="has 1 animal but the model was fitted on groups"):
        pairs_only.transform(tracks)
    with pytest.warns(UserWarning, match="points against the direction of travel"):
        FeaturePipeline(axis=("nose", "tail_base")).fit([walking(n=600, seed=20)])
    with pytest.raises(InputError, match="units"):
        FeaturePipeline().fit([tracks, tracks.replace(units="px", session="raw")])


@pytest.mark.filterwarnings("ignore:the keypoints .* never move:UserWarning")  # a rigid body
def test_still_animal_warns_that_the_axis_is_a_guess():
    still = np.repeat(BODY[None, None], 100, 0)
    tracks = PoseTracks(still, keypoints=NAMES, fps=30.0, units="cm")
    with pytest.warns(UserWarning, match="no movement"):
        pipe = FeaturePipeline(n_components=2).fit([tracks])
    assert pipe.axis_details_["rule"] == "farthest pair"
    assert pipe.axis_ == ("tail_base", "nose")  # 8.5 cm apart: the farthest pair
    jitter = still + np.random.default_rng(18).normal(0, 1e-3, still.shape)  # seed 18
    with pytest.warns(UserWarning, match="unreliable automatic body axis"):
        FeaturePipeline(n_components=2).fit([tracks.replace(coords=jitter)])


def test_featureset_checks_its_shapes():
    with pytest.raises(InputError, match="values must be"):
        FeatureSet(np.zeros((3, 2)), ("a",), np.ones(3, bool), "s", "m", 30.0)
    with pytest.raises(InputError, match="valid"):
        FeatureSet(np.full((3, 1), np.nan), ("a",), np.ones(3, bool), "s", "m", 30.0)


def test_compact_log_offsets_are_the_noise_floor_quantile():
    # log(x + c) with c = 5 % quantile of x over the fitted frames (numpy.quantile as reference)
    tracks = [walking(seed=21), walking(seed=22, session="b")]
    compact = FeaturePipeline(standardise=False).fit(tracks)
    detailed = FeaturePipeline(standardise=False, **DETAILED)
    i = detailed.fit([tracks[0]]).columns_.index("centroid_speed_cm_s")
    speeds = [f.values[:, i] for t in tracks for f in detailed.fit([t]).transform(t)]
    pooled = np.concatenate(speeds)
    offset = np.quantile(pooled[np.isfinite(pooled)], 0.05)  # numpy.quantile
    j = compact.columns_.index("log_centroid_speed_cm_s")
    assert compact.log_offset_[j] == pytest.approx(offset, rel=1e-12)
    values = compact.transform(tracks[0])[0].values[:, j]
    np.testing.assert_allclose(values, np.log(speeds[0] + offset), rtol=1e-12)


def test_log_offsets_skip_positions_repeated_exactly():
    # An animal frozen on 60 % of the frames with its positions repeated exactly (integer pixels,
    # a tracker holding still points): the 5 % quantile of its speed is float rounding, and
    # log(x + c) spread that rounding over ~20 log units, squeezing every real movement. The
    # offset is the 5 % quantile of the frames that move (numpy.quantile as reference).
    moving = walking(n=600, seed=23)
    coords = moving.coords.copy()
    coords[200:560] = coords[200]
    frozen = moving.replace(coords=coords)
    compact = FeaturePipeline(standardise=False).fit([frozen])
    detailed = FeaturePipeline(standardise=False, **DETAILED).fit([frozen])
    i = detailed.columns_.index("centroid_speed_cm_s")
    speed = detailed.transform(frozen)[0].values[:, i]
    assert np.nanquantile(speed, 0.05) < 1e-9 * np.nanquantile(speed, 0.99)  # rounding only
    speed = speed[np.isfinite(speed) & (speed > 1e-9 * np.nanquantile(speed, 0.99))]
    j = compact.columns_.index("log_centroid_speed_cm_s")
    assert compact.log_offset_[j] == pytest.approx(np.quantile(speed, 0.05), rel=1e-12)
    # the tracks of a moving animal keep the plain rule (the test above)


def test_compact_posture_band_is_the_rms_of_the_whole_body_sway():
    # Invented sway of amplitude a_k on four keypoints: the band amplitude of the whole posture
    # is the RMS of the sinusoid, sqrt(sum a_k^2 / 2) (a textbook identity), in its own band.
    fast, slow = _rhythm(4.0, 8, "fast"), _rhythm(0.5, 9, "slow")
    pipe = FeaturePipeline(origin="mid", axis=("tail_base", "mid"), n_components=2)
    pipe.set_params(standardise=False)
    sets = pipe.fit_transform([fast, slow])
    rms = 0.8 * np.sqrt(np.sum(np.array([0.5, 1.0, 0.7, 0.7]) ** 2) / 2)
    col = {c: i for i, c in enumerate(pipe.columns_)}
    inner = slice(150, -150)
    for fs, band, other in ((sets[0], "4hz", "0.5hz"), (sets[1], "0.5hz", "4hz")):
        j, k = col[f"log_posture_band_{band}"], col[f"log_posture_band_{other}"]
        amp = np.exp(fs.values[inner, j]) - pipe.log_offset_[j]
        assert np.median(amp) == pytest.approx(rms, rel=0.1)
        assert np.median(np.exp(fs.values[inner, k]) - pipe.log_offset_[k]) < 0.2 * rms


def test_a_state_saved_before_feature_sets_loads_as_the_detailed_set():
    tracks = walking(n=300, seed=23)
    pipe = FeaturePipeline(**DETAILED).fit([tracks])
    meta, arrays = pipe.to_state()
    del meta["params"]["feature_set"], arrays["log_offset_"]  # as written by version 0.1
    loaded = FeaturePipeline.from_state(meta, arrays)
    assert loaded.feature_set == "detailed" and loaded.columns_ == pipe.columns_
    np.testing.assert_array_equal(
        loaded.transform(tracks)[0].values, pipe.transform(tracks)[0].values
    )


def test_a_rigid_body_has_no_posture_components_and_still_saves():
    # Keypoints that never move relative to each other (a rigid tag, or a tracker that fits a
    # template): no posture to describe, so 0 components; the movement features remain, and
    # the saved pipeline must load again (it was refused as damaged).
    n, fps = 400, 30.0
    heading = np.linspace(0, 6, n)
    pos = np.c_[np.linspace(0, 80, n), 20 * np.sin(np.linspace(0, 3, n))]
    c, s = np.cos(heading)[:, None], np.sin(heading)[:, None]
    coords = np.empty((n, 1, len(NAMES), 2))
    coords[:, 0, :, 0] = pos[:, :1] + c * BODY[:, 0] - s * BODY[:, 1]
    coords[:, 0, :, 1] = pos[:, 1:] + s * BODY[:, 0] + c * BODY[:, 1]
    tracks = PoseTracks(coords, keypoints=NAMES, fps=fps, units="cm", session="rigid")
    with pytest.warns(UserWarning, match="never move relative to each other"):
        pipe = FeaturePipeline(axis=("tail_base", "nose")).fit([tracks])
    assert pipe.n_components_ == 0 and not any("posture_pc" in c for c in pipe.columns_)
    meta, arrays = pipe.to_state()
    loaded = FeaturePipeline.from_state(json.loads(json.dumps(meta)), arrays)
    np.testing.assert_array_equal(
        loaded.transform(tracks)[0].values, pipe.transform(tracks)[0].values
    )


UPRIGHT = ["pelvis", "head", "shoulder_left", "shoulder_right"]
UPRIGHT += ["ankle_left", "toe_left", "ankle_right", "toe_right"]


def upright_walker(seed: int, n: int = 3000, fps: float = 30.0) -> tuple[PoseTracks, np.ndarray]:
    """Invented upright figure (m): runs straight, then turns on the spot, in 4-s spells; its
    spine leans forward only when running, its feet point where it faces. Returns the tracks
    and the true turning speed (rad/s)."""
    rng = np.random.default_rng(seed)
    m = round(4 * fps)
    spell = (np.arange(n) // m) % 2  # 0: running, 1: turning on the spot
    rates = rng.choice([-2.0, -0.7, 0.7, 2.0], n // m + 1).repeat(m)[:n]
    turn = np.where(spell == 1, rates, 0.0)
    heading = np.cumsum(turn) / fps
    speed = np.where(spell == 0, 3.0, 0.0)
    pos = np.cumsum(speed[:, None] * np.c_[np.cos(heading), np.sin(heading)] / fps, axis=0)
    lean = np.where(spell == 0, 0.5, 0.0)  # forward lean of the spine (rad)
    # body frame: x forward, y left, z up
    local = np.zeros((n, len(UPRIGHT), 3))
    local[:, 0] = [0.0, 0.0, 1.0]
    local[:, 1] = np.c_[0.7 * np.sin(lean), np.zeros(n), 1.0 + 0.7 * np.cos(lean)]
    local[:, 2] = np.c_[0.5 * np.sin(lean), np.full(n, 0.2), 1.0 + 0.5 * np.cos(lean)]
    local[:, 3] = np.c_[0.5 * np.sin(lean), np.full(n, -0.2), 1.0 + 0.5 * np.cos(lean)]
    stride = 0.3 * np.sin(2 * np.pi * 2.5 * np.arange(n) / fps) * (spell == 0)
    for k, (side, x) in enumerate([(0.1, stride), (-0.1, -stride)]):
        local[:, 4 + 2 * k] = np.c_[x, np.full(n, side), np.full(n, 0.1)]
        local[:, 5 + 2 * k] = np.c_[x + 0.2, np.full(n, side), np.full(n, 0.02)]
    c, s = np.cos(heading)[:, None], np.sin(heading)[:, None]
    coords = np.empty_like(local)
    coords[..., 0] = pos[:, :1] + c * local[..., 0] - s * local[..., 1]
    coords[..., 1] = pos[:, 1:] + s * local[..., 0] + c * local[..., 1]
    coords[..., 2] = local[..., 2]
    coords += rng.normal(0, 0.005, coords.shape)
    tracks = PoseTracks(coords[:, None], keypoints=UPRIGHT, fps=fps, units="m", session=f"u{seed}")
    return tracks, np.abs(turn)


def test_pair_flatness_is_the_cosine_of_the_elevation():
    # Reference: scipy's Rotation tilts a unit pair by a known elevation; its horizontal
    # length over its length is the cosine of that angle (definition).
    from scipy.spatial.transform import Rotation

    from ethoscribe.features.motion import _pair_flatness

    angles = np.deg2rad([0.0, 30.0, 60.0, 89.0])
    # the unit x vector tilted up towards z
    tips = Rotation.from_euler("y", -angles[:, None]).apply([1.0, 0.0, 0.0])
    points = np.stack([np.zeros((4, 3)), tips], axis=1)  # 4 frames of one pair
    flat = [_pair_flatness(points[f : f + 1], "z")[0, 1] for f in range(4)]
    np.testing.assert_allclose(flat, np.cos(angles), atol=1e-12)


def test_an_upright_body_takes_its_heading_from_a_pair_that_lies_flat():
    sessions, turns = zip(*(upright_walker(seed) for seed in (1, 2)), strict=True)
    pipe = FeaturePipeline().fit(list(sessions))
    # the spine points along travel when running (leaning) but stands upright at rest
    assert pipe.axis_ in {("ankle_left", "toe_left"), ("ankle_right", "toe_right")}
    assert pipe.axis_details_["upright_pairs_left_out"] > 0
    assert "standing upright on most frames left out" in pipe.axis_report_
    # turning on the spot is seen: the turning speed follows the true one at rest (inside
    # the spells), where the spine's heading is noise
    i = np.arange(sessions[0].n_frames)
    rest = ((i // 120) % 2 == 1) & (i % 120 > 15) & (i % 120 < 105)
    for axis, low, high in [(None, 0.5, 1.0), (("pelvis", "head"), -0.2, 0.2)]:
        fitted = pipe if axis is None else FeaturePipeline(axis=axis).fit(list(sessions))
        fs = fitted.transform(sessions[0])[0]
        col = fs.values[:, fitted.columns_.index("log_turning_speed_rad_s")]
        assert low < np.corrcoef(col[rest], turns[0][rest])[0, 1] < high
