"""Files of the layout study: the chosen rig, the selection steps, the candidates, a sidecar, figures.

* ``chosen-rig.toml``: the rig with the chosen elements, one point entry per
  element, and the original rig's ``[room]`` and ``[[zones]]`` (``arrayplan
  plan`` and the studies read it like the original).
* ``layout-steps.csv``: step, action (add or swap), added, removed, value.
* ``layout-candidates.csv``: name, x, y, z (m), chosen (1/0), relaxed_weight.
* ``layout.json``: criterion, value, bound, gap, settings, provenance.
* ``layout-rig.png`` and ``layout-criterion.png``.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from ..rig.directivity import Directivity
from ..errors import InputError
from ..formats.atomic_files import write_json_atomic, write_text_atomic
from ..formats.fileio import provenance
from ..formats.output_folders import staged_output_dir
from ..formats.study_sidecars import stamp_study_sidecar
from ..rig import ElementSet, Rig, read_rig_document
from ..rig.commented_toml import toml_value as _value  # the TOML value writer of the starter rigs
from ..rig.room import IMAGE_LIMIT, SURFACES, Room
from .layout import LayoutChoice, chosen_rig
from ._common import REFERENCE_SNR_MEANING
from ._tables import csv_text as _csv

__all__ = ["rig_toml_text", "write_layout", "summary_lines"]

_UNITS = {"capacity": "bit/s/Hz summed over frequencies", "strong": "strong channels summed over frequencies",
          "usable": "usable channels summed over frequencies"}


def _num(x: float) -> str:
    text = f"{float(x):.10g}"
    return text if any(ch in text for ch in ".eEn") else text + ".0"


def _vec(v) -> str:
    return "[" + ", ".join(_num(x) for x in v) + "]"


def _directivity(d: Directivity) -> str | None:
    if d.is_omni:
        return None
    parts = [f'type = "{d.kind}"', f"axis = {_vec(d.axis)}"]
    if d.kind == "piston":
        parts.append(f"radius = {_num(d.radius)}")
    if d.kind == "first_order":
        parts.append(f"alpha = {_num(d.alpha)}")
    return "{ " + ", ".join(parts) + " }"


def _points(label: str, es: ElementSet) -> list[str]:
    lines = []
    for name, pos, d, ch in zip(es.names, es.positions, es.directivities, es.channels):
        lines += ["", f"[[{label}]]", f"name = {json.dumps(name)}", f"position = {_vec(pos)}", f"channel = {ch}"]
        text = _directivity(d)
        if text:
            lines.append(f"directivity = {text}")
    return lines


def rig_toml_text(rig: Rig, comment: str) -> str:
    """A rig file (TOML) holding `rig` as point entries; `comment` heads it (one line).

    Parameters
    ----------
    rig : Rig
        The rig: medium, frequencies (Hz), planning settings, speakers and
        microphones (positions in m, 1-based channels), room and zones.
    comment : str
        One line, written as a TOML comment at the top.

    Returns
    -------
    str
        The TOML text; :func:`arrayplan.rig.load_rig` reads it back with the
        same elements (numbers to 10 significant digits), medium, room and zones.

    Raises
    ------
    InputError
        When a zone of generated control points cannot be copied from the
        rig's own file.
    """
    m = rig.medium
    lines = [f"# {comment}", "", "[rig]", f"name = {json.dumps(rig.name)}",
             f"description = {json.dumps(rig.description)}", "", "[medium]",
             f"speed_of_sound = {_num(m.speed_of_sound)}", f"temperature_c = {_num(m.temperature_c)}",
             f"relative_humidity_pct = {_num(m.relative_humidity_pct)}", f"pressure_kpa = {_num(m.pressure_kpa)}",
             f"air_absorption = {'true' if m.air_absorption else 'false'}"]
    if rig.frequencies is not None:
        lines += ["", "[frequencies]", f"list = {_vec(rig.frequencies.hz)}"]
    lines += ["", "[planning]", f"threshold_db = {_num(rig.planning.threshold_db)}",
              f"snr_db = {_num(rig.planning.snr_db)}"]
    lines += _points("speakers", rig.speakers) + _points("microphones", rig.mics)
    lines += _room(rig.room) + _zones(rig)
    return "\n".join(lines) + "\n"


def _room(room: Room | None) -> list[str]:
    if room is None:
        return []
    lines = ["", "[room]", f"size_m = {_vec(room.size_m)}", f"reflection_order = {int(room.reflection_order)}"]
    if room.max_delay_ms is not None:
        lines.append(f"max_delay_ms = {_num(room.max_delay_ms)}")
    if room.n_images > IMAGE_LIMIT:
        lines.append("allow_large_order = true")
    lines += ["", "[room.absorption]"]
    for name, bands in zip(SURFACES, room.absorption):
        lines.append(f"{name} = {_num(bands[0]) if np.all(bands == bands[0]) else _vec(bands)}")
    return lines


def _zones(rig: Rig) -> list[str]:
    """``[[zones]]`` entries: members by name, generated groups as written in the rig's own file."""
    raw: dict[str, dict] = {}
    if any(z.mic_indices is None for z in rig.zones):
        try:
            doc = read_rig_document(rig.source)
        except InputError:
            doc = {}
        entries = doc.get("zones") if isinstance(doc.get("zones"), list) else []
        raw = {e.get("name"): e for e in entries if isinstance(e, dict)}
    lines = []
    for z in rig.zones:
        lines += ["", "[[zones]]", f"name = {json.dumps(z.name)}", f"role = {json.dumps(z.role)}"]
        if z.mic_indices is not None:
            lines.append(f"members = {_value(list(z.point_names))}")
            continue
        entry = raw.get(z.name)
        if entry is None or "shape" not in entry:
            raise InputError(f"zone {z.name!r} of generated control points cannot be written: its rig file "
                             "does not hold it", source=rig.source, field="zones",
                             fix="load the rig from its file, so the zone's group can be copied")
        lines += [f"{k} = {_value(v)}" for k, v in entry.items() if k not in ("name", "role")]
    return lines


