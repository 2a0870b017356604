"""Calibration records: microphone sensitivities, output gains and interface latency, as TOML.

A record (format in ``calibration/README.md``) holds what turns a
measurement in full-scale units into physical ones:

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
import sys
from pathlib import Path
from typing import Any, Sequence

import numpy as np
import tomlkit

from .._version import __version__
from ..formats.audiofiles import read_audio
from ..errors import InputError
from ..formats.fileio import write_text_atomic
from ..limits import MAX_CHANNEL_NUMBER
from ..formats.tomlfields import FieldReader
from ..units import DBU_REFERENCE_VRMS, dbu_to_vrms, sensitivity_db_re_1v_per_pa
from ..units import P_REF_PA as REFERENCE_PRESSURE_PA
from ..units import pressure_from_spl as pressure_from_db_spl
from .calibration_record import (FORMAT_NAME, FORMAT_VERSION, MAX_LATENCY_SAMPLES, RANGES, CalibrationRecord,
                                 LatencyCalibration, MicCalibration, OutputCalibration, now_utc)

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

__all__ = [
    "REFERENCE_PRESSURE_PA", "DBU_REFERENCE_VRMS", "FORMAT_NAME",
    "pressure_from_db_spl", "dbu_to_vrms", "sensitivity_db_re_1v_per_pa",
    "MicCalibration", "OutputCalibration", "LatencyCalibration", "CalibrationRecord",
    "read_calibration", "parse_calibration", "write_calibration", "tone_rms", "RANGES", "mic_from_calibrator_recording",
    "output_from_loopback_recording", "read_wav_channel", "format_calibration", "read_or_new",
    "calibration_factors", "now_utc",
]

# ------------------------------------------------------------------ TOML reading

_MIC_KEYS = {"name", "input_channel", "sensitivity_mv_per_pa", "sensitivity_db_re_1v_per_pa",
             "input_full_scale_vrms", "calibrator_level_db_spl", "calibrator_frequency_hz",
             "calibrator_class", "recorded_rms_dbfs", "recording", "measured_utc"}
_OUT_KEYS = {"channel", "full_scale_vrms", "amplifier_gain_db", "method", "measured_utc"}
_LAT_KEYS = {"samples", "sample_rate_hz", "output_channel", "input_channel", "device", "measured_utc"}


def read_calibration(path: str | os.PathLike) -> CalibrationRecord:
    """Read and check a calibration record.

    Parameters
    ----------
    path : str or PathLike
        The calibration TOML file.

    Returns
    -------
    CalibrationRecord
        Microphone sensitivities (mV/Pa), output full-scale voltages (V RMS)
        and latency, with the file as source.

    Raises
    ------
    InputError
        Missing file, malformed TOML, a missing or wrong field (named), a
        number outside its range (:data:`RANGES`), a duplicated microphone or
        output, or a stated dB sensitivity that disagrees with the mV/Pa value.
    """
    path = Path(path)
    src = str(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError("calibration record not found", source=src,
                         fix="create it with 'arrayplan calibrate mic/output/latency'") from None
    except (UnicodeDecodeError, IsADirectoryError) as exc:
        raise InputError(f"cannot read as UTF-8 text ({exc.__class__.__name__})", source=src) from None
    return parse_calibration(text, src)


def parse_calibration(text: str, src: str = "<text>") -> CalibrationRecord:
    """Check and parse the TOML text of a calibration record (see :func:`read_calibration`).

    Parameters
    ----------
    text : str
        TOML text.
    src : str
        Where the text came from, named in messages.

    Returns
    -------
    CalibrationRecord
        The checked record.

    Raises
    ------
    InputError
        As for :func:`read_calibration`.
    """
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML ({exc})", source=src) from None
    r = FieldReader(src, ranges=RANGES, integer_max=MAX_CHANNEL_NUMBER)
    r.keys(doc, {"format", "format_version", "description", "microphones", "outputs", "latency"}, "")
    if doc.get("format") != FORMAT_NAME:
        raise r.fail("format", f"expected format = \"{FORMAT_NAME}\", got {doc.get('format')!r}")
    version = r.integer(doc, "format_version", "")
    if version > FORMAT_VERSION:
        raise r.fail("format_version", f"version {version} is newer than this arrayplan reads "
                                       f"({FORMAT_VERSION})", fix="upgrade arrayplan")
    mics: list[MicCalibration] = []
    for i, entry in enumerate(_array_of_tables(doc, "microphones", src)):
        mic = _mic(entry, f"microphones[{i}]", r)
        if any(m.name == mic.name for m in mics):
            raise r.fail(f"microphones[{i}].name", f"microphone {mic.name!r} appears twice")
        mics.append(mic)
    outs: list[OutputCalibration] = []
    for i, entry in enumerate(_array_of_tables(doc, "outputs", src)):
        where = f"outputs[{i}]"
        r.keys(entry, _OUT_KEYS, where)
        out = OutputCalibration(channel=r.integer(entry, "channel", where),
                                full_scale_vrms=r.number(entry, "full_scale_vrms", where, positive=True),
                                amplifier_gain_db=r.number(entry, "amplifier_gain_db", where, 0.0),
                                method=r.string(entry, "method", where, "", allow_empty=True),
                                measured_utc=r.string(entry, "measured_utc", where, "", allow_empty=True))
        if any(o.channel == out.channel for o in outs):
            raise r.fail(f"{where}.channel", f"output channel {out.channel} appears twice")
        outs.append(out)
    latency = None
    if "latency" in doc:
        t = doc["latency"]
        if not isinstance(t, dict):
            raise r.fail("latency", "must be a table [latency]")
        r.keys(t, _LAT_KEYS, "latency")
        latency = LatencyCalibration(
            samples=r.integer(t, "samples", "latency", minimum=0, maximum=MAX_LATENCY_SAMPLES),
            sample_rate_hz=r.number(t, "sample_rate_hz", "latency", positive=True),
            output_channel=r.integer(t, "output_channel", "latency", None),
            input_channel=r.integer(t, "input_channel", "latency", None),
            device=r.string(t, "device", "latency", "", allow_empty=True),
            measured_utc=r.string(t, "measured_utc", "latency", "", allow_empty=True))
    return CalibrationRecord(description=r.string(doc, "description", "", "", allow_empty=True),
                             microphones=tuple(mics), outputs=tuple(outs), latency=latency, source=src)


def _mic(entry: dict, where: str, r: FieldReader) -> MicCalibration:
    """One ``[[microphones]]`` entry; a stated dB sensitivity must agree with the mV/Pa value."""
    r.keys(entry, _MIC_KEYS, where)
    mic = MicCalibration(
        name=r.string(entry, "name", where, allow_empty=True), input_channel=r.integer(entry, "input_channel", where),
        sensitivity_mv_per_pa=r.number(entry, "sensitivity_mv_per_pa", where, positive=True),
        input_full_scale_vrms=r.number(entry, "input_full_scale_vrms", where, positive=True),
        calibrator_level_db_spl=r.number(entry, "calibrator_level_db_spl", where, 94.0, positive=True),
        calibrator_frequency_hz=r.number(entry, "calibrator_frequency_hz", where, 1000.0, positive=True),
        calibrator_class=r.string(entry, "calibrator_class", where, "", allow_empty=True),
        recorded_rms_dbfs=r.number(entry, "recorded_rms_dbfs", where, None),
        recording=r.string(entry, "recording", where, "", allow_empty=True),
        measured_utc=r.string(entry, "measured_utc", where, "", allow_empty=True))
    if "sensitivity_db_re_1v_per_pa" in entry:
        stated = r.number(entry, "sensitivity_db_re_1v_per_pa", where)
        implied = sensitivity_db_re_1v_per_pa(mic.sensitivity_mv_per_pa)
        if abs(stated - implied) > 0.01:
            raise r.fail(f"{where}.sensitivity_db_re_1v_per_pa",
                         f"{stated:g} dB re 1 V/Pa disagrees with {mic.sensitivity_mv_per_pa:g} mV/Pa "
                         f"({implied:.2f} dB)", fix="correct one of them, or delete the dB value")
    return mic


def _array_of_tables(doc: dict, key: str, src: str) -> list[dict]:
    v = doc.get(key, [])
    if not isinstance(v, list) or not all(isinstance(e, dict) for e in v):
        raise InputError(f"must be an array of tables ([[{key}]])", source=src, field=key)
    return v


# ------------------------------------------------------------------ TOML writing

#: Column at which the comment after a value starts (as far as the value leaves room).
_COMMENT_COLUMN = 45


def _add_pairs(table: Any, pairs: Sequence[tuple[str, Any, str]]) -> None:
    """Add ``key = value  # comment`` lines to a tomlkit table, skipping None and empty strings."""
    for key, value, comment in pairs:
        if value is None or value == "":
            continue
        if isinstance(value, float) and not math.isfinite(value):
            raise InputError(f"cannot write {value!r}: not a finite number", field=key)
        item = tomlkit.item(value)
        if comment:
            item.comment(comment)
            width = len(f"{key} = {item.as_string()}")
            item.trivia.comment_ws = " " * max(1, _COMMENT_COLUMN - width)
        table.add(key, item)


