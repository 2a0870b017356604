"""``arrayplan verify``: check planned channels against impulse responses of the real rig."""

from __future__ import annotations

import argparse
import csv
import io
from pathlib import Path

import matplotlib
import numpy as np

from ..errors import InputError
from ..fileio import atomic_path, provenance, staged_output_dir, write_json_atomic, write_text_atomic
from ..irset import read_irset
from ..kernels.measured import MeasuredKernel
from ..plan_files import read_weights
from ..verify import Verification, verify_plan


def _channel_list(text: str) -> list[int]:
    try:
        vals = [int(v) for v in text.split(",")]
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected 1-based channel numbers like 1,2,3, got {text!r}") from None
    if any(v < 1 for v in vals):
        raise argparse.ArgumentTypeError(f"channel numbers start at 1, got {text!r}")
    return vals


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("verify", help="verify planned channels against measured impulse responses",
                       description="Apply a plan's drive and combine weights to impulse responses measured "
                                   "on the real rig; report gain, crosstalk and lost channels per frequency. "
                                   "Exit 0 when every wanted channel passes, 1 when some fail, 2 on bad input.")
    p.add_argument("plan_dir", metavar="PLAN_DIR", help="folder written by 'arrayplan plan'")
    p.add_argument("irset_dir", metavar="IRSET_DIR", help="IR-set folder measured on the rig")
    p.add_argument("--out", required=True, help="output folder (created; files written atomically)")
    p.add_argument("--isolation-db", type=float, default=20.0,
                   help="a channel is lost where its isolation falls below this (dB, default 20)")
    p.add_argument("--channels", type=_channel_list, help="wanted channels, 1-based, e.g. 1,2,3 (default all)")
    p.add_argument("--window-ms", type=float, help="keep this much of each response (ms), half-Hann fade-out")
    p.add_argument("--latency-samples", type=int, default=0, help="common latency to drop first (samples)")
    p.add_argument("--no-figures", action="store_true", help="write tables only")
    p.set_defaults(run=run)


def _fmt(x: float) -> str:
    if np.isnan(x):
        return ""
    if np.isinf(x):
        return "inf" if x > 0 else "-inf"
    return f"{x:.8g}"


def _csv(header: list[str], rows: list[list]) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    w.writerows(rows)
    return buf.getvalue()


def channel_rows(res: Verification) -> list[list]:
    rows = []
    for f, hz in enumerate(res.hz):
        for k, j in enumerate(res.channels):
            rows.append([_fmt(hz), j + 1, _fmt(res.planned_sv[f, j]), _fmt(abs(res.channel_matrix[f, j, j])),
                         _fmt(res.gain_db[f, k]), _fmt(res.crosstalk_db[f, k]), _fmt(-res.crosstalk_db[f, k]),
                         int(res.lost[f, k]), _fmt(res.measured_sv[f, j])])
    return rows


def summary_rows(res: Verification) -> list[list]:
    return [[_fmt(hz), len(res.channels), int(res.lost[f].sum()), int(res.strong_planned[f]),
             int(res.strong_measured[f]), _fmt(res.max_angle_deg[f]), _fmt(np.max(res.crosstalk_db[f]))]
            for f, hz in enumerate(res.hz)]


def run(args: argparse.Namespace) -> int:
    matplotlib.use("Agg")
    weights = read_weights(args.plan_dir)
    irs = read_irset(args.irset_dir)
    if not (args.isolation_db > 0):
        raise InputError(f"must be positive, got {args.isolation_db}", source="--isolation-db")
    if args.window_ms is not None and not (args.window_ms > 0):
        raise InputError(f"must be positive, got {args.window_ms}", source="--window-ms")
    nyquist = irs.sample_rate_hz / 2
    if weights.axis.hz[-1] >= nyquist:
        raise InputError(f"plan goes up to {weights.axis.hz[-1]:g} Hz, at or above the IR set's Nyquist "
                         f"frequency {nyquist:g} Hz", source=str(args.irset_dir),
                         fix="measure at a higher sample rate or plan lower")
    kernel = MeasuredKernel(irs, window_s=None if args.window_ms is None else args.window_ms / 1e3,
                            latency_samples=args.latency_samples)
    n_chan = weights.drive.shape[2]
    if args.channels and max(args.channels) > n_chan:
        raise InputError(f"the plan has {n_chan} channels, asked for {max(args.channels)}", source="--channels")
    res = verify_plan(weights, kernel, isolation_db=args.isolation_db,
                      channels=None if not args.channels else [c - 1 for c in args.channels],
                      plan_source=str(args.plan_dir), measured_source=str(Path(args.irset_dir)))
    with staged_output_dir(args.out) as stage:
        write_text_atomic(stage / "verify-channels.csv", _csv(
            ["frequency_hz", "channel", "planned_singular_value", "realised_gain", "gain_db", "worst_crosstalk_db",
             "isolation_db", "lost", "measured_singular_value"], channel_rows(res)))
        write_text_atomic(stage / "verify-summary.csv", _csv(
            ["frequency_hz", "wanted_channels", "lost_channels", "strong_planned", "strong_measured",
             "max_subspace_angle_deg", "worst_crosstalk_db"], summary_rows(res)))
        write_json_atomic(stage / "verify.json", {
            "kind": "arrayplan-verification", "plan_dir": str(args.plan_dir), "irset_dir": str(args.irset_dir),
            "irset_units": irs.units, "isolation_db": res.isolation_db, "threshold_db": res.threshold_db,
            "window_ms": args.window_ms, "latency_samples": args.latency_samples,
            "channels": [int(j) + 1 for j in res.channels], "passed": [bool(p) for p in res.passed],
            "gain_note": "gain_db compares with the plan's units; uncalibrated IR sets give a common offset",
            "provenance": provenance()})
        if not args.no_figures:
            import matplotlib.pyplot as plt

            from ..plots.verify import plot_crosstalk, plot_singular_values
            for name, fig in (("verify-crosstalk.png", plot_crosstalk(res)),
                              ("verify-singular-values.png", plot_singular_values(res))):
                with atomic_path(stage / name) as tmp:
                    fig.savefig(tmp, dpi=120)
                plt.close(fig)
    for k, j in enumerate(res.channels):
        iso = -res.crosstalk_db[:, k]
        worst = int(np.argmin(iso))
        verdict = "PASS" if res.passed[k] else "FAIL"
        print(f"channel {j + 1}: {verdict}  worst isolation {_fmt(iso[worst])} dB at {res.hz[worst]:g} Hz "
              f"(need {res.isolation_db:g} dB), lost at {int(res.lost[:, k].sum())} of {len(res.hz)} frequencies")
    print(f"wrote verification to {args.out}")
    return 0 if bool(np.all(res.passed)) else 1
