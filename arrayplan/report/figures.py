"""The report's figures, drawn from the results found in a project folder.

Every figure is made at A4 text width (:data:`PAGE_WIDTH_IN`) with text of
at least :data:`MIN_FONT_PT` points, so it stays readable when the report is
printed; colour maps are perceptually uniform (viridis, cividis).
"""

from __future__ import annotations

import contextlib
import io
from dataclasses import dataclass
from types import SimpleNamespace
from typing import Callable, Iterator

import numpy as np
from matplotlib.figure import Figure

from ..channels.field import best_plane, channel_fields, default_plane
from ..filters.check import plot_crosstalk as plot_filter_crosstalk
from ..plots import (plot_channel_counts, plot_channel_matrices, plot_couplings, plot_field_panels,
                     plot_ir_overview, plot_isolation, plot_level_map, plot_rig, plot_singular_values)
from ..plots.channels import centre_index
from ..plots.effort import plot_drive_effort
from .discover import FoundFilters, FoundIRSet, FoundPlan, FoundStudy, FoundVerification

__all__ = ["ReportFigure", "FigureMaker", "made", "PAGE_WIDTH_IN", "MIN_FONT_PT", "report_style", "rig_figures",
           "plan_figures", "plan_figure_makers", "filter_figures", "irset_figures", "verification_figures",
           "verification_figure_makers", "study_figures", "study_figure_makers", "png_bytes"]

#: A4 is 210 mm wide; with 15 mm margins the text is 180 mm = 7.09 in wide.
PAGE_WIDTH_IN = 7.0
#: Smallest text in a figure, points, at print size (common practice for printed figures, no source).
MIN_FONT_PT = 7.0
#: Channels shown as field maps.
FIELD_CHANNELS = 4


@dataclass
class ReportFigure:
    """A figure and its caption.

    Attributes
    ----------
    caption : str
        Plain text shown under the figure.
    figure : Figure
    """

    caption: str
    figure: Figure


#: Draws some of a section's figures when called (so that figures can be drawn one at a time, anywhere).
FigureMaker = Callable[[], "list[ReportFigure]"]


def made(makers: list[FigureMaker]) -> list[ReportFigure]:
    """The figures of every maker, in order.

    Parameters
    ----------
    makers : list of FigureMaker
        Each is called once, here.

    Returns
    -------
    list of ReportFigure
    """
    return [rf for make in makers for rf in make()]


_STYLE = {"font.size": 9.0, "axes.titlesize": 9.5, "axes.labelsize": 9.0, "xtick.labelsize": 8.0,
          "ytick.labelsize": 8.0, "legend.fontsize": 8.0, "figure.titlesize": 10.0, "image.cmap": "viridis"}


@contextlib.contextmanager
def report_style() -> Iterator[None]:
    """Matplotlib settings for report figures (font sizes for print).

    Yields
    ------
    None
        Inside the ``with`` block the settings apply; they are restored after.
    """
    import matplotlib

    with matplotlib.rc_context(_STYLE):
        yield


def _fig(height_in: float) -> Figure:
    return Figure(figsize=(PAGE_WIDTH_IN, height_in), layout="constrained")


#: zlib level of the report's PNGs: 3 encodes about twice as fast as the usual 6 and, with the opaque
#: figures stored as RGB instead of RGBA, the files come out no larger (measured on the report's figures).
PNG_COMPRESS_LEVEL = 3