def _array_of_tables_of(rows: Sequence[Sequence[tuple[str, Any, str]]]) -> Any:
    out = tomlkit.aot()
    for pairs in rows:
        table = tomlkit.table()
        _add_pairs(table, pairs)
        out.append(table)
    return out


def format_calibration(rec: CalibrationRecord) -> str:
    """The TOML text of `rec` (what :func:`write_calibration` writes), commented, through tomlkit.

    Parameters
    ----------
    rec : CalibrationRecord
        The record.

    Returns
    -------
    str
        TOML text with a header comment and a comment giving each value's unit.
    """
    doc = tomlkit.document()
    for line in ("arrayplan calibration record (format: calibration/README.md).",
                 f"Written by arrayplan {__version__} on {now_utc()}.",
                 "A full-scale sine has peak 1.0; 0 dBu = 0.7746 V RMS; sensitivity in dB re 1 V/Pa",
                 "= 20 log10(mV/Pa / 1000).  Calibrate with a calibrator of known class (IEC 60942)",
                 "and follow its manual and local practice."):
        doc.add(tomlkit.comment(line))
    doc.add(tomlkit.nl())
    _add_pairs(doc, [("format", FORMAT_NAME, ""), ("format_version", FORMAT_VERSION, ""),
                     ("description", rec.description, "")])
    if rec.microphones:
        doc.append("microphones", _array_of_tables_of([[
            ("name", m.name, "as in the rig file"),
            ("input_channel", m.input_channel, "1-based input it was calibrated on"),
            ("sensitivity_mv_per_pa", _significant(m.sensitivity_mv_per_pa), "mV/Pa"),
            ("sensitivity_db_re_1v_per_pa", round(sensitivity_db_re_1v_per_pa(m.sensitivity_mv_per_pa), 3)
             if _in_range("sensitivity_mv_per_pa", m.sensitivity_mv_per_pa) else None,
             "derived, checked on reading"),
            ("input_full_scale_vrms", _significant(m.input_full_scale_vrms), "V RMS of a full-scale sine"),
            ("calibrator_level_db_spl", m.calibrator_level_db_spl, "dB re 20 uPa"),
            ("calibrator_frequency_hz", m.calibrator_frequency_hz, "Hz"),
            ("calibrator_class", m.calibrator_class, "IEC 60942 class"),
            ("recorded_rms_dbfs", None if m.recorded_rms_dbfs is None else round(m.recorded_rms_dbfs, 3),
             "RMS of the recorded tone"),
            ("recording", m.recording, ""), ("measured_utc", m.measured_utc, "")] for m in rec.microphones]))
    if rec.outputs:
        doc.append("outputs", _array_of_tables_of([[
            ("channel", o.channel, "1-based output channel"),
            ("full_scale_vrms", _significant(o.full_scale_vrms), "V RMS of a full-scale sine at the output"),
            ("amplifier_gain_db", o.amplifier_gain_db, "voltage gain after the output, dB"),
            ("method", o.method, ""), ("measured_utc", o.measured_utc, "")] for o in rec.outputs]))
    if rec.latency is not None:
        la = rec.latency
        table = tomlkit.table()
        _add_pairs(table, [
            ("samples", la.samples, "round trip, output to input"),
            ("sample_rate_hz", la.sample_rate_hz, "valid only at this rate"),
            ("output_channel", la.output_channel, "1-based"), ("input_channel", la.input_channel, "1-based"),
            ("device", la.device, ""), ("measured_utc", la.measured_utc, "")])
        doc.append("latency", table)
    return tomlkit.dumps(doc)


