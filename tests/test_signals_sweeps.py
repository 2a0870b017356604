"""Sweeps and inverse filters, checked against A. Farina's published properties."""

import math

import numpy as np
import pytest
from scipy.signal import fftconvolve, hilbert, welch

from arrayplan.errors import InputError
from arrayplan.signals import (SweepSettings, deconvolve, exponential_inverse_filter, exponential_sweep,
                               harmonic_offset_s, linear_sweep, make_sweep)
from arrayplan.signals.sweeps import fresnel_time_s, unity_response
from helpers import known_iir_systems

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


def _dtft(x, f_hz):
    return np.dot(x, np.exp(-2j * np.pi * f_hz / FS * np.arange(x.size)))


@pytest.mark.parametrize("kw", [dict(), dict(kind="linear", f1_hz=100.0), dict(f1_hz=20.0, f2_hz=20000.0)])
def test_unity_system_deconvolves_to_0_db_at_the_band_centre(kw):
    # S. Mueller & P. Massarani, "Transfer-function measurement with sweeps", JAES 49(6), 2001:
    # the deconvolved spectrum of a unity system is 1 in band.  Checked at the band centre with a
    # direct DTFT of the whole deconvolution (not the code's own routine).
    sw = _sweep(**kw)
    s = sw.settings
    full = fftconvolve(sw.signal, sw.inverse)
    assert int(np.argmax(np.abs(full))) == sw.linear_lag == sw.n_pad_before + sw.n_sweep - 1
    centre = math.sqrt(s.f1_hz * s.f2_hz) if s.kind == "exponential" else (s.f1_hz + s.f2_hz) / 2
    assert sw.centre_hz == pytest.approx(centre)
    assert 20 * math.log10(abs(_dtft(full, centre))) == pytest.approx(0.0, abs=1e-9)
    # The band-limited pulse peaks below 1: an ideal band-pass from f1 to f2 of unit gain has the
    # impulse response peak 2 (f2 - f1) / fs (A. V. Oppenheim & R. W. Schafer, Discrete-Time Signal
    # Processing, ideal filters; value from memory).  Faded band edges: within 3 %.
    assert np.max(np.abs(full)) == pytest.approx(2 * (s.f2_hz - s.f1_hz) / FS, rel=0.03)


def _fresnel_fades(f1, f2, T):
    """Fades one Fresnel zone long at f1 and f2: 1 / sqrt(df/dt), df/dt = f ln(f2/f1) / T (rounded up)."""
    fade_in = math.ceil(100 / math.sqrt(f1 * math.log(f2 / f1) / T)) / 100
    fade_out = math.ceil(1000 / math.sqrt(f2 * math.log(f2 / f1) / T)) / 1000
    return fade_in, fade_out


def _band_inside_fades(sw, octaves_low, octaves_high):
    s = sw.settings
    rate = s.duration_s / math.log(s.f2_hz / s.f1_hz)
    lo = s.f1_hz * math.exp(s.fade_in_s / rate) * 2 ** octaves_low
    hi = s.f2_hz * math.exp(-s.fade_out_s / rate) / 2 ** octaves_high
    return lo, hi


@pytest.mark.parametrize("f1, f2, T", [(100.0, 16000.0, 1.0), (20.0, 20000.0, 4.0), (50.0, 5000.0, 1.0),
                                       (30.0, 15000.0, 2.0)])
def test_unity_response_is_flat_inside_fresnel_length_fades(f1, f2, T):
    # Mueller & Massarani 2001: flat in band.  The time-reversed inverse does not undo the Fresnel
    # ripple of the sweep's own spectrum near the fades (A. Farina, 108th AES Convention, 2000);
    # with fades one Fresnel zone long the ripple stays within 0.1 dB from half an octave above
    # the fade-in to a tenth of an octave below the fade-out (the sweeps module's claim, measured).
    fade_in, fade_out = _fresnel_fades(f1, f2, T)
    assert fresnel_time_s(f1, f1, f2, T) == pytest.approx(fade_in, abs=0.01)
    sw = _sweep(f1_hz=f1, f2_hz=f2, duration_s=T, fade_in_s=fade_in, fade_out_s=fade_out)
    freqs, resp = unity_response(sw.sweep, sw.inverse, FS)
    lo, hi = _band_inside_fades(sw, 1 / 2, 1 / 10)
    band = (freqs >= lo) & (freqs <= hi)
    db = 20 * np.log10(np.abs(resp[band]))
    assert np.max(np.abs(db)) < 0.1, np.max(np.abs(db))
    flat = sw.flat_band_hz
    assert flat[0] <= lo and flat[1] >= hi
    assert sw.sidecar("x.inverse.wav")["flat_band_hz"] == list(flat)


