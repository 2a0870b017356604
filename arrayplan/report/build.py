"""Assemble the report: one self-contained HTML page for a project folder."""

from __future__ import annotations

import datetime as _dt
import json
import os
from pathlib import Path
from typing import Callable

import numpy as np

from .._version import __version__
from ..errors import InputError
from ..formats.fileio import SIGN_CONVENTION, write_text_atomic
from ..formats.irset import MANIFEST_NAME
from ..channels.planning import Plan
from ..plots.channels import centre_index
from ..plots.effort import drive_effort_db, loudest_speaker_db
from ..rig import Rig
from ..safety import CAUTION_TEXT
from .discover import (FoundFilters, FoundIRSet, FoundPlan, FoundStudy, FoundVerification, ProjectResults,
                       find_results)
from .render import figure_makers, render_figures
from ._util import _anchor, _figures_html, _fmt, _rel
from .conclusions import centre_note, conclusions, verdict_html, verdict_of
from .html import esc, page, table
from .rigs import RigGroup, rig_anchor, rig_groups, rig_section
from .verdicts import (filters_verdict, irset_verdict, plan_verdict, study_verdict, verification_verdict,
                       verified_sources)

__all__ = ["build_report", "write_report"]

_MAX_FREQ_ROWS = 12



#: Two channels whose singular values differ by less than this (dB) are reported as degenerate.
DEGENERATE_DB = 0.01
#: Two channels closer than this (dB) are reported as near-degenerate: the pairs that mix first.
NEAR_DEGENERATE_DB = 1.0
#: Channels weaker than this re the strongest (dB) are left out of both checks.
_DEGENERATE_FLOOR_DB = -60.0


def degenerate_pairs(singular_values: np.ndarray, level_db: np.ndarray,
                     within_db: float = DEGENERATE_DB) -> list[tuple[tuple[int, int], int]]:
    """Pairs of channels whose singular values lie within `within_db` of each other, and where.

    At each frequency the channels are ranked by singular value, and each two
    neighbours in that ranking closer than `within_db` form a pair; pairs are
    named by their channel numbers, so a tracked plan (whose numbers do not
    follow the ranking) is counted by the channels themselves.

    Parameters
    ----------
    singular_values : ndarray, shape (n_freq, n_chan)
    level_db : ndarray, shape (n_freq, n_chan)
        Levels re the strongest channel, dB; channels below -60 dB are ignored.
    within_db : float
        Largest gap 20 log10(s_a / s_b) of a pair, dB.

    Returns
    -------
    list of ((a, b), count)
        0-based channel numbers a < b of each pair and the number of frequencies where they are
        that close, in the order of a, then b.
    """
    s = np.asarray(singular_values, dtype=float)
    if s.ndim != 2 or s.shape[1] < 2:
        return []
    order = np.argsort(-s, axis=1, kind="stable")
    ranked = np.take_along_axis(s, order, axis=1)
    loud = np.take_along_axis(np.asarray(level_db, dtype=float), order, axis=1) > _DEGENERATE_FLOOR_DB
    with np.errstate(divide="ignore", invalid="ignore"):
        gap_db = np.abs(20.0 * np.log10(ranked[:, :-1] / ranked[:, 1:]))
    close = (gap_db < within_db) & loud[:, :-1] & loud[:, 1:]
    counts: dict[tuple[int, int], int] = {}
    for f, j in zip(*np.nonzero(close)):
        a, b = sorted((int(order[f, j]), int(order[f, j + 1])))
        counts[(a, b)] = counts.get((a, b), 0) + 1
    return sorted(counts.items())


def _pairs_text(pairs: list[tuple[tuple[int, int], int]], n_freq: int) -> str:
    return "; ".join(f"channels {a + 1} and {b + 1} at {n} of {n_freq} frequencies" for (a, b), n in pairs[:6])


