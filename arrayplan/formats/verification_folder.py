"""The verification folder: planned channels (or FIR filters) checked against measured responses.

``arrayplan verify`` writes it (:func:`write_verification`); the report reads
it back (:func:`read_verification`).  Files (channels numbered from 1):

* ``verify.json``: ``format`` ``"arrayplan-verification"``, ``format_version``
  1 (:mod:`arrayplan.formats._versioning`); what was verified (``plan_dir`` or
  ``filters_dir``), the IR set and its units, the settings, the wanted
  channels with their verdicts (``passed``), lost and judged bands, the gain
  reference and its reason, notes on every definition, provenance.  The
  previous release marked it with ``kind`` and no version; such files are
  still read, for one release (as version 0).
* ``verify-channels.csv``: per frequency and wanted channel: planned singular
  value, realised gain, gain in dB, worst crosstalk, isolation, lost (0/1),
  measured singular value, judged (0/1).
* ``verify-summary.csv``: per frequency: wanted, lost, strong planned and
  measured channels, largest subspace angle (degrees), worst crosstalk (dB).
* ``verify.npz``: the arrays named in ``verify.json``'s ``files``.
* ``verify-crosstalk.png`` and ``verify-singular-values.png`` (optional).
"""

from __future__ import annotations

import csv
import io
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from ..errors import InputError
from ..filters.design import strong_ranges_hz
from ..verification.channels import Verification, lost_bands_hz
from ._versioning import check, read_json_document, stamp
from .atomic_files import atomic_path, write_json_atomic, write_text_atomic
from .fileio import provenance
from .output_folders import check_folder, staged_output_dir

__all__ = ["VERIFICATION_FORMAT", "VERIFICATION_FORMAT_VERSION", "VERIFICATION_SIDECAR", "VerificationFolder",
           "verification_record", "write_verification", "read_verification", "read_verification_record"]

VERIFICATION_FORMAT = "arrayplan-verification"
VERIFICATION_FORMAT_VERSION = 1
#: The sidecar's file name in the folder.
VERIFICATION_SIDECAR = "verify.json"
_CHANNELS_CSV = "verify-channels.csv"
_SUMMARY_CSV = "verify-summary.csv"
_ARRAYS = "verify.npz"
_ARRAY_KEYS = ("frequency_hz", "channels", "channel_matrix", "planned_singular_value", "measured_singular_value",
               "judged")
_CHANNEL_HEADER = ["frequency_hz", "channel", "planned_singular_value", "realised_gain", "gain_db",
                   "worst_crosstalk_db", "isolation_db", "lost", "measured_singular_value", "judged"]
_SUMMARY_HEADER = ["frequency_hz", "wanted_channels", "lost_channels", "strong_planned", "strong_measured",
                   "max_subspace_angle_deg", "worst_crosstalk_db"]


def _fmt(x: float) -> str:
    if np.isnan(x):
        return ""
    if np.isinf(x):
        return "inf" if x > 0 else "-inf"
    return f"{x:.8g}"


def _finite_or_none(x: float) -> float | None:
    return float(x) if np.isfinite(x) else None


def _csv(header: list[str], rows: list[list]) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    w.writerows(rows)
    return buf.getvalue()


def _nanmax(x: np.ndarray) -> float:
    x = np.asarray(x, dtype=float)
    return float(np.nanmax(x)) if np.any(~np.isnan(x)) else float("nan")


def _channel_rows(res: Verification) -> list[list]:
    rows = []
    judged = res.judged if res.judged is not None else np.ones(res.lost.shape, bool)
    for f, hz in enumerate(res.hz):
        for k, j in enumerate(res.channels):
            rows.append([_fmt(hz), j + 1, _fmt(res.planned_sv[f, j]), _fmt(abs(res.channel_matrix[f, j, j])),
                         _fmt(res.gain_db[f, k]), _fmt(res.crosstalk_db[f, k]), _fmt(-res.crosstalk_db[f, k]),
                         int(res.lost[f, k]), _fmt(res.measured_sv[f, j]), int(judged[f, k])])
    return rows


