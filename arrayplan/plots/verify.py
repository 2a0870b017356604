"""Figures of a verification: crosstalk heat maps and planned vs measured singular values."""

from __future__ import annotations

import numpy as np

from ._axes import frequency_axis

__all__ = ["plot_crosstalk", "plot_singular_values", "plot_isolation"]


def plot_crosstalk(result, max_panels: int = 4, floor_db: float = -60.0, fig=None):
    """Heat maps of ``20 log10 |C_ij| / max_j |C_jj|`` (dB) at up to `max_panels` frequencies.

    Parameters
    ----------
    result : arrayplan.verify.Verification
    max_panels : int
    floor_db : float
        Lower end of the colour scale, dB.
    fig : matplotlib Figure, optional

    Returns
    -------
    Figure
    """
    import matplotlib.pyplot as plt

    hz = result.hz
    picks = np.unique(np.linspace(0, len(hz) - 1, min(max_panels, len(hz))).round().astype(int))
    if fig is None:
        fig = plt.figure(figsize=(3.6 * len(picks) + 1.2, 3.8), layout="constrained")
    axes = fig.subplots(1, len(picks), squeeze=False)[0]
    want = result.channels
    labels = [str(j + 1) for j in want]
    im = None
    for ax, f in zip(axes, picks):
        c = np.abs(result.channel_matrix[f][np.ix_(want, want)])
        ref = np.max(np.diagonal(c)) or 1.0
        with np.errstate(divide="ignore"):
            db = 20.0 * np.log10(c / ref)
        im = ax.imshow(np.maximum(db, floor_db), cmap="viridis", vmin=floor_db, vmax=0.0, origin="upper")
        ax.set_xticks(range(len(want)), labels)
        ax.set_yticks(range(len(want)), labels)
        ax.set_xlabel("driven channel j (no.)")
        ax.set_ylabel("received channel i (no.)")
        ax.set_title(f"{hz[f]:g} Hz")
    fig.colorbar(im, ax=list(axes), label="|C_ij| re strongest diagonal (dB)")
    fig.suptitle("Realised channel matrix combine^T G_measured drive")
    return fig


def plot_singular_values(result, ax=None):
    """Planned and measured singular values (dB re the strongest planned) against frequency.

    Returns
    -------
    Figure
    """
    import matplotlib.pyplot as plt

    if ax is None:
        fig, ax = plt.subplots(figsize=(7.5, 4.5), layout="constrained")
    else:
        fig = ax.figure
    hz = result.hz
    ref = result.planned_sv[:, :1]
    n = result.planned_sv.shape[1]
    colours = plt.get_cmap("viridis")(np.linspace(0.0, 0.9, n))
    with np.errstate(divide="ignore"):
        p_db = 20.0 * np.log10(result.planned_sv / ref)
        m_db = 20.0 * np.log10(result.measured_sv / ref)
    marker = "o" if len(hz) < 30 else None
    for j in range(n):
        ax.plot(hz, p_db[:, j], "-", color=colours[j], marker=marker, ms=3,
                label=f"planned s{j + 1}" if n <= 8 else None)
        ax.plot(hz, m_db[:, j], "--", color=colours[j], marker="x" if marker else None, ms=4,
                label=f"measured s{j + 1}" if n <= 8 else None)
    frequency_axis(ax, hz, log_above_ratio=8.0)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("singular value re strongest planned (dB)")
    ax.set_title("Planned (solid) and measured re-plan (dashed) singular values")
    ax.grid(True, alpha=0.3)
    if n <= 8:
        ax.legend(fontsize="small", ncol=2)
    return fig


def plot_isolation(hz, channels, isolation_db, isolation_limit_db: float, ax=None):
    """Each wanted channel's isolation (dB) against frequency, with the pass limit.

    Parameters
    ----------
    hz : ndarray, shape (n_freq,)
        Frequencies, Hz.
    channels : sequence of int
        1-based channel numbers, one per column of `isolation_db`.
    isolation_db : ndarray, shape (n_freq, n_want)
        Isolation = -(worst crosstalk re the channel's own gain), dB.
    isolation_limit_db : float
        A channel is lost where its isolation falls below this, dB.
    ax : matplotlib Axes, optional

    Returns
    -------
    Figure
    """
    import matplotlib.pyplot as plt
    from matplotlib.figure import Figure

    if ax is None:
        fig = Figure(figsize=(7.0, 3.6), layout="constrained")
        ax = fig.subplots()
    else:
        fig = ax.figure
    hz = np.asarray(hz, dtype=float)
    iso = np.asarray(isolation_db, dtype=float)
    colours = plt.get_cmap("viridis")(np.linspace(0.0, 0.9, max(len(channels), 1)))
    marker = "o" if len(hz) < 30 else None
    for k, (c, colour) in enumerate(zip(channels, colours)):
        ax.plot(hz, np.clip(iso[:, k], -40.0, 160.0), "-", color=colour, marker=marker, ms=3,
                label=f"channel {c}" if len(channels) <= 10 else None)
    ax.axhline(isolation_limit_db, color="#b2182b", ls="--", lw=1.2, label=f"limit {isolation_limit_db:g} dB")
    ax.fill_between(hz, -40.0, isolation_limit_db, color="#b2182b", alpha=0.08)
    frequency_axis(ax, hz, log_above_ratio=8.0)
    ax.set_ylim(bottom=max(-40.0, min(0.0, float(np.nanmin(iso)) - 5.0)))
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("isolation (dB)")
    ax.set_title("Isolation of each wanted channel (below the limit: lost)")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=8, ncol=2 if len(channels) > 5 else 1, loc="upper left")
    if len(channels) > 10:
        from matplotlib.cm import ScalarMappable
        from matplotlib.colors import BoundaryNorm, ListedColormap

        bounds = np.arange(len(channels) + 1) + 0.5
        sm = ScalarMappable(BoundaryNorm(bounds, len(channels)), ListedColormap(colours))
        cbar = fig.colorbar(sm, ax=ax)
        ticks = np.unique(np.linspace(0, len(channels) - 1, min(len(channels), 16)).round().astype(int))
        cbar.set_ticks(ticks + 1.0, labels=[str(channels[t]) for t in ticks])
        cbar.set_label("channel (no.)")
    return fig
