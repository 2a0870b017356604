"""The filter set: FIR filters for a DSP as WAV taps per channel, a JSON sidecar, the weights table, the check.

``arrayplan filters`` writes the folder (:func:`write_filter_set`); ``arrayplan
verify`` reads it back (:func:`read_filter_set`) and the channel probe reads
its sidecar for the speakers' names (:func:`read_filter_set_sidecar`).
Files (channel numbers NN are 1-based, the plan's tracked numbering):

* ``channel-NN-drive.wav``: float32 WAV, one audio channel per speaker in
  rig order, ``taps`` samples at the design rate.
* ``channel-NN-combine.wav``: likewise, one audio channel per microphone.
* ``filters.json``: ``format`` ``"arrayplan-filter-set"`` and
  ``format_version`` 1 (:mod:`arrayplan.formats._versioning`), rate, taps,
  delays, band, channel strengths, skipped channels with reasons, element
  names by order, provenance and rig hash.  The previous release wrote it
  without either key; such files are still read, for one release.
* ``weights.csv``: the planned weights on the in-band design bins
  (frequency_hz, channel, side, element, re, im).
* ``filters.json`` also holds the plan on the in-band design bins
  (``plan_on_bins``: frequencies and every channel's singular value), the
  reference ``arrayplan verify`` measures realised gains against.
* ``filters-matrix.txt``: the whole filter matrix as plain text: a header
  (``#`` lines: rate, taps, delays, band, element order, caution), then one
  block per channel and element, a ``[channel NN drive NAME]`` line followed
  by its taps on one line, separated by spaces (the WAV files' float32
  values, written exactly).
* ``channel-NN-response.png``: magnitude and phase of the channel's drive
  and combine filters.
* With a check: ``check.csv`` and ``crosstalk.png``.
"""

from __future__ import annotations

import csv
import io
import os
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import soundfile as sf

from ..errors import InputError
from ..rig import Rig
from ..safety import CAUTION_NOTE
from ._versioning import UNMARKED, check as check_version, read_json_document, stamp
from .atomic_files import write_json_atomic, write_text_atomic
from .fileio import provenance
from .output_folders import staged_output_dir

if TYPE_CHECKING:   # the filters package imports this module: its parts are imported where they are used
    from ..filters.check import FilterCheck
    from ..filters.design import FilterSet
    from ..filters.source import DesignSource

__all__ = ["FILTER_SET_FORMAT", "FILTER_SET_FORMAT_VERSION", "FILTER_SET_SIDECAR", "FilterFiles",
           "filter_set_sidecar", "read_filter_set", "read_filter_set_sidecar", "write_filter_set"]

FILTER_SET_FORMAT = "arrayplan-filter-set"
FILTER_SET_FORMAT_VERSION = 1
#: The sidecar's file name in the folder.
FILTER_SET_SIDECAR = "filters.json"
_FIX = "point at a folder written by the filters command"


def _finite(x: float) -> float | None:
    return float(x) if np.isfinite(x) else None


def _design_source(source: DesignSource | Rig) -> DesignSource:
    from ..filters.source import source_from_rig

    return source_from_rig(source) if isinstance(source, Rig) else source