def summary_lines(choice: LayoutChoice) -> list[str]:
    """What the command prints.

    Parameters
    ----------
    choice : LayoutChoice
        The layout chosen, with the steps that found it.

    Returns
    -------
    list of str
        The count, criterion and its unit, the chosen names, the value after
        the greedy steps and swaps and, with a relaxation, its bound and gap.
    """
    p = choice.problem
    lines = [f"chose {p.count} of {len(p.candidates)} candidate {p.side} by {choice.criterion} "
             f"({_UNITS[choice.criterion]}, {len(p.axis)} frequencies, reference SNR {p.reference_snr_db:g} dB "
             "at 1 m from one speaker, power shared)",
             f"chosen: {', '.join(p.candidates.names[i] for i in sorted(choice.chosen))}",
             f"value {choice.value:.6g} after {sum(s['action'] == 'add' for s in choice.steps)} greedy steps and "
             f"{sum(s['action'] == 'swap' for s in choice.steps)} swaps"]
    if choice.bound is not None:
        lines.append(f"upper bound (convex relaxation) {choice.bound:.6g}; gap {choice.gap_percent:.2f} % of the bound")
    return lines


def write_layout(rig: Rig, choice: LayoutChoice, out_dir: str | Path, figures: bool = True) -> list[Path]:
    """Write every file of the layout study to `out_dir` atomically; return the paths.

    Parameters
    ----------
    rig : Rig
        The original rig the candidates come from.
    choice : LayoutChoice
        The chosen layout.
    out_dir : path
        The study folder; an earlier arrayplan output there is replaced whole.
    figures : bool
        Also draw and save ``layout-rig.png`` and ``layout-criterion.png``.

    Returns
    -------
    list of Path
        Every file written, sorted by name.
    """
    p = choice.problem
    new = chosen_rig(rig, choice)
    chosen = set(choice.chosen)
    cand_rows = [[n, float(x), float(y), float(z), int(i in chosen),
                  "" if choice.relaxed is None else float(choice.relaxed[i])]
                 for i, (n, (x, y, z)) in enumerate(zip(p.candidates.names, p.candidates.positions))]
    doc = {"provenance": provenance(rig_sha256=rig.sha256, rig_source=rig.source),
           "side": p.side, "count": p.count, "candidates": len(p.candidates), "criterion": choice.criterion,
           "unit": _UNITS[choice.criterion], "reference_snr_db": p.reference_snr_db,
           "reference_snr": REFERENCE_SNR_MEANING, "threshold_db": p.threshold_db,
           "frequencies_hz": p.axis.hz, "value": choice.value, "greedy_values": choice.greedy_values,
           "bound": choice.bound, "gap_percent": choice.gap_percent,
           "chosen": [p.candidates.names[i] for i in sorted(choice.chosen)], "chosen_rig_sha256": new.sha256}
    with staged_output_dir(out_dir) as stage:
        write_text_atomic(stage / "chosen-rig.toml", rig_toml_text(
            new, f"{p.count} {p.side} chosen by arrayplan study layout ({choice.criterion}) from {rig.source}"))
        write_text_atomic(stage / "layout-steps.csv", _csv(
            ["step", "action", "added", "removed", "value"],
            [[s["step"], s["action"], s["added"], s["removed"], float(s["value"])] for s in choice.steps]))
        write_text_atomic(stage / "layout-candidates.csv", _csv(
            ["name", "x", "y", "z", "chosen", "relaxed_weight"], cand_rows))
        write_json_atomic(stage / "layout.json", stamp_study_sidecar(doc, "layout"))
        if figures:
            from ..plots.layout import plot_layout_criterion, plot_layout_rig
            plot_layout_rig(rig, choice).savefig(stage / "layout-rig.png", dpi=120)
            plot_layout_criterion(choice).savefig(stage / "layout-criterion.png", dpi=120)
        names = sorted(q.name for q in stage.iterdir())
    return [Path(out_dir) / n for n in names]