def _degeneracy_notes(plan: Plan) -> list[str]:
    """The report's notes on degenerate and near-degenerate channel pairs (HTML paragraphs)."""
    ch = plan.channels
    n_freq = len(ch.axis)
    level = ch.level_db()
    exact = degenerate_pairs(ch.singular_values, level, DEGENERATE_DB)
    near = [p for p in degenerate_pairs(ch.singular_values, level, NEAR_DEGENERATE_DB)
            if p[0] not in dict(exact)]
    notes = []
    if exact:
        notes.append(f'<p class="note">Degenerate channels (singular values within {DEGENERATE_DB:g} dB, above '
                     f'{_DEGENERATE_FLOOR_DB:g} dB): {esc(_pairs_text(exact, n_freq))}. Any orthonormal basis '
                     "of such a pair is an equally valid plan, so their weights and field maps show one choice "
                     "of many; a symmetric rig has them by symmetry.</p>")
    if near:
        notes.append(f'<p class="note">Near-degenerate channels (singular values within {NEAR_DEGENERATE_DB:g} dB): '
                     f"{esc(_pairs_text(near, n_freq))}. Small placement or gain errors mix such a pair first, "
                     "so their isolation is the most fragile on the real rig: verify them on the measured "
                     "responses, or drive the pair as one two-channel group.</p>")
    return notes


def _plan_numbers(found: FoundPlan) -> tuple[str, list[list[object]]]:
    plan = found.plan
    ch = plan.channels
    hz = ch.axis.hz
    share = ch.share_of_sum_rule()
    eff = ch.effective_channels()
    picks = np.unique(np.linspace(0, len(hz) - 1, min(_MAX_FREQ_ROWS, len(hz))).round().astype(int))
    rows = [[f"{hz[f]:.5g}", int(plan.strong_channels[f]), int(plan.usable_channels[f]), f"{eff[f]:.2f}",
             _fmt(plan.estimate.counts[f], ".1f"), f"{100 * share[f].max():.1f}"] for f in picks]
    note = (f"{len(picks)} of {len(hz)} planned frequencies; all are in summary.csv." if len(picks) < len(hz)
            else f"All {len(hz)} planned frequencies.")
    return note, rows


def _measurement_rows(side: dict) -> list[list[str]]:
    """Rows naming the IR set a plan was made from (none for a free-field plan), from its ``weights.json``."""
    m = side.get("measurement")
    if not isinstance(m, dict) or not isinstance(m.get("irset"), dict):
        return []
    irs = m["irset"]
    fmt = " ".join(str(v) for v in (irs.get("format"), irs.get("format_version")) if v is not None)
    window = "whole response" if m.get("window_ms") is None else f"{m['window_ms']:g} ms after zero lag"
    smooth = "none" if m.get("smoothing_octaves") is None else f"{m['smoothing_octaves']:.3g} octave"
    return [["measured IR set", f"{irs.get('path', '')} ({fmt}; SHA-256 of {irs.get('hashed_file', '')}: "
                                f"{irs.get('sha256', '')})"],
            ["coupling units", str(m.get("units_meaning", m.get("units", "")))],
            ["window, latency removed, smoothing",
             f"{window}; {m.get('latency_samples', 0)} samples; {smooth}"]]


def _step_anchor(kind: str, found: object, root: Path) -> str:
    """The id of a result's section (a rig by its hash, everything else by its folder)."""
    return rig_anchor(found.sha256) if isinstance(found, RigGroup) else _anchor(kind, found.folder, root)


def _step_label(kind: str, found: object, root: Path) -> str:
    return found.shown.plan.rig.name if isinstance(found, RigGroup) else _rel(found.folder, root)


def _effort_table(plan: Plan, max_rows: int = 12) -> str:
    """Level, drive effort and loudest speaker of each channel at the centre frequency (HTML)."""
    ch = plan.channels
    f = centre_index(ch.axis.hz)
    effort = drive_effort_db(ch.singular_values[f:f + 1])[0]
    loudest = loudest_speaker_db(ch.drive[f])
    order = np.argsort(effort, kind="stable")[:max_rows]
    rows = [[int(j) + 1, _fmt(-effort[j], ".1f"), _fmt(effort[j], ".1f"), _fmt(loudest[j], ".1f")] for j in order]
    more = ch.n_channels - len(order)
    note = (f"Drive effort at the centre, {ch.axis.hz[f]:.5g} Hz: the extra drive a channel needs for the same output as "
            "the strongest, 20 log10(s_max / s_j), and the share of its drive on its loudest speaker, "
            "20 log10 max |v_sj| (unit-norm drive weights; the full weights are in weights.npz and weights.csv)."
            + (f" {more} weaker channel(s) not shown." if more > 0 else ""))
    return ("<h3>Drive effort per channel</h3>"
            + table(["channel", "level re strongest (dB)", "extra drive for equal output (dB)",
                     "loudest speaker's share (dB)"], rows, text_columns=())
            + f'<p class="note">{esc(note)}</p>')