def _summary_rows(res: Verification) -> list[list]:
    return [[_fmt(hz), len(res.channels), int(res.lost[f].sum()), int(res.strong_planned[f]),
             int(res.strong_measured[f]), _fmt(res.max_angle_deg[f]), _fmt(_nanmax(res.crosstalk_db[f]))]
            for f, hz in enumerate(res.hz)]


def verification_record(res: Verification, *, origin: Mapping[str, Any], irset_dir: str, irset_units: str,
                        settings: Mapping[str, Any], gain_reference_reason: str) -> dict[str, Any]:
    """The content of ``verify.json``.

    Parameters
    ----------
    res : Verification
        The verdict (:func:`arrayplan.verification.channels.verify_plan` or
        :func:`arrayplan.verification.filters.verify_filters`).
    origin : mapping
        What was verified: ``plan_dir`` or ``filters_dir`` (filters are judged
        in bands, plans at their frequencies), ``verified`` (one phrase), other
        keys as they are; ``rig_sha256`` goes into the provenance.
    irset_dir : str
        The IR set (folder or SOFA file) measured on the rig.
    irset_units : str
        Its units.
    settings : mapping
        The measured kernel's settings: ``window_ms`` (ms), ``latency_samples``,
        ``smoothing_octaves``.
    gain_reference_reason : str
        Why this gain reference (one phrase).

    Returns
    -------
    dict
        JSON-ready, with ``format`` and ``format_version`` first.
    """
    origin = dict(origin)
    rig_sha256 = origin.pop("rig_sha256", None)
    lost_bands = lost_bands_hz(res)
    channels = [str(int(j) + 1) for j in res.channels]
    judged = ({"judged_bands_hz": {c: [list(r) for r in strong_ranges_hz(res.hz, res.judged[:, k])]
                                   for k, c in enumerate(channels)}} if "filters_dir" in origin else
              {"judged_frequencies_hz": {c: [float(h) for h in res.hz[res.judged[:, k]]] for k, c in enumerate(channels)}})
    return stamp({
        **origin, "irset_dir": str(irset_dir), "irset_units": irset_units, "isolation_db": res.isolation_db,
        "threshold_db": res.threshold_db, "window_ms": settings.get("window_ms"),
        "latency_samples": settings.get("latency_samples"), "smoothing_octaves": settings.get("smoothing_octaves"),
        "channels": [int(j) + 1 for j in res.channels], "passed": [bool(p) for p in res.passed],
        "lost_bands_hz": {c: [list(r) for r in lost_bands[k]] for k, c in enumerate(channels)},
        "wanted_channels_rule": res.wanted_rule,
        **judged,
        "gain_reference": res.gain_reference, "gain_reference_reason": gain_reference_reason,
        "common_gain_db": _finite_or_none(res.common_gain_db),
        "gain_note": ("gain_db is re the plan times the common factor common_gain_db (one real positive "
                      "scalar, the least-squares fit in dB of |C_jj| to the planned singular values over the "
                      "judged channels and frequencies); the channel matrix and measured singular values are "
                      "divided by it; crosstalk and isolation are ratios and do not change"
                      if res.gain_reference == "common" else
                      "gain_db is re the plan's singular values in the plan's units (1/m for a free-field "
                      "plan): absolute only when the IR set is in the same units; common_gain_db is the "
                      "mean offset, for information"),
        "files": {_ARRAYS: "frequency_hz (n_freq,), channels (n_want,) 1-based, channel_matrix complex "
                           "(n_freq, n_chan, n_chan) = combine^T G_measured drive, planned_singular_value "
                           "and measured_singular_value (n_freq, n_chan; the measured value of the same "
                           "rank as the planned channel at that frequency), judged (n_freq, n_want)"},
        "levels": "re the strongest channel at each frequency (a tracked plan's channel 1 need not be it)",
        "provenance": provenance(rig_sha256=rig_sha256)}, VERIFICATION_FORMAT, VERIFICATION_FORMAT_VERSION)


