"""Find and load the results a project folder holds: plans, filters, IR sets, verifications.

A project folder is any folder under which arrayplan wrote its outputs, for
example::

    project/
      rig.toml
      plan/          weights.json (kind arrayplan-plan), weights.npz, summary.csv, ...
      filters/       filters.json, channel-NN-*.wav, check.csv
      meas/          session.json, takes/, irset/ (an IR set)
      verify/        verify.json (format arrayplan-verification), verify-*.csv
      capacity/      capacity.json (kind arrayplan-capacity-study), tolerance/ tolerance.json (design studies)

Each result is recognised by its sidecar, wherever it lies (up to
:data:`MAX_DEPTH` folders down); AES69 (SOFA) files (``*.sofa``) count as IR
sets.  Per-take IR sets (``takes/*/irset``) and
harmonic IR sets (``harmonic-N/``) are parts of a larger result and are not
listed on their own.  A result whose files cannot be read is not fatal: it
is listed with the reason, so the report still comes out and says what is
missing.
"""

from __future__ import annotations

import csv
import io
import json
import os
import struct
import zipfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError
from ..formats.fileio import check_folder
from ..filters.check import FilterCheck
from ..formats.irset import MANIFEST_NAME, IRSet, read_irset
from ..frequency import FrequencyAxis
from ..formats.plan_folder import PlanWeights, planned_rig_file, read_plan
from ..formats.verification_folder import read_verification_record
from ..channels.planning import Plan
from ..rig import Rig, load_rig

__all__ = ["MAX_DEPTH", "FoundPlan", "FoundFilters", "FoundIRSet", "FoundVerification", "FoundStudy",
           "ProjectResults", "find_results"]

#: How many folder levels below the project folder are searched.
MAX_DEPTH = 4

_SKIP_DIRS = {".git", ".venv", "venv", "__pycache__", "node_modules"}


@dataclass
class FoundPlan:
    """A plan folder.

    Attributes
    ----------
    folder : Path
    plan : Plan
        Rebuilt from the folder's files (see :func:`arrayplan.formats.plan_folder.read_plan`).
    sidecar : dict
        ``weights.json``.
    rig_file : Path or None
        The rig file whose geometry hash matches the plan's, when one was found.
    rig_note : str
        Where the geometry shown comes from.
    """

    folder: Path
    plan: Plan
    sidecar: dict
    rig_file: Path | None
    rig_note: str


@dataclass
class FoundFilters:
    """A filters folder: ``filters.json`` and, when the check ran, its result.

    Attributes
    ----------
    folder : Path
    sidecar : dict
        ``filters.json``.
    check : FilterCheck or None
        The time-domain check recorded in ``filters.json`` (channels 0-based),
        None when it did not run.
    """

    folder: Path
    sidecar: dict
    check: FilterCheck | None


@dataclass
class FoundIRSet:
    """An IR set (a folder, or a ``.sofa`` file); `role` says who wrote it (measurement, deconvolution, SOFA...).

    Attributes
    ----------
    folder : Path
        The IR set's folder, or the ``.sofa`` file.
    irs : IRSet
        The impulse responses, (n_samples, n_mic, n_spk).
    role : str
        ``"measurement"``, ``"deconvolution"``, ``"AES69 (SOFA) file"`` or
        ``"impulse-response set"``.
    session : dict or None
        ``session.json`` of the measurement the set lies in, if any.
    marked_takes : list of str
        One line per take of that measurement whose status is not ``ok``:
        speaker, status and warnings.
    """

    folder: Path
    irs: IRSet
    role: str
    session: dict | None = None
    marked_takes: list[str] = field(default_factory=list)


@dataclass
class FoundVerification:
    """A verification folder: ``verify.json``, its two tables and ``verify.npz`` (the realised channel
    matrices) when present.

    Attributes
    ----------
    folder : Path
    doc : dict
        ``verify.json``.
    channel_columns, summary_columns : dict of str to ndarray
        ``verify-channels.csv`` and ``verify-summary.csv`` by column, as floats (an empty cell is NaN,
        ``True``/``False`` are 1/0), each of shape (n_rows,).
    arrays : dict or None
        ``verify.npz``.
    """

    folder: Path
    doc: dict
    channel_columns: dict[str, np.ndarray]
    summary_columns: dict[str, np.ndarray]
    arrays: dict[str, Any] | None = None


@dataclass
class FoundStudy:
    """A design-study folder: its kind, the study read back and its sidecar.

    Attributes
    ----------
    folder : Path
    kind : str
        ``"capacity"``, ``"tolerance"``, ``"zones"``, ``"layout"`` or ``"comparison"``.
    study : object
        A ``CapacityStudy`` or ``ToleranceStudy`` read back; for the other
        kinds the study's main CSV table as a list of row dicts (see
        :func:`arrayplan.report.studies.load_study`).
    sidecar : dict
        The study's JSON sidecar.
    """

    folder: Path
    kind: str
    study: Any
    sidecar: dict


