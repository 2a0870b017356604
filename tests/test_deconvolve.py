"""Pure deconvolution functions: windows, distortion levels, peak-to-noise, clipping, schedule split."""

import math

import numpy as np
import pytest
from scipy.signal import fftconvolve

from arrayplan.signals import (SweepSettings, clipped_sample_counts, deconvolve, harmonic_levels_db,
                               harmonic_windows, make_sweep, peak_to_noise_db, split_schedule)
from arrayplan.signals.deconvolve import impulse_responses
from arrayplan.signals.schedule import measurement_schedule
from helpers import known_iir_systems

FS = 48000


@pytest.fixture(scope="module")
def sweep():
    return make_sweep(SweepSettings(f1_hz=50.0, f2_hz=5000.0, duration_s=1.0, sample_rate_hz=FS,
                                    pad_before_s=0.05, pad_after_s=0.3))


def test_harmonic_windows_tile_without_overlap():
    offs = {2: 1000.0, 3: 1585.0, 4: 2000.0}
    w = harmonic_windows(10000, offs, ir_length=5000)
    # order 2 owns lags from halfway to order 3 up to halfway to the linear response
    assert w[2] == (10000 - 1000 - 292, 292 + 500, 292)
    spans = sorted((s, s + n) for s, n, _ in w.values())
    for (a0, a1), (b0, b1) in zip(spans, spans[1:]):
        assert a1 <= b0
    assert w[4][2] == w[4][1] - w[4][2]  # highest order: symmetric
    assert harmonic_windows(10000, offs, ir_length=100)[2][1] == 292 + 100


def test_second_harmonic_level_of_a_square_law(sweep):
    # y = x + a x^2 with x = A sin(phi): a x^2 = a A^2 (1 - cos 2 phi) / 2, so the 2nd harmonic is
    # a A / 2 of the fundamental (trigonometric identity, common practice).  Tolerance 0.5 dB.
    a = 0.2
    x = sweep.signal
    A = np.max(np.abs(sweep.sweep))
    rec = np.zeros(x.size)
    rec[200:] = (x + a * x ** 2)[:-200]
    d = deconvolve(rec, sweep.inverse, linear_lag=sweep.linear_lag, ir_length=sweep.n_pad_after,
                   harmonic_offsets=sweep.harmonic_offsets_samples(3))
    lv = harmonic_levels_db(d.linear, d.harmonics)
    assert lv[2][0] == pytest.approx(20 * math.log10(a * A / 2), abs=0.5)
    assert lv[3][0] < lv[2][0] - 20


def test_linear_system_shows_no_distortion_above_the_band_edge_floor(sweep):
    rec = np.zeros(sweep.signal.size)
    rec[100:] = 0.5 * sweep.signal[:-100]
    d = deconvolve(rec, sweep.inverse, linear_lag=sweep.linear_lag, ir_length=sweep.n_pad_after,
                   harmonic_offsets=sweep.harmonic_offsets_samples(5))
    lv = harmonic_levels_db(d.linear, d.harmonics)
    assert all(v[0] < -40 for v in lv.values()), lv


def test_peak_to_noise_of_a_delay_with_white_noise(sweep):
    # White noise of RMS sigma through an FIR h has RMS sigma * ||h||_2 (common practice, no source):
    # the deconvolved noise floor is sigma * ||inverse||, the peak is the gain times the peak of the
    # band-limited unity pulse sweep * inverse (below 1: the inverse has unit gain in band).  Tolerance 1 dB.
    rng = np.random.default_rng(11)
    x = sweep.signal
    sigma, gain = 1e-3, 0.4
    rec = np.zeros(x.size)
    rec[50:] = gain * x[:-50]
    rec = rec + sigma * rng.standard_normal(x.size)
    d = deconvolve(rec, sweep.inverse, linear_lag=sweep.linear_lag, ir_length=sweep.n_pad_after)
    unity_peak = np.max(np.abs(fftconvolve(sweep.sweep, sweep.inverse)))
    want = 20 * math.log10(gain * unity_peak / (sigma * np.linalg.norm(sweep.inverse)))
    assert peak_to_noise_db(d.linear)[0] == pytest.approx(want, abs=1.0)


