"""Report sections of the zones, layout-choice and layout-comparison studies.

Each study folder is recognised by its JSON sidecar (``zones.json``,
``layout.json``, ``compare.json``); the section shows its numbers as tables
and redraws its figures from the study's own CSV and JSON files at report
size.
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from ..errors import InputError
from ..formats.study_sidecars import STUDY_SIDECARS, read_study_sidecar
from .html import esc, table

__all__ = ["study_kind", "load_study", "study_section_html", "study_figures", "study_summary",
           "STUDY_NAMES"]

#: The studies shown here (their sidecars: :data:`arrayplan.formats.study_sidecars.STUDY_SIDECARS`).
_STUDIES = ("zones", "layout", "comparison")
#: Heading of each study's section.
STUDY_NAMES = {"zones": "Zones study", "layout": "Layout choice", "comparison": "Layout comparison"}
_METHOD_LABELS = {"contrast": "acoustic contrast control", "matching": "pressure matching",
                  "channel": "best plan channel"}


def study_kind(folder: Path) -> str | None:
    """``"zones"``, ``"layout"``, ``"comparison"`` or None, from the folder's sidecar file.

    Parameters
    ----------
    folder : Path
        A folder that may hold a study; only the names of its files are
        looked at.

    Returns
    -------
    str or None
        The kind of the first sidecar found, None without one.
    """
    for kind in _STUDIES:
        if (folder / STUDY_SIDECARS[kind].file).is_file():
            return kind
    return None


def _read_csv(path: Path) -> list[dict[str, str]]:
    try:
        with open(path, newline="", encoding="utf-8") as fh:
            return list(csv.DictReader(fh))
    except OSError as exc:
        raise InputError(f"cannot read ({exc.__class__.__name__})", source=str(path)) from None


def load_study(folder: Path):
    """Read a study folder (see :func:`study_kind`) as a :class:`~arrayplan.report.discover.FoundStudy`.

    Its ``study`` is the study's main table (list of row dicts), its
    ``sidecar`` the JSON sidecar.

    Parameters
    ----------
    folder : Path
        The study folder.

    Returns
    -------
    FoundStudy

    Raises
    ------
    InputError
        Naming the file, when the folder is no study or a file cannot be read.
    """
    kind = study_kind(folder)
    if kind is None:
        raise InputError("not a study folder", source=str(folder))
    doc = read_study_sidecar(folder, kind)
    table_file = {"zones": "zones-metrics.csv", "layout": "layout-steps.csv",
                  "comparison": "compare-by-frequency.csv"}[kind]
    from .discover import FoundStudy
    return FoundStudy(folder, kind, _read_csv(folder / table_file), doc)


def _fig(height_in: float) -> Figure:
    return Figure(figsize=(7.0, height_in), layout="constrained")


def _zones_figure(found) -> Figure:
    from ..plots._axes import frequency_axis

    fig = _fig(3.4)
    ax_c, ax_t = fig.subplots(1, 2)
    colours = {"contrast": "#1b7837", "matching": "#2166ac", "channel": "#762a83"}
    for method, colour in colours.items():
        rows = [r for r in found.study if r["method"] == method]
        if not rows:
            continue
        chosen = [r for r in rows if r["chosen"] == "1"]
        hz = np.array([float(r["frequency_hz"]) for r in chosen])
        ax_c.plot(hz, [float(r["contrast_db"]) for r in chosen], "o-", ms=3, color=colour,
                  label=_METHOD_LABELS[method])
        regs = sorted({r["regularisation"] for r in rows})
        means = [(np.mean([float(r["effort_db"]) for r in rows if r["regularisation"] == g]),
                  np.mean([float(r["contrast_db"]) for r in rows if r["regularisation"] == g])) for g in regs]
        ax_t.plot([m[0] for m in means], [m[1] for m in means], "o-", ms=4, color=colour)
        frequency_axis(ax_c, hz)
    ax_c.set_xlabel("frequency (Hz)")
    ax_c.set_ylabel("acoustic contrast (dB)")
    ax_c.legend(fontsize=7)
    ax_t.set_xlabel("array effort, band mean (dB re one speaker)")
    ax_t.set_ylabel("contrast, band mean (dB)")
    for ax in (ax_c, ax_t):
        ax.grid(True, alpha=0.3)
    return fig


def study_figures(found) -> list[tuple[str, Figure]]:
    """(caption, figure) pairs of a study section.

    Parameters
    ----------
    found : FoundStudy
        Of kind ``"zones"``, ``"layout"`` or ``"comparison"`` (see :func:`load_study`).

    Returns
    -------
    list of (str, Figure)
        One pair, drawn from the study's table and sidecar.
    """
    if found.kind == "zones":
        return [("Left: contrast of each method's chosen design against frequency. Right: band-mean contrast "
                 "against band-mean array effort over the regularisation sweep (one point per value, least "
                 "regularised at the top right).", _zones_figure(found))]
    if found.kind == "layout":
        from ..plots.layout import plot_layout_criterion
        from types import SimpleNamespace
        d = found.sidecar
        choice = SimpleNamespace(greedy_values=np.asarray(d["greedy_values"], dtype=float), value=d["value"],
                                 bound=d.get("bound"), gap_percent=d.get("gap_percent"), criterion=d["criterion"])
        return [("The criterion after each greedy step, after the swaps, and the relaxation's upper bound.",
                 plot_layout_criterion(choice, ax=_fig(3.2).subplots()))]
    from ..plots.layout import plot_comparison
    names = [lay["name"] for lay in found.sidecar["layouts"]]
    hz = np.array(found.sidecar["frequencies_hz"], dtype=float)
    keys = {"strong channels": "strong", "usable channels": "usable", "effective channels": "effective"}
    if found.sidecar.get("reference_snr_db", found.sidecar.get("capacity_snr_db")) is not None:
        keys["capacity (bit/s/Hz)"] = "capacity_bit_per_s_hz"
    series = {title: np.array([[float(r[col]) for r in found.study if r["layout"] == n] for n in names])
              for title, col in keys.items()}
    return [("The layouts' channel counts (and capacity) against frequency, overlaid.",
             plot_comparison(hz, names, series, fig=_fig(1.9 * len(series) + 0.6)))]


def study_section_html(found) -> str:
    """The tables of a study section (the caller adds the heading and the figures).

    Parameters
    ----------
    found : FoundStudy
        As for :func:`study_figures`; the tables come from its sidecar.

    Returns
    -------
    str
        HTML: tables and short paragraphs (levels in dB, position errors in mm).
    """
    d = found.sidecar
    if found.kind == "zones":
        rows = [[_METHOD_LABELS.get(k, k), "-" if m["regularisation"] is None else f"{m['regularisation']:g}",
                 f"{m['mean_contrast_db']:.1f}", f"{m['min_contrast_db']:.1f}", f"{m['mean_effort_db']:.1f}",
                 f"{m['max_effort_db']:.1f}", f"{m['mean_error_db']:.1f}"] for k, m in d["chosen"].items()]
        zones = ", ".join(f"{z['name']} ({z['use']}, {z['points']} points)" for z in d["zones"])
        parts = [f"<p>Zones {esc(zones)}; target: {esc(d['target']['description'])}; kernel {esc(d['kernel'])}; "
                 f"chosen design: the least regularised with array effort at most {d['max_effort_db']:g} dB.</p>",
                 table(["method", "regularisation", "contrast mean (dB)", "contrast min (dB)", "effort mean (dB)",
                        "effort max (dB)", "matching error mean (dB)"], rows, text_columns=(0,))]
        if "tolerance" in d:
            t = d["tolerance"]
            parts.append(f"<p>Robustness: {t['trials']} rigs with {1000 * t['sigma_m']:g} mm Gaussian position "
                         "errors; median contrast over the band: " + ", ".join(
                             f"{esc(_METHOD_LABELS.get(k, k))} {np.mean(v):.1f} dB"
                             for k, v in t["median_contrast_db"].items()) + ".</p>")
        if "filters" in d:
            f = d["filters"]
            parts.append(f"<p>Drive filters ({esc(f['method'])}, {f['taps']} taps at {f['sample_rate_hz']:g} Hz): "
                         f"contrast realised over {f['band_hz'][0]:g} to {f['band_hz'][1]:g} Hz "
                         f"{f['band_contrast_realised_db']:.1f} dB.</p>")
        return "\n".join(parts)
    if found.kind == "layout":
        bound = "-" if d.get("bound") is None else f"{d['bound']:.6g}"
        gap = "-" if d.get("gap_percent") is None else f"{d['gap_percent']:.2f} %"
        return table(["item", "value"], [
            ["chosen", f"{d['count']} of {d['candidates']} candidate {d['side']}"],
            ["criterion", f"{d['criterion']} ({d['unit']}), reference SNR "
                          f"{d.get('reference_snr_db', d.get('snr_db')):g} dB at 1 m from one speaker"],
            ["value", f"{d['value']:.6g}"], ["upper bound", bound], ["gap", gap],
            ["elements", ", ".join(d["chosen"])]], text_columns=(0, 1))
    return table(list(d["header"]), [list(r) for r in d["rows"]], text_columns=(0, 3, 4))


def study_summary(found) -> str:
    """One sentence for the report's summary (plain text).

    Parameters
    ----------
    found : FoundStudy
        As for :func:`study_figures`; the numbers are read from its sidecar.

    Returns
    -------
    str
        One sentence, without a closing full stop.
    """
    d = found.sidecar
    if found.kind == "zones":
        best = max(d["chosen"].items(), key=lambda kv: kv[1]["mean_contrast_db"])
        return (f"best mean contrast {best[1]['mean_contrast_db']:.1f} dB by {_METHOD_LABELS.get(best[0], best[0])}"
                + (f"; drive filters realise {d['filters']['band_contrast_realised_db']:.1f} dB" if "filters" in d
                   else ""))
    if found.kind == "layout":
        gap = "" if d.get("gap_percent") is None else f", {d['gap_percent']:.2f} % below the upper bound"
        return f"{d['count']} of {d['candidates']} candidate {d['side']} chosen by {d['criterion']}{gap}"
    return f"{len(d['layouts'])} layouts compared on {len(d['frequencies_hz'])} frequencies"