def filter_set_sidecar(source: DesignSource | Rig, filters: FilterSet, check: FilterCheck | None = None) -> dict:
    """The content of ``filters.json``.

    Parameters
    ----------
    source : DesignSource or Rig
        What the filters were designed from, or a rig for its model kernel.
    filters : FilterSet
    check : FilterCheck, optional

    Returns
    -------
    dict
        JSON-ready, with ``format`` and ``format_version`` first.
    """
    from ..filters.design import TRANSITION_MIN_BINS, TRANSITION_OCTAVES, TUKEY_ALPHA

    source = _design_source(source)
    fs = filters.sample_rate_hz
    s_centre = filters.plan.singular_values[filters.plan.axis.index_of(filters.centre_hz)]
    band = filters.in_band()
    doc = stamp({
        "provenance": provenance(command="arrayplan filters", rig_sha256=source.origin.get("rig_sha256"),
                                 rig=source.origin.get("rig")),
        "designed_from": source.origin,
        "kernel": filters.kernel_name,
        "sample_rate_hz": fs,
        "taps": filters.taps,
        "bulk_delay_samples": filters.bulk_delay_samples,
        "bulk_delay_s": filters.bulk_delay_samples / fs,
        "drive_alignment_samples": filters.drive_alignment_samples,
        "combine_alignment_samples": filters.combine_alignment_samples,
        "drive_filter_delay_samples": filters.drive_delay_samples,
        "combine_filter_delay_samples": filters.combine_delay_samples,
        "band_hz": list(filters.band_hz),
        "band_window": f"raised-cosine transitions outside the band, each {TRANSITION_OCTAVES:.4f} octave or "
                       f"{TRANSITION_MIN_BINS} design bins ({TRANSITION_MIN_BINS * fs / filters.taps:.6g} Hz) wide, "
                       "whichever is wider (narrower edges ring through the band); zero at DC and Nyquist",
        "time_window": f"Tukey, alpha {TUKEY_ALPHA}",
        "filter_spectrum": "H(f) = weight(f) * W(f) * exp(-j*2*pi*f*(bulk_delay - alignment)/fs), "
                           "alignment = the weights' own group delay in samples (per side)",
        "normalisation": "unit drive energy in band: on every in-band design bin, before the time window, "
                         "sum over speakers of |H(f)|^2 = 1 (same for mics), so a channel's end-to-end gain is "
                         "its singular value s there; the realised taps hold it between and on the bins within "
                         "check.drive_energy_error_db and check.combine_energy_error_db (worst over a grid "
                         "check.grid_factor times finer than the bins), when the check was run",
        "channel_numbering": "1-based, channels tracked across frequency from the lowest design bin",
        "centre_hz": filters.centre_hz,
        "min_level_db": filters.min_level_db,
        "channel_choice": "a channel gets filters when its power coupling comes within min_level_db of the "
                          "strongest channel on one or more in-band design bins; strong_hz lists where it does",
        "plan_on_bins": {"frequency_hz": filters.plan.axis.hz[band].tolist(),
                         "singular_value": filters.plan.singular_values[band].tolist(),
                         "definition": "the planned singular value of every channel (columns, 1-based order) on "
                                       "each in-band design bin (rows), unit of the kernel's coupling"},
        "channels": [
            {"channel": j + 1, "singular_value_at_centre": float(s_centre[j]),
             "level_db_at_centre": _finite(filters.level_db[j]),
             "best_level_db": _finite(np.max(filters.band_level_db[:, j])),
             "strong_hz": [list(r) for r in filters.strong_ranges_hz(j)],
             "filters": j in filters.kept,
             "drive_file": f"channel-{j + 1:02d}-drive.wav" if j in filters.kept else None,
             "combine_file": f"channel-{j + 1:02d}-combine.wav" if j in filters.kept else None}
            for j in range(filters.plan.n_channels)],
        "skipped": [{"channel": j + 1, "reason": why} for j, why in filters.skipped],
        "speakers": list(source.speaker_names),
        "microphones": list(source.mic_names),
        "sign_convention": provenance()["sign_convention"],
        "caution": CAUTION_NOTE,
    }, FILTER_SET_FORMAT, FILTER_SET_FORMAT_VERSION)
    if check is not None:
        doc["check"] = {
            "limit_db": check.limit_db, "rig_ir_samples": check.ir_samples,
            "channels": [c + 1 for c in check.channels],
            "grid_factor": check.grid_factor,
            "gain_error_db": check.gain_error_db,
            "gain_error_definition": "worst in-band |20 log10(|T_jj| / g_j)| in dB over a grid grid_factor times "
                                     "finer than the design bins; g_j = |c_j^T G(f) d_j| with the planned weights of "
                                     "the nearest design bin (= the singular value s_j on the bins)",
            "gain_error_on_bins_db": check.bin_gain_error_db,
            "drive_energy_error_db": check.drive_energy_error_db,
            "combine_energy_error_db": check.combine_energy_error_db,
            "energy_error_definition": "worst in-band |10 log10(sum over elements of |H(f)|^2)| in dB over the same "
                                       "grid: the realised filters' departure from unit energy",
            "worst_crosstalk_db": [float(x) if np.isfinite(x) else None for x in check.worst_crosstalk_db()],
            "crosstalk_db": [[None if not np.isfinite(x) else float(x) for x in row] for row in check.crosstalk_db],
            "crosstalk_definition": "[i][j] = worst in-band |T_ij|/|T_ii| in dB, output i, input j",
            "latency_samples": check.latency_samples,
            "passed": [bool(p) for p in check.passed()],
        }
    return doc


