"""The report's opening: one conclusion line per result, and the one meaning of "centre"."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..plots.channels import centre_index
from ._util import _rel
from .discover import ProjectResults
from .html import esc
from .verdicts import (Verdict, filters_verdict, hz_text, irset_verdict, plan_verdict, study_verdict,
                       verification_verdict)

__all__ = ["verdict_html", "verdict_of", "centre_note", "conclusions"]

_BADGE = {"pass": "all pass", "fail": "some fail", "info": "result"}


def verdict_html(v: Verdict) -> str:
    """A result's verdict as the paragraph that opens its section (same words as in the conclusions).

    Parameters
    ----------
    v : Verdict
        Status, line and remedy (if any) of the result.

    Returns
    -------
    str
        An HTML ``<p class="verdict">`` with the status badge, text escaped.
    """
    remedy = f'<br><span class="remedy">Remedy: {esc(v.remedy)}.</span>' if v.remedy else ""
    return (f'<p class="verdict"><span class="badge {v.status}">{_BADGE[v.status]}</span> '
            f"{esc(v.line[:1].upper() + v.line[1:])}.{remedy}</p>")


def verdict_of(kind: str, found: object) -> Verdict | None:
    """The verdict on one result of the report.

    Parameters
    ----------
    kind : str
        The section's kind: ``"plan"``, ``"filters"``, ``"irset"``,
        ``"verify"``, ``"study"`` (others, such as ``"rig"``, have none).
    found : object
        The result as found by :func:`arrayplan.report.discover.find_results`
        (a ``FoundPlan``, ``FoundFilters``, ...).

    Returns
    -------
    Verdict or None
        None for a kind without a verdict.
    """
    makers = {"plan": plan_verdict, "filters": filters_verdict, "irset": irset_verdict,
              "verify": verification_verdict, "study": study_verdict}
    return makers[kind](found) if kind in makers else None


def centre_note(results: ProjectResults, root: Path) -> str:
    """The one statement of what "centre" means in this report, with its value for each result that uses it.

    Parameters
    ----------
    results : ProjectResults
        Its plans and filters (with a ``band_hz`` and ``centre_hz``, Hz) are named.
    root : Path
        The project folder; results are named by their path relative to it.

    Returns
    -------
    str
        An HTML ``<p class="note" id="centre">``; empty when no result has a centre.
    """
    items = []
    for fp in results.plans:
        hz = fp.plan.channels.axis.hz
        items.append(f"plan {_rel(fp.folder, root)}: {hz[centre_index(hz)]:.5g} Hz, the planned frequency nearest "
                     f"{np.sqrt(hz[0] * hz[-1]):.5g} Hz ({hz_text(hz[0])} to {hz_text(hz[-1])})")
    for ff in results.filters:
        band, c = ff.sidecar.get("band_hz"), ff.sidecar.get("centre_hz")
        if band and c is not None:
            items.append(f"filters {_rel(ff.folder, root)}: {float(c):.5g} Hz, the design bin nearest "
                         f"{np.sqrt(band[0] * band[1]):.5g} Hz ({hz_text(band[0])} to {hz_text(band[1])})")
    if not items:
        return ""
    return ('<p class="note" id="centre">"Centre" in this report (field maps, couplings, drive effort, filter levels) '
            "is the geometric centre sqrt(f_low f_high) of the band, taken at the nearest frequency the result "
            f"holds: {esc('; '.join(items))}.</p>")


def conclusions(entries: list[tuple[str, str, str, Verdict]], centre_note: str) -> str:
    """One line per result: its verdict, a link to its section and the remedy where one is known.

    Parameters
    ----------
    entries : list of (str, str, str, Verdict)
        Per result: its kind, the id of its section, its label and its verdict.
    centre_note : str
        HTML put after the list (see :func:`centre_note`); may be empty.

    Returns
    -------
    str
        The ``<section id="summary">``: the count of checked results that
        pass, then the list.
    """
    items = []
    for _kind, anchor, label, v in entries:
        remedy = f' <span class="remedy">Remedy: {esc(v.remedy)}.</span>' if v.remedy else ""
        items.append(f'<li><span class="badge {v.status}">{_BADGE[v.status]}</span> '
                     f'<a href="#{anchor}">{esc(label)}</a>: {esc(v.line)}.{remedy}</li>')
    n_fail = sum(v.status == "fail" for *_, v in entries)
    n_checked = sum(v.status != "info" for *_, v in entries)
    overall = (f"{n_checked - n_fail} of {n_checked} checked results pass" if n_checked else
               "no result in this project has a pass/fail check")
    return (f'<section id="summary"><h2>Conclusions</h2><p class="overall">{esc(overall)}.</p>'
            f'<ul class="conclusions">{"".join(items)}</ul>{centre_note}</section>')


