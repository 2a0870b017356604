"""The measured kernel on a 16 x 12 IR set, against a bare numpy rfft of the same responses.

Run: python benchmarks/measured_kernel_speed.py [--repeats 3]

An invented IR set (decaying noise, 48 kHz, 25581 samples of which 1581 before
zero lag, 16 microphones x 12 speakers, the size of a one-second simulated
measurement) is evaluated three ways, each timed against
``numpy.fft.rfft(data, n=N, axis=0)`` of the same responses, in this process:

* the fine grid of a filter check (every bin of a 65536-point grid from
  500 Hz to 8 kHz, 10240 frequencies): the kernel's FFT path;
* every eighth of those frequencies summed directly (the path any frequency
  off a grid takes; a subset, since all of them take about a minute),
  compared per frequency;
* 48 log-spaced frequencies (a plan's axis): direct sums.

Also the same with the 30 ms window of the walkthrough (3021 samples).
"""

from __future__ import annotations

import argparse

import numpy as np

from _timing import best_of

from arrayplan.formats.irset import IRSet
from arrayplan.kernels.measured import MeasuredKernel

FS = 48000.0
N_FFT = 65536


def make_irset(n_samples: int = 25581, zero_lag: int = 1581, n_mic: int = 16, n_spk: int = 12) -> IRSet:
    rng = np.random.default_rng(1)
    t = np.abs(np.arange(n_samples) - zero_lag) / FS
    data = rng.standard_normal((n_samples, n_mic, n_spk)) * np.exp(-t / 0.05)[:, None, None]
    return IRSet(data, FS, [f"S{i + 1}" for i in range(n_spk)], [f"M{i + 1}" for i in range(n_mic)],
                 zero_lag_samples=zero_lag)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    irs = make_irset()
    bins = np.arange(int(np.ceil(500.0 * N_FFT / FS)), int(8000.0 * N_FFT / FS) + 1)
    grid_hz = bins * FS / N_FFT
    log_hz = np.geomspace(500.0, 8000.0, 48)
    print(f"IR set {irs.n_mic} x {irs.n_spk}, {irs.n_samples} samples at {FS:g} Hz (zero lag at {irs.zero_lag_samples})")
    for label, window_s in (("whole record", None), ("30 ms window", 0.03)):
        kernel = MeasuredKernel(irs, window_s=window_s)
        used = irs.data[:kernel.n_samples]
        t_ref = best_of(lambda: np.fft.rfft(used, n=N_FFT, axis=0), args.repeats)[0]
        t_fft, g_fft = best_of(lambda: kernel.evaluate(grid_hz), args.repeats)
        some = slice(None, None, 8)
        t_direct, g_direct = best_of(lambda: kernel._direct(grid_hz[some]), 1)
        t_log = best_of(lambda: kernel.evaluate(log_hz), args.repeats)[0]
        g_fft = g_fft.reshape(grid_hz.size, -1)[some]
        err = np.max(np.abs(g_fft - g_direct)) / np.max(np.abs(g_direct))
        n_some = g_direct.shape[0]
        print(f"{label} ({kernel.n_samples} samples used); bare numpy rfft of {N_FFT} points: {t_ref * 1e3:.1f} ms")
        print(f"  {grid_hz.size} grid frequencies by FFT: {t_fft * 1e3:8.1f} ms, {t_fft / t_ref:6.2f} x the bare rfft "
              f"({t_fft / grid_hz.size * 1e6:.0f} us per frequency)")
        print(f"  {n_some} of them summed directly: {t_direct * 1e3:8.1f} ms, {t_direct / t_ref:6.2f} x the bare rfft "
              f"({t_direct / n_some * 1e6:.0f} us per frequency, {t_direct / n_some / (t_fft / grid_hz.size):.0f} x "
              f"the FFT path's; largest difference {err:.1e} of the largest value)")
        print(f"  {log_hz.size} log-spaced frequencies:  {t_log * 1e3:8.1f} ms, {t_log / t_ref:6.2f} x the bare rfft")


if __name__ == "__main__":
    main()
