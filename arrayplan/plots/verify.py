"""Figures of a verification: crosstalk heat maps and planned vs measured singular values."""

from __future__ import annotations

import numpy as np

from ._axes import frequency_axis

__all__ = ["plot_crosstalk", "plot_channel_matrices", "plot_singular_values", "plot_isolation"]


def plot_crosstalk(result, max_panels: int = 4, floor_db: float = -60.0, fig=None):
    """Heat maps of the realised channel matrix of a :class:`~arrayplan.verification.channels.Verification`.

    See :func:`plot_channel_matrices`; channels not judged at a panel's
    frequency are left blank.

    Parameters
    ----------
    result : Verification
        Its ``hz`` (Hz), ``channel_matrix``, ``channels`` (0-based) and
        ``judged`` (when present) are drawn.
    max_panels, floor_db, fig : int, float, Figure or None
        As for :func:`plot_channel_matrices`.

    Returns
    -------
    Figure
    """
    return plot_channel_matrices(result.hz, result.channel_matrix, result.channels,
                                 judged=getattr(result, "judged", None), max_panels=max_panels,
                                 floor_db=floor_db, fig=fig)


def plot_channel_matrices(hz, channel_matrix, channels, judged=None, max_panels: int = 4,
                          floor_db: float = -60.0, fig=None):
    """Heat maps of ``20 log10 |C_ij| / max_j |C_jj|`` (dB) at up to `max_panels` frequencies.

    Parameters
    ----------
    hz : ndarray, shape (n_freq,)
        Frequencies, Hz.
    channel_matrix : ndarray, complex, shape (n_freq, n_chan, n_chan)
        ``combine^T G_measured drive`` over all planned channels.
    channels : sequence of int
        Wanted channels, 0-based.
    judged : ndarray of bool, shape (n_freq, n_want), optional
        Where each wanted channel is judged; rows and columns of channels
        not judged at a panel's frequency are left blank.  Panels are picked
        among the frequencies where at least two channels are judged.
    max_panels : int
        Heat maps drawn at most, at frequencies spread over those picked.
    floor_db : float
        Lower end of the colour scale, dB.
    fig : matplotlib Figure, optional
        Figure to draw on (one panel per frequency); a new one when None.

    Returns
    -------
    Figure
    """
    from matplotlib.figure import Figure

    hz = np.asarray(hz, dtype=float)
    want = np.asarray(channels, dtype=int)
    judged = np.ones((len(hz), len(want)), dtype=bool) if judged is None else np.asarray(judged, dtype=bool)
    usable = np.flatnonzero(judged.sum(axis=1) >= min(2, len(want)))
    if usable.size == 0:
        usable = np.arange(len(hz))
    picks = usable[np.unique(np.linspace(0, len(usable) - 1, min(max_panels, len(usable))).round().astype(int))]
    if fig is None:
        fig = Figure(figsize=(min(2.8 * len(picks) + 1.6, 10.0), 3.6), layout="constrained")
    axes = fig.subplots(1, len(picks), squeeze=False)[0]
    labels = [str(j + 1) for j in want]
    step = max(1, int(np.ceil(len(want) / 8)))
    im = None
    for ax, f in zip(axes, picks):
        c = np.abs(np.asarray(channel_matrix)[f][np.ix_(want, want)])
        on = judged[f]
        diag = np.diagonal(c)[on]
        ref = (np.max(diag) if diag.size else 0.0) or 1.0
        with np.errstate(divide="ignore"):
            db = np.maximum(20.0 * np.log10(c / ref), floor_db)
        db[~on, :] = np.nan
        db[:, ~on] = np.nan
        im = ax.imshow(db, cmap="viridis", vmin=floor_db, vmax=0.0, origin="upper", interpolation="nearest")
        ticks = np.arange(0, len(want), step)
        ax.set_xticks(ticks, [labels[t] for t in ticks])
        ax.set_yticks(ticks, [labels[t] for t in ticks])
        ax.set_title(f"{hz[f]:.4g} Hz", fontsize="medium")
        # short labels on every panel (long ones overlapped the neighbouring panel)
        ax.set_xlabel("driven j (no.)", fontsize="small")
        ax.set_ylabel("received i (no.)", fontsize="small")
    fig.colorbar(im, ax=list(axes), label="|C_ij| re strongest diagonal (dB)", shrink=0.9)
    fig.suptitle("Realised channel matrix combine^T G_measured drive (blank: channel not judged there)",
                 fontsize="medium")
    return fig


def plot_singular_values(result, ax=None, floor_db: float = -120.0):
    """Planned and measured singular values (dB re the strongest planned) against frequency.

    Levels are taken against the strongest planned channel at each
    frequency, whichever its number (a tracked plan's channel 1 need not be
    the strongest).  Measured values are drawn in the plan's channel order
    by rank (``result.measured_sv``, see :class:`arrayplan.verification.channels.Verification`).
    The axis stops at `floor_db` (dB), so channels far below any noise floor do not squeeze the rest.

    Parameters
    ----------
    result : Verification or any object with ``hz`` (n_freq,), ``planned_sv`` and ``measured_sv`` (n_freq, n_chan)
    ax : matplotlib Axes, optional
    floor_db : float
        Lowest level shown, dB.

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
    # the strongest planned channel at each frequency (a tracked plan's channel 1 need not be it)
    ref = np.max(result.planned_sv, axis=1, keepdims=True)
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
    finite = np.concatenate([p_db[np.isfinite(p_db)], m_db[np.isfinite(m_db)]])
    if finite.size:
        ax.set_ylim(bottom=max(float(finite.min()) - 5.0, floor_db), top=float(finite.max()) + 5.0)
    ax.set_title("Planned (solid) and measured re-plan (dashed) singular values")
    ax.grid(True, alpha=0.3)
    if n <= 8:
        ax.legend(fontsize="small", ncol=2)
    else:
        # line styles in a legend, channel numbers on a colour bar (too many for a legend)
        from matplotlib.cm import ScalarMappable
        from matplotlib.colors import BoundaryNorm, ListedColormap
        from matplotlib.lines import Line2D

        ax.legend(handles=[Line2D([], [], color="0.3", ls="-", label="planned"),
                           Line2D([], [], color="0.3", ls="--", label="measured (re-plan)")],
                  fontsize="small", loc="lower left")
        bounds = np.arange(n + 1) + 0.5
        sm = ScalarMappable(BoundaryNorm(bounds, n), ListedColormap(colours))
        cbar = fig.colorbar(sm, ax=ax)
        ticks = np.unique(np.linspace(1, n, min(n, 12)).round().astype(int))
        cbar.set_ticks(ticks.astype(float), labels=[str(t) for t in ticks])
        cbar.set_label("channel (no., plan order)")
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
        Isolation = -(worst crosstalk re the channel's own gain), dB; NaN where the channel is
        not judged and infinite where no other channel is judged (both left out of the plot).
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
        ax.plot(hz, np.where(np.isfinite(iso[:, k]), np.clip(iso[:, k], -40.0, None), np.nan), "-", color=colour,
                marker=marker, ms=3,
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
