"""The analysis of one take as a pure function: recording in, impulse responses, latency and checks out.

:func:`analyse_take` averages the repeats synchronously, finds the latency
from the loopback reference (:func:`estimate_latency`) or takes the one given,
deconvolves (:func:`arrayplan.signals.deconvolve.deconvolve`), applies the
calibration factors and checks the take (clipping, xruns, peak-to-noise, a
speaker heard on no microphone).  It plays nothing and writes nothing; the
loop in :mod:`arrayplan.hardware.measure` does.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import DeviceError
from ..signals.deconvolve import clipped_sample_counts, deconvolve, harmonic_levels_db, peak_to_noise_db
from ..signals.sweeps import SweepSignal
from .duplex import DuplexResult
from .measure_settings import MeasurementSettings, RigWiring

__all__ = ["NOT_DETECTED_DB", "REFERENCE_MIN_DB", "TakeAnalysis", "analyse_take", "estimate_latency"]

#: A speaker whose best peak-to-noise ratio over all microphones is below
#: this (dB) "shows up on no microphone".  The largest of N samples of white
#: noise is about sqrt(2 ln N) times its RMS, 12-13 dB for the lengths used
#: here, so a response that is only noise stays below 20 dB (common
#: practice, no source).
NOT_DETECTED_DB = 20.0

#: The loopback reference must stand this far (dB) above the rest of its
#: deconvolved window to be trusted for the latency (common practice, no source).
REFERENCE_MIN_DB = 30.0


@dataclass
class TakeAnalysis:
    """What one take's recording gives.

    Attributes
    ----------
    ir : ndarray, shape (ir_length, n_mic)
        Impulse responses from the speaker to each microphone, in the session's
        units (full scale, Pa per full scale or Pa per V); sample ``pre_roll``
        is zero lag.
    latency_samples : int
        Latency removed, samples.
    warnings : list of str
        The take's problems (empty: the take is good).
    details : dict
        The numbers behind the checks (clipped samples, stream flags, peaks,
        fractional latency, harmonic levels), for ``take.json``.
    peak_to_noise_db : list of float or None
        Per microphone, dB (None where not finite).
    """

    ir: np.ndarray
    latency_samples: int
    warnings: list[str]
    details: dict[str, Any]
    peak_to_noise_db: list[float | None]


def estimate_latency(reference: np.ndarray, sweep: SweepSignal, max_latency_samples: int,
                     *, source: str = "reference") -> tuple[int, float, float]:
    """Latency of a loopback recording of the sweep, in samples.

    Parameters
    ----------
    reference : ndarray, shape (n_samples,)
        The reference input's recording of one sweep file (lead-in, sweep, tail).
    sweep : SweepSignal
        The sweep that was played.
    max_latency_samples : int
        Longest latency searched (samples).
    source : str
        Named in messages.

    Returns
    -------
    latency : int
        Whole samples from playing to recording (the deconvolved peak).
    fractional : float
        Sub-sample estimate (parabolic fit through the peak and its neighbours).
    peak : float
        Deconvolved peak value (below 1 for a unit-gain loop: the band-limited pulse of an
        inverse filter with unit gain in band).

    Raises
    ------
    DeviceError
        When no clear peak stands :data:`REFERENCE_MIN_DB` above the rest of
        the window (the loop is not wired, or the latency exceeds the window).
    """
    dec = deconvolve(np.asarray(reference, float), sweep.inverse, linear_lag=sweep.linear_lag,
                     ir_length=max_latency_samples + 1)
    h = dec.linear[:, 0]
    i = int(np.argmax(np.abs(h)))
    peak = float(h[i])
    rest = np.concatenate([h[:max(0, i - 64)], h[i + 64:]])
    floor = float(np.sqrt(np.mean(rest * rest))) if rest.size else 0.0
    if peak == 0:
        ratio_db = -math.inf
    elif floor == 0:
        ratio_db = math.inf
    else:
        ratio_db = 20 * math.log10(abs(peak) / floor)
    if not ratio_db >= REFERENCE_MIN_DB or i >= max_latency_samples:
        raise DeviceError(f"the loopback reference shows no clear impulse within {max_latency_samples} samples "
                          f"(peak {abs(peak):.3g} full scale, {ratio_db:.1f} dB above the rest)", source=source,
                          fix="check the loopback cable from the reference output to the reference input, "
                              "or raise `max_latency_s`")
    frac = float(i)
    if 0 < i < h.size - 1:
        a, b, c = abs(h[i - 1]), abs(h[i]), abs(h[i + 1])
        denom = a - 2 * b + c
        if denom != 0:
            frac = i + 0.5 * (a - c) / denom
    return i, frac, peak


def _check_take(result: DuplexResult, ir: np.ndarray, wiring: RigWiring, settings: MeasurementSettings,
                speaker: str) -> tuple[list[str], dict[str, Any]]:
    """Warnings for one take and the numbers behind them."""
    warnings: list[str] = []
    in_names = list(wiring.mic_names) + (["reference"] if wiring.reference else [])
    clipped = clipped_sample_counts(result.recording, settings.clip_threshold)
    if np.any(clipped):
        where = ", ".join(f"{n} ({c} samples)" for n, c in zip(in_names, clipped) if c)
        warnings.append(f"input clipped at {where}: lower the level or the input gain and measure again")
    if result.xrun:
        warnings.append(f"audio stream problems ({', '.join(result.flag_texts())}): samples were lost or "
                        "padded; measure again (close other programs, try a larger latency setting)")
    peaks = np.max(np.abs(ir), axis=0)
    pnr = peak_to_noise_db(ir)
    heard = [float(p) for p, pk in zip(pnr, peaks) if pk > 0]
    best = max(heard) if heard else -math.inf
    if best < NOT_DETECTED_DB:
        warnings.append(f"speaker {speaker} shows up on no microphone (best peak-to-noise "
                        f"{best:.1f} dB < {NOT_DETECTED_DB:g} dB): check its output channel, cable and amplifier")
    else:
        low = [(n, float(p)) for n, p, pk in zip(wiring.mic_names, pnr, peaks)
               if pk > 0 and p < settings.min_peak_to_noise_db]
        if low:
            where = ", ".join(f"{n} {p:.1f} dB" for n, p in low)
            warnings.append(f"peak-to-noise below {settings.min_peak_to_noise_db:g} dB at {where}: raise the "
                            "level (within the caution limits), add `repeats`, or reduce background noise")
    details = {
        "clipped_samples": {n: int(c) for n, c in zip(in_names, clipped)},
        "stream_flags": {"input_overflows": result.input_overflows, "input_underflows": result.input_underflows,
                         "output_underflows": result.output_underflows,
                         "output_overflows": result.output_overflows, "dropouts": result.dropouts,
                         "startup_flags_ignored": result.startup_flags},
        "peak": {n: float(p) for n, p in zip(wiring.mic_names, peaks)},
    }
    return warnings, details


def _finite_or_none(v: float) -> float | None:
    return float(v) if math.isfinite(v) else None


def analyse_take(result: DuplexResult, sweep: SweepSignal, wiring: RigWiring, settings: MeasurementSettings, *,
                 index: int, max_latency_samples: int, pre_roll: int, ir_length: int,
                 latency_samples: int | None = None, pa_per_fs: np.ndarray | None = None,
                 v_per_fs: np.ndarray | None = None) -> TakeAnalysis:
    """Analyse the recording of speaker `index`'s take.

    Parameters
    ----------
    result : DuplexResult
        The recording, shape (repeats * len(sweep.signal), n_mic [+ 1 reference]), and the stream's flags.
    sweep : SweepSignal
        The sweep played (once per repeat).
    wiring : RigWiring
    settings : MeasurementSettings
    index : int
        0-based speaker index.
    max_latency_samples : int
        Longest latency searched for on the reference, samples.
    pre_roll : int
        Samples kept before zero lag.
    ir_length : int
        Length of each response, samples.
    latency_samples : int, optional
        Latency to remove when the rig has no reference loop (None: 0).
    pa_per_fs : ndarray, shape (n_mic,), optional
        Pa per full scale of each microphone input (calibration).
    v_per_fs : ndarray, shape (n_spk,), optional
        V per full scale of each speaker's output (calibration).

    Returns
    -------
    TakeAnalysis

    Raises
    ------
    DeviceError
        When the rig has a reference loop and its recording shows no clear impulse.
    """
    speaker = wiring.speaker_names[index]
    period = sweep.signal.size
    avg = result.recording.reshape(settings.repeats, period, result.recording.shape[1]).mean(axis=0)
    frac = None
    if wiring.reference is not None:
        lat, frac, ref_peak = estimate_latency(avg[:, -1], sweep, max_latency_samples,
                                               source=f"take of speaker {speaker}")
    else:
        lat, ref_peak = int(latency_samples or 0), None
    n_mic = len(wiring.mic_names)
    dec = deconvolve(avg[:, :n_mic], sweep.inverse, linear_lag=sweep.linear_lag + lat, ir_length=ir_length,
                     harmonic_offsets=sweep.harmonic_offsets_samples(5), pre_roll_samples=pre_roll)
    ir_fs = dec.linear
    warnings, details = _check_take(result, ir_fs, wiring, settings, speaker)
    pnr = peak_to_noise_db(ir_fs)
    best_mic = int(np.argmax(np.where(np.max(np.abs(ir_fs), axis=0) > 0, pnr, -np.inf)))
    levels = harmonic_levels_db(ir_fs[:, [best_mic]], {k: v[:, [best_mic]] for k, v in dec.harmonics.items()})
    ir = ir_fs
    if pa_per_fs is not None:
        ir = ir_fs * pa_per_fs[None, :]
        if v_per_fs is not None:
            ir = ir / v_per_fs[index]
    details.update({
        "latency_fractional_samples": frac, "reference_peak": ref_peak, "zero_lag_samples": pre_roll,
        "harmonic_levels_db": {"microphone": wiring.mic_names[best_mic],
                               **{str(k): _finite_or_none(float(v[0])) for k, v in levels.items()}},
    })
    return TakeAnalysis(ir, lat, warnings, details, [_finite_or_none(p) for p in pnr])
