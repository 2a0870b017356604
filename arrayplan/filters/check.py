"""Time-domain check of channel filters: drive filters -> simulated rig -> combine filters.

The rig's free-field impulse responses (:func:`arrayplan.simulate.free_field_impulse_responses`)
are put through the drive filters of each channel and then the combine
filters of every channel, giving the end-to-end channel-to-channel impulse
responses t_ij[n] (output i, input j) and their transfer T_ij(f).  The
chain is computed from the spectra (:func:`channel_transfer`): the
zero-padded FFTs of the responses and of the filter taps sample their
Fourier transforms exactly, so ``T = Cb^T R D`` at each bin is the FFT of
the linear convolution (:func:`end_to_end_responses` computes the same in
the time domain).  Per channel it reports the in-band gain error re the
planned singular value (dB, worst over the planned bins) and the worst
in-band crosstalk into it: max over the band of |T_ij| / |T_ii| for j != i
(dB re its own diagonal), evaluated on a grid four times finer than the
design bins so the response between them counts too.
"""

from __future__ import annotations

import os
from dataclasses import dataclass

import numpy as np
import scipy.fft as sp_fft
from scipy.signal import fftconvolve

from ..rig import Rig
from ..simulate import free_field_impulse_responses
from .design import FilterSet, band_window

__all__ = ["FilterCheck", "channel_transfer", "check_filters", "end_to_end_responses", "plot_crosstalk"]

#: Frequency grid of the check is this many times finer than the design bins.
OVERSAMPLE = 4


@dataclass(frozen=True)
class FilterCheck:
    """Result of the time-domain check.

    Attributes
    ----------
    channels : tuple of int
        0-based plan channel numbers, the order of every axis below.
    gain_error_db : ndarray, shape (n_kept,)
        Worst |20 log10(|T_jj| / (s_j W^2))| over the planned in-band bins.
    crosstalk_db : ndarray, shape (n_kept, n_kept)
        [i, j] = worst in-band 20 log10(|T_ij| / |T_ii|); diagonal NaN.
    latency_samples : ndarray, shape (n_kept,)
        Measured end-to-end delay (peak of t_jj) in samples.
    limit_db : float
    ir_samples : int
        Length of the simulated rig impulse responses.
    """

    channels: tuple[int, ...]
    gain_error_db: np.ndarray
    crosstalk_db: np.ndarray
    latency_samples: np.ndarray
    limit_db: float
    ir_samples: int

    def worst_crosstalk_db(self) -> np.ndarray:
        """Worst crosstalk into each channel, shape (n_kept,)."""
        if len(self.channels) < 2:
            return np.full(len(self.channels), -np.inf)
        return np.nanmax(self.crosstalk_db, axis=1)

    def passed(self) -> np.ndarray:
        """True where the worst crosstalk into the channel is below the limit, shape (n_kept,)."""
        return self.worst_crosstalk_db() < self.limit_db


def end_to_end_responses(rig_ir: np.ndarray, drive: np.ndarray, combine: np.ndarray, progress=None) -> np.ndarray:
    """Channel-to-channel impulse responses through drive filters, rig and combine filters.

    Parameters
    ----------
    rig_ir : ndarray, shape (n_ir, n_mic, n_spk)
    drive : ndarray, shape (taps, n_spk, n_chan)
    combine : ndarray, shape (taps_c, n_mic, n_chan)

    Returns
    -------
    ndarray, shape (n_ir + taps + taps_c - 2, n_chan_out, n_chan_in)
        [n, i, j]: output of channel i's combine filters for a unit impulse
        into channel j's drive filters.
    """
    n_chan = drive.shape[2]
    n_out = rig_ir.shape[0] + drive.shape[0] + combine.shape[0] - 2
    out = np.empty((n_out, combine.shape[2], n_chan))
    for j in range(n_chan):
        mic = fftconvolve(rig_ir, drive[:, None, :, j], axes=0).sum(axis=2)       # (n1, n_mic)
        out[:, :, j] = fftconvolve(mic[:, :, None], combine, axes=0).sum(axis=1)  # (n_out, n_chan)
        if progress is not None:
            progress(j + 1, n_chan)
    return out


def rig_ir_samples(rig: Rig, sample_rate_hz: float) -> int:
    """Length of the simulated impulse responses: a power of two >= 8 x (longest delay + 64), >= 4096."""
    r = np.linalg.norm(rig.mics.positions[:, None, :] - rig.speakers.positions[None, :, :], axis=-1)
    delay = r.max() / rig.medium.speed_of_sound * sample_rate_hz
    return int(max(4096, 2 ** int(np.ceil(np.log2(8 * (delay + 64))))))


#: Memory budget of one batch of microphone spectra in :func:`channel_transfer`, bytes.
BATCH_BYTES = 64 * 2 ** 20
#: Threads of each FFT (scipy.fft ``workers``): every core this process may use.
FFT_WORKERS = max(1, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1))


