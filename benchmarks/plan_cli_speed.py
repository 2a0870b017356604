"""`arrayplan plan` on the command line against bare LAPACK, in the same run; top-k; peak memory.

Run: python benchmarks/plan_cli_speed.py [--part cli|track|topk|memory|files|all] [--repeats 3]

Parts (each prints ratios against a reference measured in the same run;
runs are interleaved and the median is reported, because the 2 cores of the
test machine are shared):

cli     ``arrayplan plan RIG --out DIR --no-figures`` end to end (start-up,
        assembly, SVD, counts, files) for 64 x 64 x 1024 and 128 x 128 x 512,
        against (a) one batched numpy.linalg.svd of the same complex128 stack
        in this process (stack built beforehand, not timed) and (b) the same
        stack built and decomposed in 2 forked processes with 1 BLAS thread
        each (pool start-up included, as the command's is).  The start-up
        of ``arrayplan --version`` is also measured and subtracted.
track   the same command with ``--track`` against without.
topk    1024 x 1024 at 16 frequencies: ``max_channels="auto"`` against the
        full numpy.linalg.svd of the same stack, both in this process with one
        BLAS thread, and the largest error of the computed singular values
        relative to the largest.
memory  peak resident memory of the command (its process plus its workers,
        sampled every 10 ms with psutil) against the memory budget and the
        worker count, for 64 x 64 at 256 and 1024 frequencies.
files   time per row of the plan files at 256 and 4096 frequencies
        (32 x 32, no long table): a ratio near 1 means linear in size.
"""

from __future__ import annotations

import argparse
import multiprocessing
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
C = 343.2


def rig_toml(n_spk_side: tuple[int, int], n_freq: int, extra: str = "") -> str:
    """An invented pair of facing grids, 3 m apart, planned from 200 Hz to 8 kHz."""
    a, b = n_spk_side
    return f"""[rig]
name = "bench-{a * b}"
[medium]
speed_of_sound = {C}
[frequencies]
start = 200.0
stop = 8000.0
count = {n_freq}
[[speakers]]
shape = "grid"
counts = [{a}, {b}]
spacing = 0.04
center = [0.0, 0.0, 0.0]
[[microphones]]
shape = "grid"
counts = [{a}, {b}]
spacing = 0.05
center = [0.0, 0.0, 3.0]
{extra}"""


def positions(a: int, b: int) -> tuple[np.ndarray, np.ndarray]:
    """The same grids as :func:`rig_toml`, built here (centred, row-major)."""
    def grid(spacing, z):
        x = (np.arange(a) - (a - 1) / 2) * spacing
        y = (np.arange(b) - (b - 1) / 2) * spacing
        xx, yy = np.meshgrid(x, y, indexing="ij")
        return np.column_stack([xx.ravel(), yy.ravel(), np.full(a * b, z)])
    return grid(0.04, 0.0), grid(0.05, 3.0)


def stack(spk: np.ndarray, mic: np.ndarray, hz: np.ndarray) -> np.ndarray:
    """Free-field exp(-jkr)/(4 pi r), shape (n_freq, n_mic, n_spk), written here independently."""
    r = np.linalg.norm(mic[:, None, :] - spk[None, :, :], axis=-1)
    k = 2 * np.pi * hz / C
    return np.exp(-1j * k[:, None, None] * r) / (4 * np.pi * r)


def _half_job(args) -> float:
    spk, mic, hz = args
    from threadpoolctl import threadpool_limits
    with threadpool_limits(1):
        np.linalg.svd(stack(spk, mic, hz), full_matrices=False)
    return 0.0


def two_process_reference(spk, mic, hz) -> float:
    """Seconds to start 2 forked processes and build + decompose half the stack in each (1 BLAS thread)."""
    t0 = time.perf_counter()
    ctx = multiprocessing.get_context("fork")
    with ctx.Pool(2) as pool:
        pool.map(_half_job, [(spk, mic, part) for part in np.array_split(hz, 2)])
    return time.perf_counter() - t0