def test_short_default_fades_ripple_more_and_the_flat_band_says_so():
    # Same sources: a 20 ms fade at 20 Hz is far shorter than the Fresnel zone (0.17 s), so the
    # ripple reaches well into the band; the sweep reports its flat band honestly.
    sw = _sweep(f1_hz=20.0, f2_hz=20000.0, duration_s=4.0, fade_in_s=0.02, fade_out_s=0.005)
    freqs, resp = unity_response(sw.sweep, sw.inverse, FS)
    lo, hi = sw.flat_band_hz
    inside = (freqs >= lo) & (freqs <= hi)
    assert np.max(np.abs(20 * np.log10(np.abs(resp[inside])))) <= 0.1
    assert lo > 2 * 20.0  # more than an octave lost at the bottom
    below = (freqs > 25.0) & (freqs < lo)
    assert np.max(np.abs(20 * np.log10(np.abs(resp[below])))) > 0.1


@pytest.mark.parametrize("kind", ["exponential", "linear"])
@pytest.mark.parametrize("name", ["gain", "butter-band-pass", "peaking+6dB"])
def test_known_system_through_sweep_and_deconvolution_matches_freqz(kind, name):
    # Reference library: scipy.signal.freqz of the same filter.  Mueller & Massarani 2001: the
    # sweep measurement gives the transfer function in band; required within 0.1 dB in the band the
    # sweeps module promises (exponential) or 5 % of the band inside the fade edges (linear).  The delay
    # leaves room for the band-limited pulse's pre-ringing, which a cut at zero lag would lose.
    from scipy.signal import freqz, lfilter

    b, a = known_iir_systems(FS)[name]
    if kind == "exponential":
        f1, f2, T = 100.0, 16000.0, 1.0
        fade_in, fade_out = _fresnel_fades(f1, f2, T)
        sw = _sweep(f1_hz=f1, f2_hz=f2, duration_s=T, fade_in_s=fade_in, fade_out_s=fade_out, pad_after_s=0.5)
        lo, hi = _band_inside_fades(sw, 1 / 2, 1 / 10)
    else:
        f1, f2, T = 200.0, 16000.0, 1.0
        sw = _sweep(kind="linear", f1_hz=f1, f2_hz=f2, duration_s=T, fade_in_s=0.02, fade_out_s=0.01,
                    pad_after_s=0.5)
        lo = f1 + (f2 - f1) * (0.02 / T + 0.05)
        hi = f2 - (f2 - f1) * (0.01 / T + 0.05)
    delay = 2001
    y = lfilter(b, a, sw.signal)
    rec = np.zeros(y.size)
    rec[delay:] = y[:y.size - delay]
    h = deconvolve(rec, sw.inverse, linear_lag=sw.linear_lag, ir_length=sw.n_pad_after).linear[:, 0]
    freqs = np.fft.rfftfreq(h.size, 1 / FS)
    band = (freqs >= lo) & (freqs <= hi)
    _, want = freqz(b, a, worN=freqs[band], fs=FS)
    err_db = 20 * np.log10(np.abs(np.fft.rfft(h)[band]) / np.abs(want))
    assert np.max(np.abs(err_db)) < 0.1, (np.max(np.abs(err_db)), freqs[band][np.argmax(np.abs(err_db))])
    if name == "gain":
        # The peak sits at the delay, exact to the sample, and is the gain times the unity pulse's peak.
        assert int(np.argmax(np.abs(h))) == delay
        unity_peak = np.max(np.abs(fftconvolve(sw.sweep, sw.inverse)))
        # Deconvolution runs in single precision: about 1e-7 of the peak (float32 epsilon, 1.2e-7).
        assert abs(h[delay]) == pytest.approx(0.3 * unity_peak, rel=1e-6)


@pytest.mark.parametrize("kind", ["exponential", "linear"])
def test_delay_and_gain_system_peaks_at_the_delay(kind):
    # Farina 2000: deconvolution of a delay-and-gain system is a scaled, delayed pulse; the peak
    # position is exact to the sample, its height the gain times the unity pulse's peak.
    sw = _sweep(kind=kind, f1_hz=100.0 if kind == "linear" else 50.0)
    x = sw.signal
    unity = fftconvolve(sw.sweep, sw.inverse)[sw.n_sweep - 1:]
    for delay, gain in ((0, 1.0), (137, 0.3), (2001, 0.05)):
        rec = np.zeros(x.size)
        rec[delay:] = gain * x[:x.size - delay]
        d = deconvolve(rec, sw.inverse, linear_lag=sw.linear_lag, ir_length=sw.n_pad_after)
        h = d.linear[:, 0]
        k = int(np.argmax(np.abs(h)))
        assert k == delay
        assert h[k] == pytest.approx(gain * unity[0], rel=1e-6)   # single-precision deconvolution


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
    (dict(f2_hz=24000.0), "f2_hz"),         # at fs/2
    (dict(f2_hz=30000.0), "f2_hz"),         # above fs/2
    (dict(f1_hz=0.0), "f1_hz"),             # not above 0
    (dict(f1_hz=-5.0), "f1_hz"),
    (dict(f1_hz=6000.0), "f1_hz"),          # not below f2
    (dict(duration_s=0.05), "duration_s"),  # too short for 50-5000 Hz
    (dict(kind="linear", duration_s=0.01), "duration_s"),
    (dict(fade_in_s=0.2), "fade_in_s"),     # fade eats the lowest octave
    (dict(pad_after_s=0.0), "pad_after_s"),
])
def test_bad_sweep_settings_are_refused_with_the_field(kw, field):
    with pytest.raises(InputError) as err:
        _sweep(**kw)
    assert err.value.field == field
    assert "\n" not in err.value.one_line()