def _plan_section(found: FoundPlan, root: Path, figs: list[tuple[str, bytes]]) -> str:
    plan, side = found.plan, found.sidecar
    rig = plan.rig
    hz = plan.channels.axis.hz
    parts = [f'<section id="{_anchor("plan", found.folder, root)}"><h2>Plan: {esc(_rel(found.folder, root))}</h2>',
             verdict_html(plan_verdict(found))]
    rig_info = side.get("rig", {})
    parts.append(table(["item", "value"], [
        ["rig", rig_info.get("name", rig.name)],
        ["rig source", rig_info.get("source", "")],
        ["geometry shown from", found.rig_note],
        ["speakers / microphones", f"{len(rig.speakers)} / {len(rig.mics)}"],
        ["speed of sound", f"{rig.medium.speed_of_sound:.2f} m/s"],
        ["air absorption", "ISO 9613-1" if rig_info.get("air_absorption") else "none"],
        ["kernel", plan.kernel_name],
        *_measurement_rows(side),
        ["frequencies", f"{len(hz)} from {hz[0]:.5g} Hz to {hz[-1]:.5g} Hz"],
        ["strong channels", f"within {plan.threshold_db:g} dB of the strongest"],
        ["usable channels", f"above the noise floor at an SNR of {plan.snr_db:g} dB on the strongest"],
        ["channels tracked across frequency", "yes" if plan.channels.tracked else "no"],
    ], text_columns=(0, 1)))
    if plan.estimate.warning:
        parts.append(f'<p class="note">Paraxial estimate: {esc(plan.estimate.warning)}.</p>')
    parts.extend(_degeneracy_notes(plan))
    key = str(side.get("rig", {}).get("sha256") or rig.sha256)
    parts.append(f'<p>Elements and geometry: <a href="#{rig_anchor(key)}">rig {esc(rig.name)}</a>.</p>')
    note, rows = _plan_numbers(found)
    parts.append("<h3>Channels per frequency</h3>")
    parts.append(table(["frequency (Hz)", "strong", "usable", "effective", "paraxial estimate",
                        "strongest s² (% of sum rule)"], rows, text_columns=()))
    parts.append(f'<p class="note">{esc(note)}</p>')
    parts.append(_effort_table(plan))
    parts.append(_figures_html(figs, f"plan {_rel(found.folder, root)}"))
    parts.append("</section>")
    return "\n".join(parts)


