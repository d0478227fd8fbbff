"""Derivatives, band power, rolling variability and gap filling, checked against published
Savitzky-Golay tables, analytic derivatives, scipy.signal and pandas. Seeds are fixed per test."""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from scipy import signal as sps

from ethoscribe.errors import InputError
from ethoscribe.filters import (
    CausalBandPower,
    CausalLowPass,
    TrailingDerivative,
    TrailingStd,
    band_power,
    derivative,
    fill_gaps,
    lowpass,
    rolling_std,
)


def test_derivative_taps_are_the_savitzky_golay_table():
    # Savitzky & Golay (1964) first-derivative tables: 5 points (-2, -1, 0, 1, 2) / 10,
    # 7 points (-3..3) / 28 (EXTERNAL-CHECKS, via scipy savgol_coeffs). A unit impulse at frame
    # 10 returns the taps in reverse order on the frames around it.
    impulse = np.zeros(30)
    impulse[10] = 1.0
    five = derivative(impulse, fps=1.0, window_s=5)
    np.testing.assert_allclose(five[8:13], np.array([2, 1, 0, -1, -2]) / 10, atol=1e-15)
    seven = derivative(impulse, fps=1.0, window_s=7)
    np.testing.assert_allclose(seven[7:14], np.arange(3, -4, -1) / 28, atol=1e-15)


def test_derivative_matches_scipy_savgol_filter():
    rng = np.random.default_rng(0)  # seed 0
    x = rng.normal(size=(300, 4))
    for frames in (3, 5, 9, 15):
        ours = derivative(x, fps=30.0, window_s=frames / 30)
        ref = sps.savgol_filter(x, frames, 2, deriv=1, delta=1 / 30, axis=0)  # mode "interp"
        np.testing.assert_allclose(ours, ref, atol=1e-10)


def test_derivative_of_sine_is_cosine():
    fps, f = 100.0, 1.5
    t = np.arange(1000) / fps
    ours = derivative(np.sin(2 * np.pi * f * t), fps, window_s=0.05)  # 5 frames
    analytic = 2 * np.pi * f * np.cos(2 * np.pi * f * t)
    # The 5-point taps (-2..2)/10 answer a sinusoid with gain (sin q + 2 sin 2q) / (5 q),
    # q = 2 pi f / fps (from the taps; 0.995 here): exact in the interior.
    q = 2 * np.pi * f / fps
    gain = (np.sin(q) + 2 * np.sin(2 * q)) / (5 * q)
    np.testing.assert_allclose(ours[2:-2], gain * analytic[2:-2], atol=1e-9)
    np.testing.assert_allclose(ours, analytic, atol=0.015 * 2 * np.pi * f)  # edges: 1.5%


def test_causal_derivative_is_the_trailing_fit():
    fps = 50.0
    t = np.arange(400) / fps
    line = derivative(3.0 * t - 1.0, fps, window_s=0.1, causal=True)
    assert np.isnan(line[:4]).all()
    np.testing.assert_allclose(line[4:], 3.0, atol=1e-10)
    x = np.sin(2 * np.pi * t)
    ours = derivative(x, fps, window_s=0.1, causal=True)
    # scipy savgol_coeffs evaluated at the window's last point (pos = window - 1) is the same
    # trailing linear least-squares slope.
    taps = sps.savgol_coeffs(5, 1, deriv=1, delta=1 / fps, pos=4, use="conv")
    ref = np.convolve(x, taps, mode="full")[4 : len(x)]
    np.testing.assert_allclose(ours[4:], ref, atol=1e-10)


def test_derivative_bridges_gaps_and_masks_them_again():
    fps = 30.0
    x = 2.0 * np.arange(100) / fps
    x[40:45] = np.nan
    for causal in (False, True):
        out = derivative(x, fps, causal=causal)
        assert np.isnan(out[40:45]).all()
        good = np.isfinite(out)
        assert good.sum() >= 90
        if not causal:
            np.testing.assert_allclose(out[good], 2.0, atol=1e-9)  # interpolation keeps a line