def run_cli(rig_path: Path, out: Path, *flags: str) -> float:
    env = dict(os.environ, PYTHONPATH=str(ROOT), ARRAYPLAN_PROGRESS="0")
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "arrayplan", "plan", str(rig_path), "--out", str(out), "--no-figures",
                    *flags], check=True, env=env, stdout=subprocess.DEVNULL)
    return time.perf_counter() - t0


def startup_time() -> float:
    """Wall time of ``arrayplan --version`` (interpreter and command-line start-up), s."""
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "arrayplan", "--version"], check=True, env=env, stdout=subprocess.DEVNULL)
    return time.perf_counter() - t0


def log_axis(n_freq: int) -> np.ndarray:
    return np.geomspace(200.0, 8000.0, n_freq)


def part_cli(tmp: Path, repeats: int, track: bool) -> None:
    for (a, b), n_freq in (((8, 8), 1024), ((16, 8), 512)):
        rig = tmp / f"rig{a * b}.toml"
        rig.write_text(rig_toml((a, b), n_freq))
        spk, mic = positions(a, b)
        hz = log_axis(n_freq)
        g = stack(spk, mic, hz)
        times: dict[str, list[float]] = {}
        for _ in range(repeats):        # interleaved
            t0 = time.perf_counter()
            np.linalg.svd(g, full_matrices=False)
            times.setdefault("svd", []).append(time.perf_counter() - t0)
            times.setdefault("two", []).append(two_process_reference(spk, mic, hz))
            times.setdefault("cli", []).append(run_cli(rig, tmp / "out"))
            times.setdefault("start", []).append(startup_time())
            if track:
                times.setdefault("track", []).append(run_cli(rig, tmp / "out", "--track"))
        med = {k: statistics.median(v) for k, v in times.items()}
        print(f"{a * b} x {a * b} x {n_freq}: batched svd {med['svd']:.2f} s, 2-process reference "
              f"{med['two']:.2f} s, arrayplan plan (CLI, no figures) {med['cli']:.2f} s")
        print(f"  CLI / batched svd = {med['cli'] / med['svd']:.2f}   CLI / 2-process reference = "
              f"{med['cli'] / med['two']:.2f}")
        work = med["cli"] - med["start"]
        print(f"  of which start-up (arrayplan --version) {med['start']:.2f} s; without it: / batched svd = "
              f"{work / med['svd']:.2f}, / 2-process reference = {work / med['two']:.2f}")
        if track:
            print(f"  --track {med['track']:.2f} s; tracked / untracked = {med['track'] / med['cli']:.2f}")


def part_topk(repeats: int) -> None:
    from arrayplan import FrequencyAxis, FreeFieldKernel, Rig
    from arrayplan.channels.svd import decompose
    from arrayplan.channels.heuristics import paraxial_estimate

    spk, mic = positions(32, 32)
    rig = Rig.from_positions(spk, mic, speed_of_sound=C)
    axis = FrequencyAxis(log_axis(16))
    g = stack(spk, mic, axis.hz)
    guess = paraxial_estimate(spk, mic, axis.wavelengths(C)).counts
    from threadpoolctl import threadpool_limits

    t_full, t_top = [], []
    for _ in range(repeats):
        t0 = time.perf_counter()
        with threadpool_limits(1):     # as the top-k run below: one process, one BLAS thread
            s_full = np.linalg.svd(g, full_matrices=False)[1]
        t_full.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        top = decompose(FreeFieldKernel(rig), axis, max_channels="auto", first_guess=guess, workers=1)
        t_top.append(time.perf_counter() - t0)
    n = top.channels_computed()
    err = max(np.max(np.abs(top.singular_values[f, :n[f]] - s_full[f, :n[f]])) / s_full[f, 0] for f in range(16))
    tf, tt = statistics.median(t_full), statistics.median(t_top)
    print(f"1024 x 1024 x 16: full numpy.linalg.svd {tf:.2f} s; top-k auto (assembly included) "
          f"{tt:.2f} s; speed-up {tf / tt:.2f}x; channels computed {n.min()}..{n.max()}; "
          f"largest error / s_max {err:.1e}")


