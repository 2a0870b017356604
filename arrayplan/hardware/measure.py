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

This module runs the loop; the analysis of one take is the pure function
:func:`arrayplan.hardware.take_analysis.analyse_take`, the settings and the
wiring are in :mod:`arrayplan.hardware.measure_settings` and the files in
:mod:`arrayplan.hardware.session_files`.

An output folder looks like::

    session.json              what was measured and how (checked on resume)
    takes/001-S1/             one folder per finished take, renamed into place, with SHA256SUMS
        recording.wav         raw inputs (mics in rig order, then the reference),
                              every repeat, float32
        irset/                the take's impulse responses (arrayplan.formats.irset); each
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
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Callable, Sequence

import numpy as np

from ..errors import DeviceError, InputError
from ..formats.atomic_files import make_folders
from ..progress import ticking
from ..signals.sweeps import SweepSignal, make_sweep
from ..formats.calibration_record import CalibrationRecord
from .calibration import calibration_factors
from .duplex import AudioLink, DuplexResult
from .measure_settings import MeasurementSettings, RigWiring
from .session_files import (SESSION_FILE, TakeResult, _cleanup_staging, _load_take, _open_session, _save_take,
                            _session_record, _undo_fresh_session, _write_combined, completed_takes,
                            take_folder_name)
from .take_analysis import NOT_DETECTED_DB, REFERENCE_MIN_DB, analyse_take, estimate_latency

__all__ = ["MeasurementSettings", "RigWiring", "TakeResult", "TakeProgress", "MeasurementSummary", "measure",
           "estimate_latency", "take_folder_name", "completed_takes", "SESSION_FILE",
           "NOT_DETECTED_DB", "REFERENCE_MIN_DB"]


@dataclass(frozen=True)
class TakeProgress:
    """Where the take loop is, for progress displays (see ``on_progress`` of :func:`measure`).

    Attributes
    ----------
    take : int
        0-based index of the speaker (and take).
    n_takes : int
        Number of takes (speakers) in the session.
    speaker : str
        The speaker's name.
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
    """What :func:`measure` did.

    Attributes
    ----------
    out_dir : Path
        The output folder.
    takes : list of TakeResult
        One per speaker, in rig order: kept ones (``resumed``) and new ones.
    measured, resumed : list of str
        Names of the speakers measured in this run, and of those whose
        finished take an earlier run left (kept, not measured again).
    irset_path : Path or None
        The combined IR set's manifest (``out_dir/irset/irset.json``); None
        when not every take is there.
    warnings : list of str
        The session's warnings (calibration, latency), then every take's,
        prefixed ``speaker <name>:``.
    """

    out_dir: Path
    takes: list[TakeResult]
    measured: list[str]
    resumed: list[str]
    irset_path: Path | None
    warnings: list[str]


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
        Names and 0-based channels of the speakers, microphones and reference loop.
    out_dir : path
        Output folder (created); re-running into it resumes.
    settings : MeasurementSettings
        Sweep, repeats, response length and checks.
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
        The takes, what was measured and kept, the combined IR set and every warning.

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
            got = analyse_take(result, sweep, wiring, settings, index=s, max_latency_samples=max_lat,
                               pre_roll=pre_roll, ir_length=ir_len, latency_samples=latency_samples,
                               pa_per_fs=pa_per_fs, v_per_fs=v_per_fs)
            for w in got.warnings:
                on_warning(f"speaker {speaker}: {w}")
            take = TakeResult(index=s, speaker=speaker, folder=takes_dir / folder_name,
                              status="marked" if got.warnings else "ok", warnings=got.warnings,
                              latency_samples=got.latency_samples, latency_source=latency_source,
                              peak_to_noise_db=got.peak_to_noise_db, details=got.details)
            _save_take(take, result, got.ir, units, wiring, sweep, settings, latency_source, sf, out_dir,
                       len(done) + len(measured))
            on_event(f"take {s + 1}/{n_spk} saved: {take.status}, latency {got.latency_samples} samples, best peak-to-noise "
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


