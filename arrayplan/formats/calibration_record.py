"""The calibration record: microphones, outputs and latency as TOML, with the accepted range of each number.

A record (``format = "arrayplan-calibration"``, ``format_version = 1``, both
checked through :mod:`arrayplan.formats._versioning`; the layout in
``calibration/README.md``) holds what turns a measurement in full-scale units
into physical ones.  :func:`write_calibration` writes it, commented, through
tomlkit; :func:`read_calibration` reads it back, naming the field of any
problem.  Finding the values from recordings is
:mod:`arrayplan.hardware.calibration`.
"""

from __future__ import annotations

import datetime as _dt
import math
import os
import sys
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, Sequence

import tomlkit

from .._version import __version__
from ..errors import InputError
from ..limits import MAX_CHANNEL_NUMBER
from ..units import sensitivity_db_re_1v_per_pa
from ._versioning import check, stamp
from .atomic_files import write_text_atomic
from .tomlfields import FieldReader

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

__all__ = ["FORMAT_NAME", "FORMAT_VERSION", "RANGES", "MAX_LATENCY_SAMPLES", "MicCalibration", "OutputCalibration",
           "LatencyCalibration", "CalibrationRecord", "now_utc", "read_calibration", "parse_calibration",
           "format_calibration", "write_calibration", "read_or_new"]

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


@dataclass(frozen=True)
class MicCalibration:
    """One microphone on one input.

    :func:`arrayplan.hardware.calibration.mic_from_calibrator_recording` makes one from a calibrator recording.

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
        The calibrator's level (dB SPL re 20 µPa) and frequency (Hz).
    calibrator_class : str
        IEC 60942 class of the calibrator ("1", "2", "LS" ...), or "".
    recorded_rms_dbfs : float or None
        RMS of the recorded tone, dBFS (20 log10 of the RMS sample value); None when not stated.
    recording : str
        File the value came from (for provenance).
    measured_utc : str
        When the calibrator was recorded, ISO 8601 UTC (:func:`now_utc`), or "".
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
        """Pressure that a sample value of 1.0 at this input stands for.

        ``sqrt(2) * input_full_scale_vrms / (sensitivity_mv_per_pa / 1000)``: a full-scale sine has peak 1.0.

        Returns
        -------
        float
            Pa per full-scale unit.
        """
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
        When it was measured, ISO 8601 UTC (:func:`now_utc`), or "".
    """

    channel: int
    full_scale_vrms: float
    amplifier_gain_db: float = 0.0
    method: str = ""
    measured_utc: str = ""

    @property
    def volts_per_full_scale(self) -> float:
        """Voltage at the speaker terminals that a sample value of 1.0 stands for.

        Returns
        -------
        float
            V per full-scale unit, ``sqrt(2) * full_scale_vrms * 10^(amplifier_gain_db / 20)``.
        """
        return math.sqrt(2.0) * self.full_scale_vrms * 10.0 ** (self.amplifier_gain_db / 20.0)


@dataclass(frozen=True)
class LatencyCalibration:
    """Round-trip latency of the interface (output to input), in samples at a rate.

    Attributes
    ----------
    samples : int
        The round trip, samples (0 to :data:`MAX_LATENCY_SAMPLES`).
    sample_rate_hz : float
        The rate it was measured at, Hz; the value holds only at this rate.
    output_channel, input_channel : int or None
        1-based output and input of the loop it was measured on, if known.
    device : str
        The audio interface's name, or "".
    measured_utc : str
        Time of the measurement (UTC, ISO 8601), or "".
    """

    samples: int
    sample_rate_hz: float
    output_channel: int | None = None
    input_channel: int | None = None
    device: str = ""
    measured_utc: str = ""


