"""``arrayplan calibrate``: create and show calibration records (TOML).

Calibration records (TOML, documented in calibration/README.md) give measured impulse responses
physical units and supply the interface latency.

Sub-commands: ``mic`` (sensitivity from a calibrator recording), ``output``
(full-scale voltage of an output from a tone recorded on a known input),
``latency`` (round trip through a loopback cable, measured live), ``show``.
Each adds to or replaces an entry in the record file, written atomically.
"""

from __future__ import annotations

import argparse
import math
import sys

from ..errors import InputError
from ._args import accept_old_spelling, add_command_group, channel_number, dbfs_level, float_in, positive_float

__all__ = ["register", "run_mic", "run_output", "run_latency", "run_show"]


def _full_scale(args: argparse.Namespace, dbu_name: str, vrms_name: str) -> float:
    from ..hardware.calibration import dbu_to_vrms

    dbu, vrms = getattr(args, dbu_name), getattr(args, vrms_name)
    flag_dbu, flag_v = "--" + dbu_name.replace("_", "-"), "--" + vrms_name.replace("_", "-")
    if (dbu is None) == (vrms is None):
        raise InputError(f"give exactly one of {flag_dbu} and {flag_v}", field=flag_dbu,
                         fix="the interface's data sheet gives the level of a full-scale sine, often in dBu")
    value = dbu_to_vrms(dbu) if dbu is not None else vrms
    if not (math.isfinite(value) and value > 0):
        raise InputError(f"full-scale voltage must be positive, got {value!r}", field=flag_v)
    return float(value)


def _add_full_scale(p: argparse.ArgumentParser, what: str) -> None:
    g = p.add_mutually_exclusive_group()
    g.add_argument("--input-full-scale-dbu", type=float_in(-60.0, 60.0, "dBu"), metavar="DBU",
                   help=f"level of a full-scale sine at {what}, dBu (0 dBu = 0.7746 V RMS)")
    g.add_argument("--input-full-scale-vrms", type=float_in(1e-6, 1000.0, "V RMS"), metavar="V",
                   help="the same in V RMS")