def test_fill_gaps_matches_numpy_interp_and_pandas_ffill():
    rng = np.random.default_rng(1)  # seed 1
    x = rng.normal(size=(60, 3))
    x[rng.random((60, 3)) < 0.3] = np.nan
    x[:4, 0] = np.nan
    filled = fill_gaps(x)
    for c in range(3):
        ok = np.isfinite(x[:, c])
        ref = np.interp(np.arange(60), np.flatnonzero(ok), x[ok, c])  # numpy.interp
        np.testing.assert_allclose(filled[:, c], ref, atol=1e-14)
    ref = np.array(pd.DataFrame(x).ffill())  # pandas ffill
    np.testing.assert_array_equal(fill_gaps(x, causal=True), ref)


def test_band_power_of_a_sinusoid_peaks_in_its_band_like_welch():
    fps, amp = 30.0, 1.5
    t = np.arange(int(120 * fps)) / fps
    rng = np.random.default_rng(2)  # seed 2
    x = amp * np.sin(2 * np.pi * 2.0 * t) + rng.normal(0, 0.05, len(t))
    freqs = [0.5, 1.0, 2.0, 4.0, 8.0]
    mean_power = band_power(x, fps, freqs)[300:-300, 0].mean(0)
    f, psd = sps.welch(x, fs=fps, nperseg=1024)  # scipy.signal.welch as reference
    welch = [psd[(f >= c / np.sqrt(2)) & (f < c * np.sqrt(2))].sum() * (f[1] - f[0]) for c in freqs]
    assert np.argmax(mean_power) == np.argmax(welch) == 2
    assert mean_power[2] == pytest.approx(welch[2], rel=0.05)
    assert mean_power[2] == pytest.approx(amp**2 / 2, rel=0.05)  # Parseval: power of A sin = A^2/2
    causal = band_power(x, fps, freqs, causal=True)[600:, 0].mean(0)
    assert np.argmax(causal) == 2
    assert causal[2] == pytest.approx(amp**2 / 2, rel=0.05)


def test_summed_band_power_is_the_power_of_the_vector_signal():
    # Two sinusoids in two channels: the summed power is A1^2/2 + A2^2/2 (Parseval) and equals
    # the sum of the per-channel powers (the smoothing is linear) offline and causally.
    fps = 30.0
    t = np.arange(int(60 * fps)) / fps
    x = np.c_[1.5 * np.sin(2 * np.pi * 2.0 * t), 0.5 * np.sin(2 * np.pi * 2.0 * t + 1.0)]
    x[400:405, 1] = np.nan
    for causal in (False, True):
        each = band_power(x, fps, [1.0, 2.0, 4.0], causal=causal)
        total = band_power(x, fps, [1.0, 2.0, 4.0], causal=causal, sum_channels=True)
        assert total.shape == (len(t), 1, 3)
        ok = np.isfinite(x).all(1)
        # equal but where the smoother undershoots zero (clipped per channel or in the sum)
        np.testing.assert_allclose(total[ok, 0], each[ok].sum(1), rtol=1e-9, atol=1e-3)
        assert np.isnan(total[~ok]).all()
        inner = total[600:-300, 0, 1].mean()
        assert inner == pytest.approx((1.5**2 + 0.5**2) / 2, rel=0.05)  # Parseval


def test_causal_band_power_uses_only_the_past():
    rng = np.random.default_rng(3)  # seed 3
    x = rng.normal(size=(500, 2))
    changed = x.copy()
    changed[300:] = rng.normal(size=(200, 2)) * 10
    a = band_power(x, 30.0, [1.0, 4.0], causal=True)
    b = band_power(changed, 30.0, [1.0, 4.0], causal=True)
    np.testing.assert_array_equal(a[:300], b[:300])
    assert not np.allclose(a[300:], b[300:])


