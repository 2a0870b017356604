"""Sweeps and inverse filters, checked against A. Farina's published properties."""

import math

import numpy as np
import pytest
from scipy.signal import fftconvolve, hilbert, welch

from arrayplan.errors import InputError
from arrayplan.signals import (SweepSettings, deconvolve, exponential_inverse_filter, exponential_sweep,
                               harmonic_offset_s, linear_sweep, make_sweep)

FS = 48000


def _sweep(**kw):
    base = dict(f1_hz=50.0, f2_hz=5000.0, duration_s=1.0, sample_rate_hz=FS, pad_before_s=0.05, pad_after_s=0.4)
    base.update(kw)
    return make_sweep(SweepSettings(**base))


def test_exponential_sweep_formula():
    # A. Farina, 108th AES Convention, Paris, 2000: x(t) = sin(2 pi f1 T/ln(f2/f1) (exp(t ln(f2/f1)/T) - 1))
    f1, f2, T = 100.0, 8000.0, 0.5
    x = exponential_sweep(f1, f2, T, FS)
    t = np.arange(x.size) / FS
    ref = np.sin(2 * np.pi * f1 * T / math.log(f2 / f1) * (np.exp(t * math.log(f2 / f1) / T) - 1))
    assert x.size == round(T * FS)
    np.testing.assert_allclose(x, ref, atol=1e-12)
    # Instantaneous frequency (phase derivative) runs from f1 to f2.
    phase = np.unwrap(np.angle(hilbert(x)))
    inst = np.diff(phase) * FS / (2 * np.pi)
    assert inst[2000] == pytest.approx(f1 * math.exp(2000.5 / FS * math.log(f2 / f1) / T), rel=0.02)


def test_linear_sweep_instantaneous_frequency():
    # Linear chirp: instantaneous frequency f1 + (f2 - f1) t / T (common practice, no source).
    x = linear_sweep(200.0, 4000.0, 0.5, FS)
    phase = np.unwrap(np.angle(hilbert(x)))
    inst = np.diff(phase) * FS / (2 * np.pi)
    k = 12000
    assert inst[k] == pytest.approx(200.0 + 3800.0 * (k + 0.5) / FS / 0.5, rel=0.01)


def test_exponential_sweep_spectrum_is_pink():
    # Farina 2000: the exponential sweep's spectrum falls 3 dB per octave.
    x = exponential_sweep(20.0, 20000.0, 4.0, FS)
    f, p = welch(x, fs=FS, nperseg=4096)
    band = (f >= 200) & (f <= 5000)
    slope = np.polyfit(np.log2(f[band]), 10 * np.log10(p[band]), 1)[0]
    assert slope == pytest.approx(-3.01, abs=0.15)


def test_inverse_filter_is_reversed_sweep_times_decaying_exponential():
    # Farina 2000: inverse = time-reversed sweep times exp(-t ln(f2/f1) / T).
    f1, f2, T = 50.0, 5000.0, 0.2
    x = exponential_sweep(f1, f2, T, FS)
    inv = exponential_inverse_filter(x, f1, f2, T, FS)
    t = np.arange(x.size) / FS
    np.testing.assert_allclose(inv, x[::-1] * np.exp(-t * math.log(f2 / f1) / T), atol=1e-12)


def test_sweep_convolved_with_inverse_peaks_at_one_at_the_linear_lag():
    sw = _sweep()
    full = fftconvolve(sw.signal, sw.inverse)
    assert int(np.argmax(np.abs(full))) == sw.linear_lag == sw.n_pad_before + sw.n_sweep - 1
    assert np.max(np.abs(full)) == pytest.approx(1.0, abs=1e-12)


