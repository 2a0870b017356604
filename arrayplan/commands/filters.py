"""``arrayplan filters``: channel weights as FIR filter files, checked through the plan's own kernel."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import matplotlib
import numpy as np

from ..errors import InputError
from ..filters import check_filters, design_filters, validate_request
from ..formats.filter_set import write_filter_set
from ..filters.source import DesignSource, read_plan_record, source_from_plan, source_from_rig
from ..filters.taps_search import MAX_AUTO_TAPS, TapsTrial, first_taps, search_taps
from ..formats.irset import read_irset
from ..progress import ProgressBar
from ..rig import load_rig
from ._args import (accept_old_spelling, add_measured_kernel_options, add_memory_limit, count, finite_float,
                    measured_kernel_from_args, positive_float)

CAUTION = ("caution: these filters feed loudspeakers; start any playback at a low level, protect hearing "
           "and drivers, and follow local codes and licensed practice")

EXIT_STATUS = ("exit status: 0 when every checked channel passes (or with --no-check), 1 when some channel "
               "fails the crosstalk limit, 2 on bad input (nothing is written then)")


def _taps(text: str) -> int | str:
    if text.strip().lower() == "auto":
        return "auto"
    try:
        return int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number of taps or 'auto', got {text!r}") from None


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("filters",
                       description="Design FIR drive filters (per speaker) and combine filters (per "
                                   "microphone) for each planned channel, from a rig's model (free field, or its "
                                   "[room]) or from the kernel a plan folder was made with (also a plan made from "
                                   "measured impulse responses); write them as WAV files with a JSON sidecar and "
                                   "a text export, and check channel isolation through the same kernel.",
                       epilog=EXIT_STATUS + ". " + CAUTION + ".")
    p.add_argument("source", metavar="RIG_OR_PLAN",
                   help="rig file (TOML), or a folder written by 'arrayplan plan' (its kernel is used)")
    p.add_argument("--rate-hz", type=positive_float, required=True, metavar="HZ", help="DSP sample rate, Hz")
    p.add_argument("--taps", type=_taps, default=2048, metavar="N|auto",
                   help="filter length in samples (default 2048); 'auto' designs and checks at doubling lengths "
                        f"up to {MAX_AUTO_TAPS} and keeps the first that meets the crosstalk limit")
    p.add_argument("--band-hz", type=positive_float, nargs=2, required=True, metavar=("LOW_HZ", "HIGH_HZ"),
                   help="band where the filters realise the planned weights")
    p.add_argument("--out", required=True, help="output folder (created; files written atomically)")
    p.add_argument("--min-level-db", type=finite_float, default=-30.0,
                   help="a channel gets filters when it comes within this of the strongest channel somewhere in "
                        "the band (default -30)")
    p.add_argument("--crosstalk-limit-db", type=finite_float, default=-40.0,
                   help="pass/fail limit of the worst in-band crosstalk (default -40)")
    p.add_argument("--irset", metavar="DIR|FILE.sofa",
                   help="the IR set of a plan made from measured responses (default: the one the plan records), "
                        "or, with a rig file, design from these measured responses")
    add_measured_kernel_options(p, prefix="with --irset when the plan records no settings: ")
    p.add_argument("--no-check", action="store_true", help="skip the check")
    add_memory_limit(p)
    accept_old_spelling(p, "--rate-hz", "--rate")
    accept_old_spelling(p, "--band-hz", "--band")
    p.set_defaults(run=run, parameter_flags={"sample_rate_hz": "--rate-hz", "band_hz": "--band-hz", "taps": "--taps"})


def _check_filter_size(n_s: int, n_m: int, taps: int) -> None:
    """Refuse filter sets whose design would not fit the memory limit (estimated before designing).

    The design holds a coupling matrix per FFT bin (``taps / 2 + 1`` of them,
    about three working copies for the SVD) and real filters of `taps`
    samples per element and channel (with the time-domain check, twice).
    """
    from ..limits import check_memory

    n_bins = taps // 2 + 1
    n_bytes = 3 * 16.0 * n_bins * n_s * n_m + 2 * 8.0 * taps * (n_s + n_m) * min(n_s, n_m)
    check_memory(n_bytes, f"{taps}-tap filters for {n_s} speakers x {n_m} microphones", field="taps")


def _measured_settings_given(args: argparse.Namespace) -> bool:
    return args.window_ms is not None or bool(args.latency_samples) or args.smooth_octaves is not None


def _agree_with_record(measurement: dict, args: argparse.Namespace, source: str) -> None:
    """Refuse measured-kernel options that differ from the settings the plan records."""
    for key, flag, given in (("window_ms", "--window-ms", args.window_ms),
                             ("latency_samples", "--latency-samples", args.latency_samples or 0),
                             ("smoothing_octaves", "--smooth-octaves", args.smooth_octaves)):
        recorded = measurement.get(key) if key != "latency_samples" else measurement.get(key) or 0
        if (given is None) != (recorded is None) or (given is not None and abs(float(given) - float(recorded)) > 1e-9):
            raise InputError(f"{flag} {given} differs from the plan's {key} {recorded}", source=source,
                             field=f"measurement.{key}", fix=f"drop {flag}: the plan's own setting applies")


def design_source(args: argparse.Namespace) -> DesignSource:
    """What to design from: a rig's model, a rig's measured responses, or a plan folder's kernel."""
    path = Path(args.source)
    if path.is_dir():
        record = read_plan_record(path)
        if not record.measured:
            if args.irset:
                raise InputError(f"the plan was made with the {record.kernel} kernel, not from measurements",
                                 source="--irset", fix="drop --irset, or give a plan made with 'plan --irset'")
            return source_from_plan(record)
        irset_path = args.irset or record.recorded_irset
        if irset_path is None:
            raise InputError("the plan was made from measured impulse responses and does not record their IR set",
                             source=str(path / "weights.json"), field="measurement",
                             fix="give the IR set with --irset")
        if not Path(irset_path).exists():
            raise InputError(f"the plan's IR set {irset_path} is not there", source=str(path / "weights.json"),
                             field="measurement.irset.path", fix="give the IR set with --irset")
        if record.measurement and _measured_settings_given(args):
            _agree_with_record(record.measurement, args, str(path / "weights.json"))
        return source_from_plan(record, irset=read_irset(irset_path), irset_path=irset_path,
                                window_s=None if args.window_ms is None else args.window_ms / 1000.0,
                                latency_samples=args.latency_samples, smoothing_octaves=args.smooth_octaves)
    rig = load_rig(args.source)
    if not args.irset:
        if _measured_settings_given(args):
            raise InputError("applies only with --irset", source="--window-ms/--latency-samples/--smooth-octaves")
        return source_from_rig(rig)
    irs = read_irset(args.irset)
    if tuple(irs.speaker_names) != tuple(rig.speakers.names) or tuple(irs.mic_names) != tuple(rig.mics.names):
        raise InputError("the IR set's element names or order differ from the rig's", source=str(args.irset),
                         field="speaker_names", fix="measure the rig with the rig file's names (measure/deconvolve --rig)")
    kernel = measured_kernel_from_args(irs, args)
    return DesignSource(kernel, tuple(rig.speakers.names), tuple(rig.mics.names), irs, rig.name,
                        {"rig": rig.source, "rig_sha256": rig.sha256, "kernel": kernel.name,
                         "irset": str(args.irset)})


