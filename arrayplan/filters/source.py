"""Where filters are designed from: a rig's model kernel, or the kernel a plan folder was made with.

A plan folder's ``weights.json`` names its kernel (``kernel``) and the rig
it was made for (``rig.source`` and ``rig.sha256``).  A free-field or room
plan is designed again from that rig file (its hash must match); a plan
made from measured impulse responses needs the IR set, which its
``measurement`` record names (path, SHA-256 of the hashed file, window,
latency and smoothing) when the plan has one.  The filters are then
designed on the filter's own bin grid from the same kernel, not from the
plan's frequencies.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..kernels.coupling import Kernel
from ..errors import InputError
from ..formats._versioning import read_json_document
from ..formats.irset import IRSet
from ..kernels import rig_kernel
from ..kernels.measured import MeasuredKernel
from ..formats.plan_provenance import irset_sha256, planned_rig_file
from ..rig import Rig

__all__ = ["DesignSource", "PlanRecord", "read_plan_record", "source_from_rig", "source_from_plan",
           "irset_sha256"]


@dataclass(frozen=True)
class DesignSource:
    """A kernel to design filters from, with the names and provenance the filter files carry.

    Attributes
    ----------
    kernel : Kernel
        Coupling (n_freq, n_mic, n_spk) at any frequency.
    speaker_names, mic_names : tuple of str
        Element names in the kernel's order.
    spread : Rig or IRSet
        Where the delay spread the taps must hold comes from
        (:func:`arrayplan.filters.design.minimum_taps`).
    name : str
        A name for people (the rig's).
    origin : dict
        What ``filters.json`` records of the source: the rig file and hash,
        or the plan folder, its kernel and IR set.
    """

    kernel: Kernel
    speaker_names: tuple[str, ...]
    mic_names: tuple[str, ...]
    spread: Rig | IRSet
    name: str
    origin: dict[str, Any] = field(default_factory=dict)

    @property
    def kernel_name(self) -> str:
        """The kernel's name.

        Returns
        -------
        str
            Its ``name`` attribute, or ``"free field"`` when it has none.
        """
        return str(getattr(self.kernel, "name", "free field"))


def source_from_rig(rig: Rig, *, free_field: bool = False) -> DesignSource:
    """The rig's model kernel: its room when it has a ``[room]`` table (unless `free_field`), else the free field.

    Parameters
    ----------
    rig : Rig
        The rig read from its file (its ``source`` and ``sha256`` are recorded).
    free_field : bool
        Use the free field even when the rig has a room.

    Returns
    -------
    DesignSource
        The kernel (:func:`arrayplan.kernels.rig_kernel`), the rig's element
        names, the rig as the delay-spread source, and an origin naming the
        rig file, its hash and the kernel.
    """
    kernel = rig_kernel(rig, free_field=free_field)
    return DesignSource(kernel, tuple(rig.speakers.names), tuple(rig.mics.names), rig, rig.name,
                        {"rig": rig.source, "rig_sha256": rig.sha256,
                         "kernel": str(getattr(kernel, "name", "free field"))})


@dataclass(frozen=True)
class PlanRecord:
    """What a plan folder says about its kernel.

    Attributes
    ----------
    folder : Path
        The plan folder.
    kernel : str
        The plan's kernel name (``free field``, ``room``, ``measured ...``).
    speaker_names, mic_names : tuple of str
        Element names in the plan's order.
    rig_source : str or None
        The rig file the plan was made from.
    rig_sha256 : str or None
        SHA-256 of that rig file, as the plan recorded it.
    measurement : dict or None
        The plan's record of its IR set (``irset.path``, ``irset.sha256``,
        ``window_ms``, ``latency_samples``, ``smoothing_octaves``), when it has one.
    """

    folder: Path
    kernel: str
    speaker_names: tuple[str, ...]
    mic_names: tuple[str, ...]
    rig_source: str | None
    rig_sha256: str | None
    measurement: dict[str, Any] | None

    @property
    def measured(self) -> bool:
        """Whether the plan was made from measured impulse responses.

        Returns
        -------
        bool
            True when its kernel's name starts with ``measured`` or it has a
            measurement record.
        """
        return self.kernel.startswith("measured") or self.measurement is not None

    @property
    def recorded_irset(self) -> str | None:
        """The IR set's path as the plan recorded it.

        Returns
        -------
        str or None
            ``measurement.irset.path``, or None when the plan records none.
        """
        irset = (self.measurement or {}).get("irset")
        return str(irset["path"]) if isinstance(irset, dict) and irset.get("path") else None


def read_json_object(path: Path, fix: str) -> dict:
    """A JSON object from `path`, or InputError naming the file.

    Parameters
    ----------
    path : Path
        The JSON file.
    fix : str
        What to point at instead, for the message when the file cannot be
        read or its JSON is not an object.

    Returns
    -------
    dict
        The decoded object.
    """
    doc = read_json_document(path, fix)
    if not isinstance(doc, dict):
        raise InputError("not a JSON object", source=str(path), fix=fix)
    return doc


def read_plan_record(plan_dir: str | Path) -> PlanRecord:
    """Read a plan folder's ``weights.json`` for its kernel, rig and IR-set record.

    Parameters
    ----------
    plan_dir : str or Path
        Folder written by the plan command.

    Returns
    -------
    PlanRecord
        Kernel name (default ``free field``), element names, rig file and
        hash, and measurement record.

    Raises
    ------
    InputError
        When ``weights.json`` is missing, not a JSON object, or lacks
        ``speaker_names`` or ``mic_names`` as lists of names.
    """
    folder = Path(plan_dir)
    path = folder / "weights.json"
    doc = read_json_object(path, "point at a folder written by the plan command")
    rig = doc.get("rig") if isinstance(doc.get("rig"), dict) else {}
    names = []
    for key in ("speaker_names", "mic_names"):
        value = doc.get(key)
        if not (isinstance(value, list) and value and all(isinstance(v, str) for v in value)):
            raise InputError("missing or not a list of names", source=str(path), field=key,
                             fix="plan again with this version")
        names.append(tuple(value))
    measurement = doc.get("measurement") if isinstance(doc.get("measurement"), dict) else None
    return PlanRecord(folder, str(doc.get("kernel", "free field")), names[0], names[1],
                      rig.get("source"), rig.get("sha256"), measurement)


def source_from_plan(record: PlanRecord, *, irset: IRSet | None = None, irset_path: str | Path | None = None,
                     window_s: float | None = None, latency_samples: int = 0,
                     smoothing_octaves: float | None = None) -> DesignSource:
    """The kernel a plan folder was made with.

    Parameters
    ----------
    record : PlanRecord
        From :func:`read_plan_record`.
    irset : IRSet, optional
        For a plan made from measurements: the IR set (read from the plan's
        record or given by the caller).  Its element names must be the plan's.
    irset_path : path, optional
        Where `irset` was read from; when the plan records the set's hash, the
        file there must have the same hash.
    window_s, latency_samples, smoothing_octaves
        The measured kernel's settings when the plan records none (see
        :class:`arrayplan.kernels.measured.MeasuredKernel`); a plan's own
        record wins.

    Returns
    -------
    DesignSource
    """
    src = str(record.folder / "weights.json")
    if not record.measured:
        rig, _, why = planned_rig_file({"rig": {"source": record.rig_source or "", "sha256": record.rig_sha256 or ""}},
                                       record.folder)
        if rig is None:
            raise InputError(why, source=src, field="rig.source", fix="give the rig file instead of the plan folder")
        out = source_from_rig(rig, free_field=record.kernel == "free field")
        return DesignSource(out.kernel, out.speaker_names, out.mic_names, rig, rig.name,
                            {"plan": str(record.folder), "kernel": record.kernel, "rig": rig.source,
                             "rig_sha256": rig.sha256})
    if irset is None:
        raise InputError("the plan was made from measured impulse responses; the IR set is needed", source=src,
                         field="measurement.irset", fix="give the IR set the plan was made from")
    m = record.measurement or {}
    recorded_hash = (m.get("irset") or {}).get("sha256") if isinstance(m.get("irset"), dict) else None
    if recorded_hash and irset_path is not None:
        got, hashed = irset_sha256(irset_path)
        if got != recorded_hash:
            raise InputError(f"the IR set at {irset_path} is not the one the plan was made from ({hashed} hash "
                             f"{got[:12]}..., plan records {recorded_hash[:12]}...)", source=src,
                             field="measurement.irset.sha256", fix="give the IR set the plan was made from")
    if tuple(irset.speaker_names) != record.speaker_names or tuple(irset.mic_names) != record.mic_names:
        raise InputError("the IR set's element names or order differ from the plan's", source=str(irset_path or src),
                         field="speaker_names", fix="give the IR set the plan was made from")
    if m:
        window_s = None if m.get("window_ms") is None else float(m["window_ms"]) / 1000.0
        latency_samples = int(m.get("latency_samples") or 0)
        smoothing_octaves = None if m.get("smoothing_octaves") is None else float(m["smoothing_octaves"])
    kernel = MeasuredKernel(irset, window_s=window_s, latency_samples=latency_samples,
                            smoothing_octaves=smoothing_octaves)
    return DesignSource(kernel, record.speaker_names, record.mic_names, irset, record.folder.name,
                        {"plan": str(record.folder), "kernel": kernel.name, "rig_sha256": record.rig_sha256,
                         "irset": str(irset_path) if irset_path is not None else None,
                         "irset_sha256": irset_sha256(irset_path)[0] if irset_path is not None else None,
                         "window_ms": None if window_s is None else 1e3 * window_s,
                         "latency_samples": latency_samples, "smoothing_octaves": smoothing_octaves})
