"""Verification of the FIR filters that will really run, against measured impulse responses.

The exported drive and combine filters (a folder written by
``arrayplan filters``) are put through the measured rig: the realised
channel matrix is ``T(f) = Cb(f)^T G(f) D(f)`` (output i, input j), with D
and Cb the Fourier transforms of the WAV taps, sampled exactly by
zero-padded FFTs, and G the measured kernel; at every bin of the grid this
is the FFT of the linear convolution of drive taps, impulse responses and
combine taps (:func:`arrayplan.filters.check.channel_transfer`).  The grid
is at least :data:`arrayplan.filters.check.OVERSAMPLE` times finer than the
filters' design bins and covers their band, so what happens between the
bins counts.

The verdict follows :func:`arrayplan.verification.channels.judge_channels` with these
choices:

* wanted channels: those with filters;
* each is judged where it is in use: where its planned singular value comes
  within the filters' ``min_level_db`` of the strongest (the filters' own
  channel choice), taken at the nearest in-band design bin;
* planned gain ``s_j(f)``: the plan's singular values on the design bins
  (``plan_on_bins`` in ``filters.json``), interpolated linearly in frequency;
  the filters' normalisation makes ``|T_jj| = s_j`` on a perfect rig;
* drive subspace: the realised drive filters' spectra, each normalised.
"""

from __future__ import annotations

import numpy as np

from ..kernels.coupling import Kernel
from ..filters.check import channel_transfer, check_grid, kernel_at, kernel_ir_samples
from ..formats.filter_set import FilterFiles
from .channels import Verification, align_kernel_names, judge_channels

__all__ = ["verify_filters"]


def verify_filters(filters: FilterFiles, kernel: Kernel, *, isolation_db: float = 20.0,
                   threshold_db: float = 3.0, gain_reference: str = "plan", progress=None,
                   measured_source: str | None = None) -> Verification:
    """Verify exported FIR filters against the rig described by `kernel` (see module docstring).

    Parameters
    ----------
    filters : FilterFiles
        From :func:`arrayplan.formats.filter_set.read_filter_set`.
    kernel : Kernel
        The measured rig; element names must match the filters' (any order).
        Its sample rate, if it has one, must be the filters'.
    isolation_db : float
        A channel is lost where its isolation is below this, dB.
    threshold_db : float
        Strong-channel threshold of the re-plan comparison, dB.
    gain_reference : {"plan", "common"}
        See :func:`arrayplan.verification.channels.verify_plan`.
    progress : callable, optional
        ``progress(done, total)`` in bins.
    measured_source : str, optional
        Name for error messages.

    Returns
    -------
    Verification
        On the fine in-band grid: ``hz`` its frequencies, ``channel_matrix``
        (n_fine, n_chan, n_chan) over every planned channel (zero for those
        without filters), ``channels`` the channels with filters.
    """
    kernel = align_kernel_names(filters, kernel, plan_source=str(filters.folder), measured_source=measured_source)
    fs, taps = filters.sample_rate_hz, filters.taps
    n_out = kernel_ir_samples(kernel, fs) + 2 * taps - 2
    n_fft, fine, hz, _ = check_grid(taps, n_out, fs, filters.band_hz, filters.band_hz)
    rig_at = kernel_at(kernel, n_fft, fs)
    g = rig_at(fine)                                                 # (n_fine, n_mic, n_spk)
    position = {int(b): i for i, b in enumerate(fine)}
    t_kept, *_ = channel_transfer(lambda bins: g[[position[int(b)] for b in bins]], filters.drive,
                                  filters.combine, n_fft, fine, np.zeros(0, dtype=int), progress=progress)
    n_chan = filters.plan_sv.shape[1]
    kept = np.asarray(filters.kept, dtype=int)
    c = np.zeros((len(fine), n_chan, n_chan), dtype=complex)
    c[np.ix_(np.arange(len(fine)), kept, kept)] = t_kept
    planned_sv = np.stack([np.interp(hz, filters.plan_hz, filters.plan_sv[:, j]) for j in range(n_chan)], axis=1)
    d = np.fft.rfft(filters.drive, n=n_fft, axis=0)[fine]            # (n_fine, n_spk, n_kept)
    norm = np.linalg.norm(d, axis=1, keepdims=True)
    drive = np.zeros((len(fine), d.shape[1], n_chan), dtype=complex)
    drive[:, :, kept] = d / np.where(norm > 0, norm, 1.0)
    nearest = np.clip(np.searchsorted(filters.plan_hz, hz), 0, len(filters.plan_hz) - 1)
    left = np.clip(nearest - 1, 0, len(filters.plan_hz) - 1)
    nearest = np.where(np.abs(filters.plan_hz[left] - hz) < np.abs(filters.plan_hz[nearest] - hz), left, nearest)
    sv = filters.plan_sv[nearest]
    with np.errstate(divide="ignore"):
        level = 20.0 * np.log10(sv / sv.max(axis=1, keepdims=True))
    judged = level[:, kept] >= filters.min_level_db
    rule = (f"the {kept.size} channels with filters, each judged where it is in use: within "
            f"{-filters.min_level_db:g} dB of the strongest channel (the filters' channel choice)")
    return judge_channels(hz, c, g, planned_sv, drive, kept, judged, rule, isolation_db=isolation_db,
                          threshold_db=threshold_db, gain_reference=gain_reference, measured_source=measured_source)
