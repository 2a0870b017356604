"""Deconvolve 8 speakers x 16 microphones of 10 s sweeps at 48 kHz; print the time against a bare FFT.

Run: python benchmarks/deconvolve_speed.py [--speakers 8] [--mics 16] [--duration-s 10] [--repeats 3]

Everything runs in this process, runs interleaved, best of `repeats`.  The
baseline is the plain fast convolution of the same recordings with the same
inverse filter: scipy.fft real FFTs in float32 with 2 workers (inverse
spectrum computed once, outside the timing), nothing else.  The measured run
is :func:`arrayplan.signals.deconvolve.impulse_responses` end to end: the
convolutions, cutting the linear responses and the harmonic windows, the
harmonic levels, the method's own floor, the noise floors and the warnings.

Errors are the largest absolute difference from an exact float64
convolution (one speaker), as a fraction of the response's peak, for
arrayplan and for the baseline.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from scipy import fft as sfft

from arrayplan.signals import SweepSettings, make_sweep
from arrayplan.signals.deconvolve import impulse_responses


def recordings(sweep, n_spk: int, n_mic: int) -> list[np.ndarray]:
    """Each speaker reaches each microphone by a delay, a gain and a little noise (float64, as read)."""
    rng = np.random.default_rng(3)
    x = sweep.signal
    out = []
    for _ in range(n_spk):
        rec = np.empty((x.size, n_mic))
        for m in range(n_mic):
            d = int(rng.integers(20, 2000))
            rec[:d, m] = 0.0
            rec[d:, m] = rng.uniform(0.05, 0.8) * x[:x.size - d]
        rec += 1e-5 * rng.standard_normal(rec.shape)
        out.append(rec)
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--speakers", type=int, default=8)
    ap.add_argument("--mics", type=int, default=16)
    ap.add_argument("--duration-s", type=float, default=10.0)
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args()
    fs = 48000.0
    sw = make_sweep(SweepSettings(f1_hz=20.0, f2_hz=20000.0, duration_s=args.duration_s, sample_rate_hz=fs,
                                  pad_before_s=0.1, pad_after_s=1.0))
    recs = recordings(sw, args.speakers, args.mics)
    names_s = [f"S{i + 1}" for i in range(args.speakers)]
    names_m = [f"M{i + 1}" for i in range(args.mics)]
    n_full = sw.signal.size + sw.inverse.size - 1
    n_fft = sfft.next_fast_len(n_full, real=True)
    inv_spec = sfft.rfft(sw.inverse.astype(np.float32), n_fft, workers=2)

    def baseline() -> list[np.ndarray]:
        out = []
        for rec in recs:
            x = sfft.rfft(rec.astype(np.float32), n_fft, axis=0, workers=2)
            x *= inv_spec[:, None]
            out.append(sfft.irfft(x, n_fft, axis=0, workers=2)[:n_full])
        return out

    def ours():
        return impulse_responses(recs, sw.inverse, linear_lag=sw.linear_lag, ir_length=sw.n_pad_after,
                                 harmonic_offsets=sw.harmonic_offsets_samples(5), speaker_names=names_s,
                                 mic_names=names_m, pre_roll_samples=sw.pre_roll_samples, clean_recording=sw.signal)

    t_base, t_ours = [], []
    for _ in range(args.repeats):
        t0 = time.perf_counter()
        base = baseline()
        t_base.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        result = ours()
        t_ours.append(time.perf_counter() - t0)

    # Errors against an exact float64 convolution of speaker 1 over the kept linear responses.
    exact = sfft.irfft(sfft.rfft(recs[0], n_fft, axis=0) * sfft.rfft(sw.inverse, n_fft)[:, None], n_fft,
                       axis=0)[:n_full]
    lo = sw.linear_lag - sw.pre_roll_samples
    want = exact[lo:lo + result.data.shape[0]]
    peak = np.max(np.abs(want))
    err_ours = np.max(np.abs(result.data[:, :, 0] - want)) / peak
    err_base = np.max(np.abs(base[0][lo:lo + result.data.shape[0]] - want)) / peak
    print(f"{args.speakers} speakers x {args.mics} microphones, {args.duration_s:g} s sweeps at {fs:g} Hz "
          f"(recordings {recs[0].shape[0]} samples, FFT length {n_fft})")
    print(f"baseline, scipy.fft float32 with 2 workers: {min(t_base):.3f} s (best of {args.repeats})")
    print(f"arrayplan impulse_responses end to end:   {min(t_ours):.3f} s (best of {args.repeats})")
    print(f"ratio arrayplan / baseline: {min(t_ours) / min(t_base):.2f}")
    print(f"largest error, fraction of the peak: arrayplan {err_ours:.2e}, baseline {err_base:.2e}")


if __name__ == "__main__":
    main()
