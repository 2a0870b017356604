"""Plan a 128 x 128 rig at 512 frequencies; print time and memory against the bare batched SVD.

Run: python benchmarks/plan_speed.py [--chunk-size 64] [--workers 1]

Both runs happen in this process.  The baseline is numpy.linalg.svd of the
full coupling stack, built beforehand (its build time is not counted).
Peak memory is measured with tracemalloc (numpy reports its buffers to it),
which sees this process only: the plan runs here (one worker) unless
--workers says otherwise.  benchmarks/plan_cli_speed.py measures the command
with its worker processes.
"""

from __future__ import annotations

import argparse
import time
import tracemalloc

import numpy as np

from arrayplan import FrequencyAxis, FreeFieldKernel, Rig, plan_rig


def make_rig(n: int = 128) -> Rig:
    rng = np.random.default_rng(7)
    spk = np.column_stack([np.linspace(-1.0, 1.0, n), rng.uniform(-0.01, 0.01, n), np.zeros(n)])
    mic = np.column_stack([np.linspace(-1.2, 1.2, n), rng.uniform(-0.01, 0.01, n), np.full(n, 5.0)])
    return Rig.from_positions(spk, mic, speed_of_sound=343.2)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--chunk-size", type=int, default=64)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--workers", type=int, default=1)
    args = ap.parse_args()
    rig = make_rig()
    axis = FrequencyAxis.spaced(200.0, 8000.0, 512, "log")
    stack = FreeFieldKernel(rig).evaluate(axis.hz)

    def best(fn):
        times = []
        for _ in range(args.repeats):
            t0 = time.perf_counter()
            fn()
            times.append(time.perf_counter() - t0)
        return min(times)

    t_svd = best(lambda: np.linalg.svd(stack, full_matrices=False))
    t_plan = best(lambda: plan_rig(rig, axis, chunk_size=args.chunk_size, workers=args.workers))

    tracemalloc.start()
    np.linalg.svd(stack, full_matrices=False)
    peak_svd = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    del stack
    tracemalloc.start()
    plan = plan_rig(rig, axis, chunk_size=args.chunk_size, workers=args.workers)
    peak_plan = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    results = (plan.channels.drive.nbytes + plan.channels.combine.nbytes + plan.channels.singular_values.nbytes)
    print(f"rig 128 x 128, 512 frequencies, chunk {args.chunk_size}, workers {args.workers}")
    print(f"bare numpy.linalg.svd of the stack: {t_svd:.3f} s")
    print(f"plan_rig end to end (kernel + SVD + counts): {t_plan:.3f} s")
    print(f"time ratio plan / bare SVD: {t_plan / t_svd:.3f}")
    print(f"peak memory: bare SVD {peak_svd / 2**20:.1f} MiB (stack held outside), plan {peak_plan / 2**20:.1f} MiB, "
          f"of which results {results / 2**20:.1f} MiB; working memory beyond results "
          f"{(peak_plan - results) / 2**20:.1f} MiB")


if __name__ == "__main__":
    main()
