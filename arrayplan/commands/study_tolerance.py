"""``arrayplan study tolerance``: what the planned weights do on a rig built a little off.

Keep the planned weights and apply them to coupling matrices of rigs built a little off (Gaussian
position, gain and phase errors per element): spread of each channel's gain, worst crosstalk, the
share of trials keeping the isolation limit, a first-order prediction and white-noise gains.
"""

from __future__ import annotations

import argparse

import matplotlib
import numpy as np

from ._args import (add_frequencies_option, add_output_folder_options, add_plan_or_rig_argument, command_description,
                    count, nonnegative_count)
from ..errors import InputError
from ..progress import ProgressBar
from ..studies._common import load_study_source
from ..studies.files import tolerance_verdict, write_tolerance_study
from ..studies.tolerance import KR_LIMIT, tolerance_study


def _number(text: str) -> float:
    try:
        return float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a number: {text!r}") from None


def register(actions: argparse._SubParsersAction) -> None:
    p = actions.add_parser("tolerance", help="Monte Carlo of placement, gain and phase errors on the planned weights",
                           description=command_description(__doc__))
    add_plan_or_rig_argument(p)
    add_output_folder_options(p)
    p.add_argument("--position-mm", type=_number, default=0.0, metavar="MM",
                   help="standard deviation of each position coordinate, mm (default 0)")
    p.add_argument("--gain-db", type=_number, default=0.0, metavar="DB",
                   help="standard deviation of each element's gain, dB (default 0)")
    p.add_argument("--phase-deg", type=_number, default=0.0, metavar="DEG",
                   help="standard deviation of each element's phase, degrees (default 0)")
    p.add_argument("--trials", type=count(100_000), default=200, metavar="N", help="Monte Carlo trials (default 200)")
    p.add_argument("--seed", type=nonnegative_count(2 ** 32 - 1), default=0, metavar="N", help="random seed (default 0)")
    p.add_argument("--isolation-db", type=_number, default=20.0, metavar="DB",
                   help="a channel keeps its isolation when its worst crosstalk is at least this far below it "
                        "(default 20, as in verify)")
    p.add_argument("--threshold-db", type=_number, metavar="DB",
                   help="channels in use are those within this of the strongest, dB, each judged where it is "
                        "(default: the plan's strong threshold)")
    p.add_argument("--rig", metavar="RIG", help="the rig file a plan folder was made for (positions, directivities)")
    add_frequencies_option(p, "with a rig file: plan", "the rig's [frequencies]")
    p.set_defaults(run=run)


def _checked(args: argparse.Namespace) -> None:
    for flag, value in (("--position-mm", args.position_mm), ("--gain-db", args.gain_db),
                        ("--phase-deg", args.phase_deg)):
        if not (np.isfinite(value) and value >= 0):
            raise InputError(f"a standard deviation must be a finite number >= 0, got {value:g}", source=flag)
    if not (np.isfinite(args.trials) and args.trials >= 1 and args.trials == int(args.trials)):
        raise InputError(f"must be a whole number of trials >= 1, got {args.trials:g}", source="--trials")
    if not (np.isfinite(args.seed) and args.seed >= 0 and args.seed == int(args.seed)):
        raise InputError(f"must be a whole number >= 0, got {args.seed:g}", source="--seed")
    if not (np.isfinite(args.isolation_db) and args.isolation_db > 0):
        raise InputError(f"must be a positive number of dB, got {args.isolation_db:g}", source="--isolation-db")
    if args.threshold_db is not None and not (np.isfinite(args.threshold_db) and args.threshold_db > 0):
        raise InputError(f"must be a positive number of dB, got {args.threshold_db:g}", source="--threshold-db")
    if args.position_mm == 0 and args.gain_db == 0 and args.phase_deg == 0:
        raise InputError("no errors to study", source="--position-mm/--gain-db/--phase-deg",
                         fix="give at least one standard deviation, e.g. --position-mm 1 --gain-db 0.5")


def run(args: argparse.Namespace) -> int:
    matplotlib.use("Agg")
    _checked(args)
    plan = load_study_source(args.source, rig_file=args.rig, hz=args.freq)
    with ProgressBar("tolerance trials") as bar:
        study = tolerance_study(plan, position_sd_m=args.position_mm / 1000.0, gain_sd_db=args.gain_db,
                                phase_sd_deg=args.phase_deg, n_trials=int(args.trials), seed=int(args.seed),
                                isolation_db=args.isolation_db, threshold_db=args.threshold_db, progress=bar)
    files = write_tolerance_study(study, args.out, plan_source=str(args.source), figures=not args.no_figures)
    used = np.flatnonzero(study.judged.any(axis=0))
    print(f"{'channel':>8} {'gain 5..95 % (dB)':>20} {'first order (dB)':>17} {'keeps isolation':>16} "
          f"{'WNG spk (dB)':>13}")
    for j in used:
        f = study.judged[:, j]
        lo, hi = np.nanmin(study.gain_pct_db[0, f, j]), np.nanmax(study.gain_pct_db[2, f, j])
        fo = 1.6448536269514722 * np.nanmax(study.predicted_gain_sd_db[f, j])
        print(f"{j + 1:8d} {f'{lo:+.2f} .. {hi:+.2f}':>20} {f'±{fo:.2f}':>17} "
              f"{f'{100 * np.nanmin(study.survival[f, j]):.0f} % (worst)':>16} "
              f"{np.nanmin(study.wng_speaker_db[f, j]):13.1f}")
    print(tolerance_verdict(study))
    if study.settings["coupling_model"] == "ratio":
        why = ("the plan comes from measured responses" if study.settings["measured_plan"] else
               "the free field at the stored positions does not reproduce the plan's couplings (directivities "
               "not stored; give --rig)")
        print(f"note: {why}; each path's planned coupling is scaled by the kernel's change at the perturbed "
              "positions")
    if np.any(study.beyond_first_order):
        print(f"note: k * position error exceeds {KR_LIMIT:g} above "
              f"{study.hz[np.argmax(study.beyond_first_order)]:.4g} Hz: the first-order prediction does not hold "
              "there, only the Monte Carlo")
    print(f"wrote {len(files)} files to {args.out}: {', '.join(p.name for p in files)}")
    return 0
