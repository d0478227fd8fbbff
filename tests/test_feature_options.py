"""Feature pipeline options: band amplitudes chosen for the frame rate, windowed (phase-free)
posture and speeds, and 3-D height kept apart from the shape. Checked against scipy.signal,
numpy and textbook identities on invented animals; seeds are fixed in each call."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import signal as sps

from ethoscribe.errors import InputError
from ethoscribe.features import FeaturePipeline
from ethoscribe.pose import PoseTracks

NAMES = ["tail_base", "mid", "neck", "nose", "ear_left", "ear_right"]
BODY = np.array([[-4.0, 0.0], [0.0, 0.0], [2.5, 0.0], [4.5, 0.0], [3.0, 0.8], [3.0, -0.8]])
SWAY = np.array([0.5, 1.0, 0.7, 0.7])  # sideways amplitude of neck, nose and ears per unit sway


def swaying(freq: float, fps: float, seed: int, session: str = "s", n_s: float = 60.0):
    """Invented still animal whose head sways sideways (0.8 units) at ``freq`` Hz."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(n_s * fps)) / fps
    coords = np.repeat(BODY[None, None], len(t), 0).copy()
    sway = 0.8 * np.sin(2 * np.pi * freq * t + rng.uniform(0, 6))
    coords[:, 0, 2:, 1] += sway[:, None] * SWAY
    coords += rng.normal(0, 0.02, coords.shape)
    return PoseTracks(coords, keypoints=NAMES, fps=fps, units="cm", session=session)


