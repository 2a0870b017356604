"""Choose 16 of 128 candidate speakers for a 16-microphone rig at 32 frequencies; print the time against plans.

Run: python benchmarks/layout_speed.py [--repeats 3]

Both runs happen in this process.  The baseline is one full plan
(:func:`arrayplan.plan_rig`) of the rig with all 128 candidates as speakers
at the same 32 frequencies; the target is a choice within 20 plans' time.
The gap between the chosen layout's capacity and the convex relaxation's
upper bound is printed too (greedy, swaps and bound timed separately).
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from _timing import best_of

from arrayplan import FrequencyAxis, Rig, plan_rig
from arrayplan.studies.layout import greedy_select, layout_problem, relaxation_bound, swap_refine


def make_rig() -> Rig:
    rng = np.random.default_rng(11)
    spk = np.column_stack([np.linspace(-2.0, 2.0, 128), rng.uniform(-0.02, 0.02, 128), rng.uniform(-0.3, 0.3, 128)])
    mic = np.column_stack([np.linspace(-1.0, 1.0, 16), np.full(16, 3.0), np.zeros(16)])
    return Rig.from_positions(spk, mic, speed_of_sound=343.2)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    rig = make_rig()
    axis = FrequencyAxis.spaced(200.0, 4000.0, 32, "log")
    t_plan, _ = best_of(lambda: plan_rig(rig, axis), args.repeats)
    t_setup, problem = best_of(lambda: layout_problem(rig, "speakers", 16, axis, reference_snr_db=30.0), args.repeats)
    t_greedy, (order, _) = best_of(lambda: greedy_select(problem, "capacity"), args.repeats)
    t_swap, (chosen, swaps) = best_of(lambda: swap_refine(problem, order, "capacity"), args.repeats)
    t_bound, (bound, _) = best_of(lambda: relaxation_bound(problem), args.repeats)
    from arrayplan.studies.layout import criterion_values
    value = float(criterion_values(problem, np.array([chosen]), "capacity")[0])
    total = t_setup + t_greedy + t_swap + t_bound
    print(f"one plan of the 128-candidate rig (32 frequencies): {t_plan * 1e3:.1f} ms")
    for label, t in (("set-up", t_setup), ("greedy", t_greedy), (f"swaps ({len(swaps)})", t_swap),
                     ("relaxation bound", t_bound), ("total", total)):
        print(f"  {label:18s} {t * 1e3:9.1f} ms = {t / t_plan:7.2f} plans")
    print(f"target: total within 20 plans -> {'met' if total <= 20 * t_plan else 'NOT met'}")
    print(f"capacity {value:.2f}, bound {bound:.2f} bit/s/Hz summed; gap {100 * (bound - value) / bound:.2f} % "
          f"of the bound")


if __name__ == "__main__":
    main()