def test_clipped_sample_counts():
    x = np.zeros((100, 3))
    x[10:15, 0] = 1.0
    x[20, 1] = -0.9995
    x[30, 2] = 0.99
    np.testing.assert_array_equal(clipped_sample_counts(x), [5, 1, 0])


def test_schedule_layout_and_split(sweep):
    sched = measurement_schedule(sweep, 3)
    step = sweep.n_sweep + sweep.n_pad_after
    assert sched.signal.shape == (sweep.n_pad_before + 3 * step, 3)
    for k in range(3):
        s = sched.sweep_starts[k]
        np.testing.assert_array_equal(sched.signal[s:s + sweep.n_sweep, k], sweep.sweep)
        others = np.delete(sched.signal, k, axis=1)[s:s + sweep.n_sweep]
        assert not np.any(others)  # one speaker at a time
    segs = split_schedule(sched.signal, sched.segment_starts, sched.segment_length)
    for k, seg in enumerate(segs):
        np.testing.assert_array_equal(seg[:, k], sweep.signal)


def test_impulse_responses_gather_warnings(sweep):
    x = sweep.signal
    rng = np.random.default_rng(2)
    loud = np.clip(np.column_stack([8.0 * x, 0.5 * x]), -1, 1)
    noisy = np.column_stack([1e-3 * x, 0.5 * x]) + np.column_stack([0.05 * rng.standard_normal(x.size),
                                                                    np.zeros(x.size)])
    res = impulse_responses([loud, noisy], sweep.inverse, linear_lag=sweep.linear_lag, ir_length=sweep.n_pad_after,
                            harmonic_offsets=sweep.harmonic_offsets_samples(3), speaker_names=["A", "B"],
                            mic_names=["m1", "m2"])
    assert res.data.shape == (sweep.n_pad_after, 2, 2)
    assert res.clipped_samples[0, 0] > 0 and res.clipped_samples[1, 0] == 0
    assert any(w.startswith("speaker A: recording clipped at m1") for w in res.warnings)
    assert any(w.startswith("speaker B: peak-to-noise below 40 dB at m1") for w in res.warnings)
    assert not any("m2" in w for w in res.warnings)
    assert res.harmonic_db[3][0, 0] > -40  # hard clipping makes odd harmonics


# --------------------------------------------------------------------------- pre-roll before zero lag

#: (kind, f1, f2, T): the measurement default (40 Hz-20 kHz, 3 s), a short sweep, a linear sweep.
_PRE_ROLL_SWEEPS = {"default-3s": ("exponential", 40.0, 20000.0, 3.0),
                    "short-1s": ("exponential", 100.0, 16000.0, 1.0),
                    "linear-1s": ("linear", 200.0, 16000.0, 1.0)}


@pytest.fixture(scope="module")
def pre_roll_sweeps():
    return {name: make_sweep(SweepSettings(kind=k, f1_hz=f1, f2_hz=f2, duration_s=T, sample_rate_hz=FS,
                                           pad_before_s=0.05, pad_after_s=0.5))
            for name, (k, f1, f2, T) in _PRE_ROLL_SWEEPS.items()}


def _measured_error_db(sw, system, delay, pre_roll):
    """|DFT of the deconvolved response| / |freqz| in dB, on the DFT bins inside the sweep's flat band."""
    from scipy.signal import freqz, lfilter

    b, a = known_iir_systems(FS)[system]
    y = lfilter(b, a, sw.signal)
    rec = np.zeros(y.size)
    rec[delay:] = y[:y.size - delay]
    d = deconvolve(rec, sw.inverse, linear_lag=sw.linear_lag, ir_length=sw.n_pad_after,
                   harmonic_offsets=sw.harmonic_offsets_samples(5), pre_roll_samples=pre_roll)
    assert d.zero_lag_index == pre_roll and d.linear.shape[0] == pre_roll + sw.n_pad_after
    h = d.linear[:, 0]
    freqs = np.fft.rfftfreq(h.size, 1 / FS)
    lo, hi = sw.flat_band_hz
    band = (freqs >= lo) & (freqs <= hi)
    _, want = freqz(b, a, worN=freqs[band], fs=FS)
    return freqs[band], 20 * np.log10(np.abs(np.fft.rfft(h)[band]) / np.abs(want))


