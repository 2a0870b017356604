"""The filters' time-domain check against the bare SVD of the filter's bin stack, same process.

Run: python benchmarks/filter_check_speed.py [--n 32] [--taps 4096] [--repeats 3]

An n x n rig (speakers and microphones on facing planar grids 0.5 m
apart) gets filters at 48 kHz for 300-8000 Hz.  The baseline is
numpy.linalg.svd of the coupling stack on the filter's design bins (the
bins the filters are planned on), built beforehand; the check is
:func:`arrayplan.filters.check_filters` end to end (the free-field rig at every bin of its grid,
responses, end-to-end transfer, gain error and crosstalk).  The two run
in turn `--repeats` times (so both see the same machine load); the median
of the per-pair ratios check / SVD is printed.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from arrayplan import FreeFieldKernel, Rig
from arrayplan.filters import check_filters, design_filters

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
    t_svd, t_check, ratios = [], [], []
    for _ in range(args.repeats):                 # interleaved, so both see the same machine load
        a, _ = timed(lambda: np.linalg.svd(stack, full_matrices=False))
        b, chk = timed(lambda: check_filters(rig, filters))
        t_svd.append(a)
        t_check.append(b)
        ratios.append(b / a)
    print(f"rig {args.n} x {args.n}, {args.taps} taps at {FS:g} Hz, band {BAND[0]:g}-{BAND[1]:g} Hz, "
          f"{len(filters.kept)} channels with filters, {len(filters.plan.axis.hz)} design bins, "
          f"check grid {chk.grid_factor:g}x finer than the bins")
    print(f"bare numpy.linalg.svd of the design-bin stack: median {np.median(t_svd):.3f} s")
    print(f"check_filters end to end:                    median {np.median(t_check):.3f} s")
    print(f"ratio check / SVD, median of {args.repeats} interleaved pairs: {np.median(ratios):.1f} "
          f"(range {min(ratios):.1f}-{max(ratios):.1f})")
    print(f"worst gain error {np.max(chk.gain_error_db):.4f} dB, worst crosstalk {np.nanmax(chk.crosstalk_db):.2f} dB")


if __name__ == "__main__":
    main()