def test_too_short_message_says_how_long():
    with pytest.raises(InputError, match=r"too short.*use `duration_s`"):
        _sweep(f1_hz=20.0, f2_hz=20000.0, duration_s=0.3)


@pytest.mark.parametrize("f1, f2, T", [(40.0, 20000.0, 3.0), (20.0, 20000.0, 4.0), (100.0, 16000.0, 1.0)])
def test_default_fades_are_one_fresnel_time_and_keep_the_band_flat(f1, f2, T):
    # Fades of 1 / sqrt(f ln(f2/f1) / T) at f1 and f2 (the time to cross one Fresnel zone; common
    # practice, no source) when none are given; Mueller & Massarani 2001 (flat in band): the unity
    # response then stays within 0.1 dB from half an octave above the fade-in's end to a tenth of an
    # octave below the fade-out's start, the claim checked above for hand-set fades.
    sw = _sweep(f1_hz=f1, f2_hz=f2, duration_s=T, fade_in_s=None, fade_out_s=None)
    s = sw.settings
    assert s.fade_in_s == pytest.approx(1 / math.sqrt(f1 * math.log(f2 / f1) / T), rel=1e-12)
    assert s.fade_out_s == pytest.approx(1 / math.sqrt(f2 * math.log(f2 / f1) / T), rel=1e-12)
    side = sw.sidecar("x.inverse.wav")
    assert side["fade_in_s"] == s.fade_in_s and side["fade_rule"].startswith("one Fresnel time")
    lo, hi = _band_inside_fades(sw, 1 / 2, 1 / 10)
    flat = sw.flat_band_hz
    assert flat[0] <= lo and flat[1] >= hi
    freqs, resp = unity_response(sw.sweep, sw.inverse, FS)
    band = (freqs >= flat[0]) & (freqs <= flat[1])
    assert np.max(np.abs(20 * np.log10(np.abs(resp[band])))) <= 0.1


def test_default_fades_start_the_flat_band_lower_than_fixed_short_fades():
    # The measurement sweep (40 Hz-20 kHz, 3 s): fixed 20 ms / 5 ms fades leave the band flat only from
    # more than an octave above f1; the default fades bring that to within an octave.
    fixed = _sweep(f1_hz=40.0, f2_hz=20000.0, duration_s=3.0, fade_in_s=0.02, fade_out_s=0.005)
    auto = _sweep(f1_hz=40.0, f2_hz=20000.0, duration_s=3.0)
    assert fixed.flat_band_hz[0] > 2 * 40.0
    assert auto.flat_band_hz[0] < 2 * 40.0 < fixed.flat_band_hz[0]
    assert auto.flat_band_hz[1] >= fixed.flat_band_hz[1] - 1.0


def test_default_fades_are_capped_for_short_sweeps_and_given_fades_are_kept():
    # 100 Hz-20 kHz in 0.2 s: one Fresnel time at f1 is longer than half an octave's time, the longest
    # fade the sweep accepts; the default takes that limit instead of refusing the sweep.
    rate = 0.2 / math.log(200.0)
    sw = _sweep(f1_hz=100.0, f2_hz=20000.0, duration_s=0.2)
    assert 1 / math.sqrt(100.0 / rate) > rate * math.log(2) / 2
    assert sw.settings.fade_in_s == pytest.approx(rate * math.log(2) / 2, rel=1e-12)
    given = _sweep(f1_hz=100.0, f2_hz=20000.0, duration_s=0.2, fade_in_s=0.004)
    assert given.settings.fade_in_s == 0.004
    assert given.settings.fade_out_s == pytest.approx(1 / math.sqrt(20000.0 / rate), rel=1e-12)
    assert "fade-in as given" in given.sidecar(None)["fade_rule"]
    lin = _sweep(kind="linear", f1_hz=200.0, f2_hz=16000.0, duration_s=1.0)
    assert lin.settings.fade_in_s == lin.settings.fade_out_s == pytest.approx(1 / math.sqrt(15800.0), rel=1e-12)
