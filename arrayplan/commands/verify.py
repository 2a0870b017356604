"""``arrayplan verify``: check planned channels, or the FIR filters that will run, against measured responses."""

from __future__ import annotations

import argparse
from pathlib import Path

import matplotlib
import numpy as np

from ..errors import InputError
from ..formats.filter_set import FILTER_SET_SIDECAR
from ..formats.irset import read_irset
from ..formats.verification_folder import verification_record, write_verification
from ._args import MAX_CHANNEL_NUMBER, add_measured_kernel_options, finite_float, measured_kernel_from_args
from ..formats.plan_folder import read_weights
from ..progress import ProgressBar
from ..verification.channels import GAIN_REFERENCES, Verification, lost_bands_hz, verify_plan

EXIT_STATUS = ("exit status: 0 when every wanted channel passes, 1 when some fail, 2 on bad input (nothing is "
               "written then)")


def _channel_list(text: str) -> list[int] | str:
    if text.strip().lower() == "all":
        return "all"
    try:
        vals = [int(v) for v in text.split(",")]
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected 1-based channel numbers like 1,2,3, got {text!r}") from None
    if any(not 1 <= v <= MAX_CHANNEL_NUMBER for v in vals):
        raise argparse.ArgumentTypeError(f"channels are numbered from 1 to at most {MAX_CHANNEL_NUMBER}, "
                                         f"got {text!r}")
    return vals


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("verify",
                       description="Apply a plan's drive and combine weights to impulse responses measured "
                                   "on the real rig, or convolve the FIR filters written by 'arrayplan filters' "
                                   "with them (a folder holding filters.json); report gain against the plan, "
                                   "crosstalk and lost channels per frequency (for filters on a grid finer than "
                                   "their design bins, with the band where each channel is lost).",
                       epilog=EXIT_STATUS + ".")
    p.add_argument("plan_dir", metavar="PLAN_OR_FILTERS_DIR",
                   help="folder written by 'arrayplan plan', or by 'arrayplan filters' (detected by its filters.json)")
    p.add_argument("irset_dir", metavar="IRSET", help="IR-set folder (or AES69/SOFA file) measured on the rig")
    p.add_argument("--out", required=True, help="output folder (created; files written atomically)")
    p.add_argument("--isolation-db", type=finite_float, default=20.0,
                   help="a channel is lost where its isolation falls below this (dB, default 20)")
    p.add_argument("--channels", type=_channel_list,
                   help="wanted channels, 1-based, e.g. 1,2,3, judged at every frequency; 'all' for every planned "
                        "channel (default: the channels strong in the plan somewhere, each judged where strong)")
    p.add_argument("--gain-reference", choices=GAIN_REFERENCES,
                   help="refer realised gains to the plan's singular values ('plan'), or to the plan times one "
                        "common factor fitted over all judged channels and frequencies ('common', for "
                        "uncalibrated measurements; crosstalk and isolation do not change). Default: 'plan' when "
                        "the IR set is in pascal_per_volt or the plan was made from measured responses, else "
                        "'common'")
    add_measured_kernel_options(p)
    p.add_argument("--no-figures", action="store_true", help="write tables only")
    p.set_defaults(run=run)


#: IR-set units whose gains can be compared with a plan directly.
PHYSICAL_UNITS = ("pascal_per_volt",)


def default_gain_reference(irset_units: str, plan_kernel: str) -> tuple[str, str]:
    """The gain reference when none is given, and why (one phrase)."""
    if str(plan_kernel).startswith("measured"):
        return "plan", "the plan was made from measured responses, in the measurement's own units"
    if irset_units in PHYSICAL_UNITS:
        return "plan", f"the IR set is calibrated ({irset_units})"
    return "common", f"the IR set is not calibrated in physical units ({irset_units})"


def _signed(x: float) -> str:
    """``+1.23`` with two decimals; never ``-0.00``."""
    return f"{round(float(x), 2) + 0.0:+.2f}"


def _gain_lines(res: Verification, reason: str) -> list[str]:
    if res.gain_reference == "common":
        return [f"gain reference: common factor {_signed(res.common_gain_db)} dB re plan (least-squares fit in dB of "
                f"|C_jj| to the planned singular values over the judged channels and frequencies; {reason}); "
                "channel gains below are relative to it"]
    return [f"gain reference: plan ({reason}); the common offset re plan is {_signed(res.common_gain_db)} dB"]


def _plan_rig_hash(sidecar: object) -> str | None:
    """The rig hash the plan was made for, if its sidecar gives one."""
    rig = sidecar.get("rig") if isinstance(sidecar, dict) else None
    return rig.get("sha256") if isinstance(rig, dict) else None


