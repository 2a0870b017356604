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

import datetime as _dt
import json
import math
import os
import sys
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from .._version import __version__
from ..errors import InputError
from ..fileio import write_text_atomic
from ..limits import MAX_CHANNEL_NUMBER

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

#: Reference sound pressure for dB SPL, Pa (20 µPa).
REFERENCE_PRESSURE_PA = 20e-6
#: 0 dBu in volts RMS: sqrt(0.6) (1 mW into 600 ohm).
DBU_REFERENCE_VRMS = math.sqrt(0.6)
FORMAT_NAME = "arrayplan-calibration"
FORMAT_VERSION = 1

#: Accepted range of each number in a record (low, high): what is written must be readable, so the
#: reader and :func:`write_calibration` check the same ranges.
RANGES: dict[str, tuple[float, float]] = {
    "sensitivity_mv_per_pa": (1e-4, 1e5),            # mV/Pa
    "sensitivity_db_re_1v_per_pa": (-200.0, 100.0),  # dB re 1 V/Pa
    "input_full_scale_vrms": (1e-6, 1000.0),         # V RMS
    "full_scale_vrms": (1e-6, 1000.0),               # V RMS at an interface output
    "calibrator_level_db_spl": (40.0, 180.0),        # dB re 20 µPa
    "calibrator_frequency_hz": (1.0, 100_000.0),     # Hz
    "recorded_rms_dbfs": (-400.0, 1.0),              # dBFS
    "amplifier_gain_db": (-100.0, 100.0),            # dB voltage gain
    "sample_rate_hz": (1.0, 768_000.0),              # Hz
}
#: Largest latency accepted, samples (over three minutes at 48 kHz).
MAX_LATENCY_SAMPLES = 10_000_000


def pressure_from_db_spl(level_db: float) -> float:
    """RMS pressure in Pa of a level in dB SPL re 20 µPa (94 dB -> 1.002 Pa)."""
    return REFERENCE_PRESSURE_PA * 10.0 ** (level_db / 20.0)


def dbu_to_vrms(level_dbu: float) -> float:
    """Volts RMS of a level in dBu (+4 dBu -> 1.228 V)."""
    return DBU_REFERENCE_VRMS * 10.0 ** (level_dbu / 20.0)


def sensitivity_db_re_1v_per_pa(mv_per_pa: float) -> float:
    """Microphone sensitivity in dB re 1 V/Pa: ``20 log10(mV/Pa / 1000)``."""
    return 20.0 * math.log10(mv_per_pa / 1000.0)


@dataclass(frozen=True)
class MicCalibration:
    """One microphone on one input.

    Attributes
    ----------
    name : str
        The microphone's name in the rig file.
    input_channel : int
        1-based input it was calibrated on.
    sensitivity_mv_per_pa : float
        Output voltage per pascal, mV/Pa.
    input_full_scale_vrms : float
        RMS voltage of a full-scale sine at that input, V.
    calibrator_level_db_spl, calibrator_frequency_hz : float
        The calibrator's level and frequency.
    calibrator_class : str
        IEC 60942 class of the calibrator ("1", "2", "LS" ...), or "".
    recorded_rms_dbfs : float
        RMS of the recorded tone, dBFS (20 log10 of the RMS sample value).
    recording : str
        File the value came from (for provenance).
    measured_utc : str
    """

    name: str
    input_channel: int
    sensitivity_mv_per_pa: float
    input_full_scale_vrms: float
    calibrator_level_db_spl: float = 94.0
    calibrator_frequency_hz: float = 1000.0
    calibrator_class: str = ""
    recorded_rms_dbfs: float | None = None
    recording: str = ""
    measured_utc: str = ""

    @property
    def pascal_per_full_scale(self) -> float:
        """Pressure (Pa) that a sample value of 1.0 at this input stands for."""
        return math.sqrt(2.0) * self.input_full_scale_vrms / (self.sensitivity_mv_per_pa / 1000.0)


@dataclass(frozen=True)
class OutputCalibration:
    """One output channel (interface output, optionally an amplifier after it).

    Attributes
    ----------
    channel : int
        1-based output channel.
    full_scale_vrms : float
        RMS voltage of a full-scale sine at the interface output, V.
    amplifier_gain_db : float
        Voltage gain of the amplifier after the output, dB (0 for none).
    method : str
        How the value was found.
    measured_utc : str
    """

    channel: int
    full_scale_vrms: float
    amplifier_gain_db: float = 0.0
    method: str = ""
    measured_utc: str = ""

    @property
    def volts_per_full_scale(self) -> float:
        """Voltage at the speaker terminals that a sample value of 1.0 stands for."""
        return math.sqrt(2.0) * self.full_scale_vrms * 10.0 ** (self.amplifier_gain_db / 20.0)


