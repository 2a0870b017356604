"""``arrayplan deconvolve``: recordings of a sweep (made with any recorder) -> an IR set.

Give either one multichannel WAV per speaker (channels = microphones), each
recorded while the sweep file played, or one long recording of a schedule
written by ``arrayplan signal schedule`` (it is split by the schedule's
sidecar), or one recording of a sweep channel probe.  Each recording must
start with the played file's first sample (as when playing one track and
recording another in the same session) and run at least to its end.  With
``--rig RIG.toml`` or ``--plan PLAN_DIR`` the speakers and microphones are
named (and placed) as the rig names them, so ``plan --irset`` and ``verify``
match them to the plan; the recordings must then hold the rig's speakers and
microphones, in rig order.

The output folder is an IR set (``irset.json`` and one WAV per speaker, see
:mod:`arrayplan.formats.irset`) holding the linear impulse responses (each starts
``--pre-ms`` before zero lag, to keep the pre-ringing of the measurement
pulse; the set records the index of zero lag), plus
``harmonic-N/`` IR sets with the harmonic distortion products of an
exponential sweep and ``deconvolution.csv`` with, per speaker and
microphone, the peak, its delay, the peak-to-noise ratio and each
harmonic's level with its floor.  A harmonic level is given only where it
stands clear of the method's own floor (the clean sweep deconvolved as its
own recording) and the noise floor; otherwise the report says "below the
method's floor" or "below the noise floor" (see
:mod:`arrayplan.signals.distortion_floor`).  Clipping and low peak-to-noise
are printed as warnings and stored in the IR set's warnings.
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

import numpy as np

from ._args import accept_old_spelling, command_description, count, finite_float, nonnegative_float, positive_float
from ._args import csv_names as _csv_names
from ..errors import InputError
from ..formats.deconvolution_summary import SUMMARY_FILE
from ..progress import ProgressBar
from ..signals.deconvolve import DEFAULT_MIN_PEAK_TO_NOISE_DB
from ..signals.element_names import RigNames, fit_names, names_from_plan, names_from_rig_file
from ..signals.offline import PlayedSweep, deconvolve_takes, read_played_sweep, read_takes, write_offline_irs
from ..signals.sweep_record import SweepRecord

__all__ = ["register", "REPORT_NAME"]

REPORT_NAME = SUMMARY_FILE


def _pre_roll_samples(pre_ms: float | None, rec_info: SweepRecord, rate: int) -> int:
    """Samples kept before zero lag: ``--pre-ms``, else the sweep's default (see arrayplan.signals.sweeps)."""
    if pre_ms is None:
        return rec_info.pre_roll_samples
    if not (math.isfinite(pre_ms) and pre_ms >= 0):
        raise InputError(f"must be zero or a positive number of milliseconds, got {pre_ms!r}", field="--pre-ms")
    n = int(round(pre_ms * 1e-3 * rate))
    top = rec_info.max_pre_roll_samples
    if n > top:
        what = ("half-way to the 2nd harmonic's response" if rec_info.kind == "exponential"
                else "a quarter of the sweep")
        raise InputError(f"{pre_ms:g} ms reaches past {what} ({math.floor(1e4 * top / rate) / 10:g} ms)",
                         field="--pre-ms", fix="use a shorter pre-roll, or a longer sweep")
    return n


def _rig_names(args: argparse.Namespace) -> RigNames | None:
    """The rig's element names from ``--rig`` or ``--plan``, else None (names given or defaulted)."""
    if args.rig is None and args.plan is None:
        return None
    if args.speaker_names or args.mic_names:
        raise InputError("the names come from the rig or the plan; --speaker-names and --mic-names are for "
                         "recordings without one", field="--speaker-names/--mic-names",
                         fix="drop --speaker-names and --mic-names, or drop --rig/--plan")
    return names_from_rig_file(args.rig) if args.rig is not None else names_from_plan(args.plan)


def _element_names(args: argparse.Namespace, rig_names: RigNames | None, default_speakers: list[str],
                   n_speakers: int, n_mic: int, *, probe: bool, notes: list[str]
                   ) -> tuple[list[str], list[str], tuple[np.ndarray | None, np.ndarray | None]]:
    """Speaker and microphone names (and positions, where the rig gives them) of the IR set."""
    if rig_names is not None:
        fitted = fit_names(rig_names, None if probe else n_speakers, n_mic)
        speakers = list(fitted.speaker_names) or default_speakers
        if not probe and default_speakers != [f"S{i + 1}" for i in range(n_speakers)] \
                and default_speakers != speakers:
            notes.append(f"the schedule names the speakers {', '.join(default_speakers)}; the IR set takes the "
                         f"{fitted.kind}'s names {', '.join(speakers)} (same order)")
        return speakers, list(fitted.mic_names), (fitted.speaker_positions, fitted.mic_positions)
    speakers = args.speaker_names or default_speakers
    if len(speakers) != n_speakers:
        raise InputError(f"{len(speakers)} speaker names for {n_speakers} speakers", field="--speaker-names",
                         fix="give one name per recorded speaker, or --rig RIG.toml to take the rig's names")
    mics = args.mic_names or [f"M{i + 1}" for i in range(n_mic)]
    if len(mics) != n_mic:
        raise InputError(f"{len(mics)} microphone names for {n_mic} recorded channels", field="--mic-names",
                         fix="give one name per recorded channel, or --rig RIG.toml to take the rig's names")
    return speakers, mics, (None, None)