def _check_rate(source: DesignSource, rate: float) -> None:
    fs_kernel = getattr(source.kernel, "sample_rate_hz", None)
    if fs_kernel is not None and abs(float(fs_kernel) - float(rate)) > 1e-6:
        raise InputError(f"the filters' rate {rate:g} Hz differs from the measured responses' {fs_kernel:g} Hz",
                         source="--rate-hz", fix=f"use --rate-hz {fs_kernel:g} (the rate the rig was measured at)")


def _ranges_text(ranges: list[tuple[float, float]], most: int = 3) -> str:
    """The widest `most` runs, in frequency order, and how many more (filters.json lists them all)."""
    widest = sorted(sorted(ranges, key=lambda r: r[1] - r[0], reverse=True)[:most])
    text = ", ".join(f"{lo:.0f} Hz" if lo == hi else f"{lo:.0f}-{hi:.0f} Hz" for lo, hi in widest) or "nowhere"
    return text + (f" and {len(ranges) - most} narrower bands (filters.json)" if len(ranges) > most else "")


def _print_trial(trial: TapsTrial, limit_db: float) -> None:
    verdict = "meets" if trial.passed else "misses"
    print(f"  {trial.taps} taps: worst crosstalk {trial.worst_crosstalk_db:.1f} dB, {verdict} the {limit_db:g} dB limit")


def _remedy(args: argparse.Namespace, filters, check) -> list[str]:
    """Known remedies for failing channels, one line each."""
    lines = []
    failing = [c for k, c in enumerate(check.channels) if not check.passed()[k]]
    if args.taps != "auto" and filters.taps < MAX_AUTO_TAPS:
        lines.append(f"remedy: more taps follow the planned weights more closely; --taps auto designs and checks "
                     f"{2 * filters.taps}, {4 * filters.taps}, ... up to {MAX_AUTO_TAPS} taps and keeps the first "
                     "length that meets the limit")
    weak = [c for c in failing if np.max(filters.band_level_db[:, c]) < -10.0]
    if weak:
        best = max(float(np.max(filters.band_level_db[:, c])) for c in weak)
        lines.append(f"remedy: channel(s) {', '.join(str(c + 1) for c in weak)} never come within 10 dB of the "
                     f"strongest; --min-level-db {np.floor(best) + 1:g} leaves them out")
    return lines


