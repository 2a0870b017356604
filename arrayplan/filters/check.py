"""Check of channel filters: drive filters -> the rig's kernel -> combine filters.

The realised filter taps are put through the rig, giving the end-to-end
channel-to-channel transfer T_ij(f) (output i, input j) and impulse
responses t_ij[n].  The chain is computed from the spectra
(:func:`channel_transfer`): the zero-padded FFTs of the taps sample their
Fourier transforms exactly, and the rig is a kernel's coupling G(f) at
every bin (free field, room or measured: the same kernel the filters were
designed on, or another one to check them against), the spectrum of the
kernel's band-limited impulse responses as long as the grid (for a free
field, :func:`arrayplan.kernels.model_irs.free_field_impulse_responses`); so
``T = Cb^T G D`` at each bin is the FFT of the linear convolution of
filters and rig (:func:`end_to_end_responses` computes the
same in the time domain from given responses).

Everything in band is evaluated on a fine grid, at least :data:`OVERSAMPLE`
times finer than the design bins (fs / taps), so the response between the
bins counts as much as on them; each figure is the worst case over it.  Per
channel j the check reports

* the gain error, ``|20 log10(|T_jj(f)| / g_j(f))|`` dB, against the planned
  gain ``g_j(f) = |c_j^T G(f) d_j|``: the planned weights c_j, d_j of the
  nearest design bin on the simulated rig's G at f.  On a design bin g_j is
  the planned singular value s_j; between bins it differs from s_j(f) only
  to second order in the weights' change, because a singular value is
  stationary in its singular vectors.  Also reported on the design bins
  alone (against s_j);
* the energy error of its drive filters, ``|10 log10 sum_s |D_sj(f)|^2|`` dB
  (their in-band energy against the planned 1), and of its combine filters;
* the worst crosstalk into it: max of |T_ji| / |T_jj| for i != j (dB re
  its own diagonal) over the frequencies where both channels are in use:
  where each comes within the filters' ``min_level_db`` of the strongest
  channel (at the nearest design bin), the same rule that chose them; a
  channel strong only at the top of the band is not judged at its foot,
  where the plan itself says it carries nothing (as in
  :mod:`arrayplan.verification.channels`);
* its latency, the peak of t_jj in samples, with t_jj taken from its
  spectrum over the filters' band and transitions (where the design window
  is above zero; outside it the filters hold only the time window's
  leakage).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import scipy.fft as sp_fft
from scipy.signal import fftconvolve

from ..kernels.coupling import Kernel
from ..kernels import rig_kernel
from ..kernels.freefield import FreeFieldKernel
from ..rig import Rig
from .design import FilterSet
from .transfer import (channel_transfer, free_field_at, kernel_at, over_bins, spectra_over, take_bins,
                       transfer_matrices)

__all__ = ["FilterCheck", "channel_transfer", "check_filters", "check_grid", "free_field_at", "kernel_at",
           "kernel_ir_samples", "end_to_end_responses", "plot_crosstalk"]

#: The check's frequency grid is at least this many times finer than the design bins.
OVERSAMPLE = 8


@dataclass(frozen=True)
class FilterCheck:
    """Result of the time-domain check.

    Attributes
    ----------
    channels : tuple of int
        0-based plan channel numbers, the order of every axis below.
    gain_error_db : ndarray, shape (n_kept,)
        Worst |20 log10(|T_jj| / g_j)| over the fine in-band grid, dB
        (g_j: the planned gain, see the module docstring).
    crosstalk_db : ndarray, shape (n_kept, n_kept)
        [i, j] = worst in-band 20 log10(|T_ij| / |T_ii|) where both are in use
        (see the module docstring); -inf where they never are; diagonal NaN.
    latency_samples : ndarray, shape (n_kept,)
        Measured end-to-end delay (peak of t_jj) in samples.
    limit_db : float
        Pass/fail limit of the worst crosstalk, dB.
    ir_samples : int
        Length allowed for the rig's impulse responses (delays and their
        tails) when sizing the end-to-end responses, samples.
    bin_gain_error_db : ndarray, shape (n_kept,), optional
        The gain error on the in-band design bins alone, dB.
    drive_energy_error_db, combine_energy_error_db : ndarray, shape (n_kept,), optional
        Worst |10 log10 sum_e |H_e(f)|^2| of the drive (combine) filters over
        the fine in-band grid, dB.
    grid_factor : float
        How many times finer than the design bins the check's grid is.
    """

    channels: tuple[int, ...]
    gain_error_db: np.ndarray
    crosstalk_db: np.ndarray
    latency_samples: np.ndarray
    limit_db: float
    ir_samples: int
    bin_gain_error_db: np.ndarray | None = None
    drive_energy_error_db: np.ndarray | None = None
    combine_energy_error_db: np.ndarray | None = None
    grid_factor: float = float("nan")

    def worst_crosstalk_db(self) -> np.ndarray:
        """Worst crosstalk into each channel: the largest entry of its row of :attr:`crosstalk_db`.

        Returns
        -------
        ndarray, shape (n_kept,)
            dB re the channel's own gain; -inf where no other channel is
            ever in use with it (and for every channel when fewer than two
            are kept).
        """
        if len(self.channels) < 2:
            return np.full(len(self.channels), -np.inf)
        return np.nanmax(self.crosstalk_db, axis=1)

    def passed(self) -> np.ndarray:
        """Which channels meet the crosstalk limit.

        Returns
        -------
        ndarray of bool, shape (n_kept,)
            True where :meth:`worst_crosstalk_db` is below :attr:`limit_db`.
        """
        return self.worst_crosstalk_db() < self.limit_db


def end_to_end_responses(rig_ir: np.ndarray, drive: np.ndarray, combine: np.ndarray, progress=None) -> np.ndarray:
    """Channel-to-channel impulse responses through drive filters, rig and combine filters.

    Parameters
    ----------
    rig_ir : ndarray, shape (n_ir, n_mic, n_spk)
        The rig's impulse responses at the filters' sample rate.
    drive : ndarray, shape (taps, n_spk, n_chan)
        Drive filter taps (dimensionless), one set per input channel.
    combine : ndarray, shape (taps_c, n_mic, n_chan)
        Combine filter taps (dimensionless), the same channels in the same order.
    progress : callable, optional
        ``progress(j + 1, n_chan)`` after each input channel j (0-based).

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
    """Length allowed for the rig's free-field impulse responses, samples.

    :func:`kernel_ir_samples` of the rig's free-field kernel: a power of two
    >= 8 x (longest direct delay in samples + 64), at least 4096.

    Parameters
    ----------
    rig : Rig
        Speakers, microphones and medium (its room, if any, is not used).
    sample_rate_hz : float
        As for :func:`kernel_ir_samples`.

    Returns
    -------
    int
        The length :func:`kernel_ir_samples` gives the free-field kernel.
    """
    return kernel_ir_samples(FreeFieldKernel(rig), sample_rate_hz)