def _band_amplitude(pipe, fs, band: str) -> float:
    j = pipe.columns_.index(f"log_posture_band_{band}")
    inner = slice(len(fs.values) // 5, -len(fs.values) // 5)
    return float(np.median(np.exp(fs.values[inner, j]) - pipe.log_offset_[j]))


def test_default_bands_fit_the_frame_rate_at_10_and_120_fps():
    # RMS of a sinusoid of amplitudes a_k: sqrt(sum a_k^2 / 2) (textbook identity).
    rms = 0.8 * np.sqrt(np.sum(SWAY**2) / 2)
    kw = {"origin": "mid", "axis": ("tail_base", "mid"), "n_components": 2, "standardise": False}
    slow = [swaying(2.0, 10.0, 1, "a"), swaying(0.5, 10.0, 2, "b")]
    pipe = FeaturePipeline(**kw)
    with pytest.warns(UserWarning, match=r"at 10 fps .* around 4, 8 Hz .* bands used: 0.5, 1, 2"):
        sets = pipe.fit_transform(slow)
    # 2 Hz band edge 2.83 Hz <= 0.95 * 5 Hz; 4 Hz band edge 5.66 Hz above the Nyquist frequency.
    assert pipe.frequencies_ == (0.5, 1.0, 2.0)
    assert [c for c in pipe.columns_ if "band" in c] == [
        "log_posture_band_0.5hz", "log_posture_band_1hz", "log_posture_band_2hz"
    ]  # fmt: skip
    assert _band_amplitude(pipe, sets[0], "2hz") == pytest.approx(rms, rel=0.1)
    assert _band_amplitude(pipe, sets[0], "0.5hz") < 0.2 * rms
    assert _band_amplitude(pipe, sets[1], "0.5hz") == pytest.approx(rms, rel=0.1)
    with pytest.raises(InputError, match=r"session 'a'.*Nyquist"):  # a given list is strict
        FeaturePipeline(frequencies=(0.5, 4.0), **kw).fit(slow[:1])
    fast = FeaturePipeline(**kw)
    sets = fast.fit_transform([swaying(8.0, 120.0, 3, n_s=20.0)])  # no warning: all bands fit
    assert fast.frequencies_ == (0.5, 1.0, 2.0, 4.0, 8.0)
    assert _band_amplitude(fast, sets[0], "8hz") == pytest.approx(rms, rel=0.1)
    assert _band_amplitude(fast, sets[0], "2hz") < 0.2 * rms
    # The fitted bands are fixed: a session too slow for them is refused, naming why.
    with pytest.raises(InputError, match=r"chosen for the frame rate.*Nyquist"):
        fast.transform(slow[0])
    meta, arrays = pipe.to_state()
    meta = json.loads(json.dumps(meta))
    assert (
        meta["fitted"]["frequencies_"] == [0.5, 1.0, 2.0] and meta["params"]["frequencies"] is None
    )
    loaded = FeaturePipeline.from_state(meta, arrays)
    assert loaded.frequencies_ == pipe.frequencies_
    np.testing.assert_array_equal(loaded.transform(slow[0])[0].values, sets_values(pipe, slow[0]))


def sets_values(pipe, tracks):
    return pipe.transform(tracks)[0].values


def test_windowed_posture_is_scipys_low_pass_of_the_components():
    # Reference: scipy.signal butter(2, 0.443 / w) + sosfiltfilt of the instantaneous column.
    tracks = swaying(3.0, 30.0, 4, n_s=40.0)
    kw = {"origin": "mid", "axis": ("tail_base", "mid"), "n_components": 2, "standardise": False}
    plain = FeaturePipeline(**kw).fit([tracks])
    windowed = FeaturePipeline(posture_window_s=1.0, speed_window_s=1.0, **kw).fit([tracks])
    assert windowed.columns_[:3] == (
        "posture_pc1_mean_1s", "posture_pc2_mean_1s", "log_centroid_speed_cm_s_mean_1s"
    )  # fmt: skip
    x = plain.transform(tracks)[0].values[:, 0]
    y = windowed.transform(tracks)[0].values[:, 0]
    sos = sps.butter(2, 0.443 / 1.0, "lowpass", fs=30.0, output="sos")
    expected = sps.sosfiltfilt(sos, x, padlen=min(len(x) - 1, int(2 * 30 / 0.443)))
    np.testing.assert_allclose(y, expected, atol=1e-9)
    # The sway (3 Hz) is gone from the windowed posture: the phases share one posture.
    inner = slice(60, -60)
    assert y[inner].std() < 0.02 * x[inner].std()
    # Speeds: the posture speed rises and falls twice per cycle; its windowed mean is level.
    j = plain.columns_.index("log_posture_speed_cm_s")
    k = windowed.columns_.index("log_posture_speed_cm_s_mean_1s")
    raw, level = plain.transform(tracks)[0].values[inner, j], windowed.transform(tracks)[0]
    assert level.values[inner, k].std() < 0.1 * raw.std()


def test_band_window_averages_the_band_power_as_scipys_butterworth():
    tracks = swaying(3.0, 30.0, 4, n_s=40.0)
    kw = {"origin": "mid", "axis": ("tail_base", "mid"), "n_components": 2, "standardise": False}
    plain = FeaturePipeline(**kw).fit([tracks])
    windowed = FeaturePipeline(band_window_s=2.0, **kw).fit([tracks])
    assert windowed.columns_[-1].endswith("_mean_2s") and "_band_" in windowed.columns_[-1]
    j = len(plain.columns_) - 1
    col, wcol = plain.transform(tracks)[0].values[:, j], windowed.transform(tracks)[0].values[:, j]
    # undo log(sqrt(power) + offset) of each pipeline: the band power before and after
    power = (np.exp(col) - plain.log_offset_[j]) ** 2
    got = (np.exp(wcol) - windowed.log_offset_[j]) ** 2
    sos = sps.butter(2, 0.443 / 2.0, "lowpass", fs=30.0, output="sos")  # scipy reference
    pad = min(len(power) - 1, int(2 * 30 / (0.443 / 2.0)))  # as the posture window test
    expected = np.maximum(sps.sosfiltfilt(sos, power, padlen=pad), 0)
    np.testing.assert_allclose(got, expected, rtol=1e-6, atol=1e-9)


@pytest.mark.parametrize(
    "options",
    [
        {"posture_window_s": 0.5, "speed_window_s": 2.0},
        {"band_window_s": 2.0},
        {"vertical": "separate"},
        {"scale_by_size": True},
    ],
)
def test_windowed_and_3d_features_stream_like_the_causal_transform(options):
    from tests.test_features import walking

    tracks = walking(n=300, animals=2, seed=13, dims=3)
    coords = tracks.coords.copy()
    coords[100:104, 1, 2] = np.nan
    coords[0:3, 0] = np.nan
    tracks = tracks.replace(coords=coords)
    pipe = FeaturePipeline(causal=True, **options).fit([tracks])
    expected = pipe.transform(tracks)
    stream = pipe.stream(2)
    rows = np.stack([stream.push(frame) for frame in tracks.coords], axis=1)
    for a in range(2):
        np.testing.assert_array_equal(np.isnan(rows[a]), np.isnan(expected[a].values))
        np.testing.assert_allclose(rows[a], expected[a].values, atol=1e-9, equal_nan=True)
    assert expected[0].valid[20:100].all()
    # Causal: a change after frame 200 leaves the features before it untouched.
    later = coords.copy()
    later[200:] += 1.0
    changed = pipe.transform(tracks.replace(coords=later))[0].values
    np.testing.assert_array_equal(changed[:200], expected[0].values[:200])


def rigid_body_raised_and_lowered(
    seed: int = 5, fps: float = 30.0
) -> tuple[PoseTracks, np.ndarray]:
    """Invented rigid 3-D body walking a circle while its height rises and falls slowly."""
    rng = np.random.default_rng(seed)
    t = np.arange(int(60 * fps)) / fps
    height = 5.0 + 3.0 * np.sin(2 * np.pi * 0.2 * t)  # centroid height, cm
    heading = 0.3 * t
    body = np.c_[BODY, [0.0, 0.5, 1.0, 1.5, 1.2, 1.2]]
    body[:, 2] -= body[:, 2].mean()
    c, s = np.cos(heading)[:, None], np.sin(heading)[:, None]
    coords = np.empty((len(t), 1, len(NAMES), 3))
    coords[:, 0, :, 0] = 20 * np.cos(heading)[:, None] + c * body[:, 0] - s * body[:, 1]
    coords[:, 0, :, 1] = 20 * np.sin(heading)[:, None] + s * body[:, 0] + c * body[:, 1]
    coords[:, 0, :, 2] = height[:, None] + body[:, 2]
    coords += rng.normal(0, 0.01, coords.shape)
    tracks = PoseTracks(coords, keypoints=NAMES, fps=fps, units="cm", session="rigid")
    return tracks, height


def test_3d_height_is_its_own_feature_and_postures_come_from_the_shape():
    tracks, height = rigid_body_raised_and_lowered()
    kw = {"axis": ("tail_base", "nose"), "standardise": False, "n_components": 3}
    old = FeaturePipeline(vertical="posture", **kw).fit([tracks])
    assert old.explained_variance_ratio_[0] > 0.99  # heights in the posture: PC1 is the height
    pipe = FeaturePipeline(**kw).fit([tracks])  # vertical="separate", the default
    # A rigid body has no shape change: what is left is the tracking noise (0.01 cm per
    # coordinate, 18 coordinates: total variance 18e-4), against the height's variance 4.5.
    assert pipe.explained_variance_.sum() < 18e-4 * 1.2
    fs = pipe.transform(tracks)[0]
    col = {c: i for i, c in enumerate(pipe.columns_)}
    centroid = tracks.coords[:, 0, :, 2].mean(1)
    floor = np.quantile(centroid, 0.01)  # numpy.quantile: the 1 % quantile is the floor
    assert pipe.height_floor_ == pytest.approx(floor, rel=1e-12)
    above = fs.values[:, col["height_cm"]]
    np.testing.assert_allclose(above, centroid - floor, atol=1e-9)
    assert np.corrcoef(above, height)[0, 1] > 0.999  # the height carries the raising
    # Vertical speed |d height / dt| = 3 * 2 pi 0.2 |cos| (analytic); horizontal speed: the
    # centroid (1.5 cm ahead of the body's origin) circles at radius 21.5 at 0.3 rad/s.
    j, k = col["log_vertical_speed_cm_s"], col["log_centroid_speed_cm_s"]
    vertical = np.exp(fs.values[:, j]) - pipe.log_offset_[j]
    t = np.arange(len(height)) / 30.0
    truth = np.abs(3.0 * 2 * np.pi * 0.2 * np.cos(2 * np.pi * 0.2 * t))
    # (tracking noise through a 3-frame derivative: about 0.1 cm/s per frame)
    assert np.median(np.abs(vertical - truth)[5:-5]) < 0.1
    horizontal = np.exp(fs.values[5:-5, k]) - pipe.log_offset_[k]
    assert np.median(np.abs(horizontal - 21.5 * 0.3)) < 0.1
    # The features do not change when the arena is turned about the vertical and moved.
    turned = tracks.coords.copy()
    a = 1.1
    turned[..., :2] = tracks.coords[..., :2] @ np.array(
        [[np.cos(a), np.sin(a)], [-np.sin(a), np.cos(a)]]
    )
    turned += np.array([3.0, -2.0, 0.0])
    again = pipe.transform(tracks.replace(coords=turned))[0]
    np.testing.assert_allclose(again.values, fs.values, atol=1e-7)


def test_options_are_checked_and_saved(tmp_path):
    tracks, _ = rigid_body_raised_and_lowered(fps=30.0)
    options = {"vertical": "separate", "posture_window_s": 0.5, "speed_window_s": 0.5}
    pipe = FeaturePipeline(causal=True, **options).fit([tracks])
    meta, arrays = pipe.to_state()
    np.savez(tmp_path / "f.npz", **arrays)
    with np.load(tmp_path / "f.npz", allow_pickle=False) as saved:
        loaded = FeaturePipeline.from_state(json.loads(json.dumps(meta)), dict(saved))
    assert loaded.get_params() == pipe.get_params() and loaded.height_floor_ == pipe.height_floor_
    np.testing.assert_array_equal(
        loaded.transform(tracks)[0].values, pipe.transform(tracks)[0].values
    )
    # A state saved before these options existed computes what it computed then.
    old = FeaturePipeline(vertical="posture").fit([tracks])
    meta, arrays = old.to_state()
    for k in ("posture_window_s", "speed_window_s", "vertical"):
        del meta["params"][k]
    del meta["fitted"]["frequencies_"], meta["fitted"]["height_floor_"]
    meta["params"]["frequencies"] = [0.5, 1.0, 2.0, 4.0, 8.0]
    loaded = FeaturePipeline.from_state(meta, arrays)
    assert loaded.vertical == "posture" and loaded.posture_window_s is None
    np.testing.assert_array_equal(
        loaded.transform(tracks)[0].values, old.transform(tracks)[0].values
    )
    meta, arrays = pipe.to_state()
    meta["fitted"]["height_floor_"] = None
    with pytest.raises(InputError, match=r"lacks \['height_floor_'\]"):
        FeaturePipeline.from_state(meta, arrays)
    for bad, match in (
        ({"vertical": "up"}, "vertical must be"),
        ({"posture_window_s": 0}, "posture_window_s"),
        ({"speed_window_s": "1s"}, "speed_window_s"),
        ({"frequencies": [1.0, -2.0]}, "frequencies must be"),
    ):
        with pytest.raises(InputError, match=match):
            FeaturePipeline(**bad).fit([tracks])
    with pytest.raises(InputError, match=r"posture_window_s=0\.01 is shorter than two frames"):
        FeaturePipeline(posture_window_s=0.01).fit([tracks])


def test_animals_of_two_sizes_share_postures_when_scaled_by_size():
    # The same invented animal, and a copy 1.5 times larger (scaled about each frame's
    # centroid): scaled by size, their postures are the same; unscaled they differ by 1.5x.
    from tests.test_features import walking

    small = walking(n=400, seed=31, session="small")
    centre = small.coords.mean(axis=2, keepdims=True)
    large = small.replace(coords=centre + 1.5 * (small.coords - centre), session="large")
    kw = {"axis": ("tail_base", "nose"), "standardise": False, "n_components": 3}
    pipe = FeaturePipeline(scale_by_size=True, **kw).fit([small, large])
    # Typical size: the median of the two animals' sizes (RMS keypoint distance from the
    # centroid, numpy), the larger one 1.5 times the smaller.
    r = np.sqrt(((small.coords[:, 0] - centre[:, 0]) ** 2).sum(-1).mean(-1))
    assert pipe.body_size_ == pytest.approx(np.median([np.median(r), 1.5 * np.median(r)]))
    a, b = pipe.transform(small)[0].values, pipe.transform(large)[0].values
    np.testing.assert_allclose(a[:, :3], b[:, :3], atol=1e-9)
    plain = FeaturePipeline(**kw).fit([small, large])
    pa, pb = plain.transform(small)[0].values, plain.transform(large)[0].values
    assert not np.allclose(pa[:, :3], pb[:, :3], atol=0.1)
