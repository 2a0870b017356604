"""Build the report of a project; print time and memory against bare figure rendering.

Run: python benchmarks/report_speed.py [--n 64] [--freqs 256] [--repeats 3] [--project DIR] [--workers N]

The project (made beforehand, not counted): a plan of an n x n rig at the
given number of frequencies, written with write_plan, and the rig's
free-field IR set (simulated); or, with --project, any project folder (for
example the output of demos/workshop-link/walkthrough.sh).  All runs happen
in this process:

* baseline: matplotlib's own rendering (``savefig`` to PNG at the report's
  resolution, after one warm-up figure) of as many empty figures of the
  report's size as the report holds, the part of the work that does not
  depend on the data;
* report, drawn here: arrayplan.report.build_report(folder, workers=1);
* report, drawn by workers: build_report(folder, workers=N) (--workers,
  default: the cores this process may use), when that is more than one.

The runs alternate (--repeats times each) and the medians are compared, so
a busy machine slows all alike.  CPU time (time.process_time of this
process plus that of its finished worker processes, os.times) is printed
beside the wall time, since on a shared machine it depends far less on what
else runs.  The ratio shows what finding, reading, plotting and encoding the
data cost beyond matplotlib's own rendering.  Peak memory of this process is
measured with tracemalloc, in runs of their own (it slows allocation, so it
stays out of the timings).
"""

from __future__ import annotations

import argparse
import io
import os
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
from arrayplan.parallel import available_cores
from arrayplan.report.figures import PAGE_WIDTH_IN
from arrayplan.report.render import report_workers
from arrayplan.kernels.model_irs import free_field_irset


def make_project(folder: Path, n: int, n_freq: int) -> None:
    rng = np.random.default_rng(7)
    spk = np.column_stack([np.linspace(-1.0, 1.0, n), rng.uniform(-0.01, 0.01, n), np.zeros(n)])
    mic = np.column_stack([np.linspace(-1.2, 1.2, n), rng.uniform(-0.01, 0.01, n), np.full(n, 5.0)])
    rig = Rig.from_positions(spk, mic, speed_of_sound=343.2, name=f"bench-{n}x{n}")
    plan = plan_rig(rig, FrequencyAxis.spaced(200.0, 8000.0, n_freq, "log"))
    write_plan(plan, folder / "plan", figures=False)
    write_irset(folder / "irset", free_field_irset(rig, 48000.0, 2048))


def empty_png(dpi: int = 150) -> bytes:
    """An empty figure of the report's width, one axes, to PNG with matplotlib's savefig."""
    buf = io.BytesIO()
    Figure(figsize=(PAGE_WIDTH_IN, 3.5)).add_subplot().figure.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


def cpu_s() -> float:
    """CPU time of this process and of its finished child processes, s."""
    t = os.times()
    return time.process_time() + t.children_user + t.children_system


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, default=64, help="speakers = microphones")
    ap.add_argument("--freqs", type=int, default=256)
    ap.add_argument("--repeats", type=int, default=3, help="alternating runs of each (median reported)")
    ap.add_argument("--project", help="report this project folder instead of a synthetic one")
    ap.add_argument("--workers", type=int, default=None, help="worker processes (default: the usable cores)")
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        if args.project:
            folder = Path(args.project)
        else:
            folder = Path(tmp)
            make_project(folder, args.n, args.freqs)
        empty_png()                                                       # warm up fonts and caches
        html = build_report(folder, workers=1)                            # warm-up, and the figure count
        n_figs = html.count("<img ")
        workers = report_workers(n_figs, args.workers if args.workers is not None else available_cores())
        jobs = {"baseline": lambda: [empty_png() for _ in range(n_figs)],
                "report, drawn here": lambda: build_report(folder, workers=1)}
        if workers > 1:
            jobs[f"report, {workers} workers"] = lambda: build_report(folder, workers=workers)
        runs: dict[str, list[tuple[float, float]]] = {k: [] for k in jobs}
        for _ in range(max(1, args.repeats)):
            for name, job in jobs.items():
                w0, c0 = time.perf_counter(), cpu_s()
                job()
                runs[name].append((time.perf_counter() - w0, cpu_s() - c0))
        med = {k: tuple(np.median(np.array(v), axis=0)) for k, v in runs.items()}
        # memory in separate runs: tracemalloc slows allocation, so it stays out of the timings
        peaks = {}
        for name in ("baseline", "report, drawn here"):
            tracemalloc.start()
            jobs[name]()
            peaks[name] = tracemalloc.get_traced_memory()[1]
            tracemalloc.stop()

    what = (f"{folder}" if args.project else
            f"{args.n} speakers x {args.n} microphones, {args.freqs} frequencies, IR set of 2048 samples")
    print(f"project: {what}")
    print(f"report: {n_figs} figures, {len(html) / 2**20:.1f} MiB of HTML; {available_cores()} usable cores")
    k = max(1, args.repeats)
    t_base, c_base = med["baseline"]
    for name, (t, c) in med.items():
        label = f"{name} ({n_figs} empty figures, savefig)" if name == "baseline" else name
        peak = f", peak {peaks[name] / 2**20:.0f} MiB" if name in peaks else ""
        print(f"{label + ':':52s} {t:.2f} s wall, {c:.2f} s CPU (medians of {k}){peak}")
    for name, (t, c) in med.items():
        if name != "baseline":
            print(f"ratio {name} / baseline: wall time {t / t_base:.1f}x, CPU time {c / c_base:.1f}x")
    print(f"memory ratio (drawn here): {peaks['report, drawn here'] / max(peaks['baseline'], 1):.1f}x")


if __name__ == "__main__":
    main()
