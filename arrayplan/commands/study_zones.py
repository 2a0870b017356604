"""``arrayplan study zones``: bright and dark zones, contrast control and pressure matching, with filters.

Drive weights that make the bright zone loud and the dark zone quiet, per frequency: acoustic
contrast control, pressure matching and the plan's own channels, over a sweep of regularisation;
figures of merit, field maps, and optionally drive FIR filters and a robustness check.
"""

from __future__ import annotations

import argparse

import matplotlib
import numpy as np

from ..errors import InputError
from ..frequency import FrequencyAxis
from ..progress import ProgressBar
from ..rig import load_rig
from ..safety import CAUTION_NOTE
from ..rig.zones import select_zones
from ._args import (accept_old_spelling, add_frequencies_option, add_measured_kernel_options, add_output_folder_options,
                    command_description, csv_names)


def _numbers(text: str) -> list[float]:
    try:
        return [float(v) for v in text.split(",")]
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected comma-separated numbers, got {text!r}") from None


def _vector(text: str) -> list[float]:
    vals = _numbers(text)
    if len(vals) != 3:
        raise argparse.ArgumentTypeError(f"expected three numbers x,y,z, got {text!r}")
    return vals


def register(actions: argparse._SubParsersAction) -> None:
    p = actions.add_parser("zones", help="bright and dark zones: contrast control, pressure matching, filters",
                           description=command_description(__doc__))
    p.add_argument("rig", help="rig file (TOML) with [[zones]] entries")
    add_output_folder_options(p)
    p.add_argument("--bright", type=csv_names, metavar="ZONE[,ZONE]",
                   help="bright zone(s) by name (default: every zone with role = \"bright\")")
    p.add_argument("--dark", type=csv_names, metavar="ZONE[,ZONE]",
                   help="dark zone(s) by name (default: every zone with role = \"dark\")")
    add_frequencies_option(p, "study", "the rig file's [frequencies]")
    p.add_argument("--regularisation", type=_numbers, metavar="R[,R...]",
                   help="relative regularisation values to sweep (> 0; default 1e-4,1e-3,1e-2,0.1,1)")
    p.add_argument("--max-effort-db", type=float, default=10.0, metavar="DB",
                   help="the chosen design is the least regularised whose worst array effort is at most this "
                        "(dB re one speaker; default 10, a design choice)")
    target = p.add_mutually_exclusive_group()
    target.add_argument("--target-direction", type=_vector, metavar="X,Y,Z",
                        help="pressure-matching target: a plane wave travelling this way (default: from the "
                             "reference speaker towards the bright zone)")
    target.add_argument("--target-source", type=_vector, metavar="X,Y,Z",
                        help="pressure-matching target: the field of a virtual point source here (m)")
    p.add_argument("--map-hz", type=float, metavar="HZ", help="frequency of the field maps (default mid-band)")
    p.add_argument("--tolerance-m", dest="tolerance", type=float, metavar="SIGMA_M",
                   help="re-evaluate the contrast on rigs whose speakers and zone points move by Gaussian errors "
                        "of this standard deviation per coordinate (m)")
    p.add_argument("--trials", type=int, default=20, help="perturbed rigs for --tolerance-m (default 20)")
    p.add_argument("--seed", type=int, default=0, help="random seed for --tolerance-m (default 0)")
    p.add_argument("--filters", choices=("contrast", "matching"),
                   help="write drive FIR filters of this method's chosen design (zone-drive.wav) and check them")
    p.add_argument("--rate-hz", dest="rate", type=float, default=48000.0, help="filter sample rate, Hz (default 48000)")
    p.add_argument("--taps", type=int, default=2048, help="filter length (default 2048)")
    p.add_argument("--band-hz", dest="band", type=float, nargs=2, metavar=("LOW_HZ", "HIGH_HZ"),
                   help="filter band in Hz (default the studied frequencies' range)")
    p.add_argument("--irset", metavar="DIR|FILE.sofa",
                   help="take the coupling to zones of microphones from this measured impulse-response set "
                        "instead of the free field (every zone must then be made of microphones); --tolerance-m "
                        "and the field maps stay free field, the filter check uses the measured responses")
    add_measured_kernel_options(p, prefix="with --irset: ")
    accept_old_spelling(p, "--rate-hz", "--rate")
    accept_old_spelling(p, "--band-hz", "--band")
    accept_old_spelling(p, "--tolerance-m", "--tolerance")
    p.set_defaults(run=run, parameter_flags={"sample_rate_hz": "--rate-hz", "band_hz": "--band-hz"})