def _in_range(key: str, value: float) -> bool:
    low, high = RANGES[key]
    return isinstance(value, (int, float)) and low <= value <= high


def _significant(x: float, digits: int = 7) -> float:
    """`x` rounded to `digits` significant digits (readable, and relative error below 1e-6)."""
    return float(f"{x:.{digits}g}")


def write_calibration(path: str | os.PathLike, rec: CalibrationRecord) -> Path:
    """Write `rec` to `path` as TOML, atomically; returns the path.

    The text is read back with :func:`parse_calibration` first, so a record
    that could not be read (a value out of range, a repeated name) is refused
    with an :class:`InputError` naming the field, and nothing is written.

    Parameters
    ----------
    path : str or PathLike
        The TOML file to write.
    rec : CalibrationRecord
        The record.

    Returns
    -------
    Path
        The path written.
    """
    text = format_calibration(rec)
    try:
        text.encode("utf-8")
    except UnicodeEncodeError:
        raise InputError("a name or description holds characters that cannot be written as UTF-8",
                         source=str(path)) from None
    parse_calibration(text, str(path))
    return write_text_atomic(path, text)


def read_or_new(path: str | os.PathLike, description: str = "") -> CalibrationRecord:
    """The record at `path`, or an empty one when the file does not exist yet.

    Parameters
    ----------
    path : str or PathLike
        The calibration TOML file.
    description : str
        Description of a new, empty record.

    Returns
    -------
    CalibrationRecord
        The file's record, checked, or an empty record with `path` as source.
    """
    path = Path(path)
    if path.exists():
        return read_calibration(path)
    return CalibrationRecord(description=description, source=str(path))