@dataclass(frozen=True)
class CalibrationRecord:
    """A whole calibration record (see the module docstring).

    Attributes
    ----------
    description : str
        Free text (the rig, the interface, the gains), or "".
    microphones : tuple of MicCalibration
        One per microphone, names unique, sorted by input channel.
    outputs : tuple of OutputCalibration
        One per output channel, sorted by channel.
    latency : LatencyCalibration or None
        The interface's round-trip latency, when measured.
    source : str
        The file it was read from (named in messages), ``"<memory>"`` otherwise.
    """

    description: str = ""
    microphones: tuple[MicCalibration, ...] = ()
    outputs: tuple[OutputCalibration, ...] = ()
    latency: LatencyCalibration | None = None
    source: str = "<memory>"

    def mic(self, name: str) -> MicCalibration | None:
        """The entry of one microphone.

        Parameters
        ----------
        name : str
            The microphone's name in the rig file.

        Returns
        -------
        MicCalibration or None
            None when the record holds no such microphone.
        """
        return next((m for m in self.microphones if m.name == name), None)

    def output(self, channel: int) -> OutputCalibration | None:
        """The entry of one output channel.

        Parameters
        ----------
        channel : int
            1-based output channel.

        Returns
        -------
        OutputCalibration or None
            None when the channel is not in the record.
        """
        return next((o for o in self.outputs if o.channel == channel), None)

    def with_mic(self, mic: MicCalibration) -> "CalibrationRecord":
        """A copy with `mic` added or replacing the entry of the same name.

        Parameters
        ----------
        mic : MicCalibration
            The new entry, keyed by its name.

        Returns
        -------
        CalibrationRecord
            The microphones sorted by input channel; this record is unchanged.
        """
        mics = tuple(m for m in self.microphones if m.name != mic.name) + (mic,)
        return replace(self, microphones=tuple(sorted(mics, key=lambda m: m.input_channel)))

    def with_output(self, out: OutputCalibration) -> "CalibrationRecord":
        """A copy with `out` added or replacing the entry of the same channel.

        Parameters
        ----------
        out : OutputCalibration
            The output's new calibration, keyed by its channel.

        Returns
        -------
        CalibrationRecord
            A new record, its outputs sorted by channel.
        """
        outs = tuple(o for o in self.outputs if o.channel != out.channel) + (out,)
        return replace(self, outputs=tuple(sorted(outs, key=lambda o: o.channel)))

    def with_latency(self, latency: LatencyCalibration) -> "CalibrationRecord":
        """A copy with `latency` in place of the stored latency.

        The latency holds only at its sample rate (:meth:`latency_samples_at`).

        Parameters
        ----------
        latency : LatencyCalibration
            The new round-trip latency.

        Returns
        -------
        CalibrationRecord
            This record is unchanged.
        """
        return replace(self, latency=latency)

    def latency_samples_at(self, sample_rate_hz: float) -> int:
        """The stored latency, refusing a record made at another rate.

        Parameters
        ----------
        sample_rate_hz : float
            The rate the measurement runs at, Hz.

        Returns
        -------
        int
            The round-trip latency, samples.

        Raises
        ------
        InputError
            When the record holds no latency, or one measured at another rate.
        """
        if self.latency is None:
            raise InputError("the calibration record holds no latency", source=self.source, field="latency",
                             fix="run 'arrayplan calibrate latency' or name a reference loop in the rig")
        if abs(self.latency.sample_rate_hz - sample_rate_hz) > 1e-6:
            raise InputError(f"latency was measured at {self.latency.sample_rate_hz:g} Hz, the measurement "
                             f"runs at {sample_rate_hz:g} Hz", source=self.source, field="latency.sample_rate_hz",
                             fix="measure the latency again at this rate")
        return self.latency.samples


def now_utc() -> str:
    """The time now in UTC, to the second.

    Returns
    -------
    str
        ISO 8601, for example ``2026-05-01T09:30:00+00:00``.
    """
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()


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
    check(doc, FORMAT_NAME, FORMAT_VERSION, src)
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
    _add_pairs(doc, [(key, value, "") for key, value in
                     stamp({"description": rec.description}, FORMAT_NAME, FORMAT_VERSION).items()])
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
