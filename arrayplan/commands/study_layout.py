"""``arrayplan study layout``: which N of the candidate positions to fill, with an optimality gap.

Choose N of the candidate positions for speakers or microphones (the other side fixed) by a
broadband criterion: greedy selection, refined by swaps; for capacity also an upper bound from a
convex relaxation and the gap to it. Writes the chosen layout as a rig file that 'arrayplan plan'
reads.
"""

from __future__ import annotations

import argparse

import matplotlib
import numpy as np

from ..errors import InputError
from ..frequency import FrequencyAxis
from ..progress import ProgressBar
from ..rig import ElementSet, load_rig, read_positions_csv
from ._args import add_frequencies_option, add_output_folder_options, command_description
from ..studies._common import DEFAULT_REFERENCE_SNR_DB


def register(actions: argparse._SubParsersAction) -> None:
    p = actions.add_parser("layout", help="choose where N speakers or microphones go, out of candidate positions",
                           description=command_description(__doc__))
    p.add_argument("rig", help="rig file (TOML); the other side stays fixed")
    add_output_folder_options(p, "write tables and the rig file only")
    p.add_argument("--choose", type=int, required=True, metavar="N", help="number of elements to choose")
    p.add_argument("--side", choices=("speakers", "microphones"), default="speakers",
                   help="which side the candidates are (default speakers)")
    p.add_argument("--candidates", metavar="FILE.csv",
                   help="CSV of candidate positions (header x,y,z[,name]) in metres; default: the rig's own "
                        "elements on --side are the candidates")
    p.add_argument("--criterion", choices=("capacity", "strong", "usable"), default="capacity",
                   help="capacity: sum over frequencies of log2 det(I + rho (4 pi)^2 G^H G / n); strong: channels "
                        "within the threshold of the strongest; usable: channels whose own SNR reaches 0 dB")
    p.add_argument("--reference-snr-db", type=float, default=DEFAULT_REFERENCE_SNR_DB, metavar="DB",
                   help="reference SNR rho, dB: at a microphone 1 m from one speaker in free field with all the "
                        "drive power on it; the speakers share the power (default %(default)g; the same "
                        "reference as 'arrayplan compare', not the plan's SNR of the strongest channel)")
    p.add_argument("--threshold-db", type=float, help="strong-channel threshold, dB (default the rig's)")
    add_frequencies_option(p, "score", "the rig file's [frequencies]")
    p.set_defaults(run=run)


def _candidates(args: argparse.Namespace, rig) -> ElementSet | None:
    if args.candidates is None:
        return None
    names, pos, _ = read_positions_csv(args.candidates, field="--candidates")
    same_side = rig.speakers if args.side == "speakers" else rig.mics
    names = names or [f"C{i + 1}" for i in range(len(pos))]
    if len(set(names)) != len(names):
        raise InputError("candidate names must be unique", source=args.candidates, field="name")
    pos.setflags(write=False)
    return ElementSet(tuple(names), pos, (same_side.directivities[0],) * len(pos), tuple(range(1, len(pos) + 1)))


def run(args: argparse.Namespace) -> int:
    from ..studies.layout import choose_layout
    from ..studies.layout_problem import layout_problem
    from ..studies.layout_files import summary_lines, write_layout

    matplotlib.use("Agg")
    rig = load_rig(args.rig)
    axis = FrequencyAxis(sorted(args.freq), source="--freq-hz") if args.freq else rig.frequencies
    if axis is None:
        raise InputError("no frequencies to score at", source=args.rig, field="frequencies",
                         fix="add a [frequencies] table or give --freq-hz")
    if not np.isfinite(args.reference_snr_db):
        raise InputError(f"must be a finite number of dB, got {args.reference_snr_db}", source="--reference-snr-db")
    if args.threshold_db is not None and not (np.isfinite(args.threshold_db) and args.threshold_db > 0):
        raise InputError(f"must be a positive number of dB, got {args.threshold_db}", source="--threshold-db")
    cand = _candidates(args, rig)
    problem = layout_problem(rig, args.side, args.choose, axis, candidates=cand,
                             reference_snr_db=args.reference_snr_db,
                             threshold_db=args.threshold_db,
                             source=args.candidates or f"{args.rig} ({args.side} as candidates)")
    with ProgressBar("choosing") as bar:
        choice = choose_layout(problem, args.criterion, progress=bar)
    files = write_layout(rig, choice, args.out, figures=not args.no_figures)
    for line in summary_lines(choice):
        print(line)
    print(f"wrote {len(files)} files to {args.out}: {', '.join(p.name for p in files)}")
    return 0