def kernel_ir_samples(kernel: Kernel, sample_rate_hz: float) -> int:
    """Length allowed for a kernel's impulse responses at `sample_rate_hz`, samples.

    A model kernel (free field, room): a power of two >= 8 x (its longest
    path's delay + 64 samples), at least 4096.  A measured kernel: a power of
    two holding its responses (``n_samples`` at its own rate, converted to
    `sample_rate_hz`) plus 64 samples, at least 4096.

    Parameters
    ----------
    kernel : Kernel
        Free-field (``distances_m``), room (``longest_path_m``) or measured
        (``n_samples``, ``sample_rate_hz``) kernel.
    sample_rate_hz : float
        The filters' rate, Hz.

    Returns
    -------
    int
        Samples.
    """
    if hasattr(kernel, "n_samples") and hasattr(kernel, "sample_rate_hz"):
        n = kernel.n_samples * sample_rate_hz / kernel.sample_rate_hz + 64
    else:
        longest = kernel.longest_path_m if hasattr(kernel, "longest_path_m") else np.max(kernel.distances_m)
        n = 8 * (longest / kernel.medium.speed_of_sound * sample_rate_hz + 64)
    return int(max(4096, 2 ** int(np.ceil(np.log2(n)))))


def check_grid(taps: int, n_out: int, sample_rate_hz: float, band_hz: tuple[float, float],
               support_hz: tuple[float, float]) -> tuple[int, np.ndarray, np.ndarray, np.ndarray]:
    """The check's grid: at least OVERSAMPLE times finer than the design bins, and long enough.

    Parameters
    ----------
    taps : int
        Filter length; the design bins are spaced sample_rate_hz / taps.
    n_out : int
        Length of the end-to-end responses, samples.
    sample_rate_hz : float
        The filters' rate, Hz.
    band_hz : (low, high)
        Band, Hz.
    support_hz : (low, high)
        Where the filters' band window is above zero (band plus transitions), Hz.

    Returns
    -------
    n_fft : int
        ``taps`` times a power of two, at least ``OVERSAMPLE * taps`` and `n_out`.
    fine : ndarray of int, shape (n_fine,)
        The bins inside the band.
    fine_hz : ndarray, shape (n_fine,)
        Their frequencies, Hz.
    edges : ndarray of int, shape (n_edge,)
        The bins of the transitions: inside `support_hz`, outside the band.
    """
    n_fft = taps * 2 ** int(np.ceil(np.log2(max(n_out / taps, OVERSAMPLE))))
    hz = np.fft.rfftfreq(n_fft, 1.0 / sample_rate_hz)
    lo, hi = band_hz
    inside = (hz >= lo) & (hz <= hi)
    edges = np.nonzero(~inside & (hz > support_hz[0]) & (hz < support_hz[1]))[0]
    fine = np.nonzero(inside)[0]
    return n_fft, fine, hz[fine], edges