def png_bytes(fig: Figure, dpi: int = 150) -> bytes:
    """The figure as PNG bytes, drawn once.

    A figure with a layout engine is laid out once at the output resolution
    and then frozen, and the canvas draws it directly: ``savefig`` would
    draw such a figure twice (a dry draw for the layout, then the real one).
    An opaque figure (every pixel's alpha 255, as every report figure) is
    stored as RGB; the pixels are the same as ``savefig``'s, for less work.

    Parameters
    ----------
    fig : Figure
    dpi : int
        Output resolution, dots per inch.

    Returns
    -------
    bytes
        A PNG file with the resolution recorded (pHYs chunk).
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from PIL import Image

    fig.set_dpi(dpi)
    canvas = FigureCanvasAgg(fig)
    engine = fig.get_layout_engine()
    if engine is not None:
        engine.execute(fig)
        fig.set_layout_engine("none")
    canvas.draw()
    rgba = np.asarray(canvas.buffer_rgba())
    image = Image.fromarray(rgba[..., :3]) if rgba[..., 3].min() == 255 else Image.fromarray(rgba)
    buf = io.BytesIO()
    image.save(buf, format="png", dpi=(dpi, dpi), compress_level=PNG_COMPRESS_LEVEL)
    return buf.getvalue()


def _field_figure(found: FoundPlan) -> ReportFigure | None:
    plan = found.plan
    if found.rig_file is None:
        return None
    rig = plan.rig
    ch = plan.channels
    f = centre_index(ch.axis.hz)                                                 # the report's one centre
    n = min(FIELD_CHANNELS, ch.n_channels)
    plane = best_plane(rig)
    grid = default_plane(rig, plane, resolution=121)
    pressures = list(channel_fields(rig, ch.drive[f, :, :n], float(ch.axis.hz[f]), grid))    # the kernel once
    level = ch.level_db()[f]
    titles = [f"channel {j + 1}: {level[j]:.1f} dB re strongest" for j in range(n)]
    fig = plot_field_panels(rig, grid, pressures, titles)
    fig.suptitle(f"Field of the first {n} channels at {ch.axis.hz[f]:.4g} Hz, {plane} plane at "
                 f"{grid.offset:.3g} m")
    return ReportFigure(f"Sound pressure level over the {plane} plane that each of the first {n} channels' drive "
                        f"weights produce at {ch.axis.hz[f]:.4g} Hz (free field; each panel on its own 0 dB). "
                        "Speakers: red triangles; microphones: white circles.", fig)


def rig_figures(found: FoundPlan) -> list[ReportFigure]:
    """The rig geometry of a plan, in three views.

    Parameters
    ----------
    found : FoundPlan
        The plan whose rig is drawn; its ``rig_note`` goes in the caption.

    Returns
    -------
    list of ReportFigure
        One figure.
    """
    return [ReportFigure(f"The rig in three views ({found.rig_note}).", plot_rig(found.plan.rig, fig=_fig(2.9)))]


def plan_figure_makers(found: FoundPlan) -> list[FigureMaker]:
    """Makers of the figures of :func:`plan_figures`, one figure each (the field maps none without a rig file).

    Parameters
    ----------
    found : FoundPlan

    Returns
    -------
    list of FigureMaker
    """
    plan = found.plan
    hz = plan.channels.axis.hz
    return [
        lambda: [ReportFigure("Each channel's power coupling s^2 as a share of the sum rule (left) and in dB re the "
                              f"strongest channel (right), at the lowest, the centre ({hz[centre_index(hz)]:.4g} Hz) "
                              "and the highest planned frequency; dashed: paraxial estimate of the count.",
                              plot_couplings(plan, fig=_fig(3.3)))],
        lambda: [ReportFigure("Strong, usable and effective channel counts against frequency, with the paraxial "
                              "estimate.", plot_channel_counts(plan, fig=_fig(3.4)))],
        lambda: [ReportFigure("Level of every channel (strongest first) over frequency; white: the strong count; "
                              "dashed: the paraxial estimate.", plot_level_map(plan, fig=_fig(3.6)))],
        lambda: [ReportFigure("Drive effort: the extra drive (dB) each channel needs to give the same output as the "
                              "strongest channel at that frequency, 20 log10(s_max / s_j): a channel 20 dB down needs "
                              "20 dB more drive; dotted: the strong threshold; dash-dotted: the noise floor at the "
                              "plan's SNR, above which the channel cannot match the strongest one's output; lines at "
                              f"the top edge need more than {abs(plan.snr_db) + 10:g} dB.",
                              plot_drive_effort(plan, ax=_fig(3.2).subplots()))],
        lambda: [f for f in (_field_figure(found),) if f is not None]]


def plan_figures(found: FoundPlan) -> list[ReportFigure]:
    """Channel strengths, counts, level map, drive effort and field maps of one plan (the rig: :func:`rig_figures`).

    Parameters
    ----------
    found : FoundPlan
        The field maps (at the centre frequency, Hz) need its rig file.

    Returns
    -------
    list of ReportFigure
    """
    return made(plan_figure_makers(found))


def filter_figures(found: FoundFilters) -> list[ReportFigure]:
    """The planned crosstalk matrix from the filters' time-domain check.

    Parameters
    ----------
    found : FoundFilters

    Returns
    -------
    list of ReportFigure
        One figure; none without a check of at least two channels.
    """
    if found.check is None or len(found.check.channels) < 2:
        return []
    fig = _fig(3.4)
    ax = fig.subplots()
    plot_filter_crosstalk(found.check, ax=ax)
    return [ReportFigure("Planned crosstalk: worst in-band leakage between the kept channels when the filters drive "
                         "the simulated free-field rig (dB re each output's own gain).", fig)]


def irset_figures(found: FoundIRSet) -> list[ReportFigure]:
    """Envelopes and peak levels of an IR set.

    Parameters
    ----------
    found : FoundIRSet

    Returns
    -------
    list of ReportFigure
        One figure (levels in dB re the set's largest sample).
    """
    irs = found.irs
    fig = plot_ir_overview(irs, fig=_fig(3.8))
    peak = float(max(irs.data.max(), -irs.data.min()))          # max |h| without a copy of |h|
    return [ReportFigure(f"Impulse responses in {found.folder.name}: envelope of every speaker/microphone pair "
                         f"(left) and each pair's peak (right), dB re the largest sample ({peak:.3g}, unit "
                         f"{irs.units}).", fig)]


def _isolation_figure(found: FoundVerification) -> list[ReportFigure]:
    col = found.channel_columns
    if len(col["channel"]) == 0:
        return []
    ok = np.isfinite(col["channel"]) & np.isfinite(col["frequency_hz"])
    chan = col["channel"][ok].astype(int)
    chans = sorted(set(chan.tolist()))
    hz = np.unique(col["frequency_hz"][ok])
    iso = np.full((len(hz), len(chans)), np.nan)
    iso[np.searchsorted(hz, col["frequency_hz"][ok]), np.searchsorted(chans, chan)] = col["isolation_db"][ok]
    limit = float(found.doc.get("isolation_db", 20.0))
    return [ReportFigure("Measured isolation of each wanted channel against frequency; a channel is lost where it "
                         f"falls below {limit:g} dB. Gaps: the channel is not judged there, or no other channel is, "
                         "so there is no crosstalk to measure.",
                         plot_isolation(hz, chans, iso, limit, ax=_fig(3.6).subplots()))]


def verification_figure_makers(found: FoundVerification) -> list[FigureMaker]:
    """Makers of the figures of :func:`verification_figures`.

    Parameters
    ----------
    found : FoundVerification

    Returns
    -------
    list of FigureMaker
        Empty when the channel table is empty; the channel matrices and
        singular values only with ``verify.npz``.
    """
    a = found.arrays
    if len(found.channel_columns["channel"]) == 0:
        return []
    makers: list[FigureMaker] = [lambda: _isolation_figure(found)]
    if a is not None:
        makers.append(lambda: [ReportFigure(
            "Measured crosstalk: the realised channel matrix |combine^T G_measured drive| of the wanted channels at "
            "up to four frequencies, dB re the strongest diagonal entry; blank rows and columns: channels not "
            "judged there (not strong in the plan).",
            plot_channel_matrices(a["frequency_hz"], a["channel_matrix"], np.asarray(a["channels"]) - 1,
                                  judged=a["judged"], fig=_fig(3.0)))])
        sv = SimpleNamespace(hz=a["frequency_hz"], planned_sv=a["planned_singular_value"],
                             measured_sv=a["measured_singular_value"])
        makers.append(lambda: [ReportFigure("Planned singular values (solid) and those of the measured coupling "
                                            "matrices (dashed), dB re the strongest planned.",
                                            plot_singular_values(sv, ax=_fig(3.6).subplots()))])
    return makers


def verification_figures(found: FoundVerification) -> list[ReportFigure]:
    """Isolation against frequency and the measured channel matrices of a verification.

    Parameters
    ----------
    found : FoundVerification

    Returns
    -------
    list of ReportFigure
    """
    return made(verification_figure_makers(found))


def study_figure_makers(found: FoundStudy) -> list[FigureMaker]:
    """Makers of the figures of :func:`study_figures` (capacity or tolerance).

    Parameters
    ----------
    found : FoundStudy
        Of kind ``"capacity"`` (three figures) or ``"tolerance"`` (two).

    Returns
    -------
    list of FigureMaker
    """
    from ..plots.studies import (plot_active_channels, plot_capacity, plot_gain_spread, plot_survival,
                                 plot_water_levels)

    st = found.study
    if found.kind == "capacity":
        return [lambda: [ReportFigure("Capacity against frequency at each SNR (SNR of the strongest channel with all "
                                      "power on it): water-filling (solid) and equal power on the strong channels "
                                      "(dashed).", plot_capacity(st, ax=_fig(3.4).subplots()))],
                lambda: [ReportFigure("Channels given power by the water-filling against SNR, at up to four "
                                      "frequencies.", plot_active_channels(st, ax=_fig(3.0).subplots()))],
                lambda: [ReportFigure("Water-filling at the middle planned frequency and the highest SNR: each "
                                      "channel's floor 1/gamma and the power poured on it, as fractions of the "
                                      "total power.", plot_water_levels(st, ax=_fig(3.0).subplots()))]]
    rows = int(np.ceil(min(6, max(1, int(st.judged.any(axis=0).sum()))) / 3))
    return [lambda: [ReportFigure("Realised gain of each channel in use with the planned weights: median and 5-95 % "
                                  "of the trials; dashed: the first-order prediction (±1.645 standard deviations).",
                                  plot_gain_spread(st, fig=_fig(1.1 + 2.0 * rows)))],
            lambda: [ReportFigure("Share of trials in which each channel in use keeps the isolation limit.",
                                  plot_survival(st, ax=_fig(3.2).subplots()))]]


def study_figures(found: FoundStudy) -> list[ReportFigure]:
    """The figures of a design study (capacity or tolerance), drawn again at report size.

    Parameters
    ----------
    found : FoundStudy
        Of kind ``"capacity"`` or ``"tolerance"``, as for :func:`study_figure_makers`.

    Returns
    -------
    list of ReportFigure
        Drawn here, one after the other.
    """
    return made(study_figure_makers(found))