def register(subparsers: argparse._SubParsersAction) -> None:
    sub = add_command_group(subparsers, "calibrate", __doc__, dest="calibrate_command", metavar="WHAT")

    m = sub.add_parser("mic", help="microphone sensitivity from a recording of an acoustic calibrator",
                       description="Record the calibrator seated on the microphone (a few seconds, the input gain "
                                   "as for measuring), then compute the sensitivity in mV/Pa.  94 dB SPL is "
                                   "1 Pa re 20 µPa; IEC 60942 defines calibrator classes.")
    m.add_argument("record", help="calibration record to create or update (TOML)")
    m.add_argument("--recording", required=True, metavar="WAV", help="recording of the calibrator")
    m.add_argument("--channel", type=channel_number, default=1, metavar="N",
                   help="1-based channel of the file (default: 1)")
    m.add_argument("--mic", required=True, metavar="NAME", help="the microphone's name in the rig file")
    m.add_argument("--input-channel", type=channel_number, metavar="N",
                   help="1-based interface input the mic is on (default: --channel)")
    _add_full_scale(m, "the interface input")
    m.add_argument("--calibrator-db-spl", type=float_in(40.0, 180.0, "dB SPL"), default=94.0, metavar="DB",
                   help="default 94 dB SPL")
    m.add_argument("--calibrator-hz", type=float_in(1.0, 100_000.0, "Hz"), default=1000.0, metavar="HZ",
                   help="default 1000 Hz")
    m.add_argument("--calibrator-class", default="", metavar="CLASS", help="IEC 60942 class, for the record")
    m.add_argument("--description", default="", help="description for a new record")
    m.set_defaults(run=run_mic)

    o = sub.add_parser("output", help="full-scale voltage of an output from a tone recorded on a known input",
                       description="Wire the output (without amplifier) to an input of known full-scale level, "
                                   "play a sine of known peak level, record it, and give the recording here.")
    o.add_argument("record", help="calibration record to create or update (TOML)")
    o.add_argument("--output-channel", type=channel_number, required=True, metavar="N",
                   help="1-based output calibrated")
    o.add_argument("--recording", required=True, metavar="WAV", help="recording of the tone")
    o.add_argument("--channel", type=channel_number, default=1, metavar="N",
                   help="1-based channel of the file (default: 1)")
    o.add_argument("--played-peak-dbfs", type=float_in(-120.0, 0.0, "dBFS"), required=True, metavar="DB",
                   help="peak level of the played sine")
    o.add_argument("--tone-hz", type=float_in(1.0, 100_000.0, "Hz"), default=1000.0, metavar="HZ",
                   help="frequency of the sine (default: 1000)")
    o.add_argument("--amplifier-gain-db", type=float_in(-100.0, 100.0, "dB"), default=0.0, metavar="DB",
                   help="voltage gain of the amplifier after this output (default: 0)")
    _add_full_scale(o, "the input that recorded it")
    o.add_argument("--description", default="", help="description for a new record")
    o.set_defaults(run=run_output)

    la = sub.add_parser("latency", help="measure the round-trip latency through a loopback cable (plays a sweep)",
                        description="Plays a short quiet sweep on --output-channel and records --input-channel, "
                                    "which must be wired to it; stores the latency in samples at the stream's rate.")
    la.add_argument("record", help="calibration record to create or update (TOML)")
    la.add_argument("--output-channel", type=channel_number, required=True, metavar="N",
                    help="1-based output of the loop")
    la.add_argument("--input-channel", type=channel_number, required=True, metavar="N",
                    help="1-based input of the loop")
    la.add_argument("--device", metavar="INDEX|NAME", help="audio device (default: the system's)")
    la.add_argument("--rate-hz", type=positive_float, metavar="HZ", help="sample rate, Hz (default: the device's)")
    accept_old_spelling(la, "--rate-hz", "--rate")
    la.add_argument("--peak-dbfs", type=dbfs_level, default=-20.0, metavar="DB", help="sweep peak (default: -20 dBFS)")
    la.add_argument("--max-latency-s", type=float_in(0.001, 10.0, "s"), default=0.25, metavar="S",
                    help="default 0.25 s")
    la.add_argument("--yes", action="store_true", help="confirm without a prompt, after reading the caution")
    la.add_argument("--description", default="", help="description for a new record")
    la.set_defaults(run=run_latency)

    sh = sub.add_parser("show", help="check a record and print what it holds")
    sh.add_argument("record", help="calibration record (TOML)")
    sh.set_defaults(run=run_show)


def run_mic(args: argparse.Namespace) -> int:
    from ..formats.calibration_record import read_or_new, write_calibration
    from ..hardware.calibration import mic_from_calibrator_recording, sensitivity_db_re_1v_per_pa

    rec = read_or_new(args.record, args.description)
    mic = mic_from_calibrator_recording(
        args.recording, args.channel, args.mic, input_full_scale_vrms=_full_scale(
            args, "input_full_scale_dbu", "input_full_scale_vrms"),
        calibrator_level_db_spl=args.calibrator_db_spl, calibrator_frequency_hz=args.calibrator_hz,
        calibrator_class=args.calibrator_class, input_channel=args.input_channel)
    write_calibration(args.record, rec.with_mic(mic))
    print(f"{mic.name}: {mic.sensitivity_mv_per_pa:.3f} mV/Pa "
          f"({sensitivity_db_re_1v_per_pa(mic.sensitivity_mv_per_pa):.2f} dB re 1 V/Pa), tone at "
          f"{mic.recorded_rms_dbfs:.2f} dBFS RMS; written to {args.record}")
    return 0