def peak_rss(cmd: list[str], env: dict) -> tuple[float, float]:
    """Peak summed RSS (MiB) of a command and its children, and its wall time (s)."""
    import psutil
    t0 = time.perf_counter()
    proc = psutil.Popen(cmd, env=env, stdout=subprocess.DEVNULL)
    peak = 0
    while proc.poll() is None:
        try:
            procs = [proc] + proc.children(recursive=True)
            peak = max(peak, sum(p.memory_info().rss for p in procs if p.is_running()))
        except psutil.Error:
            pass
        time.sleep(0.01)
    if proc.returncode:
        raise SystemExit(f"command failed: {cmd}")
    return peak / 2 ** 20, time.perf_counter() - t0


def part_memory(tmp: Path) -> None:
    env = dict(os.environ, PYTHONPATH=str(ROOT), ARRAYPLAN_PROGRESS="0")
    rows = []
    for n_freq in (256, 1024):
        rig = tmp / f"mem{n_freq}.toml"
        rig.write_text(rig_toml((8, 8), n_freq))
        results = n_freq * (64 * 64 * 2 * 16 + 64 * 8) / 2 ** 20
        for workers in (1, 2):
            for budget in (16, 64, 256):
                peak, wall = peak_rss([sys.executable, "-m", "arrayplan", "plan", str(rig), "--out", str(tmp / "m"),
                                       "--no-figures", "--workers", str(workers), "--memory-mb", str(budget)], env)
                rows.append((n_freq, workers, budget, peak, results, wall))
    print("n_freq workers budget_MB  peak_RSS_MiB  results_MiB  peak-results  wall_s")
    for n_freq, workers, budget, peak, results, wall in rows:
        print(f"{n_freq:6d} {workers:7d} {budget:9d} {peak:12.0f} {results:12.0f} {peak - results:13.0f} {wall:7.1f}")


def part_files(repeats: int) -> None:
    from arrayplan import FrequencyAxis, Rig, plan_rig
    from arrayplan.formats.plan_folder import write_plan

    spk, mic = positions(32, 1)
    rig = Rig.from_positions(spk, mic, speed_of_sound=C)
    per_row = {}
    with tempfile.TemporaryDirectory() as d:
        for n_freq in (256, 4096):
            plan = plan_rig(rig, FrequencyAxis(log_axis(n_freq)), workers=1)
            times = []
            for _ in range(repeats):
                t0 = time.perf_counter()
                write_plan(plan, Path(d) / "p", figures=False, long_weights=False)
                times.append(time.perf_counter() - t0)
            per_row[n_freq] = statistics.median(times) / (n_freq * plan.channels.n_channels)
            print(f"32 x 32 x {n_freq}: plan files (no long table) {statistics.median(times):.3f} s, "
                  f"{per_row[n_freq] * 1e6:.2f} us per channel row")
    print(f"time per row at 4096 / at 256 frequencies: {per_row[4096] / per_row[256]:.2f} (1 = linear)")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--part", default="all", choices=["cli", "track", "topk", "memory", "files", "all"])
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    print(f"cores available: {len(os.sched_getaffinity(0))}; numpy {np.__version__}")
    with tempfile.TemporaryDirectory() as d:
        tmp = Path(d)
        if args.part in ("cli", "track", "all"):
            part_cli(tmp, args.repeats, track=args.part in ("track", "all"))
        if args.part in ("files", "all"):
            part_files(args.repeats)
        if args.part in ("topk", "all"):
            part_topk(max(1, args.repeats - 1))
        if args.part in ("memory", "all"):
            part_memory(tmp)


if __name__ == "__main__":
    main()
