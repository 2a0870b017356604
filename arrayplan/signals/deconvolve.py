"""Recordings of a sweep -> impulse responses, harmonic distortion products, peak-to-noise.

The recording of each microphone is convolved with the sweep's normalised
inverse filter (:func:`deconvolve`).  In the result the linear impulse
response starts at the *linear lag* (``n_pad_before + n_sweep - 1`` for a
recording that starts with the played file's first sample) and, for an
exponential sweep, the n-th harmonic distortion product sits
``T ln(n) / ln(f2/f1)`` seconds earlier (A. Farina, 108th AES Convention,
Paris, 2000), so each is cut out by a window of its own.

All functions here are pure: arrays in, arrays out.  Time signals are
``(n_samples, n_channels)``; one channel per microphone.  Impulse responses
are in units of recorded full scale per played full scale: the inverse
filter has unit gain in the sweep's band (see :mod:`arrayplan.signals.sweeps`),
so the DFT of a response is the system's transfer function there, and the
band-limited pulse of a unit-gain wire peaks below 1.

The pulse rings before zero lag, longest at f1 (about one Fresnel time), so a
linear response cut at zero lag loses that pre-ringing whenever the acoustic
delay is shorter, and reads low near f1 (about 1 dB near 164 Hz for a 137-sample
delay and a 100 Hz-16 kHz sweep).  :func:`deconvolve` therefore keeps
``pre_roll_samples`` before zero lag (the sweep's
:attr:`~arrayplan.signals.sweeps.SweepSignal.pre_roll_samples`: one Fresnel
time at f1, at most half-way to the 2nd harmonic); zero lag is then at that
index of the response, which IR sets record as ``zero_lag_samples``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable, Mapping, Sequence

import numpy as np

from .distortion_floor import MEASURED, harmonic_status, method_floor_db, noise_floor_db

__all__ = [
    "CLIP_THRESHOLD",
    "DEFAULT_MIN_PEAK_TO_NOISE_DB",
    "Deconvolution",
    "PreparedInverse",
    "deconvolve",
    "harmonic_windows",
    "harmonic_levels_db",
    "total_harmonic_level_db",
    "peak_to_noise_db",
    "clipped_sample_counts",
    "split_schedule",
    "OfflineResult",
    "impulse_responses",
]

#: A recorded sample whose magnitude reaches this (within 0.01 dB of full
#: scale) is counted as clipped (common practice, no source).
CLIP_THRESHOLD = 0.999

#: Peak-to-noise ratio (dB) below which a warning is raised.  ISO 3382-1
#: asks for at least 35 dB of decay range above the noise for T20 and 45 dB
#: for T30 (value from memory); 40 dB sits between.
DEFAULT_MIN_PEAK_TO_NOISE_DB = 40.0


@dataclass
class Deconvolution:
    """Impulse responses cut from a deconvolved recording.

    Attributes
    ----------
    linear : ndarray, shape (pre_roll + ir_length, n_channels)
        Linear impulse response; index `zero_lag_index` is zero lag (the
        played file's first sample reaching the recorder's first sample).
    harmonics : dict of int -> ndarray, shape (n_window, n_channels)
        Harmonic distortion products by order (2, 3, ...).
    harmonic_starts : dict of int -> int
        Index in `full` where each harmonic window starts.
    harmonic_zero_index : dict of int -> int
        Index inside each harmonic window of that order's nominal zero lag.
    full : ndarray, float32, shape (n_recording + n_inverse - 1, n_channels)
        The whole deconvolved signal.
    linear_lag : int
        Index in `full` of the linear response's zero lag.
    notes : list of str
        Remarks on the cut, one line each (none are added by this module).
    zero_lag_index : int
        Index in `linear` of zero lag: the samples kept before it (pre-roll).
    """

    linear: np.ndarray
    harmonics: dict[int, np.ndarray]
    harmonic_starts: dict[int, int]
    harmonic_zero_index: dict[int, int]
    full: np.ndarray
    linear_lag: int
    notes: list[str] = field(default_factory=list)
    zero_lag_index: int = 0


def _as_2d(x: np.ndarray, name: str) -> np.ndarray:
    x = np.asarray(x)
    if not np.issubdtype(x.dtype, np.floating):
        x = x.astype(float)
    if x.ndim == 1:
        x = x[:, None]
    if x.ndim != 2:
        raise ValueError(f"{name} must have shape (n_samples, n_channels), got {x.shape}")
    return x


def _cut(full: np.ndarray, start: int, length: int) -> np.ndarray:
    """full[start:start+length] with zeros where the window leaves the array."""
    out = np.zeros((length, full.shape[1]))
    lo, hi = max(start, 0), min(start + length, full.shape[0])
    if hi > lo:
        out[lo - start:hi - start] = full[lo:hi]
    return out


class PreparedInverse:
    """An inverse filter ready to convolve many recordings: its spectrum is computed once per length.

    The convolution is done with real FFTs in single precision (scipy.fft,
    several workers): its error, about 1e-7 of the response's peak, is far
    below the float32 WAV files responses are stored in and below any
    recording's noise.

    Parameters
    ----------
    inverse : ndarray, shape (n_inverse,)
        The sweep's normalised inverse filter.
    workers : int
        Threads for the FFTs (-1: all processors).
    """

    def __init__(self, inverse: np.ndarray, workers: int = -1) -> None:
        self.taps = np.asarray(inverse, dtype=np.float32).reshape(-1)
        if self.taps.size < 1:
            raise ValueError("the inverse filter is empty")
        self.workers = int(workers)
        self._spectra: dict[int, np.ndarray] = {}

    def convolve(self, recording: np.ndarray) -> np.ndarray:
        """Full linear convolution of each column with the inverse.

        Parameters
        ----------
        recording : ndarray, shape (n_samples, n_channels)

        Returns
        -------
        ndarray, float32, shape (n_samples + n_inverse - 1, n_channels)
        """
        from scipy.fft import irfft, next_fast_len, rfft

        rec = np.asarray(recording, dtype=np.float32)
        n_full = rec.shape[0] + self.taps.size - 1
        n_fft = next_fast_len(n_full, real=True)
        spec = self._spectra.get(n_fft)
        if spec is None:
            spec = self._spectra[n_fft] = rfft(self.taps, n_fft, workers=self.workers)
        x = rfft(rec, n_fft, axis=0, workers=self.workers)
        x *= spec[:, None]
        return irfft(x, n_fft, axis=0, workers=self.workers, overwrite_x=True)[:n_full]


def harmonic_windows(linear_lag: int, harmonic_offsets: Mapping[int, float], ir_length: int,
                     pre_samples: int | None = None) -> dict[int, tuple[int, int, int]]:
    """Window of each harmonic order in the deconvolved signal.

    The windows tile the lags before the linear response: order n owns the
    lags from halfway to order n+1 (or as far before its nominal position as
    after it, for the highest order) up to halfway to order n-1 (the linear
    response for n = 2), and never more than `ir_length` after its nominal
    position.  Stopping halfway keeps the pre-ringing of the band-limited
    linear pulse (lowest frequency f1) out of the distortion products.

    Parameters
    ----------
    linear_lag : int
        Index of the linear response's zero lag.
    harmonic_offsets : mapping of int -> float
        Offset (samples) of each order before the linear response.
    ir_length : int
        Longest part of a window after its nominal position, samples.
    pre_samples : int, optional
        Samples kept before each nominal position instead of the automatic
        half gap (still no more than the half gap).

    Returns
    -------
    dict of int -> (start, length, zero)
        `start` is the window's first index in the deconvolved signal,
        `length` its length, `zero` the index inside the window of the
        order's nominal zero lag (``linear_lag - round(offset)``).
    """
    orders = sorted(n for n in harmonic_offsets if n >= 2)
    offs = {1: 0.0, **{n: float(harmonic_offsets[n]) for n in orders}}
    seq = [1] + orders
    out: dict[int, tuple[int, int, int]] = {}
    for i, n in enumerate(seq[1:], start=1):
        post = (offs[n] - offs[seq[i - 1]]) / 2.0
        pre = (offs[seq[i + 1]] - offs[n]) / 2.0 if i + 1 < len(seq) else post
        post_n = int(math.floor(min(post, ir_length)))
        pre_n = int(math.floor(pre))
        if pre_samples is not None:
            pre_n = min(pre_n, int(pre_samples))
        nominal = linear_lag - int(round(offs[n]))
        if post_n + pre_n > 0:
            out[n] = (nominal - pre_n, pre_n + post_n, pre_n)
    return out


def deconvolve(recording: np.ndarray, inverse: np.ndarray | PreparedInverse, *, linear_lag: int, ir_length: int,
               harmonic_offsets: Mapping[int, float] | None = None,
               pre_samples: int | None = None, pre_roll_samples: int = 0) -> Deconvolution:
    """Convolve a recording with a sweep's inverse filter and cut out the responses.

    Parameters
    ----------
    recording : ndarray, shape (n_samples,) or (n_samples, n_channels)
        What the microphones recorded while the sweep file played, starting
        at the file's first sample; full scale = 1.
    inverse : ndarray, shape (n_inverse,), or PreparedInverse
        The sweep's normalised inverse filter (prepared once for many recordings).
    linear_lag : int
        Index of zero lag in the full deconvolution (``n_pad_before + n_sweep - 1``).
    ir_length : int
        Length of the linear impulse response from zero lag on, samples.
    harmonic_offsets : mapping of int -> float, optional
        Harmonic order -> offset in samples before the linear response
        (:meth:`arrayplan.signals.sweeps.SweepSignal.harmonic_offsets_samples`).
    pre_samples : int, optional
        Samples kept before each harmonic's nominal position (default: half
        the gap to the next order, see :func:`harmonic_windows`).
    pre_roll_samples : int
        Samples of the linear response kept before zero lag, to hold the
        pulse's pre-ringing (the sweep's ``pre_roll_samples``; 0 cuts at
        zero lag).  Must not reach past half-way to the 2nd harmonic.

    Returns
    -------
    Deconvolution
        ``linear`` has ``pre_roll_samples + ir_length`` samples, zero lag at
        index ``pre_roll_samples``.
    """
    rec = _as_2d(recording, "recording")
    inv = inverse if isinstance(inverse, PreparedInverse) else PreparedInverse(inverse)
    if ir_length < 1:
        raise ValueError(f"ir_length must be >= 1, got {ir_length}")
    pre_roll = int(pre_roll_samples)
    if pre_roll < 0:
        raise ValueError(f"pre_roll_samples must be >= 0, got {pre_roll}")
    second = (harmonic_offsets or {}).get(2)
    if second is not None and pre_roll > second / 2:
        raise ValueError(f"a pre-roll of {pre_roll} samples reaches past half-way to the 2nd harmonic "
                         f"({second / 2:.0f} samples)")
    full = inv.convolve(rec)
    linear = _cut(full, linear_lag - pre_roll, pre_roll + ir_length)
    windows = harmonic_windows(linear_lag, harmonic_offsets or {}, ir_length, pre_samples)
    harmonics = {n: _cut(full, start, length) for n, (start, length, _) in windows.items()}
    return Deconvolution(linear=linear, harmonics=harmonics,
                         harmonic_starts={n: w[0] for n, w in windows.items()},
                         harmonic_zero_index={n: w[2] for n, w in windows.items()},
                         full=full, linear_lag=int(linear_lag), zero_lag_index=pre_roll)


def harmonic_levels_db(linear: np.ndarray, harmonics: Mapping[int, np.ndarray]) -> dict[int, np.ndarray]:
    """Energy of each harmonic product relative to the linear response, per channel, dB.

    Parameters
    ----------
    linear : ndarray, shape (n, n_channels)
    harmonics : mapping of int -> ndarray, shape (n_k, n_channels)

    Returns
    -------
    dict of int -> ndarray, shape (n_channels,)
        ``10 log10(sum h_k^2 / sum h_1^2)`` (-inf where a product is zero).
    """
    lin = _as_2d(linear, "linear")
    e1 = np.sum(lin * lin, axis=0)
    out = {}
    with np.errstate(divide="ignore", invalid="ignore"):
        for n, h in sorted(harmonics.items()):
            h = _as_2d(h, "harmonic")
            out[n] = 10.0 * np.log10(np.sum(h * h, axis=0) / e1)
    return out


def total_harmonic_level_db(levels_db: Mapping[int, np.ndarray]) -> np.ndarray:
    """Sum of the harmonic energies relative to the linear one, per channel, dB (broadband THD).

    Parameters
    ----------
    levels_db : mapping of int to ndarray
        Harmonic order -> level re the linear response (dB), all of one shape.

    Returns
    -------
    ndarray
        10 log10 of the summed energy ratios (dB), the shape of the levels;
        empty when `levels_db` is.
    """
    if not levels_db:
        return np.array([])
    total = sum(10.0 ** (np.asarray(v) / 10.0) for v in levels_db.values())
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(total)


def peak_to_noise_db(ir: np.ndarray, noise_fraction: float = 0.1) -> np.ndarray:
    """Peak-to-noise ratio of each channel of an impulse response, dB.

    The noise is the RMS of the last `noise_fraction` of the response (at
    least 16 samples); the peak is ``max |h|``.  If the room has not decayed
    by then the ratio comes out low: a conservative figure.

    Parameters
    ----------
    ir : ndarray, shape (n_samples, n_channels)
    noise_fraction : float
        Fraction of the response, at its end, taken as noise (0 < f < 1).

    Returns
    -------
    ndarray, shape (n_channels,)
        ``20 log10(peak / noise_rms)``; inf for a noiseless tail.
    """
    h = _as_2d(ir, "ir")
    if not 0 < noise_fraction < 1:
        raise ValueError(f"noise_fraction must be in (0, 1), got {noise_fraction}")
    n_tail = min(h.shape[0], max(16, int(round(noise_fraction * h.shape[0]))))
    tail = h[-n_tail:]
    noise = np.sqrt(np.mean(tail * tail, axis=0))
    peak = np.max(np.abs(h), axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(noise > 0, 20.0 * np.log10(peak / np.where(noise > 0, noise, 1.0)), math.inf)


def clipped_sample_counts(recording: np.ndarray, threshold: float = CLIP_THRESHOLD) -> np.ndarray:
    """Number of samples per channel whose magnitude reaches `threshold` (full scale = 1).

    Parameters
    ----------
    recording : ndarray, shape (n_samples, n_channels)
        Recorded signal, full scale = 1.
    threshold : float
        Magnitude counted as clipped (full scale = 1).

    Returns
    -------
    ndarray of int, shape (n_channels,)
        Samples at or above `threshold` per channel.
    """
    rec = _as_2d(recording, "recording")
    return np.sum(np.abs(rec) >= threshold, axis=0).astype(int)


def split_schedule(recording: np.ndarray, segment_starts: Sequence[int], segment_length: int) -> list[np.ndarray]:
    """Cut one long recording of a per-speaker schedule into one recording per speaker.

    Parameters
    ----------
    recording : ndarray, shape (n_samples, n_channels)
    segment_starts : sequence of int
        First sample of each speaker's segment (its sweep start minus the
        silence before it).
    segment_length : int
        Samples per segment (the single-sweep file length).

    Returns
    -------
    list of ndarray, each shape (segment_length, n_channels)
        Zero-padded where the recording ends early.
    """
    rec = _as_2d(recording, "recording")
    return [_cut(rec, int(s), int(segment_length)) for s in segment_starts]


@dataclass
class OfflineResult:
    """Impulse responses of every speaker to every microphone, with their quality figures.

    Attributes
    ----------
    data : ndarray, shape (pre_roll + ir_length, n_mic, n_spk)
        Linear impulse responses (the layout of :class:`arrayplan.formats.irset.IRSet`),
        zero lag at index `zero_lag_index`.
    harmonics : dict of int -> ndarray, shape (n_window, n_mic, n_spk)
        Harmonic distortion products by order.
    harmonic_zero_index : dict of int -> int
        Index in each harmonic window of that order's nominal zero lag.
    harmonic_db : dict of int -> ndarray, shape (n_mic, n_spk)
        Energy of each product relative to the linear response, dB, as read
        (floors included: see `harmonic_status`).
    thd_db : ndarray, shape (n_mic, n_spk)
        The products reported as measured, together, relative to the linear
        response, dB (-inf if none is above the floors).
    peak_to_noise_db : ndarray, shape (n_mic, n_spk)
    peak_dbfs : ndarray, shape (n_mic, n_spk)
        Peak of each linear response, dB re 1 (recorded full scale per played full scale).
    peak_index : ndarray, shape (n_mic, n_spk)
        Index in `data` of that peak; ``peak_index - zero_lag_index`` is the
        arrival, roughly, in samples after zero lag.
    clipped_samples : ndarray, shape (n_mic, n_spk)
        Recorded samples at or above the clip threshold.
    warnings : list of str
        One line each: clipping, low peak-to-noise.
    method_floor_db : dict of int -> float, or None
        The method's own floor per order (:mod:`arrayplan.signals.distortion_floor`);
        None when no clean recording was given.
    noise_floor_db : dict of int -> ndarray, shape (n_mic, n_spk)
        The noise floor per order and pair, dB.
    harmonic_status : dict of int -> ndarray of str, shape (n_mic, n_spk)
        "measured", "below the method's floor" or "below the noise floor".
    zero_lag_index : int
        0-based index of zero lag in `data` (the pre-roll in samples).
    """

    data: np.ndarray
    harmonics: dict[int, np.ndarray]
    harmonic_zero_index: dict[int, int]
    harmonic_db: dict[int, np.ndarray]
    thd_db: np.ndarray
    peak_to_noise_db: np.ndarray
    peak_dbfs: np.ndarray
    peak_index: np.ndarray
    clipped_samples: np.ndarray
    warnings: list[str]
    zero_lag_index: int = 0
    method_floor_db: dict[int, float] | None = None
    noise_floor_db: dict[int, np.ndarray] = field(default_factory=dict)
    harmonic_status: dict[int, np.ndarray] = field(default_factory=dict)

    def reported_harmonic_db(self, order: int) -> np.ndarray:
        """Level of `order` where it is measured, NaN where below a floor.

        Parameters
        ----------
        order : int
            Harmonic order (2, 3, ...).

        Returns
        -------
        ndarray, shape (n_mic, n_spk)
            Level re the linear response (dB), NaN where not measured.
        """
        return np.where(self.harmonic_status[order] == MEASURED, self.harmonic_db[order], np.nan)


def impulse_responses(recordings: Sequence[np.ndarray], inverse: np.ndarray, *, linear_lag: int, ir_length: int,
                      harmonic_offsets: Mapping[int, float] | None = None, speaker_names: Sequence[str],
                      mic_names: Sequence[str], min_peak_to_noise_db: float = DEFAULT_MIN_PEAK_TO_NOISE_DB,
                      clip_threshold: float = CLIP_THRESHOLD, pre_samples: int | None = None,
                      pre_roll_samples: int = 0, clean_recording: np.ndarray | None = None,
                      progress: Callable[[int, int], None] | None = None) -> OfflineResult:
    """Deconvolve one recording per speaker and gather responses, distortion and warnings.

    Parameters
    ----------
    recordings : sequence of ndarray, each shape (n_samples, n_mic)
        Speaker k's recording (all microphones), aligned with the played file.
    inverse : ndarray, shape (n_inverse,)
        The sweep's normalised inverse filter.
    linear_lag, ir_length, harmonic_offsets, pre_samples, pre_roll_samples
        As for :func:`deconvolve`.
    speaker_names, mic_names : sequence of str
        Names used in the warnings; lengths n_spk and n_mic.
    min_peak_to_noise_db : float
        A response with a lower peak-to-noise ratio raises a warning.
    clip_threshold : float
        Recorded magnitude counted as clipped.
    clean_recording : ndarray, shape (n_file,), optional
        The single-sweep file as played, for the method's own floor
        (:func:`arrayplan.signals.distortion_floor.method_floor_db`); without
        it only the noise floor is known.
    progress : callable, optional
        Called as ``progress(done, total)`` after each speaker.

    Returns
    -------
    OfflineResult
    """
    if len(recordings) != len(speaker_names):
        raise ValueError(f"{len(recordings)} recordings for {len(speaker_names)} speakers")
    linear, harm, clipped, zero = [], {}, [], {}
    prepared = inverse if isinstance(inverse, PreparedInverse) else PreparedInverse(inverse)
    for i_rec, rec in enumerate(recordings):
        rec = _as_2d(rec, "recording")
        if rec.shape[1] != len(mic_names):
            raise ValueError(f"recording has {rec.shape[1]} channels for {len(mic_names)} microphones")
        d = deconvolve(rec, prepared, linear_lag=linear_lag, ir_length=ir_length,
                       harmonic_offsets=harmonic_offsets, pre_samples=pre_samples,
                       pre_roll_samples=pre_roll_samples)
        linear.append(d.linear)
        for n, h in d.harmonics.items():
            harm.setdefault(n, []).append(h)
        zero = d.harmonic_zero_index
        clipped.append(clipped_sample_counts(rec, clip_threshold))
        if progress is not None:
            progress(i_rec + 1, len(recordings))
    data = np.stack(linear, axis=2)
    harmonics = {n: np.stack(v, axis=2) for n, v in harm.items()}
    n_mic, n_spk = data.shape[1], data.shape[2]
    pnr = np.stack([peak_to_noise_db(data[:, :, s]) for s in range(n_spk)], axis=1)
    levels = {n: np.stack([harmonic_levels_db(data[:, :, s], {n: h[:, :, s]})[n] for s in range(n_spk)], axis=1)
              for n, h in harmonics.items()}
    method = None
    if clean_recording is not None and harmonics:
        method = method_floor_db(clean_recording, prepared, linear_lag=linear_lag, ir_length=ir_length,
                                 harmonic_offsets=harmonic_offsets or {}, pre_samples=pre_samples,
                                 pre_roll_samples=pre_roll_samples)
    lengths = {n: h.shape[0] for n, h in harmonics.items()}
    noise = {n: np.stack([noise_floor_db(data[:, :, s], {n: k})[n] for s in range(n_spk)], axis=1)
             for n, k in lengths.items()}
    status = {n: np.array([[harmonic_status(float(levels[n][m, s]), None if method is None else method[n],
                                            float(noise[n][m, s])) for s in range(n_spk)] for m in range(n_mic)],
                          dtype=object) for n in levels}
    measured = {n: np.where(status[n] == MEASURED, v, -math.inf) for n, v in levels.items()}
    thd = total_harmonic_level_db(measured) if levels else np.full((n_mic, n_spk), -math.inf)
    peak = np.max(np.abs(data), axis=0)
    with np.errstate(divide="ignore"):
        peak_db = 20.0 * np.log10(peak)
    clip = np.stack(clipped, axis=1)
    warnings = []
    for s, spk in enumerate(speaker_names):
        hit = [f"{mic_names[m]} ({clip[m, s]} samples)" for m in range(n_mic) if clip[m, s] > 0]
        if hit:
            warnings.append(f"speaker {spk}: recording clipped at {', '.join(hit)}: these responses are "
                            "distorted; lower the level and measure again")
        low = [f"{mic_names[m]} ({pnr[m, s]:.1f} dB)" for m in range(n_mic) if pnr[m, s] < min_peak_to_noise_db]
        if low:
            warnings.append(f"speaker {spk}: peak-to-noise below {min_peak_to_noise_db:g} dB at {', '.join(low)}: "
                            "raise the level carefully, lengthen the sweep, or quieten the room")
    return OfflineResult(data=data, harmonics=harmonics, harmonic_zero_index=dict(zero), harmonic_db=levels, thd_db=np.asarray(thd),
                         peak_to_noise_db=pnr, peak_dbfs=peak_db, peak_index=np.argmax(np.abs(data), axis=0),
                         clipped_samples=clip, warnings=warnings, zero_lag_index=int(pre_roll_samples),
                         method_floor_db=method, noise_floor_db=noise, harmonic_status=status)
