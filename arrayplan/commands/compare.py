"""``arrayplan compare``: two or more layouts side by side on the same frequencies.

Compare two or more layouts (rig files, planned here, or plan folders) on the same frequencies:
strong, usable and effective channel counts, the paraxial estimate, element counts, aperture sizes
and optionally capacity at an SNR. Writes a table, per-frequency values and an overlaid figure to
--out.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import matplotlib
import numpy as np

from ..errors import InputError
from ..formats.atomic_files import write_json_atomic, write_text_atomic
from ..formats.fileio import provenance
from ..formats.output_folders import staged_output_dir
from ..frequency import FrequencyAxis
from ..channels.planning import plan_rig
from ..formats.plan_folder import read_plan
from ..formats.study_sidecars import stamp_study_sidecar
from ..progress import ProgressBar
from ..rig import load_rig
from ._args import add_frequencies_option, add_output_folder_options, command_description
from ..studies._common import REFERENCE_SNR_MEANING, STRONGEST_SNR_MEANING
from ..studies._tables import csv_text as _csv


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("compare", help="compare layouts: counts, apertures, capacity, one table",
                       description=command_description(__doc__))
    p.add_argument("layouts", nargs="+", metavar="RIG_OR_PLAN", help="rig files (TOML) or plan folders")
    add_output_folder_options(p)
    add_frequencies_option(p, "compare", "the first layout's frequencies")
    p.add_argument("--reference-snr-db", type=float, metavar="DB",
                   help="also give the capacity at this reference SNR: at a microphone 1 m from one speaker in "
                        "free field with all the drive power on it; each layout's speakers share the power (the "
                        "same reference as 'arrayplan study layout')")
    p.add_argument("--threshold-db", type=float, help="strong-channel threshold for rigs planned here, dB")
    p.add_argument("--snr-db", type=float, help="SNR of the strongest channel for the usable count of rigs planned "
                                                "here, dB (as in 'arrayplan plan'; not the reference SNR)")
    p.set_defaults(run=run)


def _load(path: str, axis: FrequencyAxis | None, args: argparse.Namespace):
    """(name, plan) of one argument, planned on `axis` when given (free-field plans are re-planned)."""
    p = Path(path)
    if p.is_dir():
        plan = read_plan(p)
        if axis is not None and plan.channels.axis != axis:
            if plan.kernel_name != "free field":
                raise InputError(f"planned from {plan.kernel_name} on other frequencies; it cannot be re-planned "
                                 "here", source=path, field="frequencies", fix="plan it again on the same frequencies")
            plan = plan_rig(plan.rig, axis, threshold_db=plan.threshold_db, snr_db=plan.snr_db)
        return p.name, plan
    rig = load_rig(p)
    use = axis if axis is not None else rig.frequencies
    if use is None:
        raise InputError("no frequencies to compare at", source=path, field="frequencies",
                         fix="add a [frequencies] table or give --freq-hz")
    return rig.name, plan_rig(rig, use, threshold_db=args.threshold_db, snr_db=args.snr_db)


def run(args: argparse.Namespace) -> int:
    from ..studies.compare import compare_plans

    matplotlib.use("Agg")
    if len(args.layouts) < 2:
        raise InputError(f"give at least two layouts, got {len(args.layouts)}", source="RIG_OR_PLAN")
    for flag, value in (("--reference-snr-db", args.reference_snr_db), ("--threshold-db", args.threshold_db),
                        ("--snr-db", args.snr_db)):
        if value is not None and not np.isfinite(value):
            raise InputError(f"must be a finite number of dB, got {value}", source=flag)
    for flag, value in (("--threshold-db", args.threshold_db), ("--snr-db", args.snr_db)):
        if value is not None and value <= 0:
            raise InputError(f"must be positive, got {value}", source=flag)
    axis = FrequencyAxis(sorted(args.freq), source="--freq-hz") if args.freq else None
    named = []
    with ProgressBar("planning layouts") as bar:
        for i, path in enumerate(args.layouts):
            name, plan = _load(path, axis, args)
            if axis is None:
                axis = plan.channels.axis
            taken = {n for n, _, _ in named}
            named.append((name if name not in taken else f"{name} ({i + 1})", path, plan))
            bar(i + 1, len(args.layouts))
    comparison = compare_plans(named, args.reference_snr_db)
    head, rows = comparison.table()
    hz = comparison.axis.hz
    per_f = []
    for s in comparison.layouts:
        for f in range(len(hz)):
            per_f.append([s.name, float(hz[f]), int(s.strong[f]), int(s.usable[f]), float(s.effective[f]),
                          "" if np.isnan(s.paraxial[f]) else float(s.paraxial[f]),
                          "" if s.capacity is None else float(s.capacity[f])])
    series = {"strong channels": np.array([s.strong for s in comparison.layouts]),
              "usable channels": np.array([s.usable for s in comparison.layouts]),
              "effective channels": np.array([s.effective for s in comparison.layouts])}
    if args.reference_snr_db is not None:
        series["capacity (bit/s/Hz)"] = np.array([s.capacity for s in comparison.layouts])
    doc = {"provenance": provenance(), "frequencies_hz": hz,
           "reference_snr_db": args.reference_snr_db, "reference_snr": REFERENCE_SNR_MEANING,
           "usable_snr": STRONGEST_SNR_MEANING, "header": head, "rows": rows,
           "layouts": [{"name": s.name, "source": s.source, "kernel": s.kernel} for s in comparison.layouts]}
    with staged_output_dir(args.out) as stage:
        write_text_atomic(stage / "compare.csv", _csv(head, rows))
        write_text_atomic(stage / "compare-by-frequency.csv", _csv(
            ["layout", "frequency_hz", "strong", "usable", "effective", "paraxial_estimate", "capacity_bit_per_s_hz"],
            per_f))
        write_json_atomic(stage / "compare.json", stamp_study_sidecar(doc, "comparison"))
        if not args.no_figures:
            from ..plots.layout import plot_comparison
            plot_comparison(hz, [s.name for s in comparison.layouts], series).savefig(stage / "compare.png", dpi=120)
        names = sorted(q.name for q in stage.iterdir())
    widths = [max(len(str(h)), *(len(str(r[k])) for r in rows)) for k, h in enumerate(head)]
    print("  ".join(str(h).ljust(w) for h, w in zip(head, widths)))
    for r in rows:
        print("  ".join(str(x).ljust(w) for x, w in zip(r, widths)))
    print(f"on {len(hz)} frequencies {hz[0]:g}-{hz[-1]:g} Hz; wrote {len(names)} files to {args.out}: "
          f"{', '.join(names)}")
    return 0
