"""Measured kernel: coupling matrices from an impulse-response set.

``G[f, m, s] = sum_n w[n] h[n + L, m, s] exp(-j 2 pi f (n - n0) / fs)``: the
discrete-time Fourier transform of each impulse response at exactly the
requested frequencies (the sign of numpy.fft.rfft, so a delay is
exp(-j k r) as in the free-field kernel), with the time origin at the IR
set's zero lag ``n0 = IRSet.zero_lag_samples``, after dropping a common
latency of ``L`` samples (zero lag moves L samples later; the n0 samples
before it are kept) and, when a window is given, fading out the late room
response with a half-Hann taper that counts from zero lag.  Any planned
frequency works; see Evaluation below for how.

Smoothing (optional, ``smoothing_octaves=b``): each response is first
advanced by its own direct delay tau (the peak of |h|, to a fraction of a
sample), its transfer function is averaged over the band
[f 2^(-b/2), f 2^(b/2)] (a uniform mean in linear frequency over the
bins of a zero-padded FFT), and the delay is put back:
``G_b(f) = exp(-j 2 pi f tau) mean_band(H(f') exp(+j 2 pi f' tau))``.  The
direct sound, flat once its delay is removed, passes unchanged (magnitude
and phase), while a reflection arriving dt later is scaled by about
sinc(B dt) (B the band's width in Hz): fractional-octave complex smoothing
(P. D. Hatziantoniou and J. N. Mourjopoulos, "Generalized fractional-octave
smoothing of audio and acoustic responses", JAES 48(4), 2000), taken about
each path's own arrival so that the spatial phase the channels are made of
is kept.  Where the band holds no FFT bin (very low frequencies), the
response is evaluated unsmoothed.

Notes
-----
Units: those of the IR set (``IRSet.units``; for example full scale per full
scale, or pascal per volt), per unit drive.  The samples before zero lag
(the measurement pulse's pre-ringing) enter with negative times, unwindowed;
without them a near microphone reads low near the sweep's f1.  Frequencies
must lie below fs / 2.

Evaluation: where the requested frequencies lie on a grid k fs / N (to
rounding; for example a filter check's FFT bins, or any subset of them),
one real FFT per response gives them all: the responses (after latency and
window, length N_h) are zero-padded to a multiple N' of N with N' >= N_h
(the shortest such multiple whose length scipy.fft.next_fast_len accepts,
if one lies within twice the shortest), the samples before zero lag wrapped to the end of
the buffer, so that bin k' = k N' / N of the FFT is exactly the sum above.
The grid is used where it saves work (about when the frequencies on it
times N_h exceed 2 N' log2 N'); every other frequency is summed directly,
as two real matrix products of cos and sin tables with the responses, a
chunk of frequencies at a time.  Both ways agree to rounding (about 1e-13
of the largest value for records of a few thousand samples).
"""

from __future__ import annotations

import numpy as np

from ..errors import InputError
from ..formats.irset import IRSet

__all__ = ["MeasuredKernel", "fade_out_window"]

