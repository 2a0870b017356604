"""``arrayplan study capacity``: water-filling capacity of a plan against the SNR.

Water-filling capacity of a plan's channels at each frequency and SNR, with equal power on the
strong channels for comparison, and the band's capacity in bit/s.  The SNR is that of the strongest
channel with all the power on it, as in 'arrayplan plan'.
"""

from __future__ import annotations

import argparse

import matplotlib

from ._args import (add_frequencies_option, add_output_folder_options, add_plan_or_rig_argument, command_description,
                    positive_float)
from ..errors import InputError
from ..studies._common import load_study_source
from ..studies.capacity import capacity_study, check_snr_list
from ..studies.files import capacity_verdict, write_capacity_study


def register(actions: argparse._SubParsersAction) -> None:
    p = actions.add_parser("capacity", help="capacity of the channels against SNR (water-filling), bit/s",
                           description=command_description(__doc__))
    add_plan_or_rig_argument(p)
    add_output_folder_options(p)
    p.add_argument("--snr-db", nargs="+", metavar="DB",
                   help="SNR of the strongest channel, dB, one or more values (default: the plan's)")
    p.add_argument("--threshold-db", type=positive_float, metavar="DB",
                   help="strong channels (equal-power comparison) within this of the strongest (default: the plan's)")
    add_frequencies_option(p, "with a rig file: plan", "the rig's [frequencies]")
    p.add_argument("--water-hz", type=positive_float, metavar="HZ",
                   help="frequency of the water-level figure (nearest planned; default the middle one)")
    p.set_defaults(run=run)


def run(args: argparse.Namespace) -> int:
    matplotlib.use("Agg")
    if args.snr_db is not None:
        check_snr_list(args.snr_db, source="--snr-db")
    if args.threshold_db is not None and not args.threshold_db > 0:
        raise InputError(f"must be positive, got {args.threshold_db}", source="--threshold-db")
    plan = load_study_source(args.source, hz=args.freq, need_positions=False)
    snr = args.snr_db
    if snr is None:
        side = getattr(plan, "sidecar", None)
        snr = [side.get("snr_db", 40.0) if isinstance(side, dict) else plan.snr_db]
    study = capacity_study(plan, snr, threshold_db=args.threshold_db)
    water = None
    if args.water_hz is not None:
        if not args.water_hz > 0:
            raise InputError(f"must be a positive frequency, got {args.water_hz}", source="--water-hz")
        water = int(abs(study.hz - args.water_hz).argmin())
    files = write_capacity_study(study, args.out, plan_source=str(args.source), figures=not args.no_figures,
                                 water_freq_index=water)
    print(f"{'SNR (dB)':>9} {'band (bit/s)':>13} {'equal power (bit/s)':>20} {'max channels':>13}")
    for k, s in enumerate(study.snr_db):
        print(f"{s:9g} {study.band_capacity[k]:13.4g} {study.band_equal_capacity[k]:20.4g} "
              f"{int(study.active[k].max()):13d}")
    print(capacity_verdict(study))
    print("assumption: each planned frequency stands for the band around it; white noise, the same at every "
          "frequency")
    if study.measured:
        print("note: the plan comes from measured responses; the SNR is your assumption about the noise, "
              "not something the measurement tells")
    print(f"wrote {len(files)} files to {args.out}: {', '.join(p.name for p in files)}")
    return 0