def _weights_csv(source: DesignSource, filters: FilterSet) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["frequency_hz", "channel", "side", "element", "re", "im"])
    mask = filters.in_band()
    hz = filters.plan.axis.hz[mask]
    for side, names, weights in (("drive", source.speaker_names, filters.plan.drive[mask]),
                                 ("combine", source.mic_names, filters.plan.combine[mask])):
        for fi, f in enumerate(hz):
            for j in filters.kept:
                for e, name in enumerate(names):
                    z = weights[fi, e, j]
                    w.writerow([f"{f:.6g}", j + 1, side, name, f"{z.real:.9g}", f"{z.imag:.9g}"])
    return buf.getvalue()


def _check_csv(check: FilterCheck) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["channel", "gain_error_db", "gain_error_on_bins_db", "drive_energy_error_db",
                "combine_energy_error_db", "worst_crosstalk_db", "worst_from_channel", "latency_samples", "verdict"])
    worst = check.worst_crosstalk_db()
    for k, c in enumerate(check.channels):
        row = check.crosstalk_db[k]
        src = check.channels[int(np.nanargmax(row))] + 1 if len(check.channels) > 1 else ""
        w.writerow([c + 1, f"{check.gain_error_db[k]:.3f}", f"{check.bin_gain_error_db[k]:.3f}",
                    f"{check.drive_energy_error_db[k]:.3f}", f"{check.combine_energy_error_db[k]:.3f}",
                    f"{worst[k]:.1f}", src,
                    int(check.latency_samples[k]), "pass" if check.passed()[k] else "fail"])
    return buf.getvalue()


def _matrix_text(source: DesignSource, filters: FilterSet) -> str:
    """``filters-matrix.txt``: header, then each channel's and element's taps on one line."""
    fs = filters.sample_rate_hz
    head = [f"arrayplan FIR filter matrix, {len(filters.kept)} channels ({source.name})",
            f"sample_rate_hz {fs:g}", f"taps {filters.taps}",
            f"bulk_delay_samples {filters.bulk_delay_samples}",
            f"drive_filter_delay_samples {filters.drive_delay_samples}",
            f"combine_filter_delay_samples {filters.combine_delay_samples}",
            f"band_hz {filters.band_hz[0]:g} {filters.band_hz[1]:g}",
            f"channels {' '.join(str(j + 1) for j in filters.kept)}",
            f"speakers {' '.join(source.speaker_names)}", f"microphones {' '.join(source.mic_names)}",
            "layout: a [channel NN drive|combine ELEMENT] line, then that filter's taps (float32) on one line",
            CAUTION_NOTE]
    lines = [f"# {h}" for h in head]
    for k, j in enumerate(filters.kept):
        for side, names, taps in (("drive", source.speaker_names, filters.drive[:, :, k]),
                                  ("combine", source.mic_names, filters.combine[:, :, k])):
            for e, name in enumerate(names):
                lines.append(f"[channel {j + 1:02d} {side} {name}]")
                lines.append(" ".join(f"{float(v) + 0.0:.9g}" for v in taps[:, e].astype(np.float32)))
    return "\n".join(lines) + "\n"


