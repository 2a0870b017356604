"""The report's rig sections: one per rig geometry hash, however many plans were made for it."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from ..rig import Rig
from ._util import _anchor, _figures_html, _rel
from .discover import FoundPlan
from .html import esc, table

__all__ = ["RigGroup", "rig_groups", "rig_anchor", "rig_section"]

_MAX_ELEMENT_ROWS = 48


def _element_rows(rig: Rig, with_directivity: bool) -> tuple[list[str], list[list[object]]]:
    header = ["kind", "name", "x (m)", "y (m)", "z (m)", "channel"] + (["directivity"] if with_directivity else [])
    rows: list[list[object]] = []
    for kind, es in (("speaker", rig.speakers), ("microphone", rig.mics)):
        for i, name in enumerate(es.names[:_MAX_ELEMENT_ROWS]):
            row: list[object] = [kind, name, *(f"{v:.3f}" for v in es.positions[i]), es.channels[i]]
            if with_directivity:
                d = es.directivities[i]
                desc = d.kind + (f", radius {d.radius:g} m" if d.kind == "piston" else "")
                if d.kind != "omni":
                    desc += ", axis (" + ", ".join(f"{a:.2g}" for a in d.axis) + ")"
                row.append(desc)
            rows.append(row)
        if len(es) > _MAX_ELEMENT_ROWS:
            rows.append([kind, f"... {len(es) - _MAX_ELEMENT_ROWS} more", "", "", "", ""]
                        + ([""] if with_directivity else []))
    return header, rows


def rig_anchor(sha256: str) -> str:
    """The id of a rig's section, from its geometry hash.

    Parameters
    ----------
    sha256 : str
        The rig's geometry hash (hex).

    Returns
    -------
    str
        ``"rig-"`` and the first 16 hex digits.
    """
    return "rig-" + sha256[:16]


@dataclass
class RigGroup:
    """One rig (by geometry hash) and the plans made for it, in path order.

    Attributes
    ----------
    sha256 : str
        The geometry hash the plans recorded (hex).
    plans : list of FoundPlan
        At least one.
    """

    sha256: str
    plans: list[FoundPlan]

    @property
    def shown(self) -> FoundPlan:
        """The plan whose rig is shown: the first one that found its rig file (with directivity), else the first.

        Returns
        -------
        FoundPlan
        """
        return next((fp for fp in self.plans if fp.rig_file is not None), self.plans[0])


def rig_groups(plans: list[FoundPlan]) -> list[RigGroup]:
    """The plans grouped by their rig's geometry hash, in the order of each rig's first plan.

    Parameters
    ----------
    plans : list of FoundPlan

    Returns
    -------
    list of RigGroup
        Keyed by the hash each plan recorded in ``weights.json`` (the rebuilt rig's own hash when absent).
    """
    groups: dict[str, RigGroup] = {}
    for fp in plans:
        key = str(fp.sidecar.get("rig", {}).get("sha256") or fp.plan.rig.sha256)     # the hash the plan recorded
        groups.setdefault(key, RigGroup(key, [])).plans.append(fp)
    return list(groups.values())



def rig_section(group: RigGroup, root: Path, figs: list[tuple[str, bytes]]) -> str:
    """A rig's section: geometry hash, plans, element table and the drawn figures `figs` (caption, PNG).

    Parameters
    ----------
    group : RigGroup
        The rig and its plans; the geometry is taken from :attr:`RigGroup.shown`.
    root : Path
        The project folder; plans are named by their path relative to it.
    figs : list of (str, bytes)
        Caption and PNG bytes of each figure, in order.

    Returns
    -------
    str
        The ``<section>`` (positions in m in the element table).
    """
    found = group.shown
    rig = found.plan.rig
    plans = ", ".join(f'<a href="#{_anchor("plan", fp.folder, root)}">{esc(_rel(fp.folder, root))}</a>'
                      for fp in group.plans)
    parts = [f'<section id="{rig_anchor(group.sha256)}"><h2>Rig: {esc(rig.name)}</h2>',
             f"<p>Geometry hash <code>{esc(group.sha256[:16])}...</code>; plans made for this rig: {plans}. "
             f"Geometry shown from {esc(found.rig_note)}.</p>"]
    header, rows = _element_rows(rig, with_directivity=found.rig_file is not None)
    parts.append("<h3>Elements</h3>" + table(header, rows, text_columns=(0, 1, 6)))
    parts.append(_figures_html(figs, f"rig {rig.name}"))
    parts.append("</section>")
    return "\n".join(parts)


