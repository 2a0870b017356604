"""FIR drive and combine filters for each planned channel.

The channels are planned on the FFT bins of the filter length (the band
plus its transitions), with tracking so the weights are smooth in
frequency.  For channel j the drive filter of speaker s has the spectrum

    H_s(f) = drive[f, s, j] * W(f) * exp(-j 2 pi f (D - a_drive) / fs)

and the combine filter of microphone m likewise uses combine[f, m, j] and
a_combine.  W is the band window (raised-cosine transitions outside the
band edges, each 1/6 octave or :data:`TRANSITION_MIN_BINS` design bins wide,
whichever is wider; zero at DC and at Nyquist), D = taps // 2 is the
bulk delay, and a_side is the weights' own group delay (whole samples,
estimated from their phase slope over frequency; usually an advance, so
negative), removed so each filter's energy sits at D.  The taps are the
inverse real FFT, then a Tukey time window (alpha 0.2) reduces truncation
ripple.

Normalisation (unit drive energy in band): the planned weights are unit
vectors, so on every in-band design bin the spectrum before the time
window has sum_s |H_s(f)|^2 = 1, and likewise for the combine filters;
channel j's end-to-end gain is then s_j there.  Between the bins, and
after the time window, the realised taps hold this only approximately: a
transition narrower than a few bins rings through the whole band (a
1/6-octave edge at 100 Hz is a quarter of a 47 Hz bin), so each transition
is at least :data:`TRANSITION_MIN_BINS` bins wide, which keeps that ringing
out; what remains comes from weights that turn quickly with frequency
(channels whose singular values come close), and shrinks with more taps.
The check (:mod:`arrayplan.filters.check`) measures the realised in-band
energy of every channel on a grid at least 8 times finer than the bins
and reports its worst deviation from 1.
The group delay estimate is known only modulo the filter length (the
tracked phase per bin is), so the end-to-end latency is measured by the
time-domain check (:mod:`arrayplan.filters.check`), not predicted here.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy.signal.windows import tukey

from ..channels.svd import ChannelSet, decompose
from ..kernels.coupling import Kernel
from ..errors import InputError
from ..frequency import FrequencyAxis
from ..formats.irset import IRSet
from ..kernels import rig_kernel
from ..rig import Rig

__all__ = ["FilterSet", "band_window", "delay_spread_s", "design_filters", "minimum_taps", "strong_ranges_hz",
           "validate_request", "taps_from_weights"]

#: Width of each raised-cosine transition outside the band, in octaves.
TRANSITION_OCTAVES = 1.0 / 6.0
#: Least width of each transition, in design bins (sample rate / taps); wins over
#: TRANSITION_OCTAVES where that is narrower, so the band edges do not ring in band.
TRANSITION_MIN_BINS = 4
#: Tukey window taper fraction applied to the taps.
TUKEY_ALPHA = 0.2
#: Extra samples on top of twice the rig's delay spread in the minimum filter length.
TAPS_MARGIN = 64


@dataclass(frozen=True)
class FilterSet:
    """The FIR filters of the kept channels.

    Attributes
    ----------
    sample_rate_hz : float
        The DSP's sample rate, Hz.
    taps : int
        Filter length N, samples.
    band_hz : (low, high)
        Band where the filters realise the planned weights, Hz.
    bulk_delay_samples : int
        D = taps // 2, samples.
    drive_alignment_samples, combine_alignment_samples : int
        a_drive and a_combine: the weights' own group delay removed from each
        side, whole samples (usually negative; see the module docstring).
    drive : ndarray, shape (taps, n_spk, n_kept)
        Drive filter taps (dimensionless), one column per speaker, rig order.
    combine : ndarray, shape (taps, n_mic, n_kept)
        Combine filter taps, one column per microphone.
    kept : tuple of int
        0-based channel numbers (in ``plan``) that have filters.
    skipped : tuple of (int, str)
        0-based channel numbers without filters, with the reason.
    plan : ChannelSet
        The tracked plan on the design bins (band plus transitions).
    level_db : ndarray, shape (n_chan,)
        10 log10(s_j^2 / s_max^2) at the band centre bin, every channel.
    centre_hz : float
        The design bin nearest the band's geometric centre, Hz.
    band_level_db : ndarray, shape (n_band, n_chan), optional
        10 log10(s_j^2 / s_max^2) on every in-band design bin (the strongest
        channel of that bin is 0 dB), every channel.
    min_level_db : float
        The level a channel must reach somewhere in band to get filters, dB.
    kernel_name : str
        The kernel the channels were planned on.
    """

    sample_rate_hz: float
    taps: int
    band_hz: tuple[float, float]
    bulk_delay_samples: int
    drive_alignment_samples: int
    combine_alignment_samples: int
    drive: np.ndarray
    combine: np.ndarray
    kept: tuple[int, ...]
    skipped: tuple[tuple[int, str], ...]
    plan: ChannelSet
    level_db: np.ndarray
    centre_hz: float
    band_level_db: np.ndarray | None = None
    min_level_db: float = -30.0
    kernel_name: str = "free field"

    @property
    def drive_delay_samples(self) -> int:
        """Delay applied to the drive weights.

        Returns
        -------
        int
            D - a_drive, samples.
        """
        return self.bulk_delay_samples - self.drive_alignment_samples

    @property
    def combine_delay_samples(self) -> int:
        """Delay applied to the combine weights.

        Returns
        -------
        int
            D - a_combine, samples.
        """
        return self.bulk_delay_samples - self.combine_alignment_samples

    def in_band(self) -> np.ndarray:
        """Which design bins lie inside the band.

        Returns
        -------
        ndarray of bool, shape (n_design,)
            Mask over ``plan.axis``: True where low <= f <= high (edges included).
        """
        hz = self.plan.axis.hz
        return (hz >= self.band_hz[0]) & (hz <= self.band_hz[1])

    def strong_ranges_hz(self, channel: int) -> list[tuple[float, float]]:
        """Where a channel reaches :attr:`min_level_db` in band.

        Parameters
        ----------
        channel : int
            0-based channel number in ``plan`` (a column of :attr:`band_level_db`,
            which must be set).

        Returns
        -------
        list of (float, float)
            (low, high) Hz of each run of in-band design bins where it does,
            ascending (see the function :func:`strong_ranges_hz`).
        """
        return strong_ranges_hz(self.plan.axis.hz[self.in_band()], self.band_level_db[:, channel] >= self.min_level_db)


def strong_ranges_hz(hz: np.ndarray, strong: np.ndarray) -> list[tuple[float, float]]:
    """Runs of consecutive True in `strong` as (first, last) frequencies.

    Parameters
    ----------
    hz : ndarray, shape (n,)
        Ascending frequencies, Hz.
    strong : ndarray of bool, shape (n,)

    Returns
    -------
    list of (float, float)
        (low, high) Hz of each run, ascending.
    """
    out, start = [], None
    for i, ok in enumerate(np.asarray(strong, dtype=bool)):
        if ok and start is None:
            start = i
        if start is not None and (not ok or i == len(hz) - 1):
            end = i if ok else i - 1
            out.append((float(hz[start]), float(hz[end])))
            start = None
    return out


def band_window(hz: np.ndarray, band_hz: tuple[float, float], sample_rate_hz: float,
                min_transition_hz: float = 0.0) -> np.ndarray:
    """The band window W(f): 1 in band, raised-cosine transitions outside, 0 at DC and Nyquist.

    Parameters
    ----------
    hz : ndarray, shape (n,)
        Frequencies in Hz.
    band_hz : (low, high)
        Band edges, Hz.
    sample_rate_hz : float
        Sample rate, Hz.
    min_transition_hz : float
        Least width of each transition, Hz (each is otherwise
        :data:`TRANSITION_OCTAVES` wide); the lower one stops at 0 Hz and
        the upper one at Nyquist.

    Returns
    -------
    ndarray, shape (n,)
    """
    hz = np.asarray(hz, dtype=float)
    lo, hi = band_hz
    lo0 = max(min(lo * 2.0 ** -TRANSITION_OCTAVES, lo - min_transition_hz), 0.0)
    hi1 = min(max(hi * 2.0 ** TRANSITION_OCTAVES, hi + min_transition_hz), sample_rate_hz / 2.0)
    w = np.zeros_like(hz)
    w[(hz >= lo) & (hz <= hi)] = 1.0
    rise = (hz > lo0) & (hz < lo)
    w[rise] = 0.5 - 0.5 * np.cos(np.pi * (hz[rise] - lo0) / (lo - lo0))
    if hi1 > hi:
        fall = (hz > hi) & (hz < hi1)
        w[fall] = 0.5 + 0.5 * np.cos(np.pi * (hz[fall] - hi) / (hi1 - hi))
    w[(hz <= 0) | (hz >= sample_rate_hz / 2.0)] = 0.0
    return w


def delay_spread_s(source: Rig | IRSet) -> float:
    """Spread of the direct delays between every speaker and microphone, seconds.

    Parameters
    ----------
    source : Rig or IRSet
        A rig: (max r - min r) / c over the direct distances.  An IR set:
        the spread of the responses' peaks (the strongest arrival of each
        pair, whole samples), for plans made from measurements.

    Returns
    -------
    float
    """
    if isinstance(source, IRSet):
        peaks = np.argmax(np.abs(source.data.reshape(source.n_samples, -1)), axis=0)
        return float(peaks.max() - peaks.min()) / source.sample_rate_hz
    d = source.mics.positions[:, None, :] - source.speakers.positions[None, :, :]
    r = np.linalg.norm(d, axis=-1)
    return float(r.max() - r.min()) / source.medium.speed_of_sound


def minimum_taps(source: Rig | IRSet | float, sample_rate_hz: float) -> int:
    """Shortest filter length: twice the delay spread in samples, plus a margin.

    Parameters
    ----------
    source : Rig, IRSet or float
        Where the delay spread comes from (:func:`delay_spread_s`), or the spread itself in seconds.
    sample_rate_hz : float

    Returns
    -------
    int
    """
    spread_s = float(source) if isinstance(source, (int, float)) else delay_spread_s(source)
    return int(2 * np.ceil(spread_s * sample_rate_hz) + TAPS_MARGIN)


def validate_request(source: Rig | IRSet | float, sample_rate_hz: float, taps: int,
                     band_hz: tuple[float, float]) -> None:
    """Raise InputError (naming the parameter) when rate, taps or band cannot work.

    The rate must be positive and at least twice the band's top, the band
    must satisfy 0 < low < high < Nyquist, and the taps must be a whole
    number >= 16, hold the delay spread (:func:`minimum_taps`) and put at
    least 2 FFT bins in the band.

    Parameters
    ----------
    source : Rig, IRSet or float
        Where the delay spread the taps must hold comes from, or the spread
        itself in seconds (as for :func:`minimum_taps`).
    sample_rate_hz : float
        DSP sample rate, Hz.
    taps : int
        Filter length, samples.
    band_hz : (low, high)
        Band, Hz.

    Raises
    ------
    InputError
        On the first check that fails, naming ``sample_rate_hz``, ``band_hz``
        or ``taps``.
    """
    fs = float(sample_rate_hz)
    lo, hi = (float(b) for b in band_hz)
    if not (np.isfinite(fs) and fs > 0):
        raise InputError(f"sample rate must be positive, got {sample_rate_hz!r}", source="sample_rate_hz",
                         fix="give the DSP's sample rate in Hz, e.g. 48000")
    if not (np.isfinite(lo) and np.isfinite(hi) and 0 < lo < hi):
        raise InputError(f"band must satisfy 0 < low < high, got {lo:g} {hi:g} Hz", source="band_hz",
                         fix="give two frequencies in Hz, low then high")
    if fs < 2.0 * hi:
        raise InputError(f"rate {fs:g} Hz is below twice the band's top {hi:g} Hz", source="sample_rate_hz",
                         fix=f"use a rate of at least {2 * hi:g} Hz or lower the band's top")
    if hi >= fs / 2.0:
        raise InputError(f"band top {hi:g} Hz is not below Nyquist {fs / 2:g} Hz", source="band_hz",
                         fix="lower the band's top below half the rate")
    if int(taps) != taps or taps < 16:
        raise InputError(f"taps must be a whole number >= 16, got {taps!r}", source="taps")
    need = minimum_taps(source, fs)
    if taps < need:
        raise InputError(f"{int(taps)} taps cannot hold the rig's delay spread", source="taps",
                         fix=f"use at least {need} taps")
    if _bins_in_band(fs, int(taps), lo, hi) < 2:
        raise InputError(f"{int(taps)} taps give fewer than 2 FFT bins in the band", source="taps",
                         fix="use more taps or widen `band_hz`")


def _bins_in_band(fs: float, taps: int, lo: float, hi: float) -> int:
    hz = np.fft.rfftfreq(taps, 1.0 / fs)
    return int(np.sum((hz >= lo) & (hz <= hi)))


def _group_delay_samples(w: np.ndarray, bin_hz: float, sample_rate_hz: float) -> int:
    """Common group delay of weights (n_freq, n_elem, n_chan) from their bin-to-bin phase slope."""
    c = np.sum(np.conj(w[:-1]) * w[1:])
    if len(w) < 2 or abs(c) == 0:
        return 0
    tau_s = -np.angle(c) / (2.0 * np.pi * bin_hz)
    return int(np.round(tau_s * sample_rate_hz))


def taps_from_weights(weights: np.ndarray, window: np.ndarray, design_idx: np.ndarray, taps: int, delay: int,
                      sample_rate_hz: float, progress: Callable[[int, int], None] | None = None,
                      done_before: int = 0, total: int | None = None) -> np.ndarray:
    """Real FIR taps that realise complex weights on the design bins, one channel at a time.

    Each channel's spectrum is the weights times the band window times a
    delay of `delay` samples on the bins ``design_idx`` of an rfft of
    length `taps` (zero elsewhere); the inverse rfft is tapered by a Tukey
    window (:data:`TUKEY_ALPHA`).

    Parameters
    ----------
    weights : ndarray, complex, shape (n_design, n_elem, n_chan)
        Weights at the frequencies ``rfftfreq(taps, 1 / sample_rate_hz)[design_idx]``.
    window : ndarray, shape (taps // 2 + 1,)
        Band window on every rfft bin (:func:`band_window`), dimensionless.
    design_idx : ndarray of int, shape (n_design,)
        The rfft bins the weights belong to.
    taps : int
        Filter length, samples.
    delay : int
        Bulk delay, samples (the filters are causal once it covers half their spread).
    sample_rate_hz : float
        Hz.
    progress : callable, optional
        ``progress(done_before + j + 1, total)`` after each channel j (and
        ``progress(0, total)`` first when `done_before` is 0).
    done_before, total : int
        Offsets for `progress` when several calls share one bar.

    Returns
    -------
    ndarray, shape (taps, n_elem, n_chan)
        Dimensionless taps.
    """
    n_rfft = taps // 2 + 1
    hz = np.fft.rfftfreq(taps, 1.0 / sample_rate_hz)
    phase = np.exp(-2j * np.pi * hz[design_idx] * delay / sample_rate_hz)
    scale = (window[design_idx] * phase)[:, None]
    taper = tukey(taps, TUKEY_ALPHA)[:, None]
    n_chan = weights.shape[2]
    if progress is not None and done_before == 0:
        progress(0, n_chan if total is None else total)
    out = np.empty((taps,) + weights.shape[1:])
    spec = np.zeros((n_rfft, weights.shape[1]), dtype=complex)
    for j in range(n_chan):
        spec[design_idx] = weights[:, :, j] * scale
        out[:, :, j] = np.fft.irfft(spec, n=taps, axis=0) * taper
        if progress is not None:
            progress(done_before + j + 1, n_chan if total is None else total)
    return out


def design_filters(kernel: Kernel | Rig, sample_rate_hz: float, taps: int, band_hz: tuple[float, float], *,
                   min_level_db: float = -30.0, chunk_size: int = 64, spread: Rig | IRSet | float | None = None,
                   plan_progress: Callable[[int, int], None] | None = None,
                   taps_progress: Callable[[int, int], None] | None = None) -> FilterSet:
    """Design drive and combine FIR filters for the channels of a kernel (see module docstring).

    Parameters
    ----------
    kernel : Kernel or Rig
        The coupling the channels are planned on, on the filter's bin grid:
        a free-field, room or measured kernel (anything with ``evaluate(hz)``
        returning (n, n_mic, n_spk) and ``speaker_names``/``mic_names``).  A
        rig stands for its model kernel (:func:`arrayplan.kernels.rig_kernel`:
        its room when it has one, else the free field).
    sample_rate_hz : float
        DSP sample rate in Hz.
    taps : int
        Filter length N; the bulk delay is N // 2 samples.
    band_hz : (low, high)
        Band in Hz where the filters realise the planned weights.
    min_level_db : float
        A channel gets filters when its power coupling comes within this
        many dB of the strongest channel on one or more in-band design bins
        (its strength across the band, not at one frequency); the others are
        listed in ``skipped`` with their best level.
    chunk_size : int
        Design bins planned per batch.
    spread : Rig, IRSet or float, optional
        Source of the delay spread the taps must hold (:func:`minimum_taps`);
        default: `kernel` when it is a rig, else no check.
    plan_progress : callable, optional
        ``plan_progress(done, total)`` in design bins, after each batch of the plan.
    taps_progress : callable, optional
        ``taps_progress(done, total)`` in filter sets (drive then combine, one per
        kept channel each), after each.

    Returns
    -------
    FilterSet
    """
    if isinstance(kernel, Rig):
        spread = kernel if spread is None else spread
        kernel = rig_kernel(kernel)
    if spread is not None:
        validate_request(spread, sample_rate_hz, taps, band_hz)
    fs, taps = float(sample_rate_hz), int(taps)
    lo, hi = float(band_hz[0]), float(band_hz[1])
    hz_all = np.fft.rfftfreq(taps, 1.0 / fs)
    window = band_window(hz_all, (lo, hi), fs, min_transition_hz=TRANSITION_MIN_BINS * fs / taps)
    design_idx = np.nonzero(window > 0)[0]
    axis = FrequencyAxis(hz_all[design_idx])
    plan = decompose(kernel, axis, chunk_size=chunk_size, track=True, progress=plan_progress)
    centre = float(np.sqrt(lo * hi))
    in_band = (axis.hz >= lo) & (axis.hz <= hi)
    band_idx = np.nonzero(in_band)[0]
    ci = band_idx[np.argmin(np.abs(axis.hz[band_idx] - centre))]
    with np.errstate(divide="ignore", invalid="ignore"):
        p = plan.power_coupling[band_idx]                                  # (n_band, n_chan)
        band_level = 10.0 * np.log10(p / p.max(axis=1, keepdims=True))
    band_level = np.where(np.isnan(band_level), -np.inf, band_level)
    level = band_level[int(np.searchsorted(band_idx, ci))]
    best = band_level.max(axis=0)
    kept = tuple(int(j) for j in np.nonzero(best >= min_level_db)[0])
    skipped = tuple((int(j), f"never within {-min_level_db:g} dB of the strongest channel in band (best "
                             f"{best[j]:.1f} dB at {axis.hz[band_idx[int(np.argmax(band_level[:, j]))]]:.0f} Hz)")
                    for j in range(len(best)) if j not in kept)
    bin_hz = fs / taps
    drive_w = plan.drive[:, :, list(kept)]
    combine_w = plan.combine[:, :, list(kept)]
    a_drive = _group_delay_samples(drive_w[in_band], bin_hz, fs)
    a_combine = _group_delay_samples(combine_w[in_band], bin_hz, fs)
    bulk = taps // 2
    n_sets = 2 * len(kept)
    drive = taps_from_weights(drive_w, window, design_idx, taps, bulk - a_drive, fs, taps_progress, 0, n_sets)
    combine = taps_from_weights(combine_w, window, design_idx, taps, bulk - a_combine, fs, taps_progress, len(kept), n_sets)
    return FilterSet(fs, taps, (lo, hi), bulk, a_drive, a_combine, drive, combine, kept, skipped, plan,
                     level, float(axis.hz[ci]), band_level_db=band_level, min_level_db=float(min_level_db),
                     kernel_name=str(getattr(kernel, "name", "free field")))
