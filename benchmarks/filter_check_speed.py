"""The filters' time-domain check against the bare SVD of the filter's bin stack, same process.

Run: python benchmarks/filter_check_speed.py [--n 32] [--taps 4096] [--repeats 5]

An n x n rig (speakers and microphones on facing planar grids 0.5 m
apart) gets filters at 48 kHz for 300-8000 Hz.  The baseline is
numpy.linalg.svd of the coupling stack on the filter's design bins (the
bins the filters are planned on), built beforehand; the check is
:func:`arrayplan.filters.check_filters` end to end (the free-field rig at every bin of its grid,
responses, end-to-end transfer, gain error and crosstalk), once with its
default threads (every core this process may use) and once on one thread
(``workers=1``; the SVD baseline runs on one).  The three run in turn
`--repeats` times (so all see the same machine load); the median of the
per-pair ratios check / SVD is printed for each, with the largest
difference between the two checks' figures (they must agree) and the
machine's load average before and after (other work on the cores slows
the check, which moves much more memory, more than the SVD).
"""

from __future__ import annotations

import argparse
import os
import time

import numpy as np

from arrayplan import FreeFieldKernel, Rig
from arrayplan.filters import check_filters, design_filters
from arrayplan.filters.transfer import WORKERS

FS = 48000.0
BAND = (300.0, 8000.0)


def make_rig(n: int) -> Rig:
    """n speakers and n microphones on two facing planar grids 0.5 m apart (n a multiple of 4)."""
    rng = np.random.default_rng(3)
    gx, gy = np.meshgrid(np.linspace(-0.5, 0.5, n // 4), np.linspace(-0.25, 0.25, 4))
    grid = np.column_stack([gx.ravel(), gy.ravel(), np.zeros(n)])
    spk = grid + rng.uniform(-0.01, 0.01, grid.shape)
    mic = grid * 1.2 + [0.0, 0.0, 0.5] + rng.uniform(-0.01, 0.01, grid.shape)
    return Rig.from_positions(spk, mic, speed_of_sound=343.2)


def timed(fn) -> tuple[float, object]:
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, default=32, help="speakers = microphones")
    ap.add_argument("--taps", type=int, default=4096)
    ap.add_argument("--repeats", type=int, default=5)
    args = ap.parse_args()
    rig = make_rig(args.n)
    filters = design_filters(rig, FS, args.taps, BAND, min_level_db=-60.0)
    stack = FreeFieldKernel(rig).evaluate(filters.plan.axis.hz)
    load_before = os.getloadavg()[0]
    runs = {"default threads": None, "one thread": 1}
    t_svd, t_check = [], {name: [] for name in runs}
    checks = {}
    for _ in range(args.repeats):                 # interleaved, so all see the same machine load
        a, _ = timed(lambda: np.linalg.svd(stack, full_matrices=False))
        t_svd.append(a)
        for name, workers in runs.items():
            b, checks[name] = timed(lambda: check_filters(rig, filters, workers=workers))
            t_check[name].append(b)
    chk = checks["default threads"]
    print(f"rig {args.n} x {args.n}, {args.taps} taps at {FS:g} Hz, band {BAND[0]:g}-{BAND[1]:g} Hz, "
          f"{len(filters.kept)} channels with filters, {len(filters.plan.axis.hz)} design bins, "
          f"check grid {chk.grid_factor:g}x finer than the bins, {WORKERS} default threads")
    print(f"load average (1 min) before {load_before:.1f}, after {os.getloadavg()[0]:.1f}, "
          f"on {os.cpu_count()} cores")
    print(f"bare numpy.linalg.svd of the design-bin stack: median {np.median(t_svd):.3f} s")
    for name in runs:
        ratios = np.asarray(t_check[name]) / np.asarray(t_svd)
        print(f"check_filters end to end, {name + ':':16s} median {np.median(t_check[name]):.3f} s, "
              f"ratio check / SVD median of {args.repeats} interleaved pairs {np.median(ratios):.1f} "
              f"(range {ratios.min():.1f}-{ratios.max():.1f})")
    print(f"worst gain error {np.max(chk.gain_error_db):.4f} dB, worst crosstalk {np.nanmax(chk.crosstalk_db):.2f} dB; "
          f"largest difference between the two runs' figures {_largest_difference(*checks.values()):.1e} dB")


def _largest_difference(a, b) -> float:
    """Largest |a - b| over the finite dB figures of two checks (0 where both are the same infinity or NaN)."""
    out = 0.0
    for name in ("gain_error_db", "bin_gain_error_db", "drive_energy_error_db", "combine_energy_error_db",
                 "crosstalk_db"):
        x, y = getattr(a, name), getattr(b, name)
        same = (x == y) | (np.isnan(x) & np.isnan(y))
        out = max(out, float(np.max(np.where(same, 0.0, np.abs(x - y)), initial=0.0)))
    return out


if __name__ == "__main__":
    main()
