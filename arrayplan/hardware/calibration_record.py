"""The calibration record's data: microphones, outputs, latency, and the accepted range of each number.

Reading and writing the record as TOML is :mod:`arrayplan.hardware.calibration`.
"""

from __future__ import annotations

import datetime as _dt
import math
from dataclasses import dataclass, replace

from ..errors import InputError

__all__ = ["FORMAT_NAME", "FORMAT_VERSION", "RANGES", "MAX_LATENCY_SAMPLES", "MicCalibration", "OutputCalibration",
           "LatencyCalibration", "CalibrationRecord", "now_utc"]

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
    """The time now in UTC, to the second, ISO 8601 (``2026-05-01T09:30:00+00:00``)."""
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