def write_verification(folder: str | os.PathLike, res: Verification, record: Mapping[str, Any], *,
                       figures: bool = True) -> list[Path]:
    """Write a verification folder atomically (nothing is left half-written); return the paths.

    Parameters
    ----------
    folder : path
        Created; refused when it holds files arrayplan did not write.
    res : Verification
    record : mapping
        ``verify.json`` (:func:`verification_record`), checked before anything is written.
    figures : bool
        Draw the crosstalk and singular-value figures.

    Returns
    -------
    list of Path
    """
    check(record, VERIFICATION_FORMAT, VERIFICATION_FORMAT_VERSION, VERIFICATION_SIDECAR)
    with staged_output_dir(folder) as stage:
        write_text_atomic(stage / _CHANNELS_CSV, _csv(_CHANNEL_HEADER, _channel_rows(res)))
        write_text_atomic(stage / _SUMMARY_CSV, _csv(_SUMMARY_HEADER, _summary_rows(res)))
        write_json_atomic(stage / VERIFICATION_SIDECAR, dict(record))
        np.savez(stage / _ARRAYS, frequency_hz=res.hz, channels=np.asarray(res.channels) + 1,
                 channel_matrix=res.channel_matrix, planned_singular_value=res.planned_sv,
                 measured_singular_value=res.measured_sv, judged=res.judged)
        if figures:
            import matplotlib.pyplot as plt

            from ..plots.verify import plot_crosstalk, plot_singular_values
            for name, fig in (("verify-crosstalk.png", plot_crosstalk(res)),
                              ("verify-singular-values.png", plot_singular_values(res))):
                with atomic_path(stage / name) as tmp:
                    fig.savefig(tmp, dpi=120)
                plt.close(fig)
        names = sorted(p.name for p in stage.iterdir())
    return [Path(folder) / n for n in names]


@dataclass
class VerificationFolder:
    """A verification folder read back (:func:`read_verification`).

    Attributes
    ----------
    folder : Path
    doc : dict
        ``verify.json``.
    format_version : int
        0 for a file of the previous release (``kind``, no version).
    channel_rows, summary_rows : list of dict
        The two tables, one dict (column -> text) per row.
    arrays : dict or None
        ``verify.npz``'s arrays, None when the folder has none.
    """

    folder: Path
    doc: dict
    format_version: int
    channel_rows: list[dict[str, str]]
    summary_rows: list[dict[str, str]]
    arrays: dict[str, np.ndarray] | None


def _read_csv(path: Path) -> list[dict[str, str]]:
    if not path.exists():
        raise InputError("missing", source=str(path))
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def read_verification_record(folder: str | os.PathLike) -> tuple[dict, int, dict[str, np.ndarray] | None]:
    """The checked sidecar and the arrays of a verification folder, without its two tables.

    For readers that parse the tables their own way (the report reads them by column).

    Parameters
    ----------
    folder : path

    Returns
    -------
    (dict, int, dict or None)
        ``verify.json``, its format version (0: the previous release) and ``verify.npz``'s arrays (None
        when the folder has none).

    Raises
    ------
    InputError
        As :func:`read_verification`, but for the tables.
    """
    folder = Path(folder)
    check_folder(folder, needed=("verify*",))
    path = folder / VERIFICATION_SIDECAR
    fix = "point at a folder written by the verify command"
    doc = read_json_document(path, fix)
    version = check(doc, VERIFICATION_FORMAT, VERIFICATION_FORMAT_VERSION, str(path), legacy=VERIFICATION_FORMAT,
                    fix=fix)
    arrays = None
    if (folder / _ARRAYS).is_file():
        try:
            with np.load(folder / _ARRAYS, allow_pickle=False) as z:
                arrays = {k: z[k] for k in _ARRAY_KEYS}
        except (ValueError, KeyError, OSError) as exc:
            raise InputError(f"cannot read ({exc})", source=str(folder / _ARRAYS)) from None
    return doc, version, arrays


def read_verification(folder: str | os.PathLike) -> VerificationFolder:
    """Read a folder written by :func:`write_verification`.

    Parameters
    ----------
    folder : path
        The verification folder.

    Returns
    -------
    VerificationFolder

    Raises
    ------
    InputError
        Naming the file: a mixed or damaged folder (checksums), a sidecar of
        another format or a newer version, a missing table or unreadable arrays.
    """
    folder = Path(folder)
    doc, version, arrays = read_verification_record(folder)
    return VerificationFolder(folder, doc, version, _read_csv(folder / _CHANNELS_CSV),
                              _read_csv(folder / _SUMMARY_CSV), arrays)
