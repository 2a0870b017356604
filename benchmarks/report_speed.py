"""Build the report of a large project; print time and memory against bare figure rendering.

Run: python benchmarks/report_speed.py [--n 64] [--freqs 256] [--repeats 3]

The project (made beforehand, not counted): a plan of an n x n rig at the
given number of frequencies, written with write_plan, and the rig's
free-field IR set (simulated).  Both runs happen in this process:

* baseline: render (after one warm-up figure) as many empty figures of the report's size to PNG at
  the report's resolution as the report holds, the part of the work that
  does not depend on the data;
* report: arrayplan.report.build_report on the project folder.

The two runs alternate (--repeats times each) and the medians are compared,
so a busy machine slows both alike; the CPU time of this process
(time.process_time) is printed beside the wall time, since on a shared
machine it depends far less on what else runs.  The ratio shows what finding, reading,
plotting and encoding the data cost beyond matplotlib's own rendering.  Peak memory is measured with tracemalloc,
in runs of their own (it slows allocation, so it stays out of the timings).
"""

from __future__ import annotations

import argparse
import tempfile
import time
import tracemalloc
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import numpy as np
from matplotlib.figure import Figure

from arrayplan import FrequencyAxis, Rig, plan_rig, write_plan, write_irset
from arrayplan.report import build_report
from arrayplan.report.figures import PAGE_WIDTH_IN, png_bytes
from arrayplan.kernels.model_irs import free_field_irset


def make_project(folder: Path, n: int, n_freq: int) -> None:
    rng = np.random.default_rng(7)
    spk = np.column_stack([np.linspace(-1.0, 1.0, n), rng.uniform(-0.01, 0.01, n), np.zeros(n)])
    mic = np.column_stack([np.linspace(-1.2, 1.2, n), rng.uniform(-0.01, 0.01, n), np.full(n, 5.0)])
    rig = Rig.from_positions(spk, mic, speed_of_sound=343.2, name=f"bench-{n}x{n}")
    plan = plan_rig(rig, FrequencyAxis.spaced(200.0, 8000.0, n_freq, "log"))
    write_plan(plan, folder / "plan", figures=False)
    write_irset(folder / "irset", free_field_irset(rig, 48000.0, 2048))


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, default=64, help="speakers = microphones")
    ap.add_argument("--freqs", type=int, default=256)
    ap.add_argument("--repeats", type=int, default=3, help="alternating runs of each (median reported)")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        make_project(folder, args.n, args.freqs)
        png_bytes(Figure(figsize=(PAGE_WIDTH_IN, 3.5)).add_subplot().figure)   # warm up fonts and caches

        def baseline(n_figs: int) -> None:
            for _ in range(n_figs):
                png_bytes(Figure(figsize=(PAGE_WIDTH_IN, 3.5)).add_subplot().figure)

        html = build_report(folder)                                      # warm-up, and the figure count
        n_figs = html.count("<img ")
        runs: dict[str, list[tuple[float, float]]] = {"report": [], "baseline": []}
        for _ in range(max(1, args.repeats)):
            for name, job in (("report", lambda: build_report(folder)), ("baseline", lambda: baseline(n_figs))):
                w0, c0 = time.perf_counter(), time.process_time()
                job()
                runs[name].append((time.perf_counter() - w0, time.process_time() - c0))
        (t_report, c_report), (t_base, c_base) = (tuple(np.median(np.array(runs[k]), axis=0))
                                                  for k in ("report", "baseline"))
        # memory in separate runs: tracemalloc slows allocation, so it stays out of the timings
        peaks = []
        for job in (lambda: build_report(folder), lambda: baseline(n_figs)):
            tracemalloc.start()
            job()
            peaks.append(tracemalloc.get_traced_memory()[1])
            tracemalloc.stop()
        peak_report, peak_base = peaks

    print(f"project: {args.n} speakers x {args.n} microphones, {args.freqs} frequencies, IR set of 2048 samples")
    print(f"report: {n_figs} figures, {len(html) / 2**20:.1f} MiB of HTML")
    k = len(runs["report"])
    print(f"baseline ({n_figs} empty figures to PNG): {t_base:.2f} s wall, {c_base:.2f} s CPU (medians of {k}), "
          f"peak {peak_base / 2**20:.0f} MiB")
    print(f"report:                              {t_report:.2f} s wall, {c_report:.2f} s CPU (medians of {k}), "
          f"peak {peak_report / 2**20:.0f} MiB")
    print(f"ratio report / baseline: wall time {t_report / t_base:.1f}x, CPU time {c_report / c_base:.1f}x, "
          f"memory {peak_report / max(peak_base, 1):.1f}x")


if __name__ == "__main__":
    main()