def _worst_db(x: np.ndarray, power: bool = False) -> np.ndarray:
    """Worst |dB| of a ratio over axis 0 (10 log10 for power ratios, 20 log10 for amplitudes)."""
    with np.errstate(divide="ignore"):
        return np.max(np.abs((10.0 if power else 20.0) * np.log10(x)), axis=0)


def check_filters(kernel: Kernel | Rig, filters: FilterSet, *, limit_db: float = -40.0,
                  progress=None, workers: int | None = None) -> FilterCheck:
    """Put the filters through a kernel and measure each channel's gain, energy and crosstalk.

    Parameters
    ----------
    kernel : Kernel or Rig
        The rig's coupling (see the module docstring); normally the kernel
        the filters were designed on.  A rig stands for its model kernel
        (:func:`arrayplan.kernels.rig_kernel`).  Element order must be the
        filters'.
    filters : FilterSet
        The filters to check (:func:`arrayplan.filters.design.design_filters`).
    limit_db : float
        Pass/fail limit of the worst in-band crosstalk, dB.
    progress : callable, optional
        ``progress(done, total)`` in bins of the check's grid.
    workers : int, optional
        Threads (FFTs, and chunks of the grid at once); default every core
        this process may use (:data:`arrayplan.filters.transfer.WORKERS`).
        The results do not depend on it.

    Returns
    -------
    FilterCheck
        Per kept channel: gain, energy and crosstalk figures and latency.
    """
    if isinstance(kernel, Rig):
        kernel = rig_kernel(kernel)
    fs, taps = filters.sample_rate_hz, filters.taps
    n_ir = kernel_ir_samples(kernel, fs)
    n_out = n_ir + filters.drive.shape[0] + filters.combine.shape[0] - 2
    plan_hz = filters.plan.axis.hz
    bin_hz = fs / taps
    support = (plan_hz[0] - bin_hz, plan_hz[-1] + bin_hz)          # the design window is 0 on the next bins
    n_fft, fine, fine_hz, edges = check_grid(taps, n_out, fs, filters.band_hz, support)
    kept = list(filters.kept)
    # the planned weights of the nearest design bin at each fine frequency
    nearest = np.clip(np.round((fine_hz - plan_hz[0]) / bin_hz).astype(int), 0, len(plan_hz) - 1)
    worst, diag_c, t_edges = _check_on_grid(kernel_at(kernel, n_fft, fs), filters, n_fft, fine, edges, nearest,
                                            progress, workers)
    gain_err, crosstalk, e_drive, e_combine = worst
    # the design bins in band are every (n_fft / taps)-th fine bin (n_fft is a multiple of taps)
    band_mask = filters.in_band()
    on_bins = np.searchsorted(fine, np.round(plan_hz[band_mask] / (fs / n_fft)).astype(int))
    bin_err = _worst_db(np.abs(diag_c[on_bins]) / filters.plan.singular_values[band_mask][:, kept])
    with np.errstate(divide="ignore"):
        ratio = 20 * np.log10(crosstalk)
    np.fill_diagonal(ratio, np.nan)
    # latency: peak of t_jj from its spectrum over the filters' band (band and transitions)
    full = np.zeros((n_fft // 2 + 1, len(kept)), dtype=complex)
    full[fine], full[edges] = diag_c, t_edges
    latency = np.argmax(np.abs(sp_fft.irfft(full, n=n_fft, axis=0)[:n_out]), axis=0)
    return FilterCheck(tuple(kept), gain_err, ratio, latency, float(limit_db), n_ir, bin_gain_error_db=bin_err,
                       drive_energy_error_db=e_drive, combine_energy_error_db=e_combine, grid_factor=n_fft / taps)


def _check_on_grid(rig_at: Callable[[np.ndarray], np.ndarray], filters: FilterSet, n_fft: int, fine: np.ndarray,
                   edges: np.ndarray, nearest: np.ndarray, progress=None, workers: int | None = None
                   ) -> tuple[list[np.ndarray], np.ndarray, np.ndarray]:
    """The check's figures over the fine grid, chunk by chunk, without keeping the whole T.

    Each chunk of `fine` bins (:func:`arrayplan.filters.transfer.over_bins`)
    takes the rig there, forms T and the reference gains, and keeps only
    its worst figures and the diagonal; the worst over all chunks is the
    worst over the grid.

    Returns
    -------
    worst : list of ndarray
        Worst gain error (n_kept,) dB; worst |T_ij| / |T_ii| where both are
        in use (n_kept, n_kept), a ratio; worst drive and combine energy
        errors (n_kept,) dB.
    diag : ndarray, complex, shape (n_fine, n_kept)
        T_jj at the `fine` bins.
    t_edges : ndarray, complex, shape (n_edge, n_kept)
        T_jj at the `edges`.
    """
    kept = list(filters.kept)
    drive_ref, combine_ref = filters.plan.drive[:, :, kept], filters.plan.combine[:, :, kept]
    used = _in_use(filters, nearest)                              # (n_fine, n_kept)
    d_spec, c_spec, (i_fine, i_edge) = spectra_over(filters.drive, filters.combine, n_fft, fine, edges,
                                                    workers=workers)
    diag_c = np.empty((len(fine), len(kept)), dtype=complex)
    t_edges = np.empty((len(edges), len(kept)), dtype=complex)

    def on_fine(sl: slice, r: np.ndarray) -> list[np.ndarray]:
        d, c = take_bins(d_spec, i_fine, sl), take_bins(c_spec, i_fine, sl)
        t = transfer_matrices(r, d, c)                                  # (n, i, j)
        near = nearest[sl]
        ref = np.abs(np.einsum("fmj,fmj->fj", combine_ref[near], np.matmul(r, drive_ref[near])))
        diag_c[sl] = np.einsum("fjj->fj", t)
        diag = np.abs(diag_c[sl])
        both = used[sl, :, None] & used[sl, None, :]
        with np.errstate(divide="ignore", invalid="ignore"):
            cross = np.max(np.where(both, np.abs(t) / diag[:, :, None], 0.0), axis=0)
        return [_worst_db(diag / ref), cross, _worst_db(np.sum(np.abs(d) ** 2, axis=1), power=True),
                _worst_db(np.sum(np.abs(c) ** 2, axis=1), power=True)]

    def on_edges(sl: slice, r: np.ndarray) -> None:
        t_edges[sl] = np.einsum("fmj,fmj->fj", take_bins(c_spec, i_edge, sl),
                                np.matmul(r, take_bins(d_spec, i_edge, sl)))

    total = len(fine) + len(edges)
    parts = over_bins(rig_at, fine, on_fine, d_spec, c_spec, progress, 0, total, workers)
    over_bins(rig_at, edges, on_edges, d_spec, c_spec, progress, len(fine), total, workers)
    worst = [np.max(np.stack(p), axis=0) for p in zip(*parts)]
    return worst, diag_c, t_edges


def _in_use(filters: FilterSet, nearest: np.ndarray) -> np.ndarray:
    """Where each kept channel is within ``min_level_db`` of the strongest, at design bins `nearest`.

    Returns
    -------
    ndarray of bool, shape (len(nearest), n_kept)
    """
    p = filters.plan.power_coupling[nearest]                       # (n, n_chan)
    with np.errstate(divide="ignore", invalid="ignore"):
        level = 10.0 * np.log10(p / p.max(axis=1, keepdims=True))
    return level[:, list(filters.kept)] >= filters.min_level_db


def plot_crosstalk(check: FilterCheck, ax=None, margin_db: float = 40.0):
    """Heat map of worst in-band crosstalk (dB re each output's own gain).

    The colour scale runs from `margin_db` below the crosstalk limit (weaker
    crosstalk is drawn at that floor: far below the limit it does not matter)
    to 10 dB above the limit or the worst cell, the limit is marked on the
    colour bar, and every cell over the limit carries its value.  Channels
    are labelled 1-based.

    Parameters
    ----------
    check : FilterCheck
        The check to draw (:func:`check_filters`).
    ax : matplotlib.axes.Axes, optional
        Axes to draw on; default a new figure's.
    margin_db : float
        How far below the limit the colour scale starts, dB (its magnitude is used).

    Returns
    -------
    matplotlib.axes.Axes
        The axes drawn on (with a colour bar beside them).
    """
    import matplotlib.pyplot as plt

    if ax is None:
        _, ax = plt.subplots(figsize=(6.4, 5.2))
    n = len(check.channels)
    labels = [str(c + 1) for c in check.channels]
    limit = float(check.limit_db)
    floor = limit - abs(margin_db)
    worst = float(np.nanmax(check.crosstalk_db)) if np.any(np.isfinite(check.crosstalk_db)) else limit
    top = max(limit + 10.0, worst)
    data = np.where(np.isnan(check.crosstalk_db), np.nan, np.clip(check.crosstalk_db, floor, top))
    im = ax.imshow(data, cmap="viridis", origin="upper", interpolation="nearest", vmin=floor, vmax=top)
    for i, j in zip(*np.nonzero(np.nan_to_num(check.crosstalk_db, nan=-np.inf) > limit)):
        bright = data[i, j] > floor + 0.6 * (top - floor)            # viridis is light at its top end
        ax.text(j, i, f"{check.crosstalk_db[i, j]:.0f}", ha="center", va="center", fontsize=7,
                color="black" if bright else "white", fontweight="bold")
    ax.set_xticks(range(n), labels)
    ax.set_yticks(range(n), labels)
    ax.set_xlabel("input channel j, drive filters (no.)")
    ax.set_ylabel("output channel i, combine filters (no.)")
    ax.set_title(f"Worst in-band crosstalk, limit {limit:g} dB (diagonal blank; cells over it show their dB)",
                 fontsize=9)
    cbar = ax.figure.colorbar(im, ax=ax)
    cbar.ax.axhline(limit, color="red", lw=2)
    cbar.set_label(f"|T_ij| / |T_ii|, worst over the band (dB; red: limit; floor {floor:g})")
    return ax
