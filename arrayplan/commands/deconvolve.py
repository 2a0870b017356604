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
:mod:`arrayplan.irset`) holding the linear impulse responses (each starts
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

from ._args import csv_names as _csv_names
from ..errors import InputError
from ..fileio import staged_output_dir
from ..formats.deconvolution_summary import SUMMARY_FILE, summarise, summary_record, write_deconvolution_summary
from ..formats.signal_sidecar import read_signal_sidecar
from ..irset import IRSet, write_irset
from ..progress import ProgressBar
from ..signals.deconvolve import (CLIP_THRESHOLD, DEFAULT_MIN_PEAK_TO_NOISE_DB, impulse_responses,
                                  split_schedule)
from ..signals.element_names import RigNames, fit_names, names_from_plan, names_from_rig_file
from ..signals.sweep_record import SweepRecord
from ..signals.wavout import read_recording

__all__ = ["register", "REPORT_NAME"]

REPORT_NAME = SUMMARY_FILE


def _check_length(n_rec: int, n_file: int, rate: int, src: str, warnings: list[str]) -> None:
    if n_rec < n_file:
        raise InputError(f"recording has {n_rec} samples ({n_rec / rate:.3f} s) but the played file has {n_file} "
                         f"({n_file / rate:.3f} s)", source=src,
                         fix="record the whole file, including the silence after the sweep")
    if n_rec > 2 * n_file:
        raise InputError(f"recording has {n_rec} samples, more than twice the played file's {n_file}: it may hold "
                         "several takes or start well before the file", source=src,
                         fix="trim it so it starts with the played file's first sample")
    if n_rec > n_file:
        warnings.append(f"{src}: recording is {(n_rec - n_file) / rate:.3f} s longer than the played file; "
                        "its first sample is taken as the file's first sample")


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


def _run(args: argparse.Namespace) -> int:
    rig_names = _rig_names(args)
    side_path = Path(args.sweep)
    side = read_signal_sidecar(side_path)
    src = str(side_path)
    rec_info = SweepRecord.from_json(side.get("sweep"), source=src)
    rate = int(round(rec_info.sample_rate_hz))
    inv_path = side_path.parent / rec_info.inverse_filter_file
    inverse, inv_rate = read_recording(inv_path, field="sweep.inverse_filter_file")
    if inv_rate != rate or inverse.shape[1] != 1 or inverse.shape[0] != rec_info.n_sweep_samples:
        raise InputError(f"inverse filter does not match the sidecar ({inverse.shape[0]} samples, {inv_rate} Hz; "
                         f"expected {rec_info.n_sweep_samples} samples, {rate} Hz)", source=str(inv_path),
                         fix="use the files written together by arrayplan signal")
    inverse = inverse[:, 0]

    schedule = side.get("schedule")
    probe = side.get("probe")
    warnings: list[str] = []
    n_file = int(side["n_samples"])
    recordings: list[np.ndarray] = []
    if schedule is not None or probe is not None:
        if len(args.recordings) != 1:
            raise InputError(f"a {'schedule' if schedule else 'channel probe'} is recorded as one file, got "
                             f"{len(args.recordings)}", source=src, fix="give the one recording of the whole file")
        data, r = read_recording(args.recordings[0])
        if r != rate:
            raise InputError(f"recorded at {r} Hz but the sweep is at {rate} Hz", source=str(args.recordings[0]),
                             fix="record at the sweep's rate (no resampling)")
        _check_length(data.shape[0], n_file, rate, str(args.recordings[0]), warnings)
        if schedule is not None:
            try:
                starts = [int(e["segment_start_sample"]) for e in schedule["speakers"]]
                default_names = [str(e["speaker"]) for e in schedule["speakers"]]
                seg = int(schedule["segment_length_samples"])
            except (KeyError, TypeError, ValueError):
                raise InputError("malformed schedule block", source=src, field="schedule") from None
            recordings = split_schedule(data, starts, seg)
        else:
            default_names = [str(probe.get("channel_name", "probe"))]
            recordings = [data]
        recorded = [str(args.recordings[0])]
    else:
        default_names = [f"S{i + 1}" for i in range(len(args.recordings))]
        recorded = []
        for path in args.recordings:
            data, r = read_recording(path)
            if r != rate:
                raise InputError(f"recorded at {r} Hz but the sweep is at {rate} Hz", source=str(path),
                                 fix="record at the sweep's rate (no resampling)")
            if recordings and data.shape[1] != recordings[0].shape[1]:
                raise InputError(f"has {data.shape[1]} channels, the first recording {recordings[0].shape[1]}",
                                 source=str(path), fix="record every speaker with the same microphones")
            _check_length(data.shape[0], n_file, rate, str(path), warnings)
            recordings.append(data)
            recorded.append(str(path))
    n_mic = recordings[0].shape[1]
    notes: list[str] = []
    speakers, mics, positions = _element_names(args, rig_names, default_names, len(recordings), n_mic,
                                               probe=probe is not None and schedule is None, notes=notes)

    max_len = rec_info.pad_after_samples
    if args.ir_length_s is not None:
        if not (math.isfinite(args.ir_length_s) and args.ir_length_s > 0):
            raise InputError(f"must be positive, got {args.ir_length_s!r} s", field="--ir-length-s")
        ir_len = int(round(args.ir_length_s * rate))
        if ir_len > max_len:
            raise InputError(f"{args.ir_length_s:g} s is longer than the silence after the sweep "
                             f"({max_len / rate:g} s)", field="--ir-length-s",
                             fix="give a shorter --ir-length-s, or make the sweep again with more silence after it")
    else:
        ir_len = max_len
    if args.max_harmonic < 1:
        raise InputError(f"must be 1 (none) or more, got {args.max_harmonic}", field="--max-harmonic")
    pre_roll = _pre_roll_samples(args.pre_ms, rec_info, rate)
    offsets = rec_info.harmonic_offsets_samples(args.max_harmonic)
    if rec_info.kind == "exponential" and offsets and offsets[2] < ir_len:
        notes.append(f"the 2nd harmonic sits {offsets[2] / rate:.3f} s before the linear response, less than "
                        f"the response length {ir_len / rate:.3f} s: a long room tail may overlap the distortion "
                        "products (a longer sweep separates them further)")

    clean = rec_info.clean_recording() if offsets else None
    if offsets and clean is None:
        notes.append("the sidecar does not say how the sweep was faded, so the method's own distortion floor is "
                     "unknown: harmonic levels are judged against the noise floor only")
    with ProgressBar("deconvolving speakers") as bar:
        result = impulse_responses(recordings, inverse, linear_lag=rec_info.linear_lag_samples, ir_length=ir_len,
                                   harmonic_offsets=offsets, speaker_names=speakers, mic_names=mics,
                                   min_peak_to_noise_db=args.min_pnr_db, clip_threshold=CLIP_THRESHOLD,
                                   pre_roll_samples=pre_roll, clean_recording=clean, progress=bar)
    warnings += result.warnings

    summary = summarise(result, speakers, mics, pre_roll_samples=pre_roll, sample_rate_hz=rate)
    extra = {"producer": "arrayplan deconvolve (offline)", "sweep_sidecar": side_path.name,
             "element_names_from": ({"kind": rig_names.kind, "source": rig_names.source} if rig_names is not None
                                    else "given" if args.speaker_names or args.mic_names else "defaults"),
             "sweep": side.get("sweep"), "recordings": recorded,
             "harmonic_windows": {str(n): {"offset_samples": offsets[n], "samples": int(h.shape[0]),
                                           "nominal_index": int(result.harmonic_zero_index[n])}
                                  for n, h in result.harmonics.items()},
             "pre_roll": {"samples": pre_roll, "ms": 1e3 * pre_roll / rate,
                          "rule": "given by --pre-ms" if args.pre_ms is not None else
                          f"the sweep's: {side['sweep'].get('pre_roll_rule', 'one Fresnel time at f1')}"},
             "notes": notes, **summary_record(summary)}
    irs = IRSet(data=result.data, sample_rate_hz=float(rate), speaker_names=speakers, mic_names=mics,
                speaker_positions=positions[0], mic_positions=positions[1], units="full_scale",
                latency_removed_samples=0, warnings=warnings, extra=extra, zero_lag_samples=pre_roll)

    with staged_output_dir(args.out) as stage:
        write_irset(stage, irs, command="arrayplan deconvolve")
        for n, h in result.harmonics.items():
            write_irset(stage / f"harmonic-{n}", IRSet(
                data=h, sample_rate_hz=float(rate), speaker_names=speakers, mic_names=mics, units="full_scale",
                extra={"harmonic_order": n, "offset_samples": offsets[n],
                       "nominal_index": int(result.harmonic_zero_index[n]),
                       "note": f"order-{n} distortion product; sample nominal_index (the set's zero lag) is "
                               f"{offsets[n]:.1f} samples before the linear response's zero lag"},
                zero_lag_samples=min(int(result.harmonic_zero_index[n]), h.shape[0] - 1)),
                command="arrayplan deconvolve")
        write_deconvolution_summary(stage, summary)

    for line in warnings:
        print(f"arrayplan deconvolve: warning: {line}", file=sys.stderr)
    for line in notes:
        print(f"arrayplan deconvolve: note: {line}", file=sys.stderr)
    print(f"wrote IR set {Path(args.out) / 'irset.json'}: {len(speakers)} speaker(s) x {n_mic} microphone(s), "
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
    p = subparsers.add_parser("deconvolve", help="recordings of a sweep (any recorder) -> impulse responses",
                              description=__doc__.split("\n\n")[1].replace("\n", " "))
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
                                                        "(default M1, M2, ...)")
    p.add_argument("--ir-length-s", type=float,
                   help="response length after zero lag, s (default: the silence after the sweep)")
    p.add_argument("--pre-ms", type=float, metavar="MS",
                   help="time kept before zero lag for the pre-ringing of the measurement pulse, ms (default: the "
                        "sweep's, one Fresnel time at f1 and at most half-way to the 2nd harmonic; 0 cuts at "
                        "zero lag)")
    p.add_argument("--max-harmonic", type=int, default=5,
                   help="highest harmonic order separated (exponential sweeps; default 5, 1 for none)")
    p.add_argument("--min-pnr-db", type=float, default=DEFAULT_MIN_PEAK_TO_NOISE_DB,
                   help=f"warn below this peak-to-noise ratio, dB (default {DEFAULT_MIN_PEAK_TO_NOISE_DB:g})")
    p.set_defaults(run=_run)