# ------------------------------------------------------------------ from recordings

def read_wav_channel(path: str | os.PathLike, channel: int, *, field: str = "channel"
                     ) -> tuple[np.ndarray, float]:
    """One channel (1-based) of a WAV file as float64, and its rate.

    Parameters
    ----------
    path : str or PathLike
        The WAV file.
    channel : int
        1-based channel.
    field : str
        Field named in messages about the channel.

    Returns
    -------
    x : ndarray, shape (n_samples,)
        The channel, full scale = 1.
    rate : float
        Sample rate (Hz).

    Raises
    ------
    InputError
        A missing or unreadable file, a channel the file does not have, or
        NaN or infinite samples.
    """
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

    Parameters
    ----------
    x : ndarray, shape (n_samples,)
        The recording, full scale = 1.
    sample_rate_hz : float
        Sample rate (Hz).
    frequency_hz : float
        The tone's stated frequency (Hz).
    source : str
        Named in messages.
    trim_fraction : float
        Share of the recording skipped at each end.

    Returns
    -------
    float
        RMS of the band-passed tone (full scale = 1, so a full-scale sine
        gives 0.707).

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

    Parameters
    ----------
    path : str or PathLike
        WAV recording of the tone.
    channel : int
        1-based channel of the file holding it.
    output_channel : int
        1-based output channel that played it.
    played_peak : float
        Peak of the played sine (full scale = 1).
    input_full_scale_vrms : float
        RMS voltage of a full-scale sine at the recording input (V).
    tone_frequency_hz : float
        The tone's frequency (Hz).
    amplifier_gain_db : float
        Gain of the amplifier used after this output in the rig (dB), for
        the record.

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

