"""``arrayplan measure``: measure a rig's impulse responses through an audio interface.

Prints the caution block and the estimated sound level before anything
plays, asks for confirmation on a terminal (``--yes`` where there is none),
then runs :func:`arrayplan.hardware.measure.measure`.  ``--simulate`` runs
the same loop against a simulated rig (nothing plays).
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import InputError
from ..progress import ProgressBar, mini_bar
from ._args import (accept_old_spelling, add_exposure_options, add_memory_limit, add_sweep_options, count,
                    dbfs_level, finite_float, nonnegative_count, nonnegative_float, positive_float, say)

if TYPE_CHECKING:
    from ..hardware.measure import TakeProgress

__all__ = ["register", "run", "confirm_before_playing", "add_level_options", "print_level_estimate",
           "show_take_progress"]


def add_level_options(p: argparse.ArgumentParser) -> None:
    """Options for the sound-level estimate printed before playing."""
    g = add_exposure_options(p, "sound-level estimate (printed before anything plays)",
                             amp_help="V RMS at the speaker terminals for a full-scale sine (default: from the "
                                      "calibration record's outputs)")
    g.add_argument("--allow-unknown-level", action="store_true",
                   help="play hot outputs (a known voltage that could exceed the caps) although the speaker "
                        "sensitivity, and so the level, is unknown (hearing protection on)")
    g.add_argument("--yes", action="store_true",
                   help="confirm without a prompt (needed when there is no terminal), after reading the caution")


#: Option names for the messages of the level estimate.
_LEVEL_OPTIONS = {"sensitivity_db_spl": "--speaker-sensitivity-db-spl", "sensitivity_vrms": "--sensitivity-vrms",
                  "amp_vrms_full_scale": "--amp-vrms", "distances_m": "--listener-distance-m",
                  "allow_loud": "--allow-loud"}


def print_level_estimate(args: argparse.Namespace, signal: np.ndarray, sample_rate_hz: float,
                         amp_vrms_default: float | None, stream: Any = None) -> list[str]:
    """Print the estimated level of `signal` (one speaker at a time) and return its warnings.

    With a known output voltage but no speaker sensitivity, the level is
    bounded with a sensitive speaker
    (:func:`arrayplan.safety.exposure_estimate.worst_case_unknown_speaker`); when that bound
    exceeds a refusal cap, the outputs are hot and nothing plays without
    ``--allow-unknown-level`` (a consent of its own, apart from ``--yes``).

    Raises
    ------
    InputError
        Above the caps without ``--allow-loud``; hot outputs at an unknown
        level without ``--allow-unknown-level``; implausible inputs.
    """
    from ..safety.exposure_estimate import (ASSUMED_SENSITIVE_SPEAKER_DB_SPL, check_exposure, estimate_exposure,
                                     format_exposure, worst_case_unknown_speaker)
    from ..safety.exposure_limits import DEFAULT_MAX_DBA, DEFAULT_MAX_PEAK_DB_SPL

    stream = sys.stderr if stream is None else stream
    amp = args.amp_vrms if args.amp_vrms is not None else amp_vrms_default
    x = np.asarray(signal, float).reshape(-1, 1)
    if args.speaker_sensitivity_db_spl is None and amp is not None:
        worst = worst_case_unknown_speaker(x, sample_rate_hz, amp_vrms_full_scale=amp,
                                           distances_m=args.listener_distance_m, option_names=_LEVEL_OPTIONS)
        i = int(np.argmax(np.where(np.isnan(worst.dba), np.inf, worst.dba)))
        top, peak = float(worst.dba[i]), float(np.max(worst.peak_spl_db))
        print(f"Estimated level: UNKNOWN (no --speaker-sensitivity-db-spl). The outputs give {amp:.3g} V RMS at "
              f"full scale; through a sensitive speaker ({ASSUMED_SENSITIVE_SPEAKER_DB_SPL:g} dB SPL at 1 m for "
              f"2.83 V) this sweep would reach {top:.1f} dBA, peak {peak:.1f} dB SPL, at "
              f"{worst.distances_m[i]:g} m.", file=stream)
        if top <= DEFAULT_MAX_DBA and peak <= DEFAULT_MAX_PEAK_DB_SPL:
            return []
        if not getattr(args, "allow_unknown_level", False):
            raise InputError(f"HOT OUTPUTS AT AN UNKNOWN LEVEL: {amp:.3g} V RMS at full scale could give "
                             f"{top:.1f} dBA (cap {DEFAULT_MAX_DBA:g}) or peak {peak:.1f} dB SPL (cap "
                             f"{DEFAULT_MAX_PEAK_DB_SPL:g}) and the speaker sensitivity is not known",
                             field="--speaker-sensitivity-db-spl",
                             fix="give --speaker-sensitivity-db-spl for an estimate, lower the amplifier gain, or "
                                 "pass --allow-unknown-level (apart from --yes) with hearing protection in place")
        w = (f"playing hot outputs ({amp:.3g} V RMS at full scale) at an unknown level, allowed by "
             "--allow-unknown-level: start with the amplifier gain low and raise it slowly")
        print(f"warning: {w}", file=stream)
        return [w]
    if args.speaker_sensitivity_db_spl is None or amp is None:
        missing = [name for name, v in (("--speaker-sensitivity-db-spl", args.speaker_sensitivity_db_spl),
                                        ("--amp-vrms", amp)) if v is None]
        print(f"Estimated level: UNKNOWN (give {' and '.join(missing)} for an estimate). Treat the level as "
              "unknown: start with the amplifier gain low and raise it slowly.", file=stream)
        return []
    est = estimate_exposure(x, sample_rate_hz, sensitivity_db_spl=args.speaker_sensitivity_db_spl,
                            amp_vrms_full_scale=amp, distances_m=args.listener_distance_m,
                            sensitivity_vrms=args.sensitivity_vrms, combine="one_at_a_time",
                            option_names=_LEVEL_OPTIONS)
    print(format_exposure(est), file=stream)
    warnings = [say(w, args) for w in check_exposure(est, allow_loud=args.allow_loud, option_names=_LEVEL_OPTIONS)]
    for w in warnings:
        print(f"warning: {w}", file=stream)
    return warnings


def confirm_before_playing(yes: bool, what: str, stream: Any = None) -> None:
    """Ask on the terminal before playing; without a terminal require `yes`.

    Raises
    ------
    InputError
        No terminal and no ``--yes``, or the answer was not "yes".
    """
    stream = sys.stderr if stream is None else stream
    if yes:
        print(f"Confirmed by --yes: {what}", file=stream)
        return
    if not sys.stdin.isatty():
        raise InputError("nothing plays without confirmation and there is no terminal to ask on",
                         field="--yes", fix="read the caution above, then pass --yes")
    print(f"About to play: {what}", file=stream)
    answer = input("Type 'yes' to play, anything else to stop: ").strip().lower()
    if answer != "yes":
        raise InputError("not confirmed; nothing was played", field="--yes")


def register(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "measure", description="Play a faded exponential sweep on each speaker's output in turn, record every "
                               "microphone (and the loopback reference), and save each take as it ends: raw recording "
                               "plus impulse responses.  Running again into the same --out folder measures only the "
                               "missing takes.  Loud signals can harm hearing and loudspeakers: read the caution "
                               "printed before anything plays.")
    p.add_argument("rig", help="rig file (TOML); speakers' and microphones' 'channel' are 1-based")
    p.add_argument("--out", required=True, metavar="DIR", help="output folder (resumes when it exists)")
    p.add_argument("--device", metavar="INDEX|NAME", help="audio device (default: the rig's, else the system's)")
    p.add_argument("--rate-hz", type=positive_float, metavar="HZ",
                   help="sample rate, Hz (default: the rig's, else the device's)")
    p.add_argument("--calibration", metavar="FILE", help="calibration record (default: the rig's, if any)")
    p.add_argument("--latency-samples", type=nonnegative_count(10_000_000), metavar="N",
                   help="latency to remove when there is neither a reference loop nor a calibrated latency")
    from ..hardware.measure import MeasurementSettings
    from ..signals.levels import DEFAULT_PEAK_CAP_DBFS

    settings = MeasurementSettings()            # the library's defaults, shown in --help
    s = add_sweep_options(p, f1_hz=settings.f1_hz, duration_s=settings.sweep_s)
    s.add_argument("--peak-dbfs", type=dbfs_level, metavar="DB",
                   help="sweep true peak level, 4x oversampled (default: the peak cap, "
                        f"{DEFAULT_PEAK_CAP_DBFS:g} dBFS)")
    s.add_argument("--allow-above-cap", action="store_true", help="allow a peak above the cap")
    s.add_argument("--repeats", type=count(), default=settings.repeats, metavar="N",
                   help="sweeps per take, averaged")
    s.add_argument("--ir-length-s", type=positive_float, default=settings.ir_s, metavar="S",
                   help="impulse-response length after zero lag, s")
    s.add_argument("--pre-ms", type=nonnegative_float, metavar="MS",
                   help="time kept before zero lag for the measurement pulse's pre-ringing (default: one Fresnel "
                        "time at f1, at most half-way to the 2nd harmonic; 110 ms for the default sweep)")
    s.add_argument("--max-latency-s", type=positive_float, default=settings.max_latency_s, metavar="S",
                   help="longest interface latency expected, s")
    s.add_argument("--lead-in-s", type=nonnegative_float, default=settings.lead_in_s, metavar="S",
                   help="silence before each sweep, s")
    c = p.add_argument_group("checks")
    c.add_argument("--min-peak-to-noise-db", type=finite_float, default=settings.min_peak_to_noise_db, metavar="DB",
                   help="mark takes whose responses fall below this peak-to-noise ratio, dB")
    c.add_argument("--redo-marked", action="store_true", help="measure marked takes again when resuming")
    add_level_options(p)
    m = p.add_argument_group("simulated rig (nothing plays)")
    m.add_argument("--simulate", action="store_true",
                   help="measure a simulated rig: the rig's free-field (or [room]) responses plus latency, noise, "
                        "a mild nonlinearity and optional dropouts")
    m.add_argument("--sim-latency-samples", type=nonnegative_count(10_000_000), default=300, metavar="N",
                   help="default 300")
    m.add_argument("--sim-noise-dbfs", type=dbfs_level, default=-90.0, metavar="DB",
                   help="RMS noise (default: -90 dBFS)")
    m.add_argument("--sim-nonlinearity", default="0.01,0.005", metavar="A2,A3,...",
                   help="coefficients of x^2, x^3, ... (default: 0.01,0.005; '' for linear)")
    m.add_argument("--sim-dropouts", type=nonnegative_count(1000), default=0, metavar="N",
                   help="dropped input blocks per take")
    m.add_argument("--sim-seed", type=nonnegative_count(2 ** 32 - 1), default=0, metavar="N", help="noise seed")
    m.add_argument("--sim-placement-error-mm", type=finite_float, default=0.0, metavar="MM",
                   help="place every simulated element off its rig-file position by a Gaussian error of this standard "
                        "deviation per coordinate (mm, default 0)")
    m.add_argument("--sim-gain-error-db", type=finite_float, default=0.0, metavar="DB",
                   help="Gaussian gain error of each simulated element, standard deviation in dB (default 0)")
    m.add_argument("--sim-phase-error-deg", type=finite_float, default=0.0, metavar="DEG",
                   help="Gaussian phase error of each simulated element, standard deviation in degrees (default 0)")
    m.add_argument("--sim-floor-absorption", type=finite_float, default=None, metavar="ALPHA",
                   help="add a reflecting floor at z = 0 with this absorption (0 rigid .. 1 none; default: no "
                        "floor; a rig with a [room] already has its floor)")
    m.add_argument("--sim-error-seed", type=nonnegative_count(2 ** 32 - 1), default=1, metavar="N",
                   help="seed of the placement, gain and phase errors (default 1)")
    add_memory_limit(p)
    for new, old in (("--rate-hz", "--rate"), ("--f1-hz", "--f1"), ("--f2-hz", "--f2"), ("--ir-length-s", "--ir-s")):
        accept_old_spelling(p, new, old)
    p.set_defaults(run=run, parameter_flags=PARAMETER_FLAGS)


#: Library parameter names that this command spells differently.
PARAMETER_FLAGS = {"sweep_s": "--duration-s", "pre_s": "--pre-ms", "ir_s": "--ir-length-s",
                   "sample_rate_hz": "--rate-hz",
                   "sensitivity_db_spl": "--speaker-sensitivity-db-spl",
                   "amp_vrms_full_scale": "--amp-vrms", "distances_m": "--listener-distance-m",
                   "latency_samples": "--latency-samples", "dropouts_per_take": "--sim-dropouts",
                   "noise_rms_dbfs": "--sim-noise-dbfs", "nonlinearity": "--sim-nonlinearity"}


def show_take_progress(bar: ProgressBar, p: "TakeProgress") -> None:
    """Draw a :class:`~arrayplan.hardware.measure.TakeProgress` on `bar` (total: the takes to measure).

    Takes kept from an earlier run leave the count; the bar moves with the
    time played inside each take.
    """
    if p.stage == "kept":
        bar.total = max(0, (bar.total or 0) - 1)
        return
    kept_before = p.n_takes - (bar.total or 0)  # the loop runs in order: every kept take so far came before
    measured_before = p.take - kept_before
    if p.stage == "saved":
        bar.update(measured_before + 1, label=f"take {p.take + 1}/{p.n_takes} {p.speaker}", detail="saved")
        return
    frac = p.played_s / p.signal_s if p.signal_s > 0 else 1.0
    detail = (f"{mini_bar(frac, 8)} {p.played_s:.1f}/{p.signal_s:.1f} s" if p.stage == "playing"
              else p.stage)
    bar.update(measured_before + min(frac, 0.999), label=f"take {p.take + 1}/{p.n_takes} {p.speaker}",
               detail=detail)


def _parse_coefficients(text: str) -> tuple[float, ...]:
    if not text.strip():
        return ()
    try:
        vals = tuple(float(v) for v in text.split(","))
    except ValueError:
        raise InputError(f"expected comma-separated numbers, got {text!r}", field="--sim-nonlinearity") from None
    if not all(math.isfinite(v) for v in vals):
        raise InputError(f"coefficients must be finite, got {text!r}", field="--sim-nonlinearity")
    return vals


def _check_take_size(args: argparse.Namespace, wiring: Any, fs: float) -> None:
    """Refuse takes whose recordings would not fit the memory limit (estimated before anything plays)."""
    from ..limits import check_memory

    sweep_s = args.lead_in_s + args.duration_s + args.max_latency_s + args.ir_length_s
    take_s = args.repeats * sweep_s
    n_in = wiring.n_inputs_needed
    check_memory(3 * 8.0 * take_s * fs * n_in, f"a take of {args.repeats} sweep(s), {take_s:.3g} s on {n_in} "
                 f"input(s) at {fs:g} Hz", field="repeats")


def _warn_above_cap(args: argparse.Namespace, sweep: Any) -> None:
    """Print the warning ``signal`` prints when a sweep's true peak is above the cap (with consent)."""
    from ..signals.levels import DEFAULT_PEAK_CAP_DBFS, true_peak_dbfs
    from .signals import above_cap_warning

    text = above_cap_warning(true_peak_dbfs(sweep.sweep), DEFAULT_PEAK_CAP_DBFS) if args.allow_above_cap else None
    if text is not None:
        print(f"warning: {text}", file=sys.stderr)