@dataclass(frozen=True)
class LatencyCalibration:
    """Round-trip latency of the interface (output to input), in samples at a rate."""

    samples: int
    sample_rate_hz: float
    output_channel: int | None = None
    input_channel: int | None = None
    device: str = ""
    measured_utc: str = ""


@dataclass(frozen=True)
class CalibrationRecord:
    """A whole calibration record (see the module docstring)."""

    description: str = ""
    microphones: tuple[MicCalibration, ...] = ()
    outputs: tuple[OutputCalibration, ...] = ()
    latency: LatencyCalibration | None = None
    source: str = "<memory>"

    def mic(self, name: str) -> MicCalibration | None:
        return next((m for m in self.microphones if m.name == name), None)

    def output(self, channel: int) -> OutputCalibration | None:
        return next((o for o in self.outputs if o.channel == channel), None)

    def with_mic(self, mic: MicCalibration) -> "CalibrationRecord":
        """A copy with `mic` added or replacing the entry of the same name."""
        mics = tuple(m for m in self.microphones if m.name != mic.name) + (mic,)
        return replace(self, microphones=tuple(sorted(mics, key=lambda m: m.input_channel)))

    def with_output(self, out: OutputCalibration) -> "CalibrationRecord":
        """A copy with `out` added or replacing the entry of the same channel."""
        outs = tuple(o for o in self.outputs if o.channel != out.channel) + (out,)
        return replace(self, outputs=tuple(sorted(outs, key=lambda o: o.channel)))

    def with_latency(self, latency: LatencyCalibration) -> "CalibrationRecord":
        return replace(self, latency=latency)

    def latency_samples_at(self, sample_rate_hz: float) -> int:
        """The stored latency, refusing a record made at another rate."""
        if self.latency is None:
            raise InputError("the calibration record holds no latency", source=self.source, field="latency",
                             fix="run 'arrayplan calibrate latency' or name a reference loop in the rig")
        if abs(self.latency.sample_rate_hz - sample_rate_hz) > 1e-6:
            raise InputError(f"latency was measured at {self.latency.sample_rate_hz:g} Hz, the measurement "
                             f"runs at {sample_rate_hz:g} Hz", source=self.source, field="latency.sample_rate_hz",
                             fix="measure the latency again at this rate")
        return self.latency.samples


def now_utc() -> str:
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()


# ------------------------------------------------------------------ TOML reading

class _Table:
    def __init__(self, table: dict, where: str, source: str) -> None:
        self.t, self.where, self.source = table, where, source

    def fail(self, key: str, problem: str, fix: str | None = None) -> InputError:
        return InputError(problem, source=self.source, field=f"{self.where}{key}", fix=fix)

    def number(self, key: str, default: Any = ..., positive: bool = False) -> float:
        """A finite number, within :data:`RANGES` for `key` where it has a range."""
        if key not in self.t:
            if default is ...:
                raise self.fail(key, "missing", fix=f"add {key} = <number>")
            return default
        v = self.t[key]
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise self.fail(key, f"expected a finite number, got {v!r}")
        if positive and v <= 0:
            raise self.fail(key, f"must be positive, got {v!r}")
        low, high = RANGES.get(key, (-math.inf, math.inf))
        if not low <= v <= high:
            raise self.fail(key, f"must be between {low:g} and {high:g}, got {v!r}")
        return float(v)

    def integer(self, key: str, default: Any = ..., minimum: int = 1, maximum: int = MAX_CHANNEL_NUMBER) -> int:
        """A whole number in ``[minimum, maximum]``."""
        if key not in self.t:
            if default is ...:
                raise self.fail(key, "missing", fix=f"add {key} = <whole number>")
            return default
        v = self.t[key]
        if isinstance(v, bool) or not isinstance(v, int) or not minimum <= v <= maximum:
            raise self.fail(key, f"expected a whole number from {minimum} to {maximum}, got {v!r}")
        return int(v)

    def string(self, key: str, default: Any = ...) -> str:
        if key not in self.t:
            if default is ...:
                raise self.fail(key, "missing")
            return default
        v = self.t[key]
        if not isinstance(v, str):
            raise self.fail(key, f"expected a string, got {v!r}")
        return v

    def only(self, allowed: set[str]) -> None:
        unknown = sorted(set(self.t) - allowed)
        if unknown:
            raise self.fail("", f"unknown key(s) {', '.join(unknown)}",
                            fix=f"allowed: {', '.join(sorted(allowed))}")


