"""Levels, fades, DC blocking, high-pass, the peak cap; noise colour and band; tones and bursts."""

import math

import numpy as np
import pytest
from scipy.signal import butter, sosfreqz, welch

from arrayplan.errors import InputError
from arrayplan.signals import (amplitude_from_dbfs, block_dc, check_peak, condition, highpass, peak_dbfs,
                               raised_cosine_fade, rms_dbfs, scale_to_level)
from arrayplan.signals.noise import band_limited_noise
from arrayplan.signals.tones import stepped_tones, tone_bursts

FS = 48000


def test_dbfs_of_a_full_scale_sine():
    # RMS of a sine is peak/sqrt(2): -3.01 dBFS RMS at 0 dBFS peak (common practice, no source).
    t = np.arange(FS) / FS
    x = np.sin(2 * np.pi * 1000 * t)
    assert peak_dbfs(x) == pytest.approx(0.0, abs=1e-9)
    assert rms_dbfs(x) == pytest.approx(-3.0103, abs=1e-3)
    assert amplitude_from_dbfs(-6.0206) == pytest.approx(0.5, abs=1e-5)
    assert peak_dbfs(np.zeros(10)) == -math.inf


def test_raised_cosine_fades_shape_and_ends():
    x = np.ones((1000, 2))
    y = raised_cosine_fade(x, 1000.0, 0.1, 0.05)
    n = np.arange(100)
    np.testing.assert_allclose(y[:100, 0], 0.5 * (1 - np.cos(np.pi * n / 100)))  # raised cosine (Hann half)
    assert y[0, 1] == 0.0 and y[-1, 0] == 0.0
    np.testing.assert_array_equal(y[100:950], 1.0)
    np.testing.assert_allclose(y[-50:, 1], (0.5 * (1 - np.cos(np.pi * np.arange(50) / 50)))[::-1])
    assert np.all(x == 1.0)  # input untouched


def test_fades_are_never_skipped():
    with pytest.raises(InputError, match="positive"):
        raised_cosine_fade(np.ones(100), 1000.0, 0.0, 0.01)
    with pytest.raises(InputError, match="longer than the signal"):
        raised_cosine_fade(np.ones(100), 1000.0, 0.08, 0.08)


def test_block_dc_removes_the_mean_and_keeps_the_ends():
    rng = np.random.default_rng(3)
    x = raised_cosine_fade(0.3 + 0.1 * rng.standard_normal((4000, 3)), FS, 0.01, 0.01)
    y = block_dc(x)
    assert np.all(np.abs(y.mean(axis=0)) < 1e-15)
    np.testing.assert_array_equal(y[0], 0.0)
    np.testing.assert_allclose(y[-1], 0.0, atol=1e-15)


def test_highpass_is_3db_down_at_its_cutoff():
    # Butterworth: |H| = 1/sqrt(2) at the cutoff (scipy.signal.butter / sosfreqz as reference).
    sos = butter(2, 200.0, btype="highpass", fs=FS, output="sos")
    _, h = sosfreqz(sos, worN=[200.0, 50.0], fs=FS)
    assert 20 * np.log10(abs(h[0])) == pytest.approx(-3.0103, abs=0.01)
    t = np.arange(2 * FS) / FS
    for f, want in ((50.0, 20 * np.log10(abs(h[1]))), (5000.0, 0.0)):
        y = highpass(np.sin(2 * np.pi * f * t), FS, 200.0, 2)
        got = 20 * np.log10(np.sqrt(2) * np.sqrt(np.mean(y[FS:] ** 2)))
        assert got == pytest.approx(want, abs=0.05)
    with pytest.raises(InputError, match="outside"):
        highpass(np.zeros(10), FS, 30000.0)


def test_condition_fades_and_blocks_dc():
    x = 0.5 + np.sin(2 * np.pi * 300 * np.arange(FS) / FS)
    y = condition(x, FS, fade_in_s=0.01, fade_out_s=0.01, highpass_hz=40.0)
    assert y[0] == 0.0 and abs(y[-1]) < 1e-12
    assert abs(np.mean(y)) < 1e-15


def test_level_scaling_and_cap():
    x = np.sin(2 * np.pi * 100 * np.arange(4800) / FS)
    y = scale_to_level(x, peak_dbfs=-12.0)
    assert peak_dbfs(y) == pytest.approx(-12.0, abs=1e-9)
    assert check_peak(y) == pytest.approx(-12.0, abs=1e-9)
    y = scale_to_level(x, rms_dbfs=-20.0)
    assert rms_dbfs(y) == pytest.approx(-20.0, abs=1e-9)
    with pytest.raises(InputError, match="above the cap"):
        check_peak(scale_to_level(x, peak_dbfs=-6.0))
    assert check_peak(scale_to_level(x, peak_dbfs=-6.0), allow_above_cap=True) == pytest.approx(-6.0)
    with pytest.raises(InputError, match="would clip"):
        check_peak(scale_to_level(x, peak_dbfs=0.5), allow_above_cap=True)
    with pytest.raises(InputError, match="would clip"):
        check_peak(scale_to_level(x, rms_dbfs=-1.0), allow_above_cap=True)  # sine: peak = rms + 3 dB


