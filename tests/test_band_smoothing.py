"""Band power smoothed by a critically damped low-pass (``band_smoothing="critically_damped"``):
never negative, so never clipped to zero after a burst ends. Checked against scipy.signal
(sosfreqz, sosfilt, welch) and textbook identities; seeds are fixed in each call."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal as sps

from ethoscribe.errors import InputError
from ethoscribe.features import FeaturePipeline
from ethoscribe.filters import band_power, critically_damped_lowpass


@pytest.mark.parametrize(("cutoff", "fps"), [(0.25, 25.0), (1.0, 30.0), (2.0, 120.0)])
def test_critically_damped_lowpass_is_two_equal_poles_3_db_down_at_the_cutoff(cutoff, fps):
    sos = critically_damped_lowpass(cutoff, fps)
    # Impulse response of two equal first-order stages (1 - a) a^n convolved: (1 - a)^2 (n + 1)
    # a^n (textbook identity), against scipy.signal.sosfilt; positive everywhere.
    a = np.exp(-2 * np.pi * cutoff / np.sqrt(np.sqrt(2) - 1) / fps)
    n = np.arange(2000)
    impulse = sps.sosfilt(sos, np.r_[1.0, np.zeros(len(n) - 1)])
    np.testing.assert_allclose(impulse, (1 - a) ** 2 * (n + 1) * a**n, rtol=1e-9, atol=1e-300)
    assert impulse.min() >= 0
    # Gain 1 at 0 Hz and 3 dB down at the cut-off (scipy.signal.sosfreqz); the matched
    # z-transform is close to the analog response well below the Nyquist frequency.
    _, h = sps.sosfreqz(sos, worN=[0.0, cutoff], fs=fps)
    assert abs(h[0]) == pytest.approx(1.0, rel=1e-12)
    assert abs(h[1]) == pytest.approx(2**-0.5, rel=0.02)


def test_critically_damped_band_power_is_never_zero_after_a_burst():
    # A 2-Hz burst of 10 s, then stillness with a little noise: the Butterworth smoother
    # undershoots after the burst and the power is clipped to exactly 0 there; the critically
    # damped one decays to the noise's own power without reaching 0.
    fps = 30.0
    rng = np.random.default_rng(4)  # seed 4
    t = np.arange(int(40 * fps)) / fps
    x = np.where((t >= 10) & (t < 20), 2.0 * np.sin(2 * np.pi * 2.0 * t), 0.0)
    x = x + rng.normal(0, 0.01, len(t))
    freqs = [0.5, 2.0]
    inner = slice(int(2 * fps), -int(2 * fps))  # the padding at the ends is another matter
    old = band_power(x, fps, freqs)[inner, 0]
    new = band_power(x, fps, freqs, smoothing="critically_damped")[inner, 0]
    assert (old == 0).any()  # the defect this option removes
    assert (new > 0).all()
    # Within the burst both give the sinusoid's power A^2 / 2 (Parseval) in its band.
    burst = slice(int(13 * fps) - inner.start, int(17 * fps) - inner.start)
    assert new[burst, 1].mean() == pytest.approx(2.0**2 / 2, rel=0.05)
    assert old[burst, 1].mean() == pytest.approx(2.0**2 / 2, rel=0.05)
    # The causal filter is the same recursion (scipy.signal.sosfilt) and never negative either.
    causal = band_power(x, fps, freqs, causal=True, smoothing="critically_damped")
    assert (causal[inner, 0] > 0).all()


def test_critically_damped_band_power_agrees_with_welch_on_a_sinusoid():
    # As tests/test_filters.py for the Butterworth smoother: scipy.signal.welch as reference.
    fps, amp = 30.0, 1.5
    t = np.arange(int(120 * fps)) / fps
    rng = np.random.default_rng(2)  # seed 2
    x = amp * np.sin(2 * np.pi * 2.0 * t) + rng.normal(0, 0.05, len(t))
    freqs = [0.5, 1.0, 2.0, 4.0, 8.0]
    power = band_power(x, fps, freqs, smoothing="critically_damped")[300:-300, 0].mean(0)
    f, psd = sps.welch(x, fs=fps, nperseg=1024)
    welch = [psd[(f >= c / np.sqrt(2)) & (f < c * np.sqrt(2))].sum() * (f[1] - f[0]) for c in freqs]
    assert np.argmax(power) == np.argmax(welch) == 2
    assert power[2] == pytest.approx(welch[2], rel=0.05)


def test_band_smoothing_streams_like_the_causal_transform_and_is_checked():
    from tests.test_features import walking

    tracks = walking(n=300, animals=2, seed=13, dims=3)
    pipe = FeaturePipeline(causal=True, band_smoothing="critically_damped").fit([tracks])
    expected = pipe.transform(tracks)
    stream = pipe.stream(2)
    rows = np.stack([stream.push(frame) for frame in tracks.coords], axis=1)
    for a in range(2):
        np.testing.assert_allclose(rows[a], expected[a].values, atol=1e-9, equal_nan=True)
    plain = FeaturePipeline(causal=True).fit([tracks]).transform(tracks)[0].values
    bands = [i for i, c in enumerate(pipe.columns_) if "_band_" in c]
    assert not np.allclose(plain[:, bands], expected[0].values[:, bands], equal_nan=True)
    meta, arrays = pipe.to_state()
    loaded = FeaturePipeline.from_state(meta, arrays)
    assert loaded.band_smoothing == "critically_damped"
    np.testing.assert_array_equal(loaded.transform(tracks)[0].values, expected[0].values)
    del meta["params"]["band_smoothing"]  # saved before the option: the Butterworth smoother
    assert FeaturePipeline.from_state(meta, arrays).band_smoothing == "butterworth"
    with pytest.raises(InputError, match="band_smoothing must be one of"):
        FeaturePipeline(band_smoothing="hann").fit([tracks])