_MIC_KEYS = {"name", "input_channel", "sensitivity_mv_per_pa", "sensitivity_db_re_1v_per_pa",
             "input_full_scale_vrms", "calibrator_level_db_spl", "calibrator_frequency_hz",
             "calibrator_class", "recorded_rms_dbfs", "recording", "measured_utc"}
_OUT_KEYS = {"channel", "full_scale_vrms", "amplifier_gain_db", "method", "measured_utc"}
_LAT_KEYS = {"samples", "sample_rate_hz", "output_channel", "input_channel", "device", "measured_utc"}


def read_calibration(path: str | os.PathLike) -> CalibrationRecord:
    """Read and check a calibration record.

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
    """Check and parse the TOML text of a calibration record (see :func:`read_calibration`)."""
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML ({exc})", source=src) from None
    top = _Table(doc, "", src)
    top.only({"format", "format_version", "description", "microphones", "outputs", "latency"})
    if doc.get("format") != FORMAT_NAME:
        raise top.fail("format", f"expected format = \"{FORMAT_NAME}\", got {doc.get('format')!r}")
    version = top.integer("format_version")
    if version > FORMAT_VERSION:
        raise top.fail("format_version", f"version {version} is newer than this arrayplan reads "
                                         f"({FORMAT_VERSION})", fix="upgrade arrayplan")
    mics = []
    for i, entry in enumerate(_array_of_tables(doc, "microphones", src)):
        t = _Table(entry, f"microphones[{i}].", src)
        t.only(_MIC_KEYS)
        mic = MicCalibration(
            name=t.string("name"), input_channel=t.integer("input_channel"),
            sensitivity_mv_per_pa=t.number("sensitivity_mv_per_pa", positive=True),
            input_full_scale_vrms=t.number("input_full_scale_vrms", positive=True),
            calibrator_level_db_spl=t.number("calibrator_level_db_spl", 94.0, positive=True),
            calibrator_frequency_hz=t.number("calibrator_frequency_hz", 1000.0, positive=True),
            calibrator_class=t.string("calibrator_class", ""),
            recorded_rms_dbfs=t.number("recorded_rms_dbfs", None),
            recording=t.string("recording", ""), measured_utc=t.string("measured_utc", ""))
        if "sensitivity_db_re_1v_per_pa" in entry:
            stated = t.number("sensitivity_db_re_1v_per_pa")
            implied = sensitivity_db_re_1v_per_pa(mic.sensitivity_mv_per_pa)
            if abs(stated - implied) > 0.01:
                raise t.fail("sensitivity_db_re_1v_per_pa",
                             f"{stated:g} dB re 1 V/Pa disagrees with {mic.sensitivity_mv_per_pa:g} mV/Pa "
                             f"({implied:.2f} dB)", fix="correct one of them, or delete the dB value")
        if any(m.name == mic.name for m in mics):
            raise t.fail("name", f"microphone {mic.name!r} appears twice")
        mics.append(mic)
    outs = []
    for i, entry in enumerate(_array_of_tables(doc, "outputs", src)):
        t = _Table(entry, f"outputs[{i}].", src)
        t.only(_OUT_KEYS)
        out = OutputCalibration(channel=t.integer("channel"),
                                full_scale_vrms=t.number("full_scale_vrms", positive=True),
                                amplifier_gain_db=t.number("amplifier_gain_db", 0.0),
                                method=t.string("method", ""), measured_utc=t.string("measured_utc", ""))
        if any(o.channel == out.channel for o in outs):
            raise t.fail("channel", f"output channel {out.channel} appears twice")
        outs.append(out)
    latency = None
    if "latency" in doc:
        if not isinstance(doc["latency"], dict):
            raise top.fail("latency", "must be a table [latency]")
        t = _Table(doc["latency"], "latency.", src)
        t.only(_LAT_KEYS)
        latency = LatencyCalibration(samples=t.integer("samples", minimum=0, maximum=MAX_LATENCY_SAMPLES),
                                     sample_rate_hz=t.number("sample_rate_hz", positive=True),
                                     output_channel=t.integer("output_channel", None),
                                     input_channel=t.integer("input_channel", None),
                                     device=t.string("device", ""), measured_utc=t.string("measured_utc", ""))
    return CalibrationRecord(description=top.string("description", ""), microphones=tuple(mics),
                             outputs=tuple(outs), latency=latency, source=src)


def _array_of_tables(doc: dict, key: str, src: str) -> list[dict]:
    v = doc.get(key, [])
    if not isinstance(v, list) or not all(isinstance(e, dict) for e in v):
        raise InputError(f"must be an array of tables ([[{key}]])", source=src, field=key)
    return v


# ------------------------------------------------------------------ TOML writing

def _toml_value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if not math.isfinite(v):
            raise ValueError(f"cannot write {v!r} to TOML")
        return repr(v)
    if isinstance(v, str):
        # JSON's string escapes are TOML's (\\ \" \n \t \uXXXX ...); TOML also wants DEL escaped
        return json.dumps(v, ensure_ascii=False).replace("\x7f", "\\u007f")
    raise TypeError(f"cannot write {type(v).__name__} to TOML")


def _toml_pairs(pairs: Sequence[tuple[str, Any, str]]) -> list[str]:
    lines = []
    for key, value, comment in pairs:
        if value is None or value == "":
            continue
        try:
            line = f"{key} = {_toml_value(value)}"
        except ValueError:
            raise InputError(f"cannot write {value!r}: not a finite number", field=key) from None
        lines.append(f"{line:<44} # {comment}" if comment else line)
    return lines


def format_calibration(rec: CalibrationRecord) -> str:
    """The TOML text of `rec` (what :func:`write_calibration` writes)."""
    lines = [
        "# arrayplan calibration record (format: calibration/README.md).",
        f"# Written by arrayplan {__version__} on {now_utc()}.",
        "# A full-scale sine has peak 1.0; 0 dBu = 0.7746 V RMS; sensitivity in dB re 1 V/Pa",
        "# = 20 log10(mV/Pa / 1000).  Calibrate with a calibrator of known class (IEC 60942)",
        "# and follow its manual and local practice.",
        "",
    ]
    lines += _toml_pairs([("format", FORMAT_NAME, ""), ("format_version", FORMAT_VERSION, ""),
                          ("description", rec.description, "")])
    for m in rec.microphones:
        lines += ["", "[[microphones]]"]
        lines += _toml_pairs([
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
            ("recording", m.recording, ""), ("measured_utc", m.measured_utc, "")])
    for o in rec.outputs:
        lines += ["", "[[outputs]]"]
        lines += _toml_pairs([
            ("channel", o.channel, "1-based output channel"),
            ("full_scale_vrms", _significant(o.full_scale_vrms), "V RMS of a full-scale sine at the output"),
            ("amplifier_gain_db", o.amplifier_gain_db, "voltage gain after the output, dB"),
            ("method", o.method, ""), ("measured_utc", o.measured_utc, "")])
    if rec.latency is not None:
        la = rec.latency
        lines += ["", "[latency]"]
        lines += _toml_pairs([
            ("samples", la.samples, "round trip, output to input"),
            ("sample_rate_hz", la.sample_rate_hz, "valid only at this rate"),
            ("output_channel", la.output_channel, "1-based"), ("input_channel", la.input_channel, "1-based"),
            ("device", la.device, ""), ("measured_utc", la.measured_utc, "")])
    return "\n".join(lines) + "\n"


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
    """The record at `path`, or an empty one when the file does not exist yet."""
    path = Path(path)
    if path.exists():
        return read_calibration(path)
    return CalibrationRecord(description=description, source=str(path))


# ------------------------------------------------------------------ from recordings

def read_wav_channel(path: str | os.PathLike, channel: int, *, field: str = "channel"
                     ) -> tuple[np.ndarray, float]:
    """One channel (1-based) of a WAV file as float64, and its rate."""
    import soundfile as sf

    src = str(path)
    if not Path(src).is_file():
        raise InputError("recording not found", source=src, fix="check the path")
    try:
        data, rate = sf.read(src, dtype="float64", always_2d=True)
    except Exception as exc:  # soundfile raises several kinds
        raise InputError(f"cannot read as audio ({exc})", source=src) from None
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

