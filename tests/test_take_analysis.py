"""The analysis of one take, a pure function: a recording made by hand in, responses and latency out."""

from __future__ import annotations

import numpy as np

from arrayplan.hardware.duplex import DuplexResult
from arrayplan.hardware.measure_settings import MeasurementSettings, RigWiring
from arrayplan.hardware.take_analysis import analyse_take
from arrayplan.signals.sweeps import make_sweep

FS = 16_000.0


def _delayed(x: np.ndarray, samples: int, gain: float) -> np.ndarray:
    out = np.zeros_like(x)
    out[samples:] = gain * x[:x.size - samples]
    return out


def test_two_pure_delays_and_a_reference_loop_give_back_their_delays_and_gain_ratio():
    settings = MeasurementSettings(sweep_s=0.5, ir_s=0.05, repeats=2)
    sweep = make_sweep(settings.sweep_settings(FS))
    wiring = RigWiring(("S1",), (0,), ("M1", "M2"), (0, 1), reference=(1, 2))
    one = sweep.signal
    latency, d1, d2 = 23, 40, 65          # samples: the interface's loop, then the air paths
    rec = np.stack([_delayed(one, latency + d1, 0.5), _delayed(one, latency + d2, 0.25),
                    _delayed(one, latency, 0.9)], axis=1)
    result = DuplexResult(np.tile(rec, (2, 1)), FS)
    pre = settings.pre_roll_samples(sweep)
    got = analyse_take(result, sweep, wiring, settings, index=0, max_latency_samples=int(0.25 * FS),
                       pre_roll=pre, ir_length=int(0.05 * FS))
    # a pure delay of d samples deconvolves to a pulse d samples after zero lag, and the deconvolution is
    # linear, so the pulses' heights keep the gains' ratio (common practice, no source)
    assert got.latency_samples == latency
    peaks = np.argmax(np.abs(got.ir), axis=0)
    assert list(peaks) == [pre + d1, pre + d2]
    heights = np.max(np.abs(got.ir), axis=0)
    assert abs(heights[0] / heights[1] - 2.0) < 1e-6
    assert got.warnings == [] and got.details["zero_lag_samples"] == pre


def test_calibration_factors_scale_the_responses_and_a_silent_speaker_is_flagged():
    settings = MeasurementSettings(sweep_s=0.5, ir_s=0.05)
    sweep = make_sweep(settings.sweep_settings(FS))
    wiring = RigWiring(("S1",), (0,), ("M1",), (0,))
    rng = np.random.default_rng(7)
    quiet = DuplexResult(1e-4 * rng.standard_normal((sweep.signal.size, 1)), FS)
    got = analyse_take(quiet, sweep, wiring, settings, index=0, max_latency_samples=100, pre_roll=0,
                       ir_length=800, latency_samples=0)
    assert any("shows up on no microphone" in w for w in got.warnings)
    loud = DuplexResult(_delayed(sweep.signal, 10, 0.5)[:, None], FS)
    plain = analyse_take(loud, sweep, wiring, settings, index=0, max_latency_samples=100, pre_roll=0,
                         ir_length=800, latency_samples=0)
    scaled = analyse_take(loud, sweep, wiring, settings, index=0, max_latency_samples=100, pre_roll=0,
                          ir_length=800, latency_samples=0, pa_per_fs=np.array([4.0]), v_per_fs=np.array([2.0]))
    assert np.allclose(scaled.ir, plain.ir * 4.0 / 2.0)
