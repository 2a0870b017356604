"""The measurement loop: one take per speaker, saved as it ends, resumable, checked.

For each speaker in turn the sweep (:func:`arrayplan.signals.sweeps.make_sweep`,
faded in and out, peak under the cap) is played on the speaker's output,
optionally several times back to back, while every microphone and the
loopback reference are recorded.  The repeats are averaged synchronously,
deconvolved (:func:`arrayplan.signals.deconvolve.deconvolve`), the latency
found from the reference (or taken from a calibration record) is removed,
and the take is checked: clipping at an input, xruns, peak-to-noise below a
threshold, a speaker that shows up on no microphone.  Each problem is a
warning and marks the take; nothing fails silently.

An output folder looks like::

    session.json              what was measured and how (checked on resume)
    takes/001-S1/             one folder per finished take, renamed into place, with SHA256SUMS
        recording.wav         raw inputs (mics in rig order, then the reference),
                              every repeat, float32
        irset/                the take's impulse responses (arrayplan.irset); each
                              starts the pre-roll before zero lag (the set's
                              zero_lag_samples) to keep the pulse's pre-ringing
        take.json             status ("ok" or "marked"), warnings, latency, checks
    irset/                    all speakers together, written when every take is done

A take folder is built under a hidden staging name and renamed when complete,
so a take is either entirely there or not at all; running again into the
same folder measures only the missing takes.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Callable, Sequence

import numpy as np

from ..errors import DeviceError, InputError
from ..fileio import make_folders
from ..progress import ticking
from ..signals.deconvolve import (CLIP_THRESHOLD, DEFAULT_MIN_PEAK_TO_NOISE_DB, clipped_sample_counts,
                                  deconvolve, harmonic_levels_db, peak_to_noise_db)
from ..signals.sweeps import SweepSettings, SweepSignal, make_sweep, max_pre_roll_s
from .calibration import CalibrationRecord, calibration_factors
from .duplex import AudioLink, DuplexResult
from .session_files import (SESSION_FILE, TakeResult, _cleanup_staging, _load_take, _open_session, _save_take,
                            _session_record, _undo_fresh_session, _write_combined, completed_takes,
                            take_folder_name)

__all__ = ["MeasurementSettings", "RigWiring", "TakeResult", "TakeProgress", "MeasurementSummary", "measure",
           "estimate_latency", "take_folder_name", "completed_takes", "SESSION_FILE",
           "NOT_DETECTED_DB", "REFERENCE_MIN_DB"]

#: A speaker whose best peak-to-noise ratio over all microphones is below
#: this (dB) "shows up on no microphone".  The largest of N samples of white
#: noise is about sqrt(2 ln N) times its RMS, 12-13 dB for the lengths used
#: here, so a response that is only noise stays below 20 dB (common
#: practice, no source).
NOT_DETECTED_DB = 20.0

#: The loopback reference must stand this far (dB) above the rest of its
#: deconvolved window to be trusted for the latency (common practice, no source).
REFERENCE_MIN_DB = 30.0

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
        :func:`arrayplan.signals.sweeps.default_pre_roll_s`).
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
        (:func:`arrayplan.signals.sweeps.default_fades_s`).
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
        """The sweep of one repeat, at `sample_rate_hz`."""
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
        """From an :class:`arrayplan.rig.Rig` (1-based channels become 0-based)."""
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
        """Highest 1-based output channel used."""
        return max(list(self.speaker_outputs) + ([self.reference[0]] if self.reference else [])) + 1

    @property
    def n_inputs_needed(self) -> int:
        """Highest 1-based input channel used."""
        return max(list(self.mic_inputs) + ([self.reference[1]] if self.reference else [])) + 1

    def to_json(self) -> dict[str, Any]:
        return {
            "rig_sha256": self.rig_sha256,
            "speakers": [{"name": n, "output_channel": c + 1} for n, c in
                         zip(self.speaker_names, self.speaker_outputs)],
            "microphones": [{"name": n, "input_channel": c + 1} for n, c in zip(self.mic_names, self.mic_inputs)],
            "reference": None if self.reference is None else
            {"output_channel": self.reference[0] + 1, "input_channel": self.reference[1] + 1},
        }


@dataclass(frozen=True)
class TakeProgress:
    """Where the take loop is, for progress displays (see ``on_progress`` of :func:`measure`).

    Attributes
    ----------
    take : int
        0-based index of the speaker (and take).
    n_takes : int
    speaker : str
    stage : str
        ``"kept"`` (finished by an earlier run, not measured again),
        ``"playing"``, ``"analysing"`` or ``"saved"``.
    played_s : float
        Seconds of the take's signal played so far: wall-clock time since
        the play call began, at most `signal_s` (the stream's start-up is
        not subtracted).
    signal_s : float
        Length of the take's signal (lead-in, sweeps, tail), s.
    """

    take: int
    n_takes: int
    speaker: str
    stage: str
    played_s: float = 0.0
    signal_s: float = 0.0


@dataclass
class MeasurementSummary:
    """What :func:`measure` did."""

    out_dir: Path
    takes: list[TakeResult]
    measured: list[str]
    resumed: list[str]
    irset_path: Path | None
    warnings: list[str]


def estimate_latency(reference: np.ndarray, sweep: SweepSignal, max_latency_samples: int,
                     *, source: str = "reference") -> tuple[int, float, float]:
    """Latency of a loopback recording of the sweep, in samples.

    Parameters
    ----------
    reference : ndarray, shape (n_samples,)
        The reference input's recording of one sweep file (lead-in, sweep, tail).
    sweep : SweepSignal
    max_latency_samples : int

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