def channel_transfer(rig_ir: np.ndarray, drive: np.ndarray, combine: np.ndarray, n_fft: int, fine: np.ndarray,
                     n_coarse: int, progress=None) -> tuple[np.ndarray, np.ndarray]:
    """End-to-end transfer of drive filters -> rig -> combine filters, straight from the spectra.

    The transfer is ``T(f) = Cb(f)^T R(f) D(f)`` (output i, input j), with R,
    D and Cb the discrete-time Fourier transforms of the rig's responses and
    of the filters; each is sampled exactly by a zero-padded real FFT of
    length `n_fft` (at least the length of every sequence), so ``T`` equals
    the FFT of the end-to-end responses of :func:`end_to_end_responses` at
    those bins.  The microphones are taken in batches (:data:`BATCH_BYTES`).

    Parameters
    ----------
    rig_ir : ndarray, shape (n_ir, n_mic, n_spk)
    drive : ndarray, shape (taps, n_spk, n_chan)
    combine : ndarray, shape (taps_c, n_mic, n_chan)
        The same channels as `drive`, in the same order.
    n_fft : int
        FFT length of the fine grid (bin spacing fs / n_fft); a multiple of `n_coarse`.
    fine : ndarray of int, shape (n_fine,)
        Bins of the fine grid where the whole matrix T is wanted.
    n_coarse : int
        FFT length of the coarse grid, at least ``n_ir + taps + taps_c - 2``
        so that its inverse FFT gives the end-to-end responses without wrap.
    progress : callable, optional
        ``progress(done, total)`` in microphones.

    Returns
    -------
    t_fine : ndarray, complex, shape (n_fine, n_chan, n_chan)
        T at the `fine` bins.
    t_diag : ndarray, shape (n_coarse, n_chan)
        The diagonal end-to-end impulse responses t_jj[n] (output j, input j).
    """
    n_fft, n_coarse = int(n_fft), int(n_coarse)
    step = n_fft // n_coarse
    coarse = np.arange(0, n_fft // 2 + 1, step)                    # every step-th fine bin
    n_mic, n_spk = rig_ir.shape[1:]
    n_chan = drive.shape[2]

    def spectra(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        spec = sp_fft.rfft(x, n=n_fft, axis=0, workers=FFT_WORKERS)
        return spec[fine], spec[coarse]

    d_fine, d_coarse = spectra(drive)                              # (n_bins, n_spk, n_chan)
    t_fine = np.zeros((len(fine), n_chan, n_chan), dtype=complex)
    diag = np.zeros((len(coarse), n_chan), dtype=complex)
    per_mic = (n_fft // 2 + 1) * (n_spk + n_chan) * 16
    batch = int(max(1, BATCH_BYTES // per_mic))
    for m0 in range(0, n_mic, batch):
        mics = slice(m0, min(m0 + batch, n_mic))
        r_fine, r_coarse = spectra(rig_ir[:, mics, :])
        c_fine, c_coarse = spectra(combine[:, mics, :])
        t_fine += np.matmul(np.swapaxes(c_fine, 1, 2), np.matmul(r_fine, d_fine))
        diag += np.einsum("fmj,fmj->fj", c_coarse, np.matmul(r_coarse, d_coarse))
        if progress is not None:
            progress(mics.stop, n_mic)
    return t_fine, sp_fft.irfft(diag, n=n_coarse, axis=0)


def check_filters(rig: Rig, filters: FilterSet, *, limit_db: float = -40.0, progress=None) -> FilterCheck:
    """Simulate the rig and measure each channel's gain and crosstalk (see module docstring)."""
    fs, taps = filters.sample_rate_hz, filters.taps
    n_ir = rig_ir_samples(rig, fs)
    ir = free_field_impulse_responses(rig, fs, n_ir)
    n_out = n_ir + filters.drive.shape[0] + filters.combine.shape[0] - 2
    n_coarse = taps * int(np.ceil(n_out / taps))
    n_fft = OVERSAMPLE * n_coarse
    hz = np.fft.rfftfreq(n_fft, 1.0 / fs)
    lo, hi = filters.band_hz
    fine = np.nonzero((hz >= lo) & (hz <= hi))[0]
    spec, t_diag = channel_transfer(ir, filters.drive, filters.combine, n_fft, fine, n_coarse, progress=progress)
    kept = list(filters.kept)
    # planned bins: every (n_fft / taps)-th fine bin is a design bin (n_fft is a multiple of taps)
    plan_hz = filters.plan.axis.hz
    band_mask = filters.in_band()
    idx = np.searchsorted(fine, np.round(plan_hz[band_mask] / (fs / n_fft)).astype(int))
    s = filters.plan.singular_values[band_mask][:, kept]
    w2 = band_window(plan_hz[band_mask], filters.band_hz, fs)[:, None] ** 2
    diag = np.abs(np.einsum("fjj->fj", spec[idx]))
    gain_err = np.max(np.abs(20 * np.log10(diag / (s * w2))), axis=0)
    mag = np.abs(spec)                                            # (n_fine, i, j)
    own = np.einsum("fii->fi", mag)
    with np.errstate(divide="ignore"):
        ratio = 20 * np.log10(np.max(mag / own[:, :, None], axis=0))
    np.fill_diagonal(ratio, np.nan)
    latency = np.argmax(np.abs(t_diag[:n_out]), axis=0)
    return FilterCheck(tuple(kept), gain_err, ratio, latency, float(limit_db), n_ir)


def plot_crosstalk(check: FilterCheck, ax=None):
    """Heat map of worst in-band crosstalk (dB re each output's own gain); returns the axes."""
    import matplotlib.pyplot as plt

    if ax is None:
        _, ax = plt.subplots(figsize=(6.4, 5.2))
    n = len(check.channels)
    labels = [str(c + 1) for c in check.channels]
    data = np.where(np.isnan(check.crosstalk_db), np.nan, np.maximum(check.crosstalk_db, -160.0))
    im = ax.imshow(data, cmap="viridis", origin="upper", interpolation="nearest")
    ax.set_xticks(range(n), labels)
    ax.set_yticks(range(n), labels)
    ax.set_xlabel("input channel j, drive filters (no.)")
    ax.set_ylabel("output channel i, combine filters (no.)")
    ax.set_title(f"Worst in-band crosstalk, limit {check.limit_db:g} dB (diagonal blank)")
    cbar = ax.figure.colorbar(im, ax=ax)
    cbar.set_label("|T_ij| / |T_ii|, worst over the band (dB, floor -160)")
    return ax