def run(args: argparse.Namespace) -> int:
    matplotlib.use("Agg")
    if not args.min_level_db <= 0:
        raise InputError(f"must be 0 dB or below, got {args.min_level_db:g}", source="--min-level-db")
    if args.taps == "auto" and args.no_check:
        raise InputError("--taps auto chooses the length by the check", source="--no-check",
                         fix="drop --no-check or give a tap count")
    source = design_source(args)
    _check_rate(source, args.rate_hz)
    n_s, n_m = len(source.speaker_names), len(source.mic_names)
    _check_filter_size(n_s, n_m, MAX_AUTO_TAPS if args.taps == "auto" else args.taps)
    limit = args.crosstalk_limit_db
    if args.taps == "auto":
        start = first_taps(source.spread, args.rate_hz)
        validate_request(source.spread, args.rate_hz, start, tuple(args.band_hz))
        print(f"choosing the filter length: {start} taps, then doubling up to {MAX_AUTO_TAPS}")
        trials = search_taps(source.kernel, args.rate_hz, tuple(args.band_hz), start, limit_db=limit,
                             min_level_db=args.min_level_db, spread=source.spread,
                             on_trial=lambda t: _print_trial(t, limit))
        filters, check = trials[-1].filters, trials[-1].check
    else:
        validate_request(source.spread, args.rate_hz, args.taps, tuple(args.band_hz))
        with ProgressBar("filter plan") as plan_bar, \
                ProgressBar("filter taps") as taps_bar:
            filters = design_filters(source.kernel, args.rate_hz, args.taps, tuple(args.band_hz),
                                     min_level_db=args.min_level_db, plan_progress=plan_bar, taps_progress=taps_bar)
        check = None
        if not args.no_check:
            with ProgressBar("checking crosstalk") as check_bar:
                check = check_filters(source.kernel, filters, limit_db=limit, progress=check_bar)
    files = write_filter_set(source, filters, args.out, check)
    fs = filters.sample_rate_hz
    print(f"{source.name}: {len(filters.kept)} channels with filters, {filters.taps} taps at {fs:g} Hz, "
          f"bulk delay {filters.bulk_delay_samples} samples ({1e3 * filters.bulk_delay_samples / fs:.2f} ms), "
          f"designed on the {source.kernel_name} kernel")
    for j in filters.kept:
        print(f"  channel {j + 1}: within {-filters.min_level_db:g} dB of the strongest at "
              f"{_ranges_text(filters.strong_ranges_hz(j))} (best {np.max(filters.band_level_db[:, j]):.1f} dB)")
    for j, why in filters.skipped:
        print(f"  channel {j + 1} skipped: {why}")
    status = 0
    if check is not None:
        worst = check.worst_crosstalk_db()
        print(f"check through the {source.kernel_name} kernel on a grid {check.grid_factor:g} times finer than the "
              "design bins; worst in-band case of each figure (gain re plan, drive/combine energy re 1; crosstalk where "
              "both channels are in use); best dB: the channel's best level re the strongest in band")
        print(f"{'channel':>7} {'best dB':>9} {'gain err dB':>11} {'drive E dB':>10} {'combine E dB':>12} "
              f"{'crosstalk dB':>12} {'latency':>8}  verdict")
        for k, c in enumerate(check.channels):
            print(f"{c + 1:>7} {np.max(filters.band_level_db[:, c]):>9.1f} {check.gain_error_db[k]:>11.2f} "
                  f"{check.drive_energy_error_db[k]:>10.2f} {check.combine_energy_error_db[k]:>12.2f} "
                  f"{worst[k]:>12.1f} {int(check.latency_samples[k]):>8}  {'PASS' if check.passed()[k] else 'FAIL'}")
        n_pass = int(np.sum(check.passed()))
        verdict = "PASS" if n_pass == len(check.channels) else "FAIL"
        print(f"verdict: {verdict}, {n_pass} of {len(check.channels)} channels meet the {limit:g} dB crosstalk limit")
        if verdict == "FAIL":
            status = 1
            for line in _remedy(args, filters, check):
                print(line)
    print(f"wrote {len(files)} files to {args.out}")
    print(CAUTION, file=sys.stderr)
    return status