def _plan_result(args: argparse.Namespace, irs, kernel) -> tuple[Verification, str, dict]:
    """Verify a plan folder's weights at its planned frequencies."""
    weights = read_weights(args.plan_dir)
    nyquist = irs.sample_rate_hz / 2
    if weights.axis.hz[-1] >= nyquist:
        raise InputError(f"plan goes up to {weights.axis.hz[-1]:g} Hz, at or above the IR set's Nyquist "
                         f"frequency {nyquist:g} Hz", source=str(args.irset_dir),
                         fix="measure at a higher sample rate or plan lower")
    n_chan = weights.drive.shape[2]
    if isinstance(args.channels, list) and max(args.channels) > n_chan:
        raise InputError(f"the plan has {n_chan} channels, asked for {max(args.channels)}", source="--channels")
    plan_kernel = weights.sidecar.get("kernel", "free field") if isinstance(weights.sidecar, dict) else "free field"
    gain_reference, reason = _gain_reference(args, irs, plan_kernel)
    channels = args.channels if args.channels in (None, "all") else [c - 1 for c in args.channels]
    res = verify_plan(weights, kernel, isolation_db=args.isolation_db, channels=channels,
                      gain_reference=gain_reference,
                      plan_source=str(args.plan_dir), measured_source=str(Path(args.irset_dir)))
    return res, reason, {"plan_dir": str(args.plan_dir), "rig_sha256": _plan_rig_hash(weights.sidecar),
                         "verified": "the plan's drive and combine weights at its planned frequencies"}


def _filters_result(args: argparse.Namespace, irs, kernel) -> tuple[Verification, str, dict]:
    """Verify a filter folder's WAV taps on a fine grid over their band."""
    from ..formats.filter_set import read_filter_set
    from ..verification.filters import verify_filters

    if args.channels is not None:
        raise InputError("a filter folder is verified on the channels it has filters for", source="--channels",
                         fix="drop --channels (or write filters for other channels with --min-level-db)")
    filters = read_filter_set(args.plan_dir)
    if abs(filters.sample_rate_hz - irs.sample_rate_hz) > 0.5:
        raise InputError(f"the filters run at {filters.sample_rate_hz:g} Hz but the IR set was measured at "
                         f"{irs.sample_rate_hz:g} Hz", source=str(args.irset_dir),
                         fix="measure at the filters' rate, or write filters at the IR set's rate (filters --rate)")
    gain_reference, reason = _gain_reference(args, irs, filters.kernel)
    with ProgressBar("verifying filters") as bar:
        res = verify_filters(filters, kernel, isolation_db=args.isolation_db, gain_reference=gain_reference,
                             progress=bar, measured_source=str(Path(args.irset_dir)))
    return res, reason, {"filters_dir": str(args.plan_dir), "taps": filters.taps,
                         "sample_rate_hz": filters.sample_rate_hz, "band_hz": list(filters.band_hz),
                         "verified": "the exported FIR filters (WAV taps) convolved with the measured responses, "
                                     "on a frequency grid finer than the filters' design bins"}


def _gain_reference(args: argparse.Namespace, irs, plan_kernel: str) -> tuple[str, str]:
    if args.gain_reference is None:
        return default_gain_reference(irs.units, plan_kernel)
    return args.gain_reference, "as given by --gain-reference"


def _ranges(runs: list[tuple[float, float]], most: int = 3) -> str:
    text = ", ".join(f"{lo:.5g} Hz" if lo == hi else f"{lo:.5g}-{hi:.5g} Hz" for lo, hi in runs[:most])
    return text + (f" and {len(runs) - most} more bands (verify.json)" if len(runs) > most else "")


def run(args: argparse.Namespace) -> int:
    matplotlib.use("Agg")
    irs = read_irset(args.irset_dir)
    if not (args.isolation_db > 0):
        raise InputError(f"must be positive, got {args.isolation_db}", source="--isolation-db")
    kernel = measured_kernel_from_args(irs, args)
    is_filters = (Path(args.plan_dir) / FILTER_SET_SIDECAR).is_file()
    res, reason, origin = (_filters_result if is_filters else _plan_result)(args, irs, kernel)
    lost_bands = lost_bands_hz(res)
    record = verification_record(res, origin=origin, irset_dir=str(args.irset_dir), irset_units=irs.units,
                                 settings={"window_ms": args.window_ms, "latency_samples": args.latency_samples,
                                           "smoothing_octaves": args.smooth_octaves},
                                 gain_reference_reason=reason)
    write_verification(args.out, res, record, figures=not args.no_figures)
    print(f"wanted channels: {res.wanted_rule}")
    for line in _gain_lines(res, reason):
        print(line)
    ref = "re common" if res.gain_reference == "common" else "re plan"
    for k, j in enumerate(res.channels):
        where = res.judged[:, k]
        iso = np.where(where, -res.crosstalk_db[:, k], np.inf)
        worst = int(np.argmin(iso))
        verdict = "PASS" if res.passed[k] else "FAIL"
        gains = res.gain_db[where, k]
        gains = gains[np.isfinite(gains)]
        gain_text = f"median gain {_signed(np.median(gains))} dB {ref}" if gains.size else "no gain (silent)"
        lost = f"; lost at {_ranges(lost_bands[k])}" if lost_bands[k] else ""
        print(f"channel {j + 1}: {verdict}  worst isolation {iso[worst]:.1f} dB at {res.hz[worst]:.5g} Hz "
              f"(need {res.isolation_db:g} dB), lost at {int(res.lost[:, k].sum())} of {int(where.sum())} judged "
              f"frequencies (of {len(res.hz)}), {gain_text}{lost}")
    n_pass = int(np.sum(res.passed))
    print(f"verdict: {'PASS' if n_pass == len(res.channels) else 'FAIL'}, {n_pass} of {len(res.channels)} wanted "
          f"channels keep {res.isolation_db:g} dB isolation wherever they are judged")
    print(f"wrote verification to {args.out}")
    return 0 if bool(np.all(res.passed)) else 1