def measure(link: AudioLink, wiring: RigWiring, out_dir: str | os.PathLike,
            settings: MeasurementSettings = MeasurementSettings(), *,
            calibration: CalibrationRecord | None = None, latency_samples: int | None = None,
            redo_marked: bool = False, on_event: Callable[[str], None] = lambda text: None,
            on_warning: Callable[[str], None] = lambda text: None,
            on_progress: Callable[[TakeProgress], None] | None = None) -> MeasurementSummary:
    """Measure every speaker's take that `out_dir` does not hold yet.

    Parameters
    ----------
    link : AudioLink
        The real interface (:class:`~arrayplan.hardware.duplex.SoundDeviceLink`)
        or a simulated one; it must have the channels `wiring` uses.
    wiring : RigWiring
    out_dir : path
        Output folder (created); re-running into it resumes.
    settings : MeasurementSettings
    calibration : CalibrationRecord, optional
        Gives physical units (Pa per V, or Pa per full scale) when it holds
        microphones (then it must hold every microphone of the rig) and, when
        the rig has no reference loop, the latency.
    latency_samples : int, optional
        Latency to remove when there is neither a reference nor a
        calibrated latency.
    redo_marked : bool
        Measure marked takes again (finished good takes are kept).
    on_event, on_warning : callable
        Receive progress lines and warnings.
    on_progress : callable, optional
        Receives a :class:`TakeProgress` for each kept take, before, during
        (every 0.2 s, from a helper thread; the audio callback is untouched)
        and after playing each take, and when it is saved.

    Returns
    -------
    MeasurementSummary

    Raises
    ------
    InputError, DeviceError
        Before anything plays for bad settings or missing channels; during
        the run for a missing reference impulse or a failed save, with the
        finished takes left intact.
    KeyboardInterrupt
        Passed on after the takes already done are safe.
    """
    out_dir = Path(out_dir)
    fs = float(link.sample_rate_hz)
    sweep = make_sweep(settings.sweep_settings(fs))
    for kind, need, have in (("output", wiring.n_outputs_needed, link.n_outputs),
                             ("input", wiring.n_inputs_needed, link.n_inputs)):
        if need > have:
            raise DeviceError(f"the rig uses {kind} channel {need} but {link.description} has {have}",
                              source=wiring.rig_source or None, fix="choose a larger device or renumber the rig")
    if wiring.reference is not None:
        latency_source = "reference"
    elif calibration is not None and calibration.latency is not None:
        latency_source = "calibration"
        latency_samples = calibration.latency_samples_at(fs)
    elif latency_samples is not None:
        latency_source = "given"
    else:
        latency_source = "none"
    units, pa_per_fs, v_per_fs, cal_notes = "full_scale", None, None, []
    if calibration is not None and calibration.microphones:
        pa_per_fs, v_per_fs, units, cal_notes = calibration_factors(
            calibration, wiring.mic_names, [c + 1 for c in wiring.mic_inputs],
            [c + 1 for c in wiring.speaker_outputs])
    session_warnings = list(cal_notes)
    if latency_source == "none":
        session_warnings.append("latency not removed: the rig names no reference loop and no calibrated latency "
                                "was given; responses start at the moment of playing")
    for w in session_warnings:
        on_warning(w)

    ir_len = int(round(settings.ir_s * fs))
    pre_roll = settings.pre_roll_samples(sweep)
    max_lat = int(round(settings.max_latency_s * fs))
    if latency_samples is not None and latency_source != "reference" and latency_samples > max_lat:
        raise InputError(f"latency of {latency_samples} samples exceeds `max_latency_s` ({max_lat} samples)",
                         field="max_latency_s", fix="raise `max_latency_s`")
    fresh = not (out_dir / SESSION_FILE).exists()
    created = make_folders(out_dir, str(out_dir))
    takes_dir = out_dir / "takes"
    made_takes_dir = not takes_dir.exists()
    try:
        return _measure_into(link, wiring, out_dir, settings, sweep, pre_roll, ir_len, max_lat, latency_source,
                             latency_samples, units, pa_per_fs, v_per_fs, session_warnings, redo_marked, on_event,
                             on_warning, on_progress)
    except BaseException:
        if fresh and not completed_takes(out_dir):
            _undo_fresh_session(out_dir, takes_dir if made_takes_dir else None, created)
        raise