def _truth_errors(args: argparse.Namespace):
    """The simulated truth's errors from the --sim-* options, each checked."""
    from ..kernels.model_irs import TruthErrors

    for flag, value in (("--sim-placement-error-mm", args.sim_placement_error_mm),
                        ("--sim-gain-error-db", args.sim_gain_error_db),
                        ("--sim-phase-error-deg", args.sim_phase_error_deg)):
        if not (np.isfinite(value) and value >= 0):
            raise InputError(f"must be a finite standard deviation >= 0, got {value:g}", source=flag)
    a = args.sim_floor_absorption
    if a is not None and not (np.isfinite(a) and 0 <= a <= 1):
        raise InputError(f"must lie in 0..1, got {a:g}", source="--sim-floor-absorption")
    return TruthErrors(args.sim_placement_error_mm, args.sim_gain_error_db, args.sim_phase_error_deg, a,
                       args.sim_error_seed)


def run(args: argparse.Namespace) -> int:
    from ..formats.calibration_record import read_calibration
    from ..hardware.measure import MeasurementSettings, RigWiring, measure
    from ..rig import load_rig
    from ..safety import print_caution
    from ..signals.levels import peak_dbfs, true_peak_dbfs
    from ..signals.sweeps import make_sweep

    if Path(args.out).exists() and not Path(args.out).is_dir():
        raise InputError("exists and is not a folder", source=args.out,
                         fix="give a new folder, or the folder of an earlier run to resume it")
    rig = load_rig(args.rig)
    wiring = RigWiring.from_rig(rig)
    hw = rig.hardware
    cal_path = args.calibration or hw.calibration
    calibration = read_calibration(cal_path) if cal_path else None
    settings = MeasurementSettings(
        f1_hz=args.f1_hz, f2_hz=args.f2_hz, sweep_s=args.duration_s, peak_dbfs=args.peak_dbfs,
        allow_above_cap=args.allow_above_cap, ir_s=args.ir_length_s,
        pre_s=None if args.pre_ms is None else args.pre_ms * 1e-3, lead_in_s=args.lead_in_s,
        max_latency_s=args.max_latency_s, repeats=args.repeats,
        min_peak_to_noise_db=args.min_peak_to_noise_db)
    rate = args.rate_hz or hw.sample_rate_hz
    _check_take_size(args, wiring, float(rate or 48000.0))
    if args.simulate:
        from ..hardware.simulated import SimulatedLink

        fs = float(rate or 48000.0)
        errors = _truth_errors(args)
        link = SimulatedLink.from_rig(rig, fs, int(round(settings.ir_s * fs)), truth_errors=errors,
                                      latency_samples=args.sim_latency_samples, noise_rms_dbfs=args.sim_noise_dbfs,
                                      nonlinearity=_parse_coefficients(args.sim_nonlinearity),
                                      dropouts_per_take=args.sim_dropouts, seed=args.sim_seed)
        sweep = make_sweep(settings.sweep_settings(fs))
        settings.pre_roll_samples(sweep)  # refuse bad options before anything else
        print(f"Simulated rig: nothing is played ({link.description}).", file=sys.stderr)
        if errors.any:
            print(f"Simulated truth differs from the rig file: {errors.placement_mm:g} mm placement, "
                  f"{errors.gain_db:g} dB gain, {errors.phase_deg:g} deg phase errors (seed {errors.seed})"
                  + ("" if errors.floor_absorption is None else
                     f", floor at z = 0 with absorption {errors.floor_absorption:g}"), file=sys.stderr)
        _warn_above_cap(args, sweep)
    else:
        from ..hardware.duplex import SoundDeviceLink

        device = args.device if args.device is not None else hw.device
        link = SoundDeviceLink(device, rate, n_outputs=wiring.n_outputs_needed, n_inputs=wiring.n_inputs_needed)
        sweep = make_sweep(settings.sweep_settings(link.sample_rate_hz))
        settings.pre_roll_samples(sweep)  # refuse a bad --pre-ms before anything plays
        print_caution()
        amp = None
        if calibration is not None:  # the hottest calibrated output bounds what is known of the level
            outs = [o for o in (calibration.output(c + 1) for c in wiring.speaker_outputs) if o is not None]
            if outs:
                amp = max(o.volts_per_full_scale for o in outs) / math.sqrt(2.0)
        print(f"Sweep: {settings.f1_hz:g} Hz to {sweep.settings.f2_hz:g} Hz, {settings.sweep_s:g} s, true peak "
              f"{true_peak_dbfs(sweep.sweep):+.1f} dBFS (sample peak {peak_dbfs(sweep.sweep):+.1f} dBFS), "
              f"{settings.repeats} per speaker, "
              f"{len(wiring.speaker_names)} speakers, one at a time, faded in and out.", file=sys.stderr)
        _warn_above_cap(args, sweep)
        print_level_estimate(args, sweep.signal, link.sample_rate_hz, amp)
        confirm_before_playing(args.yes, f"{len(wiring.speaker_names)} sweeps through {link.description}")

    tty = sys.stderr.isatty()
    bar = ProgressBar("measuring", total=len(wiring.speaker_names), show_count=False, width=10)

    def event(text: str) -> None:
        if tty:
            bar.print_above(text)

    def warn(text: str) -> None:
        bar.print_above(f"warning: {say(text, args)}")

    try:
        with bar:
            summary = measure(link, wiring, args.out, settings, calibration=calibration,
                              latency_samples=args.latency_samples, redo_marked=args.redo_marked,
                              on_event=event, on_warning=warn, on_progress=lambda p: show_take_progress(bar, p))
    except KeyboardInterrupt:
        from ..hardware.measure import completed_takes

        kept = len(completed_takes(Path(args.out)))
        print(f"stopped by Ctrl-C: {kept} of {len(wiring.speaker_names)} takes are kept in {args.out}; run the "
              "same command again to measure the rest", file=sys.stderr)
        raise
    marked = [t for t in summary.takes if t.status != "ok"]
    print(f"{len(summary.measured)} take(s) measured, {len(summary.resumed)} kept from before, "
          f"{len(marked)} marked; impulse responses: {summary.irset_path}")
    for t in summary.takes:
        best = max((p for p in t.peak_to_noise_db if p is not None), default=math.inf)
        print(f"  {t.speaker}: {t.status}, latency {t.latency_samples} samples ({t.latency_source}), "
              f"best peak-to-noise {best:.1f} dB" + (" (kept from before)" if t.resumed else ""))
    return 1 if marked else 0

