"""Time the design studies against same-process baselines.

Run: python benchmarks/study_speed.py [--trials 1000] [--repeats 3]

1. Tolerance: ``--trials`` Monte Carlo trials of a 32 x 32 rig at 64
   frequencies (position, gain and phase errors; free-field kernel rebuilt
   each trial, the planned weights applied, the perturbed stack's singular
   values, the first-order block prediction).  Baseline: one bare batched
   numpy.linalg.svd of the same (64, 32, 32) stack.  Printed: time per trial
   / time of that SVD (target: at most 1.5).
2. Capacity: the capacity study at four SNRs against the plan's own time
   (plan_rig of the same rig and frequencies).

Both baselines run in this process; no timing is asserted anywhere.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from _timing import best_of

from arrayplan import FrequencyAxis, FreeFieldKernel, Rig, plan_rig
from arrayplan.studies.capacity import capacity_study
from arrayplan.studies.tolerance import tolerance_study


def make_rig(n: int = 32) -> Rig:
    rng = np.random.default_rng(3)
    spk = np.column_stack([rng.uniform(-0.8, 0.8, (n, 2)), np.zeros(n)])
    mic = np.column_stack([rng.uniform(-1.0, 1.0, (n, 2)), np.full(n, 3.0)])
    return Rig.from_positions(spk, mic, speed_of_sound=343.2)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--trials", type=int, default=1000)
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    rig = make_rig()
    axis = FrequencyAxis.spaced(200.0, 4000.0, 64, "log")
    stack = FreeFieldKernel(rig).evaluate(axis.hz)

    t_svd = best_of(lambda: np.linalg.svd(stack), args.repeats)[0]
    t_plan = best_of(lambda: plan_rig(rig, axis), args.repeats)[0]
    plan = plan_rig(rig, axis)
    t_cap = best_of(lambda: capacity_study(plan, [10.0, 20.0, 30.0, 40.0]), args.repeats)[0]
    t0 = time.perf_counter()
    tolerance_study(plan, position_sd_m=1e-3, gain_sd_db=0.5, phase_sd_deg=2.0, n_trials=args.trials, seed=0)
    t_tol = time.perf_counter() - t0
    per_trial = t_tol / args.trials
    print(f"rig 32 x 32, 64 frequencies")
    print(f"bare batched numpy.linalg.svd of the (64, 32, 32) stack: {1000 * t_svd:.2f} ms")
    print(f"tolerance study, {args.trials} trials: {t_tol:.2f} s, {1000 * per_trial:.2f} ms per trial "
          "(includes the one-off first-order prediction)")
    print(f"time ratio one trial / bare SVD: {per_trial / t_svd:.2f} (target <= 1.5)")
    print(f"plan_rig: {1000 * t_plan:.2f} ms; capacity study at 4 SNRs: {1000 * t_cap:.2f} ms")
    print(f"time ratio capacity / plan: {t_cap / t_plan:.3f}")


if __name__ == "__main__":
    main()
