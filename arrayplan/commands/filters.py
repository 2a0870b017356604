"""``arrayplan filters``: channel weights as FIR filter files, checked in a time-domain simulation."""

from __future__ import annotations

import argparse
import sys

import matplotlib

from ..errors import InputError
from ..filters import check_filters, design_filters, validate_request, write_filters
from ..progress import ProgressBar
from ..rig import load_rig
from ._args import add_memory_limit, count, finite_float, positive_float

CAUTION = ("caution: these filters feed loudspeakers; start any playback at a low level, protect hearing "
           "and drivers, and follow local codes and licensed practice")


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("filters",
                       description="Design FIR drive filters (per speaker) and combine filters (per "
                                   "microphone) for each planned channel, write them as WAV files with a "
                                   "JSON sidecar, and check channel isolation in a time-domain simulation.")
    p.add_argument("rig", help="rig file (TOML)")
    p.add_argument("--rate", type=positive_float, required=True, metavar="HZ", help="DSP sample rate in Hz")
    p.add_argument("--taps", type=count(), default=2048, help="filter length in samples (default 2048)")
    p.add_argument("--band", type=positive_float, nargs=2, required=True, metavar=("LOW_HZ", "HIGH_HZ"),
                   help="band where the filters realise the planned weights")
    p.add_argument("--out", required=True, help="output folder (created; files written atomically)")
    p.add_argument("--min-level-db", type=finite_float, default=-30.0,
                   help="skip channels weaker than this re the strongest at band centre (default -30)")
    p.add_argument("--crosstalk-limit-db", type=finite_float, default=-40.0,
                   help="pass/fail limit of the worst in-band crosstalk (default -40)")
    p.add_argument("--no-check", action="store_true", help="skip the time-domain check")
    add_memory_limit(p)
    p.set_defaults(run=run, parameter_flags={"sample_rate_hz": "--rate", "band_hz": "--band"})


def _check_filter_size(rig, taps: int) -> None:
    """Refuse filter sets whose design would not fit the memory limit (estimated before designing).

    The design holds a coupling matrix per FFT bin (``taps / 2 + 1`` of them,
    about three working copies for the SVD) and real filters of `taps`
    samples per element and channel (with the time-domain check, twice).
    """
    from ..limits import check_memory

    n_s, n_m = len(rig.speakers), len(rig.mics)
    n_bins = taps // 2 + 1
    n_bytes = 3 * 16.0 * n_bins * n_s * n_m + 2 * 8.0 * taps * (n_s + n_m) * min(n_s, n_m)
    check_memory(n_bytes, f"{taps}-tap filters for {n_s} speakers x {n_m} microphones", field="taps")


def run(args: argparse.Namespace) -> int:
    matplotlib.use("Agg")
    rig = load_rig(args.rig)
    if not args.min_level_db <= 0:
        raise InputError(f"must be 0 dB or below, got {args.min_level_db:g}", source="--min-level-db")
    _check_filter_size(rig, args.taps)
    validate_request(rig, args.rate, args.taps, tuple(args.band))
    with ProgressBar("filter plan") as plan_bar, \
            ProgressBar("filter taps") as taps_bar:
        filters = design_filters(rig, args.rate, args.taps, tuple(args.band), min_level_db=args.min_level_db,
                                 plan_progress=plan_bar, taps_progress=taps_bar)
    check = None
    if not args.no_check:
        with ProgressBar("checking crosstalk") as check_bar:
            check = check_filters(rig, filters, limit_db=args.crosstalk_limit_db, progress=check_bar)
    files = write_filters(rig, filters, args.out, check)
    fs = filters.sample_rate_hz
    print(f"{rig.name}: {len(filters.kept)} channels with filters, {filters.taps} taps at {fs:g} Hz, "
          f"bulk delay {filters.bulk_delay_samples} samples ({1e3 * filters.bulk_delay_samples / fs:.2f} ms)")
    for j, why in filters.skipped:
        print(f"  channel {j + 1} skipped: {why}")
    if check is not None:
        worst = check.worst_crosstalk_db()
        print(f"check on a grid {check.grid_factor:g} times finer than the design bins; worst in-band case of each "
              "figure (gain re plan, drive/combine energy re 1)")
        print(f"{'channel':>7} {'level dB':>9} {'gain err dB':>11} {'drive E dB':>10} {'combine E dB':>12} "
              f"{'crosstalk dB':>12} {'latency':>8}  verdict")
        for k, c in enumerate(check.channels):
            print(f"{c + 1:>7} {filters.level_db[c]:>9.1f} {check.gain_error_db[k]:>11.2f} "
                  f"{check.drive_energy_error_db[k]:>10.2f} {check.combine_energy_error_db[k]:>12.2f} "
                  f"{worst[k]:>12.1f} {int(check.latency_samples[k]):>8}  {'pass' if check.passed()[k] else 'FAIL'}")
    print(f"wrote {len(files)} files to {args.out}")
    print(CAUTION, file=sys.stderr)
    return 0
