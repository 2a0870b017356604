"""Figure of a channel's FIR filters: magnitude and phase of every drive and combine filter against frequency."""

from __future__ import annotations

import numpy as np

from ._axes import frequency_axis

__all__ = ["plot_filter_responses"]


def plot_filter_responses(drive: np.ndarray, combine: np.ndarray, sample_rate_hz: float, band_hz: tuple[float, float],
                          *, drive_delay_samples: int, combine_delay_samples: int, channel: int,
                          speaker_names=None, mic_names=None, floor_db: float = -60.0, fig=None):
    """Magnitude (dB) and phase (degrees, each filter's peak delay removed) of one channel's filters.

    Parameters
    ----------
    drive : ndarray, shape (taps, n_spk)
        The channel's drive filter taps, one column per speaker.
    combine : ndarray, shape (taps, n_mic)
        Its combine filter taps, one column per microphone.
    sample_rate_hz : float
        Hz.
    band_hz : (low, high)
        The filters' band, Hz (shaded outside).
    drive_delay_samples, combine_delay_samples : int
        Each side's common delay (bulk delay minus the weights' alignment),
        samples, named in the figure; the phase drawn is each filter's own
        after removing its peak delay (the tap of largest magnitude).
    channel : int
        1-based channel number, for the title.
    speaker_names, mic_names : sequence of str, optional
        Element names for the legend (used when there are at most 8 elements).
    floor_db : float
        Lowest magnitude drawn, dB.
    fig : matplotlib Figure, optional

    Returns
    -------
    Figure
        2 x 2 panels: drive magnitude, drive phase; combine magnitude, combine phase.
    """
    import matplotlib.pyplot as plt
    from matplotlib.figure import Figure

    if fig is None:
        fig = Figure(figsize=(9.0, 6.0), layout="constrained")
    axes = fig.subplots(2, 2, sharex=True)
    lo, hi = band_hz
    for row, (side, taps, delay, names) in enumerate((("drive", drive, drive_delay_samples, speaker_names),
                                                      ("combine", combine, combine_delay_samples, mic_names))):
        taps = np.asarray(taps, dtype=float)
        n_fft = int(2 ** np.ceil(np.log2(max(4 * taps.shape[0], 1024))))
        hz = np.fft.rfftfreq(n_fft, 1.0 / sample_rate_hz)
        keep = (hz >= lo / 2) & (hz <= min(2 * hi, sample_rate_hz / 2))
        # each filter's own peak delay is removed from its phase (the common delay alone leaves the
        # elements' steering delays, which wrap the phase many times across the band)
        peak = np.argmax(np.abs(taps), axis=0)                                     # (n_elem,)
        h = np.fft.rfft(taps, n=n_fft, axis=0)[keep]
        h = h * np.exp(2j * np.pi * np.outer(hz[keep], peak) / sample_rate_hz)
        with np.errstate(divide="ignore"):
            mag = np.maximum(20.0 * np.log10(np.abs(h)), floor_db)
        phase = np.degrees(np.angle(h))
        n = taps.shape[1]
        colours = plt.get_cmap("viridis")(np.linspace(0.0, 0.9, n))
        for e in range(n):
            label = str(names[e]) if names is not None and n <= 8 else None
            axes[row, 0].plot(hz[keep], mag[:, e], color=colours[e], lw=1.0, label=label)
            axes[row, 1].plot(hz[keep], np.where(mag[:, e] > floor_db, phase[:, e], np.nan), ".", color=colours[e],
                              ms=1.2)
        for ax in axes[row]:
            ax.axvspan(hz[keep][0], lo, color="0.85", zorder=0)
            ax.axvspan(hi, hz[keep][-1], color="0.85", zorder=0)
            ax.grid(True, alpha=0.3)
            frequency_axis(ax, hz[keep][hz[keep] > 0], log_above_ratio=4.0)
        axes[row, 0].set_ylabel(f"{side} magnitude (dB)")
        axes[row, 1].set_ylabel(f"{side} phase (deg)")
        axes[row, 1].set_title(f"peak delays {peak.min()}..{peak.max()} samples removed (filter delay {delay})",
                               fontsize="small")
        axes[row, 1].set_ylim(-180, 180)
        axes[row, 1].set_yticks([-180, -90, 0, 90, 180])
        if names is not None and n <= 8:
            axes[row, 0].legend(fontsize="x-small", ncol=2)
        else:
            axes[row, 0].set_title(f"{n} {'speakers' if side == 'drive' else 'microphones'} "
                                   f"(colour: element 1 dark .. {n} light)", fontsize="small")
    for ax in axes[1]:
        ax.set_xlabel("frequency (Hz)")
    fig.suptitle(f"Channel {channel}: FIR filter responses; grey: outside the band {lo:g}-{hi:g} Hz",
                 fontsize="medium")
    return fig