@pytest.mark.parametrize("kind", ["exponential", "linear"])
def test_delay_and_gain_system_comes_back_exact(kind):
    # Farina 2000: deconvolution of a delay-and-gain system is a scaled, delayed pulse
    # (required: exact to the sample and within 0.01 dB).
    sw = _sweep(kind=kind, f1_hz=100.0 if kind == "linear" else 50.0)
    x = sw.signal
    for delay, gain in ((0, 1.0), (137, 0.3), (2001, 0.05)):
        rec = np.zeros(x.size)
        rec[delay:] = gain * x[:x.size - delay]
        d = deconvolve(rec, sw.inverse, linear_lag=sw.linear_lag, ir_length=sw.n_pad_after)
        h = d.linear[:, 0]
        k = int(np.argmax(np.abs(h)))
        assert k == delay
        err_db = 20 * math.log10(abs(h[k]) / gain)
        assert abs(err_db) < 0.01, err_db


@pytest.mark.parametrize("order", [2, 3, 4])
def test_harmonic_offset_for_memoryless_nonlinearity(order):
    # Farina 2000: the n-th harmonic's response lies T ln(n)/ln(f2/f1) before the linear one
    # (required within +-1 sample).  Nonlinearity y = x + 0.1 x^2 + 0.05 x^3 + 0.03 x^4 (memoryless),
    # after a pure delay; f2 * 4 stays below fs/2 so no product aliases.
    sw = _sweep(f1_hz=50.0, f2_hz=5000.0, duration_s=1.0)
    x = sw.signal / np.max(np.abs(sw.signal))
    y = x + 0.1 * x ** 2 + 0.05 * x ** 3 + 0.03 * x ** 4
    delay = 480
    rec = np.zeros(y.size)
    rec[delay:] = y[:y.size - delay]
    d = deconvolve(rec, sw.inverse, linear_lag=sw.linear_lag, ir_length=sw.n_pad_after,
                   harmonic_offsets=sw.harmonic_offsets_samples(4))
    expected = harmonic_offset_s(order, 50.0, 5000.0, 1.0) * FS
    envelope = np.abs(hilbert(d.full[:, 0]))
    centre = sw.linear_lag + delay - expected
    lo = int(centre) - 300
    peak = lo + int(np.argmax(envelope[lo:lo + 600]))
    measured = sw.linear_lag + delay - peak
    assert abs(measured - expected) <= 1.0, (measured, expected)
    # The harmonic's window holds that peak, at its nominal index plus the delay.
    h = np.abs(hilbert(d.harmonics[order][:, 0]))
    assert abs(int(np.argmax(h)) - (d.harmonic_zero_index[order] + delay)) <= 1


def test_harmonic_offset_formula_values():
    # Farina 2000: offset T ln(n) / ln(f2/f1); for a decade sweep of 1 s, order 10 sits 1 s early.
    assert harmonic_offset_s(10, 100.0, 1000.0, 1.0) == pytest.approx(1.0)
    assert harmonic_offset_s(2, 20.0, 20000.0, 4.0) == pytest.approx(4 * math.log(2) / math.log(1000))


@pytest.mark.parametrize("kw, field", [
    (dict(f2_hz=24000.0), "--f2-hz"),         # at fs/2
    (dict(f2_hz=30000.0), "--f2-hz"),         # above fs/2
    (dict(f1_hz=0.0), "--f1-hz"),             # not above 0
    (dict(f1_hz=-5.0), "--f1-hz"),
    (dict(f1_hz=6000.0), "--f1-hz"),          # not below f2
    (dict(duration_s=0.05), "--duration-s"),  # too short for 50-5000 Hz
    (dict(kind="linear", duration_s=0.01), "--duration-s"),
    (dict(fade_in_s=0.2), "--fade-in-s"),     # fade eats the lowest octave
    (dict(pad_after_s=0.0), "--pad-after-s"),
])
def test_bad_sweep_settings_are_refused_with_the_field(kw, field):
    with pytest.raises(InputError) as err:
        _sweep(**kw)
    assert err.value.field == field
    assert "\n" not in err.value.one_line()


def test_too_short_message_says_how_long():
    with pytest.raises(InputError, match=r"too short.*use --duration-s"):
        _sweep(f1_hz=20.0, f2_hz=20000.0, duration_s=0.3)
