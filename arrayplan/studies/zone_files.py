"""Files of the zones study: tables, a JSON sidecar, figures and drive filters.

Files written to the output folder:

* ``zones-metrics.csv``: method, regularisation, frequency_hz, contrast_db,
  effort_db, error_db, chosen (1 for the design used for maps and filters).
* ``zones-weights.csv``: the chosen design of each method (method,
  frequency_hz, speaker, re, im), source strength per unit input.
* ``zones.json``: zones, target, regularisation, chosen designs, band means,
  the tolerance and filter checks when made, provenance and rig hash.
* Figures: ``zones-tradeoff.png``, ``zones-metrics.png``, ``zones-field.png``
  and, with a tolerance, ``zones-tolerance.png``.
* With filters: ``zone-drive.wav`` (float32, one audio channel per speaker in
  rig order) and ``zone-filter-check.csv``.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import soundfile as sf

from ..formats.study_sidecars import stamp_study_sidecar
from ..formats.atomic_files import write_json_atomic, write_text_atomic
from ..formats.fileio import provenance
from ..formats.output_folders import staged_output_dir
from ..channels.field import PlaneGrid, channel_field
from ..rig import Rig
from ..safety import CAUTION_NOTE
from .zone_filters import ZoneFilters
from .zones import ZoneStudy, zone_coupling
from ._tables import csv_text as _csv

__all__ = ["ZoneTolerance", "write_zone_study", "field_grid", "summary_lines"]


@dataclass(frozen=True)
class ZoneTolerance:
    """Contrast of the chosen designs on perturbed rigs.

    Attributes
    ----------
    sigma_m : float
        Position error per coordinate, m.
    trials, seed : int
        Number of perturbed rigs, and the seed of their random errors.
    contrast_db : dict of str to ndarray, shape (trials, n_freq)
        Contrast of each method's chosen design (keyed by method) on each
        perturbed rig at each planned frequency, dB.
    """

    sigma_m: float
    trials: int
    seed: int
    contrast_db: dict


def field_grid(rig: Rig, study: ZoneStudy, resolution: int = 121) -> PlaneGrid:
    """A horizontal (xy) grid at the zones' mean height over the speakers and zones, 20 % margin.

    Parameters
    ----------
    rig : Rig
        The rig (its speaker positions, m).
    study : ZoneStudy
        The study (its bright and dark zones' points, m).
    resolution : int
        Grid points along x; along y in proportion to the extent (at least 2).

    Returns
    -------
    PlaneGrid
        An ``"xy"`` plane at the mean height of the zones' points (m).
    """
    zpts = np.vstack([z.positions for z in (*study.bright, *study.dark)])
    pts = np.vstack([rig.speakers.positions, zpts])
    lo, hi = pts[:, :2].min(axis=0), pts[:, :2].max(axis=0)
    size = np.maximum(hi - lo, 0.2)
    lo, hi = lo - 0.2 * size, hi + 0.2 * size
    u = np.linspace(lo[0], hi[0], resolution)
    v = np.linspace(lo[1], hi[1], max(2, int(round(resolution * (hi[1] - lo[1]) / (hi[0] - lo[0])))))
    return PlaneGrid("xy", float(zpts[:, 2].mean()), u, v)


def _band_means(study: ZoneStudy) -> dict:
    out = {}
    for key, res in study.results.items():
        k = res.chosen
        out[key] = {"regularisation": None if key == "channel" else float(res.regularisation[k]),
                    "mean_contrast_db": float(res.contrast_db[k].mean()),
                    "min_contrast_db": float(res.contrast_db[k].min()),
                    "mean_effort_db": float(res.effort_db[k].mean()),
                    "max_effort_db": float(res.effort_db[k].max()),
                    "mean_error_db": float(res.error_db[k].mean())}
    return out


def summary_lines(study: ZoneStudy) -> list[str]:
    """What the command prints: one line per method's chosen design.

    Parameters
    ----------
    study : ZoneStudy
        The study.

    Returns
    -------
    list of str
        The zones and frequencies, a header, then per method its
        regularisation and its band mean (and min) contrast, mean (and max)
        effort and mean matching error, dB.
    """
    lines = [f"zones: bright {', '.join(z.name for z in study.bright)}; dark {', '.join(z.name for z in study.dark)}; "
             f"{len(study.axis)} frequencies {study.axis.hz[0]:g}-{study.axis.hz[-1]:g} Hz ({study.kernel_name})",
             f"{'method':28s} {'reg.':>8s} {'contrast dB':>16s} {'effort dB':>14s} {'match err dB':>13s}",
             f"{'':28s} {'':>8s} {'mean (min)':>16s} {'mean (max)':>14s} {'mean':>13s}"]
    from ..plots.zones import METHOD_LABELS
    for key, m in _band_means(study).items():
        reg = "-" if m["regularisation"] is None else f"{m['regularisation']:g}"
        lines.append(f"{METHOD_LABELS[key]:28s} {reg:>8s} {m['mean_contrast_db']:7.1f} ({m['min_contrast_db']:5.1f}) "
                     f"{m['mean_effort_db']:6.1f} ({m['max_effort_db']:5.1f}) {m['mean_error_db']:13.1f}")
    return lines


def _sidecar(rig: Rig, study: ZoneStudy, tolerance: ZoneTolerance | None, filters: ZoneFilters | None,
             filter_method: str | None, map_hz: float) -> dict:
    doc = {
        "provenance": provenance(rig_sha256=rig.sha256, rig_source=rig.source),
        "kernel": study.kernel_name,
        "frequencies_hz": study.axis.hz,
        "zones": [{"name": z.name, "role": z.role, "use": use, "points": len(z),
                   "microphones": z.mic_indices is not None}
                  for use, zs in (("bright", study.bright), ("dark", study.dark)) for z in zs],
        "target": {"kind": study.target.kind, "vector": list(study.target.vector),
                   "description": study.target.describe()},
        "reference_speaker": rig.speakers.names[study.reference_speaker],
        "regularisation_relative": study.results["contrast"].regularisation,
        "max_effort_db": study.max_effort_db,
        "chosen": _band_means(study),
        "map_frequency_hz": map_hz,
        "definitions": {
            "contrast_db": "10 log10(mean |p|^2 in bright zone / mean |p|^2 in dark zone)",
            "effort_db": "10 log10(sum |w|^2 / |q_ref|^2), q_ref: reference speaker alone giving the same "
                         "mean |p|^2 in the bright zone",
            "error_db": "10 log10(sum |p - p_target|^2 / sum |p_target|^2) in the bright zone",
        },
    }
    if tolerance is not None:
        doc["tolerance"] = {"sigma_m": tolerance.sigma_m, "trials": tolerance.trials, "seed": tolerance.seed,
                            "median_contrast_db": {k: np.median(v, axis=0) for k, v in tolerance.contrast_db.items()},
                            "p10_contrast_db": {k: np.percentile(v, 10, axis=0)
                                                for k, v in tolerance.contrast_db.items()}}
    if filters is not None:
        doc["filters"] = {"method": filter_method, "file": "zone-drive.wav", "sample_rate_hz": filters.sample_rate_hz,
                          "taps": int(filters.taps.shape[0]), "bulk_delay_samples": int(filters.taps.shape[0] // 2),
                          "band_hz": list(filters.band_hz), "channels": list(rig.speakers.names),
                          "band_contrast_realised_db": filters.band_contrast_db,
                          "caution": CAUTION_NOTE}
    return doc


def write_zone_study(rig: Rig, study: ZoneStudy, out_dir: str | Path, *, map_hz: float,
                     tolerance: ZoneTolerance | None = None, filters: ZoneFilters | None = None,
                     filter_method: str | None = None, figures: bool = True) -> list[Path]:
    """Write every file of the study to `out_dir` atomically (all or nothing); return the paths.

    Parameters
    ----------
    rig : Rig
        The rig studied (names, positions, hash and source go in the files).
    study : ZoneStudy
        Every method's designs and metrics.
    out_dir : path
        The study folder; an earlier arrayplan output there is replaced whole.
    map_hz : float
        Frequency of the field map, Hz (the nearest planned frequency is drawn).
    tolerance : ZoneTolerance, optional
        Contrast on perturbed rigs, written to the sidecar and drawn.
    filters : ZoneFilters, optional
        Drive filters, written as ``zone-drive.wav`` with their check.
    filter_method : str, optional
        The method the filters realise (``"contrast"`` or ``"matching"``),
        recorded in the sidecar.
    figures : bool
        Also draw and save the PNG figures.

    Returns
    -------
    list of Path
        Every file written, sorted by name.
    """
    hz = study.axis.hz
    rows, wrows = [], []
    for key, res in study.results.items():
        for k, beta in enumerate(res.regularisation):
            for f in range(len(hz)):
                rows.append([key, "" if np.isnan(beta) else float(beta), float(hz[f]), float(res.contrast_db[k, f]),
                             float(res.effort_db[k, f]), float(res.error_db[k, f]), int(k == res.chosen)])
        w = res.weights[res.chosen]
        for f in range(len(hz)):
            for s, name in enumerate(rig.speakers.names):
                wrows.append([key, float(hz[f]), name, float(w[f, s].real), float(w[f, s].imag)])
    with staged_output_dir(out_dir) as stage:
        write_text_atomic(stage / "zones-metrics.csv", _csv(
            ["method", "regularisation", "frequency_hz", "contrast_db", "effort_db", "error_db", "chosen"], rows))
        write_text_atomic(stage / "zones-weights.csv", _csv(["method", "frequency_hz", "speaker", "re", "im"], wrows))
        write_json_atomic(stage / "zones.json", stamp_study_sidecar(
            _sidecar(rig, study, tolerance, filters, filter_method, map_hz), "zones"))
        if filters is not None:
            sf.write(stage / "zone-drive.wav", filters.taps.astype(np.float32), int(round(filters.sample_rate_hz)),
                     subtype="FLOAT")
            write_text_atomic(stage / "zone-filter-check.csv", _csv(
                ["frequency_hz", "designed_contrast_db", "realised_contrast_db"],
                [[float(a), float(b), float(c)] for a, b, c in
                 zip(filters.check_hz, filters.designed_db, filters.realised_db)]))
        if figures:
            _figures(rig, study, stage, map_hz, tolerance)
        names = sorted(p.name for p in stage.iterdir())
    return [Path(out_dir) / n for n in names]


def _figures(rig: Rig, study: ZoneStudy, stage: Path, map_hz: float, tolerance: ZoneTolerance | None) -> None:
    from matplotlib.figure import Figure

    from ..plots.zones import METHOD_LABELS, plot_tolerance, plot_tradeoff, plot_zone_field, plot_zone_metrics

    plot_tradeoff(study).savefig(stage / "zones-tradeoff.png", dpi=120)
    plot_zone_metrics(study).savefig(stage / "zones-metrics.png", dpi=120)
    grid = field_grid(rig, study)
    f = int(np.argmin(np.abs(study.axis.hz - map_hz)))
    fig = Figure(figsize=(4.2 * len(study.results), 5.0), layout="constrained")
    axes = fig.subplots(1, len(study.results))
    zones = (*study.bright, *study.dark)
    for ax, (key, res) in zip(np.atleast_1d(axes), study.results.items()):
        w = res.weights[res.chosen, f]
        p = channel_field(rig, w, float(study.axis.hz[f]), grid)
        g_b = zone_coupling(rig, study.bright, study.axis.hz[f:f + 1])[0]       # room or free field, as the map
        ref = float(np.sqrt(np.mean(np.abs(g_b @ w) ** 2)))
        plot_zone_field(rig, grid, p, zones, f"{METHOD_LABELS[key]}\n{study.axis.hz[f]:.0f} Hz, contrast "
                        f"{res.contrast_db[res.chosen, f]:.1f} dB", ax=ax, reference=ref)
    fig.savefig(stage / "zones-field.png", dpi=120)
    if tolerance is not None:
        fig = Figure(figsize=(6.5, 3.0 * len(tolerance.contrast_db)), layout="constrained")
        axes = np.atleast_1d(fig.subplots(len(tolerance.contrast_db), 1))
        for ax, (key, pert) in zip(axes, tolerance.contrast_db.items()):
            res = study.results[key]
            plot_tolerance(study.axis.hz, res.contrast_db[res.chosen], pert, tolerance.sigma_m,
                           METHOD_LABELS[key], ax=ax)
        fig.savefig(stage / "zones-tolerance.png", dpi=120)