def _filters_section(found: FoundFilters, root: Path, figs: list[tuple[str, bytes]]) -> str:
    d = found.sidecar
    parts = [f'<section id="{_anchor("filters", found.folder, root)}"><h2>Filters: '
             f'{esc(_rel(found.folder, root))}</h2>', verdict_html(filters_verdict(found))]
    band = d.get("band_hz", [np.nan, np.nan])
    parts.append(table(["item", "value"], [
        ["sample rate", f"{d.get('sample_rate_hz', float('nan')):g} Hz"],
        ["taps", d.get("taps", "")],
        ["bulk delay", f"{d.get('bulk_delay_samples', '')} samples ({1e3 * float(d.get('bulk_delay_s', 0)):.2f} ms)"],
        ["band", f"{band[0]:g} Hz to {band[1]:g} Hz"],
        ["normalisation", d.get("normalisation", "")],
    ], text_columns=(0, 1)))
    rows, classes = [], {}
    check = d.get("check") or {}
    checked = {c: k for k, c in enumerate(check.get("channels", []))}
    skipped = {s.get("channel"): s.get("reason", "") for s in d.get("skipped", [])}
    for r, c in enumerate(d.get("channels", [])):
        j = c.get("channel")
        k = checked.get(j)
        verdict = "-" if k is None else ("pass" if check["passed"][k] else "fail")
        if k is not None:
            classes[(r, 4)] = verdict
        worst = None if k is None else check["worst_crosstalk_db"][k]
        rows.append([j, _fmt(c.get("level_db_at_centre"), ".1f"), "yes" if c.get("filters") else "no",
                     _fmt(worst, ".1f") if worst is not None else "-", verdict,
                     "skipped: " + skipped[j].rsplit(", ", 1)[-1] if j in skipped else ""])
    parts.append("<h3>Channels</h3>" + table(
        ["channel", f"level at {_fmt(d.get('centre_hz'), '.5g')} Hz (dB)", "filters written", "worst planned crosstalk (dB)", "check", "note"],
        rows, text_columns=(5,), cell_classes=classes))
    if check:
        parts.append(f'<p class="note">Check limit {esc(check.get("limit_db"))} dB: the kept channels\' filters '
                     "drive the simulated free-field rig and the leakage between them is measured.</p>")
    parts.append(_figures_html(figs, f"filters {_rel(found.folder, root)}"))
    parts.append("</section>")
    return "\n".join(parts)


def _sweep_text(session: dict) -> str:
    """The measurement sweep in one line, from a session record."""
    sweep = session.get("sweep") or session.get("settings", {}).get("sweep") or {}
    if not isinstance(sweep, dict) or not sweep:
        return "not recorded"
    parts = []
    for key, fmt in (("kind", "{}"), ("f1_hz", "{:g} Hz"), ("f2_hz", "to {:g} Hz"), ("duration_s", "{:g} s"),
                     ("sweep_peak_dbfs", "peak {:.1f} dBFS")):
        if sweep.get(key) is not None:
            parts.append(fmt.format(sweep[key]))
    repeats = session.get("settings", {}).get("repeats")
    if repeats:
        parts.append(f"{repeats} sweep(s) averaged per take")
    return ", ".join(parts)


def _irset_section(found: FoundIRSet, root: Path, figs: list[tuple[str, bytes]]) -> str:
    irs = found.irs
    parts = [f'<section id="{_anchor("irset", found.folder, root)}"><h2>Impulse responses: '
             f'{esc(_rel(found.folder, root))}</h2>', verdict_html(irset_verdict(found))]
    rows = [["written by", found.role],
            ["speakers / microphones", f"{irs.n_spk} / {irs.n_mic}"],
            ["sample rate", f"{irs.sample_rate_hz:g} Hz"],
            ["length", f"{irs.n_samples} samples ({1e3 * irs.n_samples / irs.sample_rate_hz:.1f} ms)"],
            ["units", irs.units],
            ["latency removed", f"{irs.latency_removed_samples} samples"],
            ["zero lag", f"sample {irs.zero_lag_samples} ({1e3 * irs.zero_lag_samples / irs.sample_rate_hz:.1f} ms "
                         "kept before it for the pre-ringing)" if irs.zero_lag_samples else "sample 0"]]
    if found.session:
        rows.append(["sweep", _sweep_text(found.session)])
    parts.append(table(["item", "value"], rows, text_columns=(0, 1)))
    if irs.warnings:
        parts.append("<h3>Warnings</h3><ul>" + "".join(f"<li>{esc(w)}</li>" for w in irs.warnings[:40]) + "</ul>")
        if len(irs.warnings) > 40:
            parts.append(f'<p class="note">{len(irs.warnings) - 40} more warnings in {MANIFEST_NAME}.</p>')
    if found.marked_takes:
        parts.append("<h3>Marked takes</h3><ul>" + "".join(f"<li>{esc(t)}</li>" for t in found.marked_takes)
                     + "</ul>")
    parts.append(_figures_html(figs, f"impulse responses {_rel(found.folder, root)}"))
    parts.append("</section>")
    return "\n".join(parts)