#: Study sidecars by file name: (kind, reader module attribute).
_STUDY_SIDECARS = {"capacity.json": ("capacity", "read_capacity_study"),
                   "tolerance.json": ("tolerance", "read_tolerance_study")}


@dataclass
class ProjectResults:
    """Everything found under a project folder, each list sorted by path.

    Attributes
    ----------
    folder : Path
        The project folder.
    plans, filters, irsets, verifications, studies : list
        The results of each kind (:class:`FoundPlan`, :class:`FoundFilters`,
        :class:`FoundIRSet`, :class:`FoundVerification`, :class:`FoundStudy`).
    problems : list of str
        One line per result that could not be read: its kind, where, and why.
    """

    folder: Path
    plans: list[FoundPlan] = field(default_factory=list)
    filters: list[FoundFilters] = field(default_factory=list)
    irsets: list[FoundIRSet] = field(default_factory=list)
    verifications: list[FoundVerification] = field(default_factory=list)
    problems: list[str] = field(default_factory=list)
    studies: list[FoundStudy] = field(default_factory=list)

    @property
    def empty(self) -> bool:
        """Whether no result at all was found (problems do not count).

        Returns
        -------
        bool
        """
        return not (self.plans or self.filters or self.irsets or self.verifications or self.studies)


def _read_json(path: Path) -> Any:
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"cannot read ({exc.__class__.__name__}: {exc})", source=str(path)) from None


def _read_csv_columns(path: Path) -> dict[str, np.ndarray]:
    """A numeric CSV table by column (float; empty cells NaN, ``True``/``False`` 1/0).

    A verification's table has a row per frequency and channel (10^5 rows
    and more), where a dict per row would cost most of the report's reading:
    the table is parsed by :func:`numpy.loadtxt` (empty cells written as
    ``nan`` first), and only a table that parser refuses is read cell by
    cell, to name the column at fault.
    """
    if not path.exists():
        raise InputError("missing", source=str(path))
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read ({exc.__class__.__name__}: {exc})", source=str(path)) from None
    first, _, body = text.partition("\n")
    header = next(csv.reader([first.rstrip("\r")]), [])
    if not header or not "".join(header).strip():
        raise InputError("empty, no header row", source=str(path))
    try:
        return _parse_fast(header, body)
    except ValueError:
        return _parse_by_cell(header, body, path)


def _parse_fast(header: list[str], body: str) -> dict[str, np.ndarray]:
    """Columns of a plain numeric CSV body (no quotes), empty cells as NaN; ValueError when it is not one."""
    if '"' in body:
        raise ValueError("quoted cells")
    lines = [ln for ln in body.replace("\r", "").replace("True", "1").replace("False", "0").split("\n") if ln]
    if not lines:
        return {name: np.empty(0) for name in header}
    clean = "\n".join(f",{ln}," for ln in lines)           # a leading and a trailing empty cell on every line
    while ",," in clean:
        clean = clean.replace(",,", ",nan,")
    table = np.loadtxt(io.StringIO(clean), delimiter=",", ndmin=2, usecols=range(1, len(header) + 1))
    if table.shape[1] != len(header) or any(ln.count(",") != len(header) - 1 for ln in lines):
        raise ValueError("ragged table")
    return {name: np.ascontiguousarray(table[:, k]) for k, name in enumerate(header)}


def _parse_by_cell(header: list[str], body: str, path: Path) -> dict[str, np.ndarray]:
    """Columns of a CSV body read cell by cell, naming the line or column at fault."""
    rows = list(csv.reader(io.StringIO(body)))
    rows = [r for r in rows if r]
    for n, r in enumerate(rows, 2):
        if len(r) != len(header):
            raise InputError(f"line {n} has {len(r)} cells, the header {len(header)}", source=str(path))
    out = {}
    for k, name in enumerate(header):
        try:
            out[name] = np.array([_cell(r[k]) for r in rows], dtype=float)
        except ValueError as exc:
            raise InputError(f"not a number ({exc})", source=str(path), field=name) from None
    return out


def _cell(text: str) -> float:
    text = text.strip()
    if text in _BOOL_CELLS:
        return _BOOL_CELLS[text]
    return float(text) if text else float("nan")


_BOOL_CELLS = {"True": 1.0, "False": 0.0}


def _walk(root: Path) -> list[Path]:
    """Folders below `root` (itself included) down to MAX_DEPTH, sorted, hidden ones skipped."""
    found = []
    for dirpath, dirnames, _ in os.walk(root):
        here = Path(dirpath)
        depth = len(here.relative_to(root).parts)
        dirnames[:] = sorted(d for d in dirnames if not d.startswith(".") and d not in _SKIP_DIRS
                             and depth < MAX_DEPTH)
        found.append(here)
    return sorted(found)