def _measure_into(link: AudioLink, wiring: RigWiring, out_dir: Path, settings: MeasurementSettings,
                  sweep: SweepSignal, pre_roll: int, ir_len: int, max_lat: int, latency_source: str,
                  latency_samples: int | None, units: str, pa_per_fs: np.ndarray | None,
                  v_per_fs: np.ndarray | None, session_warnings: list[str], redo_marked: bool,
                  on_event: Callable[[str], None], on_warning: Callable[[str], None],
                  on_progress: Callable[[TakeProgress], None] | None) -> MeasurementSummary:
    """The take loop of :func:`measure` once its settings are checked."""
    import soundfile as sf

    fs = float(link.sample_rate_hz)
    _open_session(out_dir, _session_record(link, wiring, settings, sweep, latency_source, units), link.description)
    takes_dir = out_dir / "takes"
    takes_dir.mkdir(exist_ok=True)
    for name in _cleanup_staging(takes_dir, wiring):
        on_event(f"removed an unfinished take left by an earlier run ({name})")

    done = completed_takes(out_dir)
    period = sweep.signal.size
    signal_one = sweep.signal
    n_spk = len(wiring.speaker_names)
    measured, resumed, results = [], [], []
    try:
        for s, speaker in enumerate(wiring.speaker_names):
            folder_name = take_folder_name(s, speaker)
            existing = done.get(folder_name)
            if existing is not None:
                old = _load_take(existing, s, speaker)
                if not (redo_marked and old.status != "ok"):
                    old.resumed = True
                    results.append(old)
                    resumed.append(speaker)
                    if on_progress is not None:
                        on_progress(TakeProgress(s, n_spk, speaker, "kept"))
                    continue
            on_event(f"take {s + 1}/{n_spk}: speaker {speaker} on output {wiring.speaker_outputs[s] + 1}, "
                     f"{settings.repeats} x {settings.sweep_s:g} s sweep")
            out_channels = [wiring.speaker_outputs[s]]
            in_channels = list(wiring.mic_inputs)
            if wiring.reference is not None:
                out_channels.append(wiring.reference[0])
                in_channels.append(wiring.reference[1])
            drive = np.tile(signal_one, settings.repeats)[:, None].repeat(len(out_channels), axis=1)
            result = _play_reporting(link, drive, out_channels, in_channels, on_progress,
                                     TakeProgress(s, n_spk, speaker, "playing", 0.0, drive.shape[0] / fs))
            avg = result.recording.reshape(settings.repeats, period, len(in_channels)).mean(axis=0)
            warnings: list[str] = []
            frac = None
            if wiring.reference is not None:
                lat, frac, ref_peak = estimate_latency(avg[:, -1], sweep, max_lat,
                                                       source=f"take of speaker {speaker}")
            else:
                lat, ref_peak = int(latency_samples or 0), None
            n_mic = len(wiring.mic_names)
            dec = deconvolve(avg[:, :n_mic], sweep.inverse, linear_lag=sweep.linear_lag + lat, ir_length=ir_len,
                             harmonic_offsets=sweep.harmonic_offsets_samples(5), pre_roll_samples=pre_roll)
            ir_fs = dec.linear
            checks, details = _check_take(result, ir_fs, wiring, settings, speaker)
            warnings += checks
            pnr = peak_to_noise_db(ir_fs)
            best_mic = int(np.argmax(np.where(np.max(np.abs(ir_fs), axis=0) > 0, pnr, -np.inf)))
            levels = harmonic_levels_db(ir_fs[:, [best_mic]], {k: v[:, [best_mic]] for k, v in dec.harmonics.items()})
            ir = ir_fs
            if pa_per_fs is not None:
                ir = ir_fs * pa_per_fs[None, :]
                if v_per_fs is not None:
                    ir = ir / v_per_fs[s]
            for w in warnings:
                on_warning(f"speaker {speaker}: {w}")
            details.update({
                "latency_fractional_samples": frac, "reference_peak": ref_peak, "zero_lag_samples": pre_roll,
                "harmonic_levels_db": {"microphone": wiring.mic_names[best_mic],
                                       **{str(k): _finite_or_none(float(v[0])) for k, v in levels.items()}},
            })
            take = TakeResult(index=s, speaker=speaker, folder=takes_dir / folder_name,
                              status="marked" if warnings else "ok", warnings=warnings, latency_samples=lat,
                              latency_source=latency_source, peak_to_noise_db=[_finite_or_none(p) for p in pnr],
                              details=details)
            _save_take(take, result, ir, units, wiring, sweep, settings, latency_source, sf, out_dir,
                       len(done) + len(measured))
            on_event(f"take {s + 1}/{n_spk} saved: {take.status}, latency {lat} samples, best peak-to-noise "
                     f"{max((p for p in take.peak_to_noise_db if p is not None), default=math.inf):.1f} dB")
            results.append(take)
            measured.append(speaker)
            if on_progress is not None:
                on_progress(TakeProgress(s, n_spk, speaker, "saved", drive.shape[0] / fs, drive.shape[0] / fs))
    except KeyboardInterrupt:
        kept = len(completed_takes(out_dir))
        on_event(f"stopped: {kept} of {n_spk} takes are kept in {out_dir}; run the same command again to "
                 "measure the rest")
        raise

    irset_path = _write_combined(out_dir, results, wiring, fs, units, session_warnings, latency_source, pre_roll)
    all_warnings = session_warnings + [f"speaker {t.speaker}: {w}" for t in results for w in t.warnings]
    return MeasurementSummary(out_dir, results, measured, resumed, irset_path, all_warnings)


def _play_reporting(link: AudioLink, drive: np.ndarray, out_channels: Sequence[int], in_channels: Sequence[int],
                    on_progress: Callable[[TakeProgress], None] | None, at: TakeProgress) -> DuplexResult:
    """``link.play_record``, reporting the time played to `on_progress` from a helper thread."""
    if on_progress is None:
        return link.play_record(drive, out_channels, in_channels)
    on_progress(at)
    with ticking(lambda t: on_progress(replace(at, played_s=min(t, at.signal_s))), 0.2):
        result = link.play_record(drive, out_channels, in_channels)
    on_progress(replace(at, stage="analysing", played_s=at.signal_s))
    return result