@pytest.mark.parametrize("sweep_name", list(_PRE_ROLL_SWEEPS))
@pytest.mark.parametrize("system", ["gain", "butter-band-pass", "butter-high-pass-150", "peaking+6dB"])
@pytest.mark.parametrize("delay", [30, 137])
def test_near_microphone_reads_its_transfer_function_across_the_flat_band(pre_roll_sweeps, sweep_name, system,
                                                                          delay):
    # S. Mueller & P. Massarani, "Transfer-function measurement with sweeps", JAES 49(6), 2001: the
    # deconvolved spectrum of a linear system is its transfer function in band.  Reference library:
    # scipy.signal.freqz.  Within 0.1 dB on every DFT bin of the sweep's flat band, its bottom octave
    # included, for delays far shorter than the pulse's pre-ringing: the default pre-roll holds it.
    sw = pre_roll_sweeps[sweep_name]
    freqs, err_db = _measured_error_db(sw, system, delay, sw.pre_roll_samples)
    assert np.max(np.abs(err_db)) < 0.1, (np.max(np.abs(err_db)), freqs[np.argmax(np.abs(err_db))])
    bottom = freqs <= 2 * freqs[0]
    assert bottom.sum() > 10  # the bottom octave is really in the check


@pytest.mark.parametrize("sweep_name", list(_PRE_ROLL_SWEEPS))
@pytest.mark.parametrize("delay", [30, 137])
def test_cutting_at_zero_lag_loses_the_pre_ringing(pre_roll_sweeps, sweep_name, delay):
    # The same check fails without the pre-roll (the test above can fail): the cut loses the pre-ringing.
    sw = pre_roll_sweeps[sweep_name]
    freqs, err_db = _measured_error_db(sw, "gain", delay, 0)
    assert np.max(np.abs(err_db)) > 0.3, np.max(np.abs(err_db))


def test_a_137_sample_delay_reads_about_1_db_low_near_f1_without_pre_roll(pre_roll_sweeps):
    # The case reported from the field: 100 Hz-16 kHz, 137 samples of delay, about 1 dB low near 164 Hz
    # at the bottom of the flat band; with the default pre-roll within 0.1 dB there.
    sw = pre_roll_sweeps["short-1s"]
    freqs, cut = _measured_error_db(sw, "gain", 137, 0)
    near = (freqs >= 155) & (freqs <= 175)
    assert np.min(cut[near]) < -0.7
    freqs, kept = _measured_error_db(sw, "gain", 137, sw.pre_roll_samples)
    near = (freqs >= 155) & (freqs <= 175)
    assert np.max(np.abs(kept[near])) < 0.1


def test_pre_roll_rule_and_its_limit():
    # One Fresnel time at f1, 1 / sqrt(f1 ln(f2/f1) / T), at most half the 2nd harmonic's offset
    # T ln 2 / ln(f2/f1) (A. Farina, 108th AES Convention, Paris, 2000, for the offset).
    from arrayplan.signals.sweeps import default_pre_roll_s

    for f1, f2, T in ((40.0, 20000.0, 3.0), (100.0, 16000.0, 1.0), (100.0, 20000.0, 0.2)):
        fresnel = 1 / math.sqrt(f1 * math.log(f2 / f1) / T)
        half_second = T * math.log(2) / math.log(f2 / f1) / 2
        assert default_pre_roll_s("exponential", f1, f2, T) == pytest.approx(min(fresnel, half_second), rel=1e-12)
    assert 1 / math.sqrt(100 * math.log(200) / 0.2) > 0.2 * math.log(2) / math.log(200) / 2  # the limit binds
    sw = make_sweep(SweepSettings(f1_hz=100.0, f2_hz=20000.0, duration_s=0.2, sample_rate_hz=FS))
    assert sw.pre_roll_samples <= sw.harmonic_offsets_samples(2)[2] / 2


def test_pre_roll_past_half_way_to_the_second_harmonic_is_refused(sweep):
    offsets = sweep.harmonic_offsets_samples(3)
    with pytest.raises(ValueError, match="half-way to the 2nd harmonic"):
        deconvolve(sweep.signal, sweep.inverse, linear_lag=sweep.linear_lag, ir_length=100,
                   harmonic_offsets=offsets, pre_roll_samples=int(offsets[2] / 2) + 1)