def run_output(args: argparse.Namespace) -> int:
    from ..formats.calibration_record import read_or_new, write_calibration
    from ..hardware.calibration import output_from_loopback_recording

    rec = read_or_new(args.record, args.description)
    out = output_from_loopback_recording(
        args.recording, args.channel, args.output_channel, played_peak=10.0 ** (args.played_peak_dbfs / 20.0),
        input_full_scale_vrms=_full_scale(args, "input_full_scale_dbu", "input_full_scale_vrms"),
        tone_frequency_hz=args.tone_hz, amplifier_gain_db=args.amplifier_gain_db)
    write_calibration(args.record, rec.with_output(out))
    print(f"output {out.channel}: full-scale sine = {out.full_scale_vrms:.4f} V RMS at the output, "
          f"{out.volts_per_full_scale:.4f} V per full-scale sample at the speaker; written to {args.record}")
    return 0


def run_latency(args: argparse.Namespace) -> int:
    from ..formats.calibration_record import LatencyCalibration, now_utc, read_or_new, write_calibration
    from ..hardware.duplex import SoundDeviceLink
    from ..hardware.measure import estimate_latency
    from ..safety import print_caution
    from ..signals.sweeps import SweepSettings, make_sweep
    from .measure import confirm_before_playing

    rec = read_or_new(args.record, args.description)
    link = SoundDeviceLink(args.device, args.rate_hz, n_outputs=args.output_channel, n_inputs=args.input_channel)
    fs = link.sample_rate_hz
    sweep = make_sweep(SweepSettings(f1_hz=100.0, f2_hz=min(20000.0, 0.45 * fs), duration_s=0.5,
                                     sample_rate_hz=fs, pad_before_s=0.2, pad_after_s=args.max_latency_s + 0.05,
                                     peak_dbfs=args.peak_dbfs))
    print_caution()
    print(f"Latency: a 0.5 s sweep at {args.peak_dbfs:+.1f} dBFS peak on output {args.output_channel}; it should "
          f"reach only the loopback cable to input {args.input_channel}, not a speaker.", file=sys.stderr)
    confirm_before_playing(args.yes, f"one quiet sweep through {link.description}")
    result = link.play_record(sweep.signal[:, None], [args.output_channel - 1], [args.input_channel - 1])
    if result.xrun:
        raise InputError(f"the stream lost samples ({', '.join(result.flag_texts())}); nothing was written",
                         fix="run it again")
    lat, frac, peak = estimate_latency(result.recording[:, 0], sweep, int(round(args.max_latency_s * fs)))
    write_calibration(args.record, rec.with_latency(LatencyCalibration(
        samples=lat, sample_rate_hz=fs, output_channel=args.output_channel, input_channel=args.input_channel,
        device=link.device.name, measured_utc=now_utc())))
    print(f"latency: {lat} samples ({1000 * lat / fs:.2f} ms) at {fs:g} Hz, loop gain {peak:.4f}; "
          f"written to {args.record}")
    return 0


def run_show(args: argparse.Namespace) -> int:
    from ..formats.calibration_record import read_calibration
    from ..hardware.calibration import sensitivity_db_re_1v_per_pa

    rec = read_calibration(args.record)
    print(f"{args.record}: {rec.description}".rstrip(": "))
    for m in rec.microphones:
        print(f"  mic {m.name} on input {m.input_channel}: {m.sensitivity_mv_per_pa:.3f} mV/Pa "
              f"({sensitivity_db_re_1v_per_pa(m.sensitivity_mv_per_pa):.2f} dB re 1 V/Pa), "
              f"{m.pascal_per_full_scale:.4g} Pa per full scale")
    for o in rec.outputs:
        print(f"  output {o.channel}: {o.full_scale_vrms:.4f} V RMS full-scale sine, amplifier "
              f"{o.amplifier_gain_db:+.1f} dB, {o.volts_per_full_scale:.4g} V per full scale")
    if rec.latency is not None:
        la = rec.latency
        print(f"  latency: {la.samples} samples at {la.sample_rate_hz:g} Hz")
    if not (rec.microphones or rec.outputs or rec.latency):
        print("  (empty)")
    return 0
