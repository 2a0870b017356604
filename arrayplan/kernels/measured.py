"""Measured kernel: coupling matrices from an impulse-response set.

``G[f, m, s] = sum_n w[n] h[n + L, m, s] exp(-j 2 pi f (n - n0) / fs)``: the
discrete-time Fourier transform of each impulse response at exactly the
requested frequencies (the sign of numpy.fft.rfft, so a delay is
exp(-j k r) as in the free-field kernel), with the time origin at the IR
set's zero lag ``n0 = IRSet.zero_lag_samples``, after dropping a common
latency of ``L`` samples (zero lag moves L samples later; the n0 samples
before it are kept) and, when a window is given, fading out the late room
response with a half-Hann taper that counts from zero lag.  Evaluation is
direct (no FFT grid), in chunks, so any planned frequency works.

Notes
-----
Units: those of the IR set (``IRSet.units``; for example full scale per full
scale, or pascal per volt), per unit drive.  The samples before zero lag
(the measurement pulse's pre-ringing) enter with negative times, unwindowed;
without them a near microphone reads low near the sweep's f1.  Frequencies
must lie below fs / 2.
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..irset import IRSet

__all__ = ["MeasuredKernel", "fade_out_window"]

#: Complex exponentials held at once (frequencies x samples), bounds memory.
_CHUNK_ELEMENTS = 1 << 22


def fade_out_window(n_samples: int, sample_rate_hz: float, window_s: float,
                    fade_fraction: float = 0.25) -> np.ndarray:
    """Flat-then-half-Hann window that ends at `window_s`.

    Parameters
    ----------
    n_samples : int
        Length of the returned window.
    sample_rate_hz : float
    window_s : float
        Time (s, from the first sample) where the window reaches zero.
    fade_fraction : float
        Share of `window_s` taken by the half-Hann fade-out.

    Returns
    -------
    ndarray, shape (n_samples,)
        1 up to ``window_s * (1 - fade_fraction)``, a falling half-Hann to
        ``window_s``, 0 after.
    """
    n_end = int(round(window_s * sample_rate_hz))
    n_fade = max(1, int(round(n_end * fade_fraction)))
    n_flat = max(0, n_end - n_fade)
    w = np.zeros(n_samples)
    w[:min(n_flat, n_samples)] = 1.0
    k = np.arange(n_fade)
    fade = 0.5 * (1.0 + np.cos(np.pi * (k + 1) / (n_fade + 1)))  # falls from ~1 to ~0
    stop = min(n_flat + n_fade, n_samples)
    w[n_flat:stop] = fade[:max(0, stop - n_flat)]
    return w


class MeasuredKernel:
    """Coupling matrices from measured (or simulated) impulse responses.

    Parameters
    ----------
    irset : IRSet
        Responses ``data[n, m, s]``, shape (n_samples, n_mic, n_spk).
    window_s : float, optional
        Keep this many seconds after zero lag; the last quarter is a
        half-Hann fade-out (see :func:`fade_out_window`).  The samples
        before zero lag are kept whole.  None keeps the whole record.
    latency_samples : int
        Common latency to drop, in samples (on top of what the producer
        already removed): zero lag moves this many samples later, and as
        many samples leave the start of every response.

    Attributes
    ----------
    speaker_names, mic_names : tuple of str
    sample_rate_hz : float
    units : str
        The IR set's units.
    zero_lag_samples : int
        Index of zero lag in the samples used (the IR set's n0).
    name : str
    """

    def __init__(self, irset: IRSet, window_s: float | None = None, latency_samples: int = 0) -> None:
        latency_samples = int(latency_samples)
        n0 = int(irset.zero_lag_samples)
        if latency_samples < 0 or latency_samples >= irset.n_samples - n0:
            raise InputError(f"latency of {latency_samples} samples must lie in 0..{irset.n_samples - n0 - 1} "
                             f"(the responses hold {irset.n_samples - n0} samples from zero lag on)",
                             field="latency_samples")
        h = irset.data[latency_samples:]
        if window_s is not None:
            if not (np.isfinite(window_s) and window_s > 0):
                raise InputError(f"window must be a positive time in seconds, got {window_s}", field="window_s")
            if window_s * irset.sample_rate_hz < 4:
                raise InputError(f"window of {window_s * 1e3:g} ms is shorter than 4 samples", field="window_s",
                                 fix="use a longer window")
            w = np.ones(h.shape[0])
            w[n0:] = fade_out_window(h.shape[0] - n0, irset.sample_rate_hz, window_s)
            n_keep = n0 + int(np.count_nonzero(w[n0:]))
            h = h[:n_keep] * w[:n_keep, None, None]
        self._h = np.ascontiguousarray(h.reshape(h.shape[0], -1))   # (n, n_mic * n_spk)
        self._shape = (irset.n_mic, irset.n_spk)
        self.sample_rate_hz = float(irset.sample_rate_hz)
        self.speaker_names = tuple(irset.speaker_names)
        self.mic_names = tuple(irset.mic_names)
        self.units = irset.units
        self.window_s = window_s
        self.latency_samples = latency_samples
        self.zero_lag_samples = n0
        self.name = "measured impulse responses"

    @property
    def n_samples(self) -> int:
        """Samples used per response after latency removal and windowing (pre-roll included)."""
        return int(self._h.shape[0])

    def evaluate(self, hz: np.ndarray) -> np.ndarray:
        """Coupling matrices at `hz` (Hz, shape (n,), each below fs / 2); shape (n, n_mic, n_spk), complex."""
        hz = np.atleast_1d(np.asarray(hz, dtype=float))
        if np.any(hz < 0) or np.any(hz >= self.sample_rate_hz / 2):
            raise InputError(f"frequencies must lie in 0..{self.sample_rate_hz / 2:g} Hz (below Nyquist), "
                             f"got {hz.min():g}..{hz.max():g} Hz", field="frequencies",
                             fix="plan below half the IR set's sample rate")
        n = np.arange(self.n_samples) - self.zero_lag_samples     # time re zero lag, samples
        out = np.empty((hz.size, self._h.shape[1]), dtype=complex)
        step = max(1, _CHUNK_ELEMENTS // max(1, self.n_samples))
        for start in range(0, hz.size, step):
            f = hz[start:start + step]
            phase = np.exp(-2j * np.pi * np.outer(f / self.sample_rate_hz, n))   # (n_f, n_samples)
            out[start:start + step] = phase @ self._h
        return out.reshape(hz.size, *self._shape)
