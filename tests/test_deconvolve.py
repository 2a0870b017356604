"""Pure deconvolution functions: windows, distortion levels, peak-to-noise, clipping, schedule split."""

import math

import numpy as np
import pytest
from scipy.signal import fftconvolve

from arrayplan.signals import (SweepSettings, clipped_sample_counts, deconvolve, harmonic_levels_db,
                               harmonic_windows, make_sweep, peak_to_noise_db, split_schedule)
from arrayplan.signals.deconvolve import impulse_responses
from arrayplan.signals.schedule import measurement_schedule

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