@pytest.mark.parametrize("seed", [1, 2])
def test_pink_noise_falls_3db_per_octave(seed):
    # Pink noise: power density ~ 1/f, 10 log10(2) = 3.01 dB per octave (common practice, no source);
    # spectrum estimated with scipy.signal.welch; tolerance 0.1 dB per octave.
    x = band_limited_noise("pink", 4.0, FS, 20.0, 20000.0, seed=seed)
    f, p = welch(x, fs=FS, nperseg=8192)
    band = (f >= 100) & (f <= 10000)
    slope = np.polyfit(np.log2(f[band]), 10 * np.log10(p[band]), 1)[0]
    assert slope == pytest.approx(-10 * math.log10(2), abs=0.1)


def test_white_noise_is_flat_and_both_are_band_limited():
    for colour, want in (("white", 0.0), ("pink", -3.0103)):
        x = band_limited_noise(colour, 2.0, FS, 500.0, 4000.0, seed=7)
        assert np.max(np.abs(x)) == pytest.approx(1.0)
        spec = np.abs(np.fft.rfft(x)) ** 2
        f = np.fft.rfftfreq(x.size, 1 / FS)
        outside = spec[(f < 490) | (f > 4010)].sum() / spec.sum()
        assert outside < 1e-20
        fw, p = welch(x, fs=FS, nperseg=4096)
        band = (fw >= 700) & (fw <= 3500)
        slope = np.polyfit(np.log2(fw[band]), 10 * np.log10(p[band]), 1)[0]
        assert slope == pytest.approx(want, abs=0.25)


def test_noise_band_checks():
    with pytest.raises(InputError, match="outside"):
        band_limited_noise("pink", 1.0, FS, 20.0, 30000.0)
    with pytest.raises(InputError, match="too short"):
        band_limited_noise("pink", 0.1, FS, 20.0, 20000.0)
    with pytest.raises(InputError, match="colour"):
        band_limited_noise("brown", 1.0, FS, 20.0, 20000.0)
    a = band_limited_noise("white", 1.0, FS, 20.0, 20000.0, seed=5)
    np.testing.assert_array_equal(a, band_limited_noise("white", 1.0, FS, 20.0, 20000.0, seed=5))


def test_stepped_tones_frequencies_and_layout():
    freqs = [250.0, 1000.0, 3150.0]
    x = stepped_tones(freqs, 0.5, 0.25, FS, 0.01)
    n_tone, n_gap = 24000, 12000
    assert x.size == 3 * n_tone + 2 * n_gap
    assert x[0] == 0.0 and x[-1] == 0.0
    for i, f in enumerate(freqs):
        seg = x[i * (n_tone + n_gap):i * (n_tone + n_gap) + n_tone]
        spec = np.abs(np.fft.rfft(seg * np.hanning(seg.size), 8 * seg.size))
        peak_f = np.argmax(spec) * FS / (8 * seg.size)
        assert peak_f == pytest.approx(f, abs=1.0)
        gap = x[i * (n_tone + n_gap) + n_tone:(i + 1) * (n_tone + n_gap)]
        assert not np.any(gap)
    with pytest.raises(InputError, match="outside"):
        stepped_tones([25000.0], 0.5, 0.1, FS, 0.01)
    with pytest.raises(InputError, match="periods"):
        stepped_tones([20.0], 0.1, 0.1, FS, 0.01)


def test_tone_bursts_layout():
    x = tone_bursts(1000.0, 10, 0.05, 4, FS, fade_cycles=2)
    n_burst, n_period = 480, 2400
    assert x.size == 3 * n_period + n_burst
    for k in range(4):
        seg = x[k * n_period:k * n_period + n_burst]
        assert seg[0] == 0.0 and np.max(np.abs(seg)) == pytest.approx(1.0, abs=1e-3)
        if k < 3:
            assert not np.any(x[k * n_period + n_burst:(k + 1) * n_period])
    with pytest.raises(InputError, match="shorter than a burst"):
        tone_bursts(100.0, 10, 0.05, 4, FS)
    with pytest.raises(InputError, match="fades"):
        tone_bursts(1000.0, 3, 0.05, 4, FS, fade_cycles=2)