#: Table entries (frequencies x samples) or FFT outputs (bins x responses) held at once; bounds memory.
_CHUNK_ELEMENTS = 1 << 22
#: The FFT path is taken when (frequencies on the grid) x N_h exceeds this many times N' log2 N'
#: (measured break-even on 192 responses: about 2.2; fewer responses favour the FFT further).
_FFT_ADVANTAGE = 2.0
#: A frequency is on the grid when it is within this many ulp-sized steps (relative) of a bin.
_GRID_TOLERANCE = 16 * np.finfo(float).eps


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
    smoothing_octaves : float, optional
        Width b of the complex smoothing band in octaves (for example 1/3),
        about each response's direct arrival (see the module Notes).  None:
        no smoothing.

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

    def __init__(self, irset: IRSet, window_s: float | None = None, latency_samples: int = 0,
                 smoothing_octaves: float | None = None) -> None:
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
        self.smoothing_octaves = None
        if smoothing_octaves is not None:
            if not (np.isfinite(smoothing_octaves) and 0 < smoothing_octaves <= 2):
                raise InputError(f"smoothing width must be above 0 and at most 2 octaves, got {smoothing_octaves}",
                                 field="smoothing_octaves", fix="use for example 1/3 or 1/6")
            self.smoothing_octaves = float(smoothing_octaves)
            self._delay = _direct_delays(self._h) - n0                # samples re zero lag, per pair
            self.name += f", complex-smoothed over {self.smoothing_octaves:.3g} octave about each arrival"

    @property
    def n_samples(self) -> int:
        """Samples used per response after latency removal and windowing (pre-roll included).

        Returns
        -------
        int
            N_h, samples at :attr:`sample_rate_hz`.
        """
        return int(self._h.shape[0])

    def evaluate(self, hz: np.ndarray) -> np.ndarray:
        """Coupling matrices at `hz` (the sums of the module docstring, smoothed when asked).

        Parameters
        ----------
        hz : array_like, shape (n,)
            Frequencies, Hz, each in 0 <= f < fs / 2; any subset in any order.

        Returns
        -------
        ndarray, complex, shape (n, n_mic, n_spk)
            G in the IR set's units (:attr:`units`) per unit drive, exp(-jkr) sign.

        Raises
        ------
        InputError
            When a frequency is negative or not below Nyquist.
        """
        hz = np.atleast_1d(np.asarray(hz, dtype=float))
        if np.any(hz < 0) or np.any(hz >= self.sample_rate_hz / 2):
            raise InputError(f"frequencies must lie in 0..{self.sample_rate_hz / 2:g} Hz (below Nyquist), "
                             f"got {hz.min():g}..{hz.max():g} Hz", field="frequencies",
                             fix="plan below half the IR set's sample rate")
        out = self._dtft(hz) if self.smoothing_octaves is None else self._smoothed(hz)
        return out.reshape(hz.size, *self._shape)

    def _dtft(self, hz: np.ndarray) -> np.ndarray:
        """Unsmoothed transfer functions at `hz`, shape (n_f, n_pairs): by FFT on a grid, else directly."""
        grid = _fft_grid(hz / self.sample_rate_hz, self.n_samples)
        if grid is None:
            return self._direct(hz)
        n_fft, on, bins = grid
        out = np.empty((hz.size, self._h.shape[1]), dtype=complex)
        out[on] = self._fft_bins(n_fft, bins)
        if not np.all(on):
            out[~on] = self._direct(hz[~on])
        return out

    def _direct(self, hz: np.ndarray) -> np.ndarray:
        """The sums of the module docstring at `hz`, as cos and sin tables times the responses; (n_f, n_pairs)."""
        n = np.arange(self.n_samples) - self.zero_lag_samples     # time re zero lag, samples
        out = np.empty((hz.size, self._h.shape[1]), dtype=complex)
        parts = out.view(float).reshape(hz.size, -1, 2)
        step = max(1, _CHUNK_ELEMENTS // max(1, self.n_samples))
        for start in range(0, hz.size, step):
            phase = np.outer(-2.0 * np.pi * hz[start:start + step] / self.sample_rate_hz, n)   # (n_f, n_samples)
            parts[start:start + step, :, 0] = np.cos(phase) @ self._h
            parts[start:start + step, :, 1] = np.sin(phase) @ self._h
        return out

    def _fft_bins(self, n_fft: int, bins: np.ndarray) -> np.ndarray:
        """The sums at bins `bins` of an `n_fft`-point grid (n_fft >= n_samples); shape (len(bins), n_pairs).

        Each response goes into a zero buffer with zero lag at sample 0 and
        the samples before it wrapped to the end (time -t is sample n_fft - t).
        """
        n0, n_h = self.zero_lag_samples, self.n_samples
        n_pairs = self._h.shape[1]
        out = np.empty((bins.size, n_pairs), dtype=complex)
        step = max(1, _CHUNK_ELEMENTS // (n_fft // 2 + 1))
        import scipy.fft   # here, not at import: it takes a fifth of a second to load

        buf = np.zeros((min(step, n_pairs), n_fft))
        for start in range(0, n_pairs, step):
            cols = slice(start, min(start + step, n_pairs))
            b = buf[:cols.stop - cols.start]
            b[:, :n_h - n0] = self._h[n0:, cols].T
            if n0:
                b[:, n_fft - n0:] = self._h[:n0, cols].T
            out[:, cols] = scipy.fft.rfft(b, axis=-1)[:, bins].T
        return out

    def _smoothed(self, hz: np.ndarray) -> np.ndarray:
        """Transfer functions at `hz` smoothed about each pair's arrival (module Notes), shape (n_f, n_pairs)."""
        fs = self.sample_rate_hz
        n_fft = int(2 ** np.ceil(np.log2(max(4 * self.n_samples, 64))))
        df = fs / n_fft
        half = 2.0 ** (self.smoothing_octaves / 2.0)
        lo = np.ceil(hz / half / df).astype(int)                 # first bin in each band
        hi = np.minimum(np.floor(hz * half / df).astype(int), n_fft // 2 - 1)
        has_bins = hi >= lo
        out = np.empty((hz.size, self._h.shape[1]), dtype=complex)
        if not np.all(has_bins):
            out[~has_bins] = self._dtft(hz[~has_bins])
        if not np.any(has_bins):
            return out
        f_bins = np.arange(n_fft // 2 + 1) * df
        n0 = self.zero_lag_samples
        step = max(1, _CHUNK_ELEMENTS // (n_fft // 2 + 1))
        idx = np.flatnonzero(has_bins)
        for start in range(0, self._h.shape[1], step):
            cols = slice(start, start + step)
            tau = self._delay[cols]
            # DTFT with time re zero lag, advanced by each pair's own arrival
            spec = np.fft.rfft(self._h[:, cols], n=n_fft, axis=0)
            spec *= np.exp(2j * np.pi * np.outer(f_bins / fs, n0 + tau))
            csum = np.concatenate([np.zeros((1, spec.shape[1]), dtype=complex), np.cumsum(spec, axis=0)])
            mean = (csum[hi[idx] + 1] - csum[lo[idx]]) / (hi[idx] - lo[idx] + 1)[:, None]
            out[idx, cols] = mean * np.exp(-2j * np.pi * np.outer(hz[idx] / fs, tau))
        return out


def _fft_grid(cycles: np.ndarray, n_min: int) -> tuple[int, np.ndarray, np.ndarray] | None:
    """An FFT length that holds most of `cycles` (frequencies / fs) as bins, if it saves work.

    Parameters
    ----------
    cycles : ndarray, shape (n_f,)
        Frequencies in cycles per sample, in [0, 0.5).
    n_min : int
        The shortest FFT that does not wrap the responses (their length).

    Returns
    -------
    (n_fft, on, bins) or None
        `on` (bool, shape (n_f,)) marks the frequencies on the grid and
        `bins` (int, shape (on.sum(),)) their bins of the `n_fft`-point FFT;
        None when no grid holds at least 8 of them or the direct sums are cheaper.
    """
    positive = np.unique(cycles[cycles > 0])
    if positive.size < 8:
        return None
    spacing = float(np.median(np.diff(positive)))         # the grid step, or a few grid steps (a subset)
    if not 1.0 / (1 << 26) < spacing < 0.5:
        return None
    for steps in range(1, 65):                            # the grid: the smallest N holding most frequencies
        n_grid = int(round(steps / spacing))
        k = cycles * n_grid
        on = np.abs(k - np.rint(k)) <= _GRID_TOLERANCE * np.maximum(k, 1.0)
        if np.count_nonzero(on) >= max(8, cycles.size // 2):
            break
    else:
        return None
    import scipy.fft

    least = -(-int(n_min) // n_grid)                      # smallest multiple of the grid that does not wrap
    n_fft = n_grid * least
    for m in range(least, 2 * least + 1):                 # a length scipy.fft transforms fast, if one is near
        if scipy.fft.next_fast_len(n_grid * m, real=True) == n_grid * m:
            n_fft = n_grid * m
            break
    if np.count_nonzero(on) * n_min < _FFT_ADVANTAGE * n_fft * np.log2(n_fft):
        return None
    bins = np.rint(cycles[on] * n_fft).astype(int)
    return n_fft, on, bins


def _direct_delays(h: np.ndarray) -> np.ndarray:
    """Index of each column's largest |h|, refined to a fraction of a sample by a parabola (samples)."""
    mag = np.abs(h)
    k = np.argmax(mag, axis=0)
    cols = np.arange(h.shape[1])
    inner = (k > 0) & (k < h.shape[0] - 1)
    frac = np.zeros(h.shape[1])
    a = mag[np.maximum(k - 1, 0), cols]
    b = mag[k, cols]
    c = mag[np.minimum(k + 1, h.shape[0] - 1), cols]
    denom = a - 2.0 * b + c
    ok = inner & (denom < 0)
    frac[ok] = 0.5 * (a[ok] - c[ok]) / denom[ok]
    return k + np.clip(frac, -0.5, 0.5)
