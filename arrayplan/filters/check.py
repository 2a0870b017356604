"""Time-domain check of channel filters: drive filters -> simulated rig -> combine filters.

The rig's free-field impulse responses (:func:`arrayplan.simulate.free_field_impulse_responses`)
are convolved with the drive filters of each channel and then with the
combine filters of every channel (``scipy.signal.fftconvolve``), giving the
end-to-end channel-to-channel impulse responses t_ij[n] (output i, input j)
and their transfer T_ij(f).  Per channel it reports the in-band gain error
re the planned singular value (dB, worst over the planned bins) and the
worst in-band crosstalk into it: max over the band of |T_ij| / |T_ii| for
j != i (dB re its own diagonal), evaluated on a grid four times finer than
the design bins so the response between them counts too.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.signal import fftconvolve

from ..rig import Rig
from ..simulate import free_field_impulse_responses
from .design import FilterSet, band_window

__all__ = ["FilterCheck", "check_filters", "end_to_end_responses", "plot_crosstalk"]

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


def check_filters(rig: Rig, filters: FilterSet, *, limit_db: float = -40.0, progress=None) -> FilterCheck:
    """Simulate the rig and measure each channel's gain and crosstalk (see module docstring)."""
    fs, taps = filters.sample_rate_hz, filters.taps
    n_ir = rig_ir_samples(rig, fs)
    ir = free_field_impulse_responses(rig, fs, n_ir)
    t = end_to_end_responses(ir, filters.drive, filters.combine, progress=progress)
    n_fft = OVERSAMPLE * taps * int(np.ceil(t.shape[0] / taps))
    spec = np.fft.rfft(t, n=n_fft, axis=0)
    hz = np.fft.rfftfreq(n_fft, 1.0 / fs)
    lo, hi = filters.band_hz
    fine = np.nonzero((hz >= lo) & (hz <= hi))[0]
    kept = list(filters.kept)
    # planned bins: every OVERSAMPLE-th fine bin is a design bin (n_fft is a multiple of taps)
    plan_hz = filters.plan.axis.hz
    band_mask = filters.in_band()
    idx = np.round(plan_hz[band_mask] / (fs / n_fft)).astype(int)
    s = filters.plan.singular_values[band_mask][:, kept]
    w2 = band_window(plan_hz[band_mask], filters.band_hz, fs)[:, None] ** 2
    diag = np.abs(np.einsum("fjj->fj", spec[idx]))
    gain_err = np.max(np.abs(20 * np.log10(diag / (s * w2))), axis=0)
    mag = np.abs(spec[fine])                                      # (n_fine, i, j)
    own = np.einsum("fii->fi", mag)
    with np.errstate(divide="ignore"):
        ratio = 20 * np.log10(np.max(mag / own[:, :, None], axis=0))
    np.fill_diagonal(ratio, np.nan)
    latency = np.array([np.argmax(np.abs(t[:, j, j])) for j in range(len(kept))])
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
