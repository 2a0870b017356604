"""Start-up time of ``arrayplan --help`` and ``--version`` against a bare ``import numpy``, in one run.

Run: python benchmarks/startup_speed.py [--repeats 7]

Each command is started as a fresh interpreter (``python -m arrayplan ...``)
the given number of times, interleaved with the baseline
``python -c "import numpy"``; the median wall time of each is printed with
its ratio to the baseline's median.  Target: ``--help`` and ``--version`` at
most 2x the baseline.  Also lists any of numpy, scipy or matplotlib that
``--help`` imports (there should be none).
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import time

CASES = {
    "python -c 'import numpy' (baseline)": [sys.executable, "-c", "import numpy"],
    "arrayplan --version": [sys.executable, "-m", "arrayplan", "--version"],
    "arrayplan --help": [sys.executable, "-m", "arrayplan", "--help"],
    "arrayplan plan --help": [sys.executable, "-m", "arrayplan", "plan", "--help"],
}
HEAVY = ("numpy", "scipy", "matplotlib", "soundfile", "sounddevice")


def wall_time(cmd: list[str]) -> float:
    t0 = time.perf_counter()
    subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - t0


def heavy_imports(cmd: list[str]) -> list[str]:
    """Top-level heavy packages imported by `cmd` (from ``python -X importtime``)."""
    run = subprocess.run([cmd[0], "-X", "importtime", *cmd[1:]], capture_output=True, text=True, check=True)
    found = set()
    for line in run.stderr.splitlines():
        name = line.rsplit("|", 1)[-1].strip()
        if name.split(".")[0] in HEAVY:
            found.add(name.split(".")[0])
    return sorted(found)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=7)
    args = ap.parse_args()
    times: dict[str, list[float]] = {name: [] for name in CASES}
    for name, cmd in CASES.items():      # warm the file cache once
        wall_time(cmd)
    for _ in range(args.repeats):        # interleaved, so load changes hit every case alike
        for name, cmd in CASES.items():
            times[name].append(wall_time(cmd))
    base = statistics.median(next(iter(times.values())))
    print(f"median of {args.repeats} runs each, interleaved")
    for name, ts in times.items():
        med = statistics.median(ts)
        print(f"  {name:<40} {med * 1e3:8.1f} ms   {med / base:5.2f} x baseline")
    for name in ("arrayplan --version", "arrayplan --help"):
        heavy = heavy_imports(CASES[name])
        print(f"  heavy packages imported by {name}: {', '.join(heavy) or 'none'}")


if __name__ == "__main__":
    main()
