"""What a plan records of where its coupling came from: the IR set it was measured from, and its rig file.

A plan made from measured responses stores in ``weights.json`` the IR set's
path and SHA-256, its units and what they mean, and the kernel's window,
latency and smoothing (:func:`measurement_record`), so that a later reader
can tell whether the responses have changed.  :func:`planned_rig_file`
finds the rig file a plan names, when it is still there unchanged.
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

from ..errors import InputError
from ..rig import Rig, load_rig

__all__ = ["MEASURED_UNITS", "coupling_text", "irset_sha256", "planned_rig_file", "measurement_record",
           "measurement_fields"]

#: What one unit of a measured coupling means, by the IR set's units (see :data:`arrayplan.formats.irset.UNITS`).
MEASURED_UNITS = {"full_scale": "input full scale per output full scale (uncalibrated)",
                  "pascal_per_full_scale": "Pa per output full scale",
                  "pascal_per_volt": "Pa per V at the speaker terminals"}

def coupling_text(units: str | None = None) -> str:
    """The ``coupling`` line of ``weights.json``: what one unit of G means.

    Parameters
    ----------
    units : str, optional
        An IR set's units (:data:`MEASURED_UNITS` keys); None for a model
        kernel (pressure per unit source strength, 1/m).

    Returns
    -------
    str
    """
    if units is None:
        return "G[f, m, s]: complex pressure at microphone m per unit source strength of speaker s (1/m)"
    return (f"G[f, m, s]: measured transfer function from speaker s's drive to microphone m, in the IR set's "
            f"units: {MEASURED_UNITS.get(units, units)}")



def irset_sha256(path: str | os.PathLike) -> tuple[str, str]:
    """SHA-256 of an IR set as a plan records it: of ``irset.json`` in a folder, or of a ``.sofa`` file.

    Parameters
    ----------
    path : path
        An IR-set folder, its ``irset.json``, or a ``.sofa`` file.

    Returns
    -------
    (str, str)
        The hex digest and the name of the hashed file.
    """
    import hashlib

    p = Path(path)
    hashed = p if p.suffix.lower() == ".sofa" else (p if p.name == "irset.json" else p / "irset.json")
    try:
        return hashlib.sha256(hashed.read_bytes()).hexdigest(), hashed.name
    except OSError as exc:
        raise InputError(f"cannot read ({exc.strerror or exc})", source=str(hashed)) from None


def planned_rig_file(sidecar: dict, plan_dir: str | os.PathLike,
                     project: str | os.PathLike | None = None) -> tuple[Rig | None, Path | None, str]:
    """The rig file a plan's ``weights.json`` names, when it is still there with the plan's geometry hash.

    A relative path is tried from the working folder, the project folder (if
    given), the plan folder's parent and the plan folder itself.

    Parameters
    ----------
    sidecar : dict
        The plan's ``weights.json``.
    plan_dir : path
        The plan folder.
    project : path, optional
        A project folder to search too.

    Returns
    -------
    (Rig or None, Path or None, str)
        The rig and its file, or None and None with the reason in words.
    """
    rig_info = sidecar.get("rig") if isinstance(sidecar.get("rig"), dict) else {}
    source, want = str(rig_info.get("source", "")), str(rig_info.get("sha256", ""))
    if not source or source.startswith("<") or source == "command line":
        return None, None, "the plan was not made from a rig file"
    folder, p = Path(plan_dir), Path(source)
    roots = [Path.cwd()] + ([Path(project)] if project is not None else []) + [folder.parent, folder]
    candidates = [p] if p.is_absolute() else [r / p for r in roots] + ([Path(project) / p.name] if project else [])
    changed = False
    for cand in candidates:
        if cand.is_file():
            try:
                rig = load_rig(cand)
            except InputError:
                continue
            if rig.sha256 == want:
                return rig, cand, ""
            changed = True
    return None, None, (f"the rig file {source} has changed since the plan was made (hash differs)" if changed
                        else f"the rig file the plan was made from ({source}) is not there")

def measurement_record(irset_path: str | os.PathLike, kernel: Any) -> dict[str, Any]:
    """What ``weights.json`` records of the IR set a plan was made from.

    Parameters
    ----------
    irset_path : path
        The IR-set folder (its ``irset.json`` is hashed) or AES69 (SOFA) file
        (the file is hashed).
    kernel : MeasuredKernel
        The kernel planned from (:class:`arrayplan.kernels.measured.MeasuredKernel`):
        its units, window (s), latency (samples) and smoothing (octaves).

    Returns
    -------
    dict
        ``irset`` (``path``, ``sha256`` and ``hashed_file``, ``format``,
        ``format_version``), ``units``, ``units_meaning``, ``sample_rate_hz``,
        ``zero_lag_samples``, ``window_ms``, ``latency_samples`` and
        ``smoothing_octaves`` (None where not used).
    """
    path = Path(irset_path)
    digest, hashed_name = irset_sha256(path)
    hashed = path if path.suffix.lower() == ".sofa" else path / hashed_name
    raw = hashed.read_bytes()
    if hashed.suffix.lower() == ".sofa":
        fmt, version = "AES69 (SOFA)", None
    else:
        try:
            manifest = json.loads(raw.decode("utf-8"))
        except (UnicodeDecodeError, json.JSONDecodeError):
            manifest = {}
        fmt, version = manifest.get("format"), manifest.get("format_version")
    return {"irset": {"path": str(path), "hashed_file": hashed.name, "sha256": digest,
                      "format": fmt, "format_version": version},
            "units": kernel.units, "units_meaning": MEASURED_UNITS.get(kernel.units, kernel.units),
            "sample_rate_hz": float(kernel.sample_rate_hz), "zero_lag_samples": int(kernel.zero_lag_samples),
            "window_ms": None if kernel.window_s is None else 1e3 * float(kernel.window_s),
            "latency_samples": int(kernel.latency_samples),
            "smoothing_octaves": kernel.smoothing_octaves}


def measurement_fields(measurement: dict[str, Any] | None) -> dict[str, Any]:
    """The ``weights.json`` fields of a plan made from measured responses (none for a free-field plan).

    Parameters
    ----------
    measurement : dict or None
        :func:`measurement_record` of the IR set, or None.

    Returns
    -------
    dict
        ``coupling`` (in the IR set's units) and ``measurement``; empty for None.
    """
    if measurement is None:
        return {}
    return {"coupling": coupling_text(measurement["units"]), "measurement": measurement}