def _rig_for_plan(sidecar: dict, plan_dir: Path, project: Path, given: Rig | None) -> tuple[Rig | None, Path | None,
                                                                                          str]:
    want = str(sidecar.get("rig", {}).get("sha256", ""))
    if given is not None and given.sha256 == want:
        return given, Path(given.source), f"rig file {given.source} (geometry hash matches the plan)"
    rig, path, _ = planned_rig_file(sidecar, plan_dir, project)
    if rig is not None:
        return rig, path, f"rig file {path} (geometry hash matches the plan)"
    return None, None, ("element positions stored in the plan (rig file not found or changed since planning; "
                        "directivity unknown, so no field maps)")


#: Size of a ZIP local file header before its name and extra field (PKWARE APPNOTE.TXT, section 4.3.7).
_ZIP_LOCAL_HEADER = struct.Struct("<4s5H3L2H")


def _mapped_npz(path: Path, keys: tuple[str, ...]) -> dict[str, np.ndarray]:
    """Members of an uncompressed ``.npz`` as read-only memory maps; nothing is read until it is used.

    ``np.savez`` stores each array as an uncompressed ``.npy`` member, so the
    array's bytes lie in the file as they are: a map of them reads only the
    pages a figure or table touches (the report needs the drive weights at
    one frequency, not the whole (n_freq, n_spk, n_chan) stack).  A
    compressed member is read in full instead.
    """
    out: dict[str, np.ndarray] = {}
    with zipfile.ZipFile(path) as zf, open(path, "rb") as fh:
        for key in keys:
            info = zf.getinfo(key + ".npy")
            if info.compress_type != zipfile.ZIP_STORED:
                with zf.open(info) as member:
                    out[key] = np.lib.format.read_array(member, allow_pickle=False)
                continue
            fh.seek(info.header_offset)
            head = _ZIP_LOCAL_HEADER.unpack(fh.read(_ZIP_LOCAL_HEADER.size))
            if head[0] != b"PK\x03\x04":
                raise ValueError(f"bad ZIP member header for {key}")
            fh.seek(info.header_offset + _ZIP_LOCAL_HEADER.size + head[-2] + head[-1])
            version = np.lib.format.read_magic(fh)
            shape, fortran, dtype = (np.lib.format.read_array_header_1_0(fh) if version == (1, 0)
                                     else np.lib.format.read_array_header_2_0(fh))
            if dtype.hasobject:
                raise ValueError(f"{key} holds Python objects")
            if 0 in shape:
                out[key] = np.empty(shape, dtype=dtype)
                continue
            out[key] = np.memmap(path, dtype=dtype, mode="r", offset=fh.tell(), shape=shape,
                                 order="F" if fortran else "C")
    return out


def _plan_weights(folder: Path, sidecar: dict) -> PlanWeights:
    """The plan's weights with the large drive and combine stacks memory-mapped (see :func:`_mapped_npz`)."""
    npz = folder / "weights.npz"
    check_folder(folder, needed=("weights.*", "*.csv"))   # a mixed or damaged folder is refused, naming the file
    try:
        with np.load(npz, allow_pickle=False) as z:
            small = {k: z[k] for k in ("frequency_hz", "singular_value", "speaker_names", "mic_names")}
        big = _mapped_npz(npz, ("drive", "combine"))
    except (ValueError, KeyError, OSError, zipfile.BadZipFile) as exc:
        raise InputError(f"cannot read plan weights ({exc.__class__.__name__}: {' '.join(str(exc).split())})",
                         source=str(npz)) from None
    return PlanWeights(FrequencyAxis(small["frequency_hz"], source=str(npz)), small["singular_value"], big["drive"],
                       big["combine"], tuple(str(x) for x in small["speaker_names"]),
                       tuple(str(x) for x in small["mic_names"]), sidecar)


def _load_plan(folder: Path, project: Path, rig: Rig | None) -> FoundPlan:
    sidecar = _read_json(folder / "weights.json")
    full_rig, rig_file, note = _rig_for_plan(sidecar, folder, project, rig)
    plan = read_plan(folder, full_rig, weights=_plan_weights(folder, sidecar))
    return FoundPlan(folder, plan, sidecar, rig_file, note)


def _load_filters(folder: Path) -> FoundFilters:
    check_folder(folder, needed=("filters.json", "channel-*.wav", "*.csv"))
    doc = _read_json(folder / "filters.json")
    check = None
    c = doc.get("check")
    if isinstance(c, dict):
        try:
            xt = np.array([[np.nan if v is None else float(v) for v in row] for row in c["crosstalk_db"]], dtype=float)
            check = FilterCheck(tuple(int(k) - 1 for k in c["channels"]), np.asarray(c["gain_error_db"], dtype=float),
                                xt.reshape(len(c["channels"]), len(c["channels"])),
                                np.asarray(c["latency_samples"], dtype=int), float(c["limit_db"]),
                                int(c["rig_ir_samples"]))
        except (KeyError, TypeError, ValueError) as exc:
            raise InputError(f"malformed check ({exc})", source=str(folder / "filters.json"), field="check") from None
    return FoundFilters(folder, doc, check)