def test_rolling_std_matches_pandas():
    rng = np.random.default_rng(4)  # seed 4
    x = rng.normal(size=(400, 3)) + 50.0
    x[100:110, 1] = np.nan
    for window in (4, 15):
        minimum = (window + 1) // 2
        trailing = np.array(pd.DataFrame(x).rolling(window, min_periods=minimum).std(ddof=0))
        trailing[np.isnan(x)] = np.nan
        # pandas rolling std (ddof=0) as reference
        np.testing.assert_allclose(rolling_std(x, window, causal=True), trailing, atol=1e-9)
    centred = pd.DataFrame(x).rolling(15, min_periods=8, center=True).std(ddof=0)
    centred = np.array(centred)
    centred[np.isnan(x)] = np.nan
    np.testing.assert_allclose(rolling_std(x, 15), centred, atol=1e-9)  # pandas, centred


@pytest.mark.parametrize("sizes", [[1] * 40, [7, 1, 13, 19], [40]])
def test_online_filters_give_the_same_numbers_in_any_chunks(sizes):
    rng = np.random.default_rng(5)  # seed 5
    x = rng.normal(size=(40, 2))
    x[5:8, 0] = np.nan
    x[:3, 1] = np.nan
    whole = [
        TrailingDerivative(2, 30.0, 0.2).process(x),
        CausalBandPower(2, 30.0, [1.0, 4.0]).process(x),
        TrailingStd(2, 6).process(x),
        CausalLowPass(2, 30.0, 2.0).process(x),
    ]
    parts = [TrailingDerivative(2, 30.0, 0.2), CausalBandPower(2, 30.0, [1.0, 4.0])]
    parts += [TrailingStd(2, 6), CausalLowPass(2, 30.0, 2.0)]
    bounds = np.cumsum([0, *sizes])
    for ref, op in zip(whole, parts, strict=True):
        out = np.concatenate([op.process(x[a:b]) for a, b in itertools.pairwise(bounds)])
        np.testing.assert_allclose(out, ref, atol=1e-12)
        np.testing.assert_array_equal(np.isnan(out), np.isnan(ref))


def test_lowpass_is_scipys_butterworth_both_ways():
    # Reference: scipy.signal butter + sosfiltfilt (offline) and sosfilt started at rest on the
    # first value, sosfilt_zi * x[0] (causal); gaps are bridged and masked again.
    rng = np.random.default_rng(6)  # seed 6
    x = np.cumsum(rng.normal(size=(500, 3)), axis=0)
    sos = sps.butter(2, 1.5, "lowpass", fs=30.0, output="sos")
    offline = sps.sosfiltfilt(sos, x, axis=0, padlen=min(499, max(15, int(2 * 30 / 1.5))))
    np.testing.assert_allclose(lowpass(x, 30.0, 1.5), offline, atol=1e-10)
    zi = sps.sosfilt_zi(sos)[:, :, None] * x[0]
    causal = sps.sosfilt(sos, x, axis=0, zi=zi)[0]
    np.testing.assert_allclose(lowpass(x, 30.0, 1.5, causal=True), causal, atol=1e-10)
    gappy = x.copy()
    gappy[100:110, 1] = np.nan
    out = lowpass(gappy, 30.0, 1.5)
    assert np.isnan(out[100:110, 1]).all() and np.isfinite(np.delete(out, slice(100, 110), 0)).all()
    with pytest.raises(InputError, match="Nyquist"):
        lowpass(x, 10.0, 5.0)


def test_bad_parameters_raise_input_errors():
    with pytest.raises(InputError, match="Nyquist"):
        band_power(np.zeros(100), 10.0, [4.0])
    with pytest.raises(InputError, match="fps"):
        derivative(np.zeros(10), fps=0)
    with pytest.raises(InputError, match="window_s"):
        derivative(np.zeros(10), fps=30, window_s=-1)
    with pytest.raises(InputError, match="polyorder"):
        derivative(np.zeros(10), fps=30, window_s=0.1, polyorder=5)
    with pytest.raises(InputError, match="at least 1 frame"):
        rolling_std(np.zeros(10), 0)
