"""Calibration values from recordings: microphone sensitivities, output gains, and the factors they give.

The record they go into, and its TOML file, is
:mod:`arrayplan.formats.calibration_record` (its names are importable from
here too).  What it holds:

* per microphone: its sensitivity in mV/Pa, found from a recording of an
  acoustic calibrator (commonly 94 dB SPL = 1 Pa re 20 µPa at 1 kHz; IEC
  60942 defines calibrator classes), and the full-scale voltage of the input
  it is plugged into;
* per output channel: the RMS voltage of a full-scale sine at the output,
  optionally times an amplifier gain, so volts at the speaker terminals are
  known;
* the interface's round-trip latency in samples at a given rate.

Conventions: a full-scale sine has peak 1.0, so a sample value x stands for
``x * sqrt(2) * full_scale_vrms`` volts.  Sensitivity in dB re 1 V/Pa is
``20 log10(mV/Pa / 1000)``.  0 dBu is 0.7746 V RMS (sqrt(0.6) V).
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import Sequence

import numpy as np

from ..errors import InputError
from ..formats.audiofiles import read_audio
from ..formats.calibration_record import (FORMAT_NAME, RANGES, CalibrationRecord, LatencyCalibration,
                                          MicCalibration, OutputCalibration, format_calibration, now_utc,
                                          parse_calibration, read_calibration, read_or_new, write_calibration)
from ..units import DBU_REFERENCE_VRMS, dbu_to_vrms, sensitivity_db_re_1v_per_pa
from ..units import P_REF_PA as REFERENCE_PRESSURE_PA
from ..units import pressure_from_spl as pressure_from_db_spl

__all__ = [
    "REFERENCE_PRESSURE_PA", "DBU_REFERENCE_VRMS", "FORMAT_NAME",
    "pressure_from_db_spl", "dbu_to_vrms", "sensitivity_db_re_1v_per_pa",
    "MicCalibration", "OutputCalibration", "LatencyCalibration", "CalibrationRecord",
    "read_calibration", "parse_calibration", "write_calibration", "tone_rms", "RANGES", "mic_from_calibrator_recording",
    "output_from_loopback_recording", "read_wav_channel", "format_calibration", "read_or_new",
    "calibration_factors", "now_utc",
]

# ------------------------------------------------------------------ from recordings

def read_wav_channel(path: str | os.PathLike, channel: int, *, field: str = "channel"
                     ) -> tuple[np.ndarray, float]:
    """One channel (1-based) of a WAV file as float64, and its rate."""
    src = str(path)
    if not Path(src).is_file():
        raise InputError("recording not found", source=src, fix="check the path")
    data, rate = read_audio(src, what="as audio")
    if not 1 <= channel <= data.shape[1]:
        raise InputError(f"channel {channel} asked for, the file has {data.shape[1]}", source=src, field=field,
                         fix=f"give a channel from 1 to {data.shape[1]}")
    x = data[:, channel - 1]
    if not np.all(np.isfinite(x)):
        raise InputError("contains NaN or infinite samples", source=src)
    return x, float(rate)


def tone_rms(x: np.ndarray, sample_rate_hz: float, frequency_hz: float, *, source: str = "recording",
             trim_fraction: float = 0.1) -> float:
    """RMS (full-scale units) of the steady tone at `frequency_hz` in a recording.

    The first and last `trim_fraction` of the recording are skipped (the
    calibrator being fitted and removed), the rest is band-passed over one
    third of an octave around the tone (4th-order Butterworth, zero phase),
    and its RMS returned.

    Raises
    ------
    InputError
        Recording shorter than 0.5 s, clipped, or whose strongest component
        is not within 3 % of `frequency_hz`, or whose band holds less than
        half of the signal's power (too noisy).
    """
    from scipy.signal import butter, sosfiltfilt

    x = np.asarray(x, dtype=float).reshape(-1)
    if x.size < 0.5 * sample_rate_hz:
        raise InputError(f"recording is {x.size / sample_rate_hz:.2f} s long; at least 0.5 s of steady tone is "
                         "needed", source=source, fix="record the calibrator for a few seconds")
    if np.max(np.abs(x)) >= 0.999:
        raise InputError("the recording is clipped", source=source,
                         fix="lower the input gain and record again (keep the gain used for measuring)")
    if not frequency_hz < sample_rate_hz / 2:
        raise InputError(f"{frequency_hz:g} Hz is above half the sample rate", source=source)
    k = int(round(trim_fraction * x.size))
    steady = x[k:x.size - k] - np.mean(x[k:x.size - k])
    spectrum = np.abs(np.fft.rfft(steady * np.hanning(steady.size)))
    freqs = np.fft.rfftfreq(steady.size, 1.0 / sample_rate_hz)
    strongest = float(freqs[int(np.argmax(spectrum[1:])) + 1])
    if abs(strongest - frequency_hz) > 0.03 * frequency_hz:
        raise InputError(f"no {frequency_hz:g} Hz tone found: the strongest component is at {strongest:.1f} Hz",
                         source=source, fix="check the channel, that the calibrator was on, and its frequency")
    lo, hi = frequency_hz * 2 ** (-1 / 6), min(frequency_hz * 2 ** (1 / 6), 0.49 * sample_rate_hz)
    sos = butter(4, [lo, hi], btype="bandpass", fs=sample_rate_hz, output="sos")
    band = sosfiltfilt(sos, x)[k:x.size - k]
    m = max(1, band.size // 10)  # the filter's own settling at the cut edges
    band = band[m:band.size - m]
    rms_band = float(np.sqrt(np.mean(band * band)))
    rms_all = float(np.sqrt(np.mean(steady * steady)))
    if rms_band * rms_band < 0.5 * rms_all * rms_all:
        raise InputError(f"the {frequency_hz:g} Hz tone carries only {100 * (rms_band / rms_all) ** 2:.0f} % of "
                         "the recorded power: too much noise", source=source,
                         fix="record in a quieter place, with the calibrator seated on the microphone")
    return rms_band


def mic_from_calibrator_recording(path: str | os.PathLike, channel: int, name: str, *,
                                  input_full_scale_vrms: float, calibrator_level_db_spl: float = 94.0,
                                  calibrator_frequency_hz: float = 1000.0, calibrator_class: str = "",
                                  input_channel: int | None = None) -> MicCalibration:
    """A microphone's calibration from a recording of an acoustic calibrator on it.

    Parameters
    ----------
    path : path
        WAV recording with the calibrator seated on the microphone.
    channel : int
        1-based channel of the file holding that microphone.
    name : str
        The microphone's name in the rig file.
    input_full_scale_vrms : float
        RMS voltage of a full-scale sine at the interface input, V (from the
        interface's data sheet at the gain used, or measured).
    calibrator_level_db_spl, calibrator_frequency_hz : float
        The calibrator's stated level (dB re 20 µPa) and frequency (Hz).
    calibrator_class : str
        The calibrator's IEC 60942 class, for the record.
    input_channel : int, optional
        1-based interface input the microphone is on (default: `channel`).

    Returns
    -------
    MicCalibration
        ``sensitivity = tone_rms * sqrt(2) * input_full_scale_vrms / p_cal``,
        in mV/Pa, with ``p_cal = 20 µPa * 10^(L/20)``.
    """
    if not (math.isfinite(input_full_scale_vrms) and input_full_scale_vrms > 0):
        raise InputError(f"input full scale must be a positive voltage, got {input_full_scale_vrms!r}",
                         field="input_full_scale_vrms")
    x, rate = read_wav_channel(path, channel)
    rms = tone_rms(x, rate, calibrator_frequency_hz, source=str(path))
    volts_rms = rms * math.sqrt(2.0) * input_full_scale_vrms
    sensitivity = 1000.0 * volts_rms / pressure_from_db_spl(calibrator_level_db_spl)
    return MicCalibration(name=name, input_channel=int(input_channel or channel),
                          sensitivity_mv_per_pa=sensitivity, input_full_scale_vrms=float(input_full_scale_vrms),
                          calibrator_level_db_spl=float(calibrator_level_db_spl),
                          calibrator_frequency_hz=float(calibrator_frequency_hz),
                          calibrator_class=str(calibrator_class),
                          recorded_rms_dbfs=20.0 * math.log10(rms), recording=Path(path).name,
                          measured_utc=now_utc())


def output_from_loopback_recording(path: str | os.PathLike, channel: int, output_channel: int, *,
                                   played_peak: float, input_full_scale_vrms: float,
                                   tone_frequency_hz: float = 1000.0,
                                   amplifier_gain_db: float = 0.0) -> OutputCalibration:
    """An output's full-scale voltage from a recording of a tone it played into a known input.

    The output is wired (without amplifier) to an input whose full-scale
    voltage is known; a sine of peak `played_peak` (full scale 1) was played.

    Returns
    -------
    OutputCalibration
        ``full_scale_vrms = tone_rms * sqrt(2) * input_full_scale_vrms / played_peak``.
    """
    if not 0 < played_peak <= 1:
        raise InputError(f"played peak must be in (0, 1] full scale, got {played_peak!r}",
                         field="played_peak")
    x, rate = read_wav_channel(path, channel)
    rms = tone_rms(x, rate, tone_frequency_hz, source=str(path))
    volts_rms = rms * math.sqrt(2.0) * input_full_scale_vrms
    return OutputCalibration(channel=int(output_channel), full_scale_vrms=volts_rms / played_peak,
                             amplifier_gain_db=float(amplifier_gain_db),
                             method=(f"{tone_frequency_hz:g} Hz tone at peak {20 * math.log10(played_peak):.1f} "
                                     f"dBFS recorded on an input of {input_full_scale_vrms:g} V RMS full scale "
                                     f"({Path(path).name}, channel {channel})"),
                             measured_utc=now_utc())


def calibration_factors(rec: CalibrationRecord, mic_names: Sequence[str], mic_channels: Sequence[int],
                        speaker_channels: Sequence[int]) -> tuple[np.ndarray, np.ndarray | None, str, list[str]]:
    """Scale factors that turn full-scale impulse responses into physical units.

    Parameters
    ----------
    rec : CalibrationRecord
    mic_names : sequence of str
        The rig's microphones; each must be in the record.
    mic_channels, speaker_channels : sequence of int
        1-based input channel of each mic, output channel of each speaker.

    Returns
    -------
    pa_per_fs : ndarray, shape (n_mic,)
        Pa per full-scale unit at each microphone's input.
    v_per_fs : ndarray, shape (n_spk,) or None
        Volts at the speaker per full-scale unit played, when every
        speaker's output is in the record; else None.
    units : str
        ``"pascal_per_volt"`` or ``"pascal_per_full_scale"``.
    notes : list of str
        Warnings (an output missing, a mic calibrated on another input).

    Raises
    ------
    InputError
        A microphone missing from the record.
    """
    notes: list[str] = []
    pa = []
    for name, ch in zip(mic_names, mic_channels):
        m = rec.mic(name)
        if m is None:
            raise InputError(f"microphone {name!r} is not in the calibration record", source=rec.source,
                             field="microphones", fix="calibrate it with 'arrayplan calibrate mic' "
                                                      "or measure without `calibration`")
        if m.input_channel != ch:
            notes.append(f"microphone {name} was calibrated on input {m.input_channel} but is on input {ch}: "
                         "the input gain may differ")
        pa.append(m.pascal_per_full_scale)
    outs = [rec.output(ch) for ch in speaker_channels]
    if all(o is not None for o in outs):
        return np.array(pa), np.array([o.volts_per_full_scale for o in outs]), "pascal_per_volt", notes
    missing = [ch for ch, o in zip(speaker_channels, outs) if o is None]
    notes.append(f"output channel(s) {missing} are not in the calibration record: responses are in Pa per "
                 "full scale, not Pa per volt")
    return np.array(pa), None, "pascal_per_full_scale", notes

