"""Figures of a verification: crosstalk heat maps and planned vs measured singular values."""

from __future__ import annotations

import numpy as np

__all__ = ["plot_crosstalk", "plot_singular_values"]


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
        ax.set_xlabel("driven channel j")
        ax.set_ylabel("received channel i")
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
    if len(hz) > 1 and hz[-1] / hz[0] > 8:
        ax.set_xscale("log")
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("singular value re strongest planned (dB)")
    ax.set_title("Planned (solid) and measured re-plan (dashed) singular values")
    ax.grid(True, alpha=0.3)
    if n <= 8:
        ax.legend(fontsize="small", ncol=2)
    return fig