def _write_responses(source: DesignSource, filters: FilterSet, stage: Path) -> list[str]:
    import matplotlib.pyplot as plt

    from .atomic_files import atomic_path
    from ..plots.filter_responses import plot_filter_responses

    names = []
    for k, j in enumerate(filters.kept):
        fig = plot_filter_responses(filters.drive[:, :, k], filters.combine[:, :, k], filters.sample_rate_hz,
                                    filters.band_hz, drive_delay_samples=filters.drive_delay_samples,
                                    combine_delay_samples=filters.combine_delay_samples, channel=j + 1,
                                    speaker_names=source.speaker_names, mic_names=source.mic_names)
        name = f"channel-{j + 1:02d}-response.png"
        with atomic_path(stage / name) as tmp:
            fig.savefig(tmp, dpi=110)
        plt.close(fig)
        names.append(name)
    return names


def write_filter_set(source: DesignSource | Rig, filters: FilterSet, out_dir: str | os.PathLike,
                     check: FilterCheck | None = None) -> list[Path]:
    """Write every filter file (and the check, if given) to `out_dir` atomically; return the paths.

    Parameters
    ----------
    source : DesignSource or Rig
        What the filters were designed from (names and provenance); a rig for its model kernel.
    filters : FilterSet
    out_dir : path
    check : FilterCheck, optional

    Returns
    -------
    list of Path
    """
    import matplotlib.pyplot as plt

    from ..filters.check import plot_crosstalk

    source = _design_source(source)
    out_dir = Path(out_dir)
    names: list[str] = []
    with staged_output_dir(out_dir) as stage:
        fs = int(round(filters.sample_rate_hz))
        for k, j in enumerate(filters.kept):
            for side, taps in (("drive", filters.drive[:, :, k]), ("combine", filters.combine[:, :, k])):
                name = f"channel-{j + 1:02d}-{side}.wav"
                sf.write(stage / name, taps.astype(np.float32), fs, subtype="FLOAT")
                names.append(name)
        write_json_atomic(stage / FILTER_SET_SIDECAR, filter_set_sidecar(source, filters, check))
        write_text_atomic(stage / "weights.csv", _weights_csv(source, filters))
        write_text_atomic(stage / "filters-matrix.txt", _matrix_text(source, filters))
        names += [FILTER_SET_SIDECAR, "weights.csv", "filters-matrix.txt"]
        names += _write_responses(source, filters, stage)
        if check is not None:
            write_text_atomic(stage / "check.csv", _check_csv(check))
            ax = plot_crosstalk(check)
            ax.figure.savefig(stage / "crosstalk.png", dpi=120, bbox_inches="tight")
            plt.close(ax.figure)
            names += ["check.csv", "crosstalk.png"]
    return [out_dir / n for n in names]


@dataclass(frozen=True)
class FilterFiles:
    """A filter set read back (:func:`read_filter_set`).

    Attributes
    ----------
    folder : Path
        The filter set's folder.
    sample_rate_hz : float
        Sample rate of the taps, Hz.
    taps : int
        Filter length, samples.
    band_hz : (float, float)
        The design band, Hz.
    kept : tuple of int
        0-based plan channels with filters, the order of the last axis below.
    drive : ndarray, shape (taps, n_spk, n_kept)
    combine : ndarray, shape (taps, n_mic, n_kept)
    speaker_names, mic_names : tuple of str
    plan_hz : ndarray, shape (n_bins,)
        The in-band design bins, Hz.
    plan_sv : ndarray, shape (n_bins, n_chan)
        Every planned channel's singular value there.
    min_level_db : float
        The filters' channel choice (a channel is in use where it comes within this of the strongest).
    kernel : str
        The kernel the filters were designed on.
    """

    folder: Path
    sample_rate_hz: float
    taps: int
    band_hz: tuple[float, float]
    kept: tuple[int, ...]
    drive: np.ndarray
    combine: np.ndarray
    speaker_names: tuple[str, ...]
    mic_names: tuple[str, ...]
    plan_hz: np.ndarray
    plan_sv: np.ndarray
    min_level_db: float
    kernel: str