def _ir_length(ir_length_s: float | None, played: PlayedSweep) -> int:
    """Samples kept after zero lag: ``--ir-length-s``, else the whole silence after the sweep."""
    rate, most = played.sample_rate_hz, played.record.pad_after_samples
    if ir_length_s is None:
        return most
    if not (math.isfinite(ir_length_s) and ir_length_s > 0):
        raise InputError(f"must be positive, got {ir_length_s!r} s", field="--ir-length-s")
    n = int(round(ir_length_s * rate))
    if n > most:
        raise InputError(f"{ir_length_s:g} s is longer than the silence after the sweep ({most / rate:g} s)",
                         field="--ir-length-s",
                         fix="give a shorter --ir-length-s, or make the sweep again with more silence after it")
    return n


def _run(args: argparse.Namespace) -> int:
    rig_names = _rig_names(args)
    played = read_played_sweep(args.sweep)
    takes = read_takes(played, args.recordings)
    notes: list[str] = []
    speakers, mics, positions = _element_names(args, rig_names, takes.speaker_names, len(takes.recordings),
                                               takes.n_mic, probe=takes.probe, notes=notes)
    ir_len = _ir_length(args.ir_length_s, played)
    if args.max_harmonic < 1:
        raise InputError(f"must be 1 (none) or more, got {args.max_harmonic}", field="--max-harmonic")
    rate = played.sample_rate_hz
    pre_roll = _pre_roll_samples(args.pre_ms, played.record, rate)
    names_from = ({"kind": rig_names.kind, "source": rig_names.source} if rig_names is not None
                  else "given" if args.speaker_names or args.mic_names else "defaults")
    pre_rule = ("given by --pre-ms" if args.pre_ms is not None else
                f"the sweep's: {played.sidecar['sweep'].get('pre_roll_rule', 'one Fresnel time at f1')}")
    with ProgressBar("deconvolving speakers") as bar:
        made = deconvolve_takes(played, takes, speaker_names=speakers, mic_names=mics, ir_length=ir_len,
                                pre_roll=pre_roll, max_harmonic=args.max_harmonic,
                                min_peak_to_noise_db=args.min_peak_to_noise_db, speaker_positions=positions[0],
                                mic_positions=positions[1], notes=notes, progress=bar,
                                provenance={"element_names_from": names_from,
                                            "pre_roll": {"samples": pre_roll, "ms": 1e3 * pre_roll / rate,
                                                         "rule": pre_rule}})
    write_offline_irs(args.out, made)

    for line in made.irset.warnings:
        print(f"arrayplan deconvolve: warning: {line}", file=sys.stderr)
    for line in made.notes:
        print(f"arrayplan deconvolve: note: {line}", file=sys.stderr)
    summary = made.summary
    print(f"wrote IR set {Path(args.out) / 'irset.json'}: {len(speakers)} speaker(s) x {len(mics)} microphone(s), "
          f"{pre_roll} + {ir_len} samples (before + after zero lag) at {rate} Hz; "
          f"report {Path(args.out) / REPORT_NAME}")
    for s, spk in enumerate(speakers):
        worst = float(np.nanmin(summary.peak_to_noise_db[:, s]))
        text = f"  {spk}: peak-to-noise {worst:.1f} dB (lowest mic)"
        if summary.orders:
            text += ", " + ", ".join(summary.worst_harmonic_text(n, s) for n in summary.orders)
        print(text)
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``deconvolve`` command."""
    p = subparsers.add_parser("deconvolve",
                              description=command_description(__doc__))
    p.add_argument("recordings", nargs="+", type=Path, metavar="RECORDING.wav",
                   help="one WAV per speaker (channels = microphones), or one recording of a schedule or probe")
    p.add_argument("--sweep", required=True, type=Path, metavar="SWEEP.json",
                   help="the sidecar written beside the played sweep, schedule or sweep probe")
    p.add_argument("--out", required=True, type=Path, metavar="DIR", help="output folder (an IR set)")
    names = p.add_mutually_exclusive_group()
    names.add_argument("--rig", type=Path, metavar="RIG.toml",
                       help="name (and place) the speakers and microphones as this rig file does; the recordings "
                            "must hold its speakers and microphones in rig order")
    names.add_argument("--plan", type=Path, metavar="PLAN_DIR",
                       help="the same, from a folder written by 'arrayplan plan'")
    p.add_argument("--speaker-names", type=_csv_names, help="speaker names, comma-separated, without --rig/--plan "
                                                            "(default: the schedule's, else S1, S2, ...)")
    p.add_argument("--mic-names", type=_csv_names, help="microphone names, comma-separated, without --rig/--plan "
                                                        "(default: M1, M2, ...)")
    p.add_argument("--ir-length-s", type=positive_float, metavar="S",
                   help="response length after zero lag, s (default: the silence after the sweep)")
    p.add_argument("--pre-ms", type=nonnegative_float, metavar="MS",
                   help="time kept before zero lag for the pre-ringing of the measurement pulse, ms (default: the "
                        "sweep's, one Fresnel time at f1 and at most half-way to the 2nd harmonic; 0 cuts at "
                        "zero lag)")
    p.add_argument("--max-harmonic", type=count(50), default=5, metavar="N",
                   help="highest harmonic order separated (exponential sweeps; 1 for none)")
    p.add_argument("--min-peak-to-noise-db", type=finite_float, default=DEFAULT_MIN_PEAK_TO_NOISE_DB, metavar="DB",
                   help="warn below this peak-to-noise ratio, dB")
    accept_old_spelling(p, "--min-peak-to-noise-db", "--min-pnr-db")
    p.set_defaults(run=_run)