def _load_irset(folder: Path) -> FoundIRSet:
    irs = read_irset(folder)
    if folder.suffix.lower() == ".sofa":
        return FoundIRSet(folder, irs, "AES69 (SOFA) file")
    parent = folder.parent
    if (parent / "session.json").is_file():
        session = _read_json(parent / "session.json")
        marked = []
        for take in sorted((parent / "takes").glob("*/take.json")):
            t = _read_json(take)
            if t.get("status") not in (None, "ok"):
                marked.append(f"{t.get('speaker', take.parent.name)}: {t.get('status')}; "
                              + "; ".join(str(w) for w in t.get("warnings", [])))
        return FoundIRSet(folder, irs, "measurement", session, marked)
    if (folder / "deconvolution.csv").is_file():
        return FoundIRSet(folder, irs, "deconvolution")
    return FoundIRSet(folder, irs, "impulse-response set")


#: Columns of ``verify-channels.csv`` the report reads.
_VERIFY_CHANNEL_COLUMNS = ("frequency_hz", "channel", "gain_db", "isolation_db", "lost")


def _load_verification(folder: Path) -> FoundVerification:
    doc, _version, arrays = read_verification_record(folder)      # the sidecar checked, the arrays; not the tables
    channels = _read_csv_columns(folder / "verify-channels.csv")
    for name in _VERIFY_CHANNEL_COLUMNS:
        if name not in channels:
            raise InputError("missing column", source=str(folder / "verify-channels.csv"), field=name)
    return FoundVerification(folder, doc, channels, _read_csv_columns(folder / "verify-summary.csv"), arrays)


def _load_study(folder: Path) -> FoundStudy:
    from ..studies import files as study_files

    for name, (kind, reader) in _STUDY_SIDECARS.items():
        if (folder / name).is_file():
            study, side = getattr(study_files, reader)(folder)
            return FoundStudy(folder, kind, study, side)
    from .studies import load_study, study_kind
    if study_kind(folder):
        return load_study(folder)
    raise InputError("no study sidecar", source=str(folder))


def _kind(folder: Path) -> str | None:
    if (folder / "weights.json").is_file() and (folder / "weights.npz").is_file():
        return "plan"
    if (folder / "filters.json").is_file():
        return "filters"
    if (folder / "verify.json").is_file():
        return "verification"
    if any((folder / name).is_file() for name in _STUDY_SIDECARS):
        return "study"
    from .studies import study_kind       # zones, layout and comparison studies
    if study_kind(folder):
        return "study"
    if (folder / MANIFEST_NAME).is_file():
        parts = folder.parts
        if folder.name.startswith("harmonic-") or (len(parts) >= 3 and parts[-3] == "takes"):
            return None
        return "irset"
    return None


def find_results(project_dir: str | os.PathLike, rig: Rig | None = None) -> ProjectResults:
    """Find and load every result under `project_dir`.

    Parameters
    ----------
    project_dir : path
    rig : Rig, optional
        The rig to show with plans whose geometry hash it matches (default:
        the rig file named in each plan's sidecar, when it still matches).

    Returns
    -------
    ProjectResults
        Results that could not be read are listed in ``problems``.

    Raises
    ------
    InputError
        When `project_dir` is not a folder.
    """
    root = Path(project_dir)
    if not root.is_dir():
        raise InputError("not a folder", source=str(root), fix="give the folder that holds the plan/measure results")
    out = ProjectResults(root)
    loaders = {"plan": (lambda f: _load_plan(f, root, rig), out.plans),
               "filters": (_load_filters, out.filters),
               "irset": (_load_irset, out.irsets),
               "verification": (_load_verification, out.verifications),
               "study": (_load_study, out.studies)}
    for folder in _walk(root):
        found = [(_kind(folder), folder)] + [("irset", f) for f in sorted(folder.glob("*.sofa")) if f.is_file()]
        for kind, where in found:
            if kind is None:
                continue
            load, bucket = loaders[kind]
            try:
                bucket.append(load(where))
            except InputError as exc:
                out.problems.append(f"{kind} in {where}: {exc.one_line()}")
            except (OSError, ValueError, KeyError, TypeError, EOFError, zipfile.BadZipFile) as exc:
                # Any other fault of one result's files: listed, and the rest still comes out.
                out.problems.append(f"{kind} in {where}: unreadable ({exc.__class__.__name__}: "
                                    f"{' '.join(str(exc).split())})")
    return out
