"""What the take loop needs to know: how each take is measured, and how the rig is wired to the device."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import InputError
from ..signals.deconvolve import CLIP_THRESHOLD, DEFAULT_MIN_PEAK_TO_NOISE_DB
from ..signals.sweep_formulas import max_pre_roll_s
from ..signals.sweeps import SweepSettings, SweepSignal

__all__ = ["MeasurementSettings", "RigWiring"]


@dataclass(frozen=True)
class MeasurementSettings:
    """How each take is measured.

    Parameters
    ----------
    f1_hz, f2_hz : float or None
        Sweep band, Hz (f2 default: the lower of 20 kHz and 0.45 fs).
    sweep_s : float
        Duration of one sweep, s.
    peak_dbfs : float or None
        Peak level of the sweep, dBFS (default: the signals' peak cap).
    allow_above_cap : bool
        Allow a peak above the cap (refused otherwise).
    ir_s : float
        Length of the impulse responses kept after zero lag, s.
    pre_s : float or None
        Time kept before zero lag for the pre-ringing of the measurement
        pulse, s; None takes the sweep's default (one Fresnel time at f1,
        at most half-way to the 2nd harmonic; see
        :func:`arrayplan.signals.sweep_formulas.default_pre_roll_s`).
    lead_in_s : float
        Silence before each sweep, s; covers the audio stream's start-up.
    max_latency_s : float
        Longest interface latency expected, s; silence after each sweep is
        ``max_latency_s + ir_s``.
    repeats : int
        Sweeps per take, averaged synchronously.
    fade_in_s, fade_out_s : float or None
        Raised-cosine fades of the sweep, s; None (the default) takes one
        Fresnel time at f1 and f2, which keeps the band flat
        (:func:`arrayplan.signals.sweep_formulas.default_fades_s`).
    min_peak_to_noise_db : float
        A microphone response below this peak-to-noise ratio marks the take.
    clip_threshold : float
        Recorded magnitude counted as clipping (full scale 1).
    """

    f1_hz: float = 40.0
    f2_hz: float | None = None
    sweep_s: float = 3.0
    peak_dbfs: float | None = None
    allow_above_cap: bool = False
    ir_s: float = 0.5
    pre_s: float | None = None
    lead_in_s: float = 0.2
    max_latency_s: float = 0.25
    repeats: int = 1
    fade_in_s: float | None = None
    fade_out_s: float | None = None
    min_peak_to_noise_db: float = DEFAULT_MIN_PEAK_TO_NOISE_DB
    clip_threshold: float = CLIP_THRESHOLD

    def sweep_settings(self, sample_rate_hz: float) -> SweepSettings:
        """The sweep of one repeat, at `sample_rate_hz`.

        Parameters
        ----------
        sample_rate_hz : float
            The device's sample rate (Hz); without an f2, the sweep stops at
            min(20 kHz, 0.45 fs).

        Returns
        -------
        SweepSettings
            Exponential or linear sweep settings for :func:`make_sweep`.

        Raises
        ------
        InputError
            Fewer than 1 repeat, or a non-positive duration.
        """
        if self.repeats < 1:
            raise InputError(f"repeats must be at least 1, got {self.repeats}", field="repeats")
        for name, v in (("ir_s", self.ir_s), ("max_latency_s", self.max_latency_s),
                        ("lead_in_s", self.lead_in_s)):
            if not (math.isfinite(v) and v > 0):
                raise InputError(f"must be a positive number of seconds, got {v!r}", field=name)
        f2 = self.f2_hz if self.f2_hz is not None else min(20000.0, 0.45 * sample_rate_hz)
        kw: dict[str, Any] = {}
        if self.peak_dbfs is not None:
            kw["peak_dbfs"] = self.peak_dbfs
        return SweepSettings(kind="exponential", f1_hz=self.f1_hz, f2_hz=f2, duration_s=self.sweep_s,
                             sample_rate_hz=sample_rate_hz, fade_in_s=self.fade_in_s, fade_out_s=self.fade_out_s,
                             pad_before_s=self.lead_in_s, pad_after_s=self.max_latency_s + self.ir_s,
                             allow_above_cap=self.allow_above_cap, **kw)

    def pre_roll_samples(self, sweep: SweepSignal) -> int:
        """Samples kept before zero lag: `pre_s`, else the sweep's default.

        Parameters
        ----------
        sweep : SweepSignal
            The sweep that was played.

        Returns
        -------
        int
            Pre-roll (samples).

        Raises
        ------
        InputError
            For a negative `pre_s` or one reaching past half-way to the 2nd harmonic.
        """
        if self.pre_s is None:
            return sweep.pre_roll_samples
        fs = sweep.settings.sample_rate_hz
        if not (math.isfinite(self.pre_s) and self.pre_s >= 0):
            raise InputError(f"must be zero or a positive time, got {self.pre_s * 1e3!r} ms", field="pre_s")
        n = int(round(self.pre_s * fs))
        s = sweep.settings
        top = int(math.floor(max_pre_roll_s(s.kind, s.f1_hz, s.f2_hz, s.duration_s) * fs))
        if n > top:
            raise InputError(f"{self.pre_s * 1e3:g} ms reaches past half-way to the 2nd harmonic's response "
                             f"({math.floor(1e4 * top / fs) / 10:g} ms)", field="pre_s",
                             fix="use a shorter pre-roll, or a longer sweep")
        return n


@dataclass(frozen=True)
class RigWiring:
    """What the take loop needs from a rig: names and 0-based device channels.

    Attributes
    ----------
    speaker_names, mic_names : tuple of str
    speaker_outputs, mic_inputs : tuple of int
        0-based output channel per speaker, input channel per microphone.
    reference : (int, int) or None
        0-based (output, input) of the loopback reference.
    speaker_positions, mic_positions : ndarray, shape (n, 3), or None
        Metres.
    rig_sha256, rig_source : str
    """

    speaker_names: tuple[str, ...]
    speaker_outputs: tuple[int, ...]
    mic_names: tuple[str, ...]
    mic_inputs: tuple[int, ...]
    reference: tuple[int, int] | None = None
    speaker_positions: np.ndarray | None = None
    mic_positions: np.ndarray | None = None
    rig_sha256: str = ""
    rig_source: str = ""

    def __post_init__(self) -> None:
        src = self.rig_source or None
        if len(self.speaker_names) != len(self.speaker_outputs) or len(self.mic_names) != len(self.mic_inputs):
            raise InputError("each speaker needs one output channel and each microphone one input channel",
                             source=src)
        for kind, chans in (("speaker output", self.speaker_outputs), ("microphone input", self.mic_inputs)):
            if any(c < 0 for c in chans):
                raise InputError(f"{kind} channels are numbered from 1", source=src)
            if len(set(chans)) != len(chans):
                raise InputError(f"two entries share a {kind} channel: {[c + 1 for c in chans]}", source=src,
                                 fix="give each element its own channel")
        if self.reference is not None:
            out, inp = self.reference
            if out in self.speaker_outputs:
                raise InputError(f"reference output {out + 1} is also a speaker's output", source=src,
                                 field="hardware.reference.output_channel",
                                 fix="wire the loopback from a spare output")
            if inp in self.mic_inputs:
                raise InputError(f"reference input {inp + 1} is also a microphone's input", source=src,
                                 field="hardware.reference.input_channel",
                                 fix="wire the loopback into a spare input")

    @classmethod
    def from_rig(cls, rig: Any) -> "RigWiring":
        """From an :class:`arrayplan.rig.Rig` (1-based channels become 0-based).

        Parameters
        ----------
        rig : Rig
            Element names, 1-based hardware channels and reference.

        Returns
        -------
        RigWiring
            0-based device channels.

        Raises
        ------
        InputError
            A reference with only one of its two channels.
        """
        hw = rig.hardware
        ref = None
        if (hw.reference_output is None) != (hw.reference_input is None):
            raise InputError("the reference needs both output_channel and input_channel", source=rig.source,
                             field="hardware.reference")
        if hw.reference_output is not None:
            ref = (int(hw.reference_output) - 1, int(hw.reference_input) - 1)
        return cls(tuple(rig.speakers.names), tuple(int(c) - 1 for c in rig.speakers.channels),
                   tuple(rig.mics.names), tuple(int(c) - 1 for c in rig.mics.channels), ref,
                   np.asarray(rig.speakers.positions, float), np.asarray(rig.mics.positions, float),
                   rig.sha256, str(rig.source))

    @property
    def n_outputs_needed(self) -> int:
        """Highest 1-based output channel used.

        Returns
        -------
        int
            Outputs the device must have (reference included).
        """
        return max(list(self.speaker_outputs) + ([self.reference[0]] if self.reference else [])) + 1

    @property
    def n_inputs_needed(self) -> int:
        """Highest 1-based input channel used (the microphones' and the reference loop's).

        Returns
        -------
        int
            The device needs at least this many inputs.
        """
        return max(list(self.mic_inputs) + ([self.reference[1]] if self.reference else [])) + 1

    def to_json(self) -> dict[str, Any]:
        """The wiring as plain data for the session file.

        Returns
        -------
        dict
            ``rig_sha256``, speakers and microphones with their 1-based
            channels, and the 1-based reference pair (or None).
        """
        return {
            "rig_sha256": self.rig_sha256,
            "speakers": [{"name": n, "output_channel": c + 1} for n, c in
                         zip(self.speaker_names, self.speaker_outputs)],
            "microphones": [{"name": n, "input_channel": c + 1} for n, c in zip(self.mic_names, self.mic_inputs)],
            "reference": None if self.reference is None else
            {"output_channel": self.reference[0] + 1, "input_channel": self.reference[1] + 1},
        }