def run(args: argparse.Namespace) -> int:
    from ..studies.zone_files import ZoneTolerance, summary_lines, write_zone_study
    from ..filters import validate_request
    from ..studies.zone_filters import check_zone_filters, zone_filter_taps, zone_points_rig
    from ..studies.zone_weights import ZoneTarget, contrast_db
    from ..studies.zones import AUTO_REGULARISATION, perturbed_contrast, study_zones, zone_coupling

    matplotlib.use("Agg")
    rig = load_rig(args.rig)
    if not rig.zones:
        raise InputError("the rig has no zones", source=args.rig, field="zones",
                         fix="add [[zones]] entries with name, role and members or a generated group")
    bright = select_zones(rig.zones, args.bright, "bright", args.rig if args.bright is None else "--bright")
    dark = select_zones(rig.zones, args.dark, "dark", args.rig if args.dark is None else "--dark")
    axis = FrequencyAxis(sorted(args.freq), source="--freq-hz") if args.freq else rig.frequencies
    if axis is None:
        raise InputError("no frequencies to study", source=args.rig, field="frequencies",
                         fix="add a [frequencies] table or give --freq-hz")
    regs = args.regularisation if args.regularisation is not None else list(AUTO_REGULARISATION)
    if not all(np.isfinite(r) and r > 0 for r in regs):
        raise InputError(f"values must be positive, got {','.join(f'{r:g}' for r in regs)}",
                         source="--regularisation", fix="give values such as 0.001,0.01,0.1")
    if not np.isfinite(args.max_effort_db):
        raise InputError("must be a finite number of dB", source="--max-effort-db")
    pts_b = np.vstack([z.positions for z in bright])
    if args.target_source is not None:
        target = ZoneTarget.point(args.target_source, source="--target-source")
    elif args.target_direction is not None:
        target = ZoneTarget.plane(args.target_direction, source="--target-direction")
    else:
        from ..studies.zone_weights import reference_speaker
        ref = rig.speakers.positions[reference_speaker(rig.speakers.positions)]
        target = ZoneTarget.plane(pts_b.mean(axis=0) - ref, source="rig")
    if args.tolerance is not None and not (np.isfinite(args.tolerance) and args.tolerance > 0):
        raise InputError(f"must be a positive position error in metres, got {args.tolerance}", source="--tolerance-m")
    if args.trials < 1:
        raise InputError(f"must be at least 1, got {args.trials}", source="--trials")
    map_hz = float(args.map_hz) if args.map_hz is not None else float(np.sqrt(axis.hz[0] * axis.hz[-1]))
    if not (np.isfinite(map_hz) and map_hz > 0):
        raise InputError(f"must be a positive frequency, got {args.map_hz}", source="--map-hz")
    band = tuple(args.band) if args.band else (float(axis.hz[0]), float(axis.hz[-1]))
    if args.filters:
        validate_request(zone_points_rig(rig, [*bright, *dark]), args.rate, args.taps, band)

    kernel, measured_ir = None, None
    if args.irset:
        from .plan import _measured_kernel
        points = [z.name for z in (*bright, *dark) if z.mic_indices is None]
        if points:
            raise InputError(f"zone {points[0]!r} is made of control points, and measured responses exist only at "
                             "microphones", source="--irset", fix="use zones of microphones (members = [...])")
        rig, kernel = _measured_kernel(args, rig)
        if args.filters:
            from ..formats.irset import read_irset
            irs = read_irset(args.irset)
            if abs(irs.sample_rate_hz - args.rate) > 1e-9:
                raise InputError(f"the IR set's rate {irs.sample_rate_hz:g} Hz differs from the filter rate "
                                 f"{args.rate:g} Hz", source="--rate-hz", fix=f"give --rate-hz {irs.sample_rate_hz:g}")
            rows = [i for z in (*bright, *dark) for i in z.mic_indices]
            measured_ir = irs.data[irs.zero_lag_samples:, rows, :]
    elif args.window_ms is not None or args.latency_samples or args.smooth_octaves is not None:
        raise InputError("applies only with --irset", source="--window-ms/--latency-samples/--smooth-octaves")
    study = study_zones(rig, bright, dark, axis, target=target, regularisation=regs,
                        max_effort_db=args.max_effort_db, kernel=kernel)
    tolerance = None
    if args.tolerance is not None:
        with ProgressBar("perturbed rigs") as bar:
            pert = {}
            keys = list(study.results)
            for i, key in enumerate(keys):
                res = study.results[key]
                pert[key] = perturbed_contrast(rig, bright, dark, res.weights[res.chosen], axis,
                                               sigma_m=args.tolerance, trials=args.trials, seed=args.seed)
                bar(i + 1, len(keys))
        tolerance = ZoneTolerance(float(args.tolerance), int(args.trials), int(args.seed), pert)
    filters = None
    if args.filters:
        beta = float(study.results[args.filters].regularisation[study.results[args.filters].chosen])

        def weights_at(ax: FrequencyAxis) -> np.ndarray:
            sub = study_zones(rig, bright, dark, ax, target=target, regularisation=[beta], kernel=kernel)
            return sub.results[args.filters].weights[0]

        def designed(ax: FrequencyAxis) -> np.ndarray:
            w = weights_at(ax)
            return contrast_db(w, zone_coupling(rig, bright, ax.hz, kernel), zone_coupling(rig, dark, ax.hz, kernel))

        with ProgressBar("zone filters") as bar:
            bar(0, 2)
            taps = zone_filter_taps(weights_at, zone_points_rig(rig, [*bright, *dark]), args.rate, args.taps, band)
            bar(1, 2)
            filters = check_zone_filters(rig, bright, dark, taps, args.rate, band, designed,
                                         impulse_responses=measured_ir)
            bar(2, 2)
    files = write_zone_study(rig, study, args.out, map_hz=map_hz, tolerance=tolerance, filters=filters,
                             filter_method=args.filters, figures=not args.no_figures)
    for line in summary_lines(study):
        print(line)
    if tolerance is not None:
        for key, pert in tolerance.contrast_db.items():
            print(f"tolerance {tolerance.sigma_m * 1000:g} mm, {key}: median contrast "
                  f"{np.median(pert):.1f} dB (designed {study.results[key].contrast_db[study.results[key].chosen].mean():.1f} dB "
                  f"mean), worst trial and frequency {pert.min():.1f} dB")
    if filters is not None:
        print(f"filters ({args.filters}, {filters.taps.shape[0]} taps at {filters.sample_rate_hz:g} Hz): contrast "
              f"realised over {band[0]:g}-{band[1]:g} Hz {filters.band_contrast_db:.1f} dB")
        print(f"caution: {CAUTION_NOTE}")
    print(f"wrote {len(files)} files to {args.out}: {', '.join(p.name for p in files)}")
    return 0