def _read_wav(path: Path, n_channels: int, taps: int, rate: float) -> np.ndarray:
    try:
        data, fs = sf.read(path, dtype="float64", always_2d=True)
    except (OSError, RuntimeError, sf.LibsndfileError) as exc:
        raise InputError(f"cannot read filter ({' '.join(str(exc).split())})", source=str(path)) from None
    if data.shape != (taps, n_channels) or abs(fs - rate) > 0.5 or not np.all(np.isfinite(data)):
        raise InputError(f"expected {n_channels} channels of {taps} finite taps at {rate:g} Hz, got "
                         f"{data.shape[1]} of {data.shape[0]} at {fs:g} Hz", source=str(path),
                         fix="write the filters again with the filters command")
    return data


def read_filter_set_sidecar(folder: str | os.PathLike) -> dict[str, Any]:
    """Read and check a filter set's ``filters.json`` (its format and version only).

    Parameters
    ----------
    folder : path
        The folder, or its ``filters.json``.

    Returns
    -------
    dict
        ``filters.json`` as decoded (module docstring); its format and version checked, nothing else.

    Raises
    ------
    InputError
        When the file is missing, not a JSON object, of another format or of a newer version.
    """
    path = Path(folder)
    path = path if path.name == FILTER_SET_SIDECAR and path.is_file() else path / FILTER_SET_SIDECAR
    doc = read_json_document(path, _FIX)
    check_version(doc, FILTER_SET_FORMAT, FILTER_SET_FORMAT_VERSION, str(path), legacy=UNMARKED, fix=_FIX)
    return doc


def read_filter_set(folder: str | os.PathLike) -> FilterFiles:
    """Read a folder written by :func:`write_filter_set`: its ``filters.json`` and every channel's WAV taps.

    Parameters
    ----------
    folder : path
        The filter set's folder.

    Returns
    -------
    FilterFiles

    Raises
    ------
    InputError
        Naming the file and field when the folder is not a complete filter set.
    """
    folder = Path(folder)
    path = folder / FILTER_SET_SIDECAR
    doc = read_filter_set_sidecar(folder)
    field = "plan_on_bins"
    try:
        rate, taps = float(doc["sample_rate_hz"]), int(doc["taps"])
        band = (float(doc["band_hz"][0]), float(doc["band_hz"][1]))
        spk, mic = tuple(str(n) for n in doc["speakers"]), tuple(str(n) for n in doc["microphones"])
        entries = [c for c in doc["channels"] if c.get("filters")]
        field = "plan_on_bins"
        bins = doc[field]
        plan_hz = np.asarray(bins["frequency_hz"], dtype=float)
        plan_sv = np.asarray(bins["singular_value"], dtype=float).reshape(len(plan_hz), -1)
    except (KeyError, TypeError, ValueError, IndexError, AttributeError) as exc:
        raise InputError(f"missing or malformed ({exc})", source=str(path), field=field,
                         fix="write the filters again with this version of the filters command") from None
    if not entries:
        raise InputError("no channel has filters", source=str(path), field="channels")
    drive, combine = [], []
    for c in entries:
        drive.append(_read_wav(folder / str(c["drive_file"]), len(spk), taps, rate))
        combine.append(_read_wav(folder / str(c["combine_file"]), len(mic), taps, rate))
    return FilterFiles(folder, rate, taps, band, tuple(int(c["channel"]) - 1 for c in entries),
                       np.stack(drive, axis=-1), np.stack(combine, axis=-1), spk, mic, plan_hz, plan_sv,
                       float(doc.get("min_level_db", -30.0)), str(doc.get("kernel", "free field")))