def _verification_verdicts(found: FoundVerification) -> list[list[object]]:
    """One row per wanted channel: verdict, worst isolation and where, lost count, median gain."""
    col = found.channel_columns
    channel, hz, iso_all, gain_all = col["channel"], col["frequency_hz"], col["isolation_db"], col["gain_db"]
    lost_all = np.nan_to_num(col["lost"])
    judged_all = col.get("judged", np.ones(len(channel))) != 0
    passed = dict(zip(found.doc.get("channels", []), found.doc.get("passed", [])))
    rows = []
    for c in np.unique(channel[np.isfinite(channel)]).astype(int):
        mine = channel == c
        iso, gain = iso_all[mine], gain_all[mine]
        lost, judged = int(lost_all[mine].sum()), int(judged_all[mine].sum())
        finite = np.isfinite(iso)
        worst = int(np.flatnonzero(finite)[np.argmin(iso[finite])]) if finite.any() else None
        ok = passed.get(int(c), lost == 0)
        median_gain = float(np.nanmedian(gain)) if np.any(np.isfinite(gain)) else np.nan
        rows.append([int(c), "PASS" if ok else "FAIL",
                     "-" if worst is None else _fmt(iso[worst], ".1f"),
                     "-" if worst is None else _fmt(float(hz[mine][worst]), ".5g"),
                     f"{lost} of {judged} judged", _fmt(median_gain, ".1f")])
    return rows


def _gain_reference_text(doc: dict) -> str:
    ref = doc.get("gain_reference", "plan")
    common = doc.get("common_gain_db")
    text = ("the plan's singular values, in the plan's units" if ref == "plan" else
            "the plan times one common factor fitted to the measurement")
    if common is not None:
        text += f"; common factor {common:+.2f} dB re plan"
    if doc.get("gain_reference_reason"):
        text += f" ({doc['gain_reference_reason']})"
    return text


def _verification_section(found: FoundVerification, root: Path, figs: list[tuple[str, bytes]]) -> str:
    d = found.doc
    parts = [f'<section id="{_anchor("verify", found.folder, root)}"><h2>Verification: '
             f'{esc(_rel(found.folder, root))}</h2>', verdict_html(verification_verdict(found))]
    parts.append(table(["item", "value"], [
        *[list(row) for row in verified_sources(found)], ["measured impulse responses", d.get("irset_dir", "")],
        ["isolation limit", f"{d.get('isolation_db', '')} dB"], ["measured units", d.get("irset_units", "")],
        ["window", "none" if d.get("window_ms") is None else f"{d.get('window_ms')} ms"],
        ["smoothing", "none" if d.get("smoothing_octaves") is None
         else f"{d['smoothing_octaves']:.3g} octave, complex, about each direct arrival"],
        ["wanted channels", d.get("wanted_channels_rule", "all planned channels")],
        ["gain reference", _gain_reference_text(d)],
    ], text_columns=(0, 1)))
    rows = _verification_verdicts(found)
    classes = {(r, 1): ("pass" if row[1] == "PASS" else "fail") for r, row in enumerate(rows)}
    parts.append("<h3>Channels</h3>" + table(
        ["channel", "verdict", "worst isolation (dB)", "at (Hz)", "lost at", "median gain re reference (dB)"],
        rows, text_columns=(), cell_classes=classes))
    if d.get("gain_note"):
        parts.append(f'<p class="note">{esc(d["gain_note"])}</p>')
    parts.append(_figures_html(figs, f"verification {_rel(found.folder, root)}"))
    parts.append("</section>")
    return "\n".join(parts)


def _study_section(found: FoundStudy, root: Path, figs: list[tuple[str, bytes]]) -> str:
    if found.kind in ("zones", "layout", "comparison"):
        return _design_study_section(found, root, figs)
    side = found.sidecar
    title = {"capacity": "Capacity study", "tolerance": "Tolerance study"}[found.kind]
    parts = [f'<section id="{_anchor("study", found.folder, root)}"><h2>{title}: {esc(_rel(found.folder, root))}</h2>',
             verdict_html(study_verdict(found))]
    conventions = side.get("conventions", {})
    rows = [[k.replace("_", " "), str(v)] for k, v in conventions.items()]
    if found.kind == "tolerance":
        rows = [[k.replace("_", " "), str(v)] for k, v in side.get("settings", {}).items()] + rows
    parts.append(table(["item", "value"], [["plan", str(side.get("plan", ""))]] + rows, text_columns=(0, 1)))
    parts.append(_figures_html(figs, f"{found.kind} study {_rel(found.folder, root)}"))
    parts.append("</section>")
    return "\n".join(parts)


def _design_study_section(found, root: Path, figs: list[tuple[str, bytes]]) -> str:
    """A zones, layout or comparison study (tables and figures from :mod:`arrayplan.report.studies`)."""
    from .studies import STUDY_NAMES, study_section_html

    return "\n".join([f'<section id="{_anchor("study", found.folder, root)}"><h2>{STUDY_NAMES[found.kind]}: '
                      f'{esc(_rel(found.folder, root))}</h2>', verdict_html(study_verdict(found)),
                      study_section_html(found),
                      _figures_html(figs, f"study {_rel(found.folder, root)}"), "</section>"])


def _provenance_of(path: Path) -> dict:
    if path.suffix.lower() == ".sofa":
        return _sofa_provenance(path)
    try:
        doc = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
    return doc.get("provenance", {}) if isinstance(doc, dict) else {}


def _sofa_provenance(path: Path) -> dict:
    """The provenance arrayplan stored in a SOFA file, else the file's own creation date and producer."""
    try:
        import netCDF4

        with netCDF4.Dataset(str(path)) as nc:
            attrs = {k: nc.getncattr(k) for k in nc.ncattrs()}
    except (ImportError, OSError):
        return {}
    try:
        prov = json.loads(attrs.get("ArrayplanIRSet", "{}")).get("provenance", {})
    except (ValueError, AttributeError):
        prov = {}
    return prov or {"tool_version": f"{attrs.get('APIName', '?')} {attrs.get('APIVersion', '')}".strip(),
                    "written_utc": attrs.get("DateCreated", "?")}


def _provenance_section(results: ProjectResults, root: Path, generated: str) -> str:
    rows = []
    sources = ([(fp.folder / "weights.json", "plan") for fp in results.plans]
               + [(ff.folder / "filters.json", "filters") for ff in results.filters]
               + [(fi.folder if fi.folder.is_file() else fi.folder / MANIFEST_NAME, "impulse responses")
                  for fi in results.irsets]
               + [(fv.folder / "verify.json", "verification") for fv in results.verifications])
    for path, kind in sources:
        prov = _provenance_of(path)
        sha = str(prov.get("rig_sha256", "-"))
        rows.append([kind, _rel(path, root), prov.get("tool_version", "?"), prov.get("written_utc", "?"),
                     sha[:16] + "..." if len(sha) > 16 else sha])
    rig_hashes = sorted({fp.plan.rig.sha256 for fp in results.plans})
    parts = ['<section id="provenance"><h2>Provenance</h2>',
             table(["result", "file", "arrayplan version", "written (UTC)", "rig SHA-256"], rows,
                   text_columns=(0, 1, 2, 3, 4)),
             f'<p class="note">This report: arrayplan {esc(__version__)}, generated {esc(generated)} UTC from '
             f'{esc(str(root.resolve()))}. Rig geometry hash(es) of the plans: '
             f'{esc(", ".join(rig_hashes) or "none")}. Sign convention: {esc(SIGN_CONVENTION)}. '
             "Units: metres, hertz, seconds, pascals; levels in dB as labelled.</p>"]
    if results.problems:
        parts.append("<h3>Results that could not be read</h3><ul>"
                     + "".join(f"<li>{esc(p)}</li>" for p in results.problems) + "</ul>")
    parts.append("</section>")
    return "\n".join(parts)


def build_report(project_dir: str | os.PathLike, *, rig: Rig | None = None, title: str | None = None,
                 progress: Callable[[int, int], None] | None = None, workers: int | None = None) -> str:
    """The report of everything under `project_dir`, as one HTML document.

    Parameters
    ----------
    project_dir : path
        Folder holding plan, filters, measurement and verification results
        (searched recursively, see :mod:`arrayplan.report.discover`).
    rig : Rig, optional
        The rig file's content, where the plans' sidecars no longer point to it.
    title : str, optional
        Page title (default: the folder's name).
    progress : callable, optional
        ``progress(done, total)`` after each figure, then after each section.
    workers : int, optional
        Worker processes drawing the figures (default 1: drawn here; 0:
        the cores this process may use).  The page is the same either way
        (see :mod:`arrayplan.report.render`).

    Returns
    -------
    str
        A self-contained HTML5 document (inline style, PNG data URIs, no scripts).

    Raises
    ------
    InputError
        When the folder does not exist or holds no arrayplan results.
    """
    root = Path(project_dir)
    results = find_results(root, rig=rig)
    if results.empty:
        detail = f" ({'; '.join(results.problems)})" if results.problems else ""
        raise InputError("no arrayplan results found" + detail, source=str(root),
                         fix="write results into this folder first ('arrayplan plan', then filters, measure, verify)")
    generated = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
    title = title or f"arrayplan report: {root.resolve().name}"
    steps = ([("rig", g) for g in rig_groups(results.plans)]
             + [("plan", fp) for fp in results.plans] + [("filters", ff) for ff in results.filters]
             + [("irset", fi) for fi in results.irsets] + [("verify", fv) for fv in results.verifications]
             + [("study", fs) for fs in results.studies])
    n_figs = sum(len(figure_makers(kind, found)) for kind, found in steps)
    total = n_figs + len(steps) + 1
    step_progress = None if progress is None else (lambda done, _n: progress(done, total))
    rendered = render_figures(steps, workers=workers, progress=step_progress)
    builders = {"rig": (rig_section, "Rig"), "plan": (_plan_section, "Plan"), "filters": (_filters_section, "Filters"),
                "irset": (_irset_section, "Impulse responses"), "verify": (_verification_section, "Verification"),
                "study": (_study_section, "Study")}
    toc = []
    sections = []
    entries = []
    for done, ((kind, found), figs) in enumerate(zip(steps, rendered), n_figs + 1):
        build, name = builders[kind]
        sections.append(build(found, root, figs))
        anchor, label = _step_anchor(kind, found, root), f"{name}: {_step_label(kind, found, root)}"
        toc.append(f'<li><a href="#{anchor}">{esc(label)}</a></li>')
        verdict = verdict_of(kind, found)
        if verdict is not None:
            entries.append((kind, anchor, label, verdict))
        if progress is not None:
            progress(done, total)
    header = (f"<header><h1>{esc(title)}</h1><p class=\"meta\">Generated {esc(generated)} UTC by arrayplan "
              f"{esc(__version__)} from <code>{esc(str(root.resolve()))}</code>.</p></header>")
    caution = ('<section class="caution" id="caution"><h2>Caution</h2>'
               "<p>Measuring and verifying a rig plays loud test signals through real loudspeakers. "
               "The drive filters in this project feed loudspeakers too.</p>"
               f"<pre>{esc(CAUTION_TEXT.strip())}</pre></section>")
    nav = ('<nav id="contents"><h2>Contents</h2><ol><li><a href="#summary">Conclusions</a></li>'
           '<li><a href="#caution">Caution</a></li>' + "".join(toc)
           + '<li><a href="#provenance">Provenance</a></li></ol></nav>')
    body = "\n".join([header, conclusions(entries, centre_note(results, root)), nav, caution, *sections,
                      _provenance_section(results, root, generated)])
    if progress is not None:
        progress(total, total)
    return page(title, body)


def write_report(project_dir: str | os.PathLike, out_path: str | os.PathLike, **kwargs) -> Path:
    """Build the report (see :func:`build_report`) and write it atomically to `out_path`.

    Parameters
    ----------
    project_dir : path
        As for :func:`build_report`.
    out_path : path
        The HTML file written; replaced whole or left as it was.
    **kwargs
        `rig`, `title`, `progress` and `workers` of :func:`build_report`.

    Returns
    -------
    Path
        `out_path`.
    """
    text = build_report(project_dir, **kwargs)
    return write_text_atomic(out_path, text)
