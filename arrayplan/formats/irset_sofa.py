"""IR sets as AES69 (SOFA) files, through the sofar library.

Export uses the convention **GeneralFIR-E** (version 2.0).  It stores impulse
responses that depend on receivers *and* emitters, ``Data.IR`` of dimensions
M x R x N x E (measurements, receivers, samples, emitters), with cartesian
positions in metres by default and no room model imposed: our sets are
free-field simulations or measurements in rooms we know nothing about.
SingleRoomMIMOSRIR has the same data layout but asks for a shoebox or DAE
room description and spherical positions, so it fits a room survey rather
than an array rig.

The mapping written:

* one measurement (M = 1); receivers = microphones, emitters = speakers;
  ``Data.IR[0, m, n, s] = data[n, m, s]``, float64, ``Data.Delay`` zero;
* ``Data.SamplingRate`` in hertz;
* ``ListenerPosition`` and ``SourcePosition`` at the origin (cartesian,
  metre), so ``ReceiverPosition`` and ``EmitterPosition`` are the absolute
  positions of the microphones and speakers in metres; unknown positions are
  NaN rows;
* ``GLOBAL:RoomType`` "free field" for simulated free-field sets, otherwise
  "reverberant" with a ``GLOBAL:RoomDescription`` saying the room is not
  described;
* the names (also readable in ``GLOBAL:EmitterDescription`` and
  ``GLOBAL:ReceiverDescription``), units, latency removed, the index of zero
  lag (``zero_lag_samples``), warnings, extra fields and our provenance, as
  JSON in the custom global attribute ``GLOBAL:ArrayplanIRSet`` (ASCII, so
  any netCDF reader can show it).

Zero lag: a set that keeps n0 samples of pre-ringing before zero lag is
written as it is, so for a reader that does not look at
``GLOBAL:ArrayplanIRSet`` the responses simply start n0 samples early (every
arrival sits n0 samples later than its acoustic delay).  ``Data.Delay`` cannot
say so: AES69 delays are added, never negative.  ``GLOBAL:Comment`` states n0
in words; arrayplan reads it back from the metadata.

Names go into global attributes rather than string variables because
sofar 1.3 cannot write string variables with netCDF4 1.7.

Import accepts the FIR-E conventions (GeneralFIR-E, SingleRoomMIMOSRIR) with
one measurement (speakers = emitters), and the one-emitter layout in which
each measurement is one speaker position (GeneralFIR, SingleRoomSRIR, or a
FIR-E file with E = 1): ``Data.IR`` M x R x N, speakers = measurements.
Positions are converted to cartesian metres (spherical: azimuth
counter-clockwise from x, elevation up from the horizontal plane) and made
absolute by adding the listener/source position, turned by its view and up
vectors where given.  Integer ``Data.Delay`` values are applied by shifting
the responses later; fractional ones are refused.

sofar is imported only inside these functions; without it they raise an
:class:`~arrayplan.errors.InputError` that says how to install it.
"""

from __future__ import annotations

import json
import os
import warnings
from pathlib import Path
from typing import Any

import numpy as np

from .._version import __version__
from ..errors import InputError
from ._versioning import check, stamp
from .atomic_files import atomic_path, json_default
from .fileio import provenance as _provenance
from .irset import FORMAT_NAME, FORMAT_VERSION, UNITS, IRSet, format_version_for, zero_lag_problem

__all__ = ["write_irset_sofa", "read_irset_sofa", "SOFA_CONVENTION", "METADATA_ATTRIBUTE"]

#: The convention written by :func:`write_irset_sofa`.
SOFA_CONVENTION = "GeneralFIR-E"
#: Custom global attribute (sofar name) holding our metadata as JSON.
METADATA_ATTRIBUTE = "GLOBAL_ArrayplanIRSet"

#: Conventions read with speakers = emitters (FIR-E data, M x R x N x E).
_FIR_E = ("GeneralFIR-E", "GeneralFIRE", "SingleRoomMIMOSRIR")
#: Conventions read with speakers = measurements (FIR data, M x R x N).
_FIR = ("GeneralFIR", "SingleRoomSRIR")
_METRE = ("metre", "meter", "metres", "meters", "m")
_DEGREE = ("degree", "degrees", "deg")


def _sofar(source: str):
    try:
        import sofar
    except ImportError:
        raise InputError("reading and writing AES69 (SOFA) files needs the optional package sofar",
                         source=source, fix="pip install 'arrayplan[sofa]'") from None
    return sofar


def _check_suffix(path: Path) -> None:
    # sofar replaces any other suffix by '.sofa', which would read or write another file.
    if path.suffix != ".sofa":
        raise InputError("an AES69 (SOFA) file name must end in '.sofa'", source=str(path),
                         fix="rename the file to end in .sofa (lower case)")


def _name_list(kind: str, names: list[str]) -> str:
    return f"{kind}, in Data.IR order: " + ", ".join(names)


# --------------------------------------------------------------------------- export

def write_irset_sofa(path: str | os.PathLike, irs: IRSet, **provenance_extra: Any) -> Path:
    """Write `irs` to `path` as an AES69 GeneralFIR-E file, atomically.

    Parameters
    ----------
    path : path-like
        The output file; must end in ``.sofa``.  Written under a temporary
        name in the same folder and renamed into place when complete.
    irs : IRSet
        Responses ``data`` of shape (n_samples, n_mic, n_spk), positions in m.
    **provenance_extra
        Added to the provenance header kept in ``GLOBAL:ArrayplanIRSet``.

    Returns
    -------
    Path
        `path`.
    """
    path = Path(path)
    _check_suffix(path)
    sofar = _sofar(str(path))
    n_mic, n_spk = irs.n_mic, irs.n_spk
    meta = stamp({
        "speaker_names": list(irs.speaker_names),
        "mic_names": list(irs.mic_names),
        "units": irs.units,
        "latency_removed_samples": int(irs.latency_removed_samples),
        "zero_lag_samples": int(irs.zero_lag_samples),
        "warnings": list(irs.warnings),
        "extra": irs.extra,
        "provenance": _provenance(**provenance_extra),
    }, FORMAT_NAME, format_version_for(irs))
    sofa = sofar.Sofa(SOFA_CONVENTION)
    sofa.GLOBAL_Title = f"Impulse responses of {n_spk} loudspeakers to {n_mic} microphones"
    sofa.GLOBAL_ApplicationName = "arrayplan"
    sofa.GLOBAL_ApplicationVersion = __version__
    sofa.GLOBAL_Comment = (f"Data.IR[0, r, n, e] is the response at microphone r to loudspeaker e; one unit of "
                           f"Data.IR is '{irs.units}'; latency already removed: {int(irs.latency_removed_samples)} "
                           f"samples; zero lag (the moment of driving) is sample {irs.zero_lag_samples}, the "
                           "samples before it are pre-ringing of the measurement; unknown positions are NaN")
    sofa.GLOBAL_History = f"written by arrayplan {__version__}"
    if irs.extra.get("simulated") == "free field":
        sofa.GLOBAL_RoomType = "free field"
    else:
        sofa.GLOBAL_RoomType = "reverberant"
        sofa.add_attribute("GLOBAL_RoomDescription", "not described: the responses include whatever room the "
                                                     "rig stood in")
    sofa.ListenerPosition = np.zeros((1, 3))
    sofa.SourcePosition = np.zeros((1, 3))
    sofa.SourcePosition_Type = "cartesian"
    sofa.SourcePosition_Units = "metre"
    sofa.ReceiverPosition = _positions_or_nan(irs.mic_positions, n_mic)
    sofa.EmitterPosition = _positions_or_nan(irs.speaker_positions, n_spk)
    sofa.Data_IR = np.ascontiguousarray(irs.data.transpose(1, 0, 2)[None], dtype=np.float64)
    sofa.Data_SamplingRate = float(irs.sample_rate_hz)
    sofa.Data_Delay = np.zeros((1, n_mic, n_spk))
    sofa.add_attribute("GLOBAL_EmitterDescription", _name_list("loudspeakers", irs.speaker_names))
    sofa.add_attribute("GLOBAL_ReceiverDescription", _name_list("microphones", irs.mic_names))
    text = json.dumps(meta, ensure_ascii=True, allow_nan=False, default=json_default)
    sofa.add_attribute(METADATA_ATTRIBUTE, text)
    with atomic_path(path) as tmp, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sofar.write_sofa(str(tmp), sofa)
    return path


def _positions_or_nan(pos: np.ndarray | None, n: int) -> np.ndarray:
    if pos is None:
        return np.full((n, 3), np.nan)
    out = np.asarray(pos, dtype=float).reshape(n, 3).copy()
    out[~np.all(np.isfinite(out), axis=1)] = np.nan
    return out


# --------------------------------------------------------------------------- import

def read_irset_sofa(path: str | os.PathLike) -> IRSet:
    """Read an AES69 (SOFA) file of impulse responses as an :class:`IRSet`.

    Parameters
    ----------
    path : path-like
        A ``.sofa`` file in one of the conventions GeneralFIR-E,
        SingleRoomMIMOSRIR (speakers = emitters, one measurement), or
        GeneralFIR, SingleRoomSRIR (speakers = measurements).

    Returns
    -------
    IRSet
        ``data`` of shape (n_samples, n_mic, n_spk); positions in m where
        the file gives them.  Names, units, latency, warnings and extra
        fields and the index of zero lag come from ``GLOBAL:ArrayplanIRSet``
        when present (zero lag 0 when it has no ``zero_lag_samples``); otherwise
        names are ``S1..`` / ``M1..`` (or the file's Emitter/Receiver
        descriptions) and the units ``"full_scale"``.

    Raises
    ------
    InputError
        Naming the file and the SOFA field, for anything that cannot be read.
    """
    path = Path(path)
    src = str(path)
    if not path.is_file():
        raise InputError("file not found", source=src)
    _check_suffix(path)
    sofar = _sofar(src)
    convention = _peek_convention(path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            sofa = sofar.read_sofa(src, verify=False, verbose=False)
            issues = sofa.verify(issue_handling="return", mode="read")
        except Exception as exc:  # sofar and netCDF4 raise many types for malformed files
            raise InputError(f"not a readable AES69 (SOFA) file ({_first_issue(str(exc))})", source=src) from None
    if issues and "ERRORS" in issues:
        raise InputError(f"does not follow the {convention} convention ({_first_issue(issues)})", source=src,
                         fix="repair the file with the tool that wrote it")
    try:
        return _irset_from_sofa(sofa, convention, src)
    except InputError as exc:
        if exc.source is None:                            # raised by IRSet itself: name the file
            raise InputError(exc.problem, source=src, field=exc.field or "GLOBAL:ArrayplanIRSet",
                             fix=exc.fix) from None
        raise


def _first_issue(text: str) -> str:
    lines = [ln.strip() for ln in text.splitlines() if ln.strip()]
    items = [ln[2:] for ln in lines if ln.startswith("- ")]
    return (items or lines or ["unknown error"])[0]


def _peek_convention(path: Path) -> str:
    """The convention name, read with netCDF4 before sofar sees the file."""
    from netCDF4 import Dataset

    src = str(path)
    try:
        with Dataset(src, "r") as ds:
            attrs = {a: ds.getncattr(a) for a in ds.ncattrs()}
    except OSError as exc:
        raise InputError(f"not an AES69 (SOFA) file: cannot be read as netCDF-4 ({' '.join(str(exc).split())})",
                         source=src, fix="give a .sofa file written by a SOFA tool") from None
    if attrs.get("Conventions") != "SOFA":
        raise InputError("not an AES69 (SOFA) file: the global attribute Conventions is not 'SOFA'",
                         source=src, field="GLOBAL:Conventions")
    convention = attrs.get("SOFAConventions")
    if not isinstance(convention, str):
        raise InputError("missing the convention name", source=src, field="GLOBAL:SOFAConventions")
    if convention not in _FIR_E + _FIR:
        data_type = attrs.get("DataType", "?")
        raise InputError(f"convention {convention} (data type {data_type}) is not an impulse-response set "
                         "arrayplan reads", source=src, field="GLOBAL:SOFAConventions",
                         fix="export impulse responses as " + ", ".join(_FIR_E[:1] + _FIR_E[2:] + _FIR))
    return convention


def _get(sofa: Any, name: str) -> Any:
    """A variable or attribute by its AES69 name ('Data.IR', 'EmitterPosition:Type'), or None."""
    return getattr(sofa, name.replace(".", "_").replace(":", "_"), None)


def _array(sofa: Any, name: str, src: str) -> np.ndarray | None:
    value = _get(sofa, name)
    if value is None:
        return None
    try:
        arr = np.ma.filled(np.ma.asarray(value, dtype=float), np.nan)
    except (TypeError, ValueError):
        raise InputError("is not numeric", source=src, field=name) from None
    return np.asarray(arr)


def _irset_from_sofa(sofa: Any, convention: str, src: str) -> IRSet:
    ir = _array(sofa, "Data.IR", src)
    if ir is None:
        raise InputError("missing", source=src, field="Data.IR")
    want = 4 if convention in _FIR_E else 3
    if ir.ndim > want:
        raise InputError(f"has {ir.ndim} dimensions, the convention has {want}", source=src, field="Data.IR")
    ir = ir.reshape(ir.shape + (1,) * (want - ir.ndim))
    if want == 3:
        ir = ir[..., None]
    n_meas, n_rec, n_len, n_emit = ir.shape
    if not np.all(np.isfinite(ir)):
        raise InputError("contains NaN, infinite or missing samples", source=src, field="Data.IR",
                         fix="replace or drop the bad responses before export")
    rate = _sample_rate(sofa, n_meas, src)
    ir = _apply_delay(ir, _array(sofa, "Data.Delay", src), src)

    notes: list[str] = []
    if n_meas == 1:
        layout = "emitters"
        data = ir[0].transpose(1, 0, 2)                       # (N, R, E)
    elif n_emit == 1:
        layout = "measurements"
        data = ir[:, :, :, 0].transpose(2, 1, 0)              # (N, R, M)
    else:
        raise InputError(f"holds {n_meas} measurements of {n_emit} emitters; arrayplan reads one measurement "
                         "of many emitters, or many measurements of one emitter", source=src, field="Data.IR",
                         fix="export one measurement per file")
    data = np.ascontiguousarray(data)
    n_spk = data.shape[2]
    for s in range(n_spk):
        if not np.any(data[:, :, s]):
            what = "emitter" if layout == "emitters" else "measurement"
            raise InputError(f"the responses of {what} {s + 1} are silent (all samples zero)", source=src,
                             field="Data.IR", fix="check the wiring of this speaker and measure again")
    spk_pos, mic_pos = _element_positions(sofa, layout, n_meas, n_rec, n_emit, src, notes)

    meta = _metadata(sofa, src, n_spk, data.shape[1], data.shape[0])
    if meta is not None:
        return IRSet(data=data, sample_rate_hz=rate, speaker_names=meta["speaker_names"],
                     mic_names=meta["mic_names"], speaker_positions=spk_pos, mic_positions=mic_pos,
                     units=meta["units"], latency_removed_samples=meta["latency_removed_samples"],
                     warnings=meta["warnings"] + notes, extra=meta["extra"],
                     zero_lag_samples=meta["zero_lag_samples"])
    spk_names = _descriptions(sofa, "EmitterDescriptions", n_spk) if layout == "emitters" else None
    return IRSet(data=data, sample_rate_hz=rate,
                 speaker_names=spk_names or [f"S{i + 1}" for i in range(n_spk)],
                 mic_names=_descriptions(sofa, "ReceiverDescriptions", n_rec) or [f"M{i + 1}" for i in range(n_rec)],
                 speaker_positions=spk_pos, mic_positions=mic_pos, units="full_scale", warnings=notes,
                 extra={"sofa": {"convention": convention,
                                 "convention_version": str(_get(sofa, "GLOBAL:SOFAConventionsVersion")),
                                 "title": str(_get(sofa, "GLOBAL:Title") or ""),
                                 "speakers_are": layout, "source_file": src}})


def _sample_rate(sofa: Any, n_meas: int, src: str) -> float:
    rates = _array(sofa, "Data.SamplingRate", src)
    if rates is None:
        raise InputError("missing", source=src, field="Data.SamplingRate")
    units = _get(sofa, "Data.SamplingRate:Units")
    if units is not None and str(units).strip().lower() not in ("hertz", "hz"):
        raise InputError(f"must be hertz, got {units!r}", source=src, field="Data.SamplingRate:Units")
    rates = rates.ravel()
    if rates.size == 0 or not np.all(np.isfinite(rates)) or np.any(rates <= 0):
        raise InputError(f"must be positive, got {rates.tolist()}", source=src, field="Data.SamplingRate")
    if np.ptp(rates) > 0:
        raise InputError(f"varies between measurements ({rates.min():g} to {rates.max():g} Hz)", source=src,
                         field="Data.SamplingRate", fix="resample every response to one rate before export")
    return float(rates[0])


def _apply_delay(ir: np.ndarray, delay: np.ndarray | None, src: str) -> np.ndarray:
    """Shift each response (M, R, N, E) later by its whole-sample Data.Delay."""
    if delay is None:
        return ir
    n_meas, n_rec, n_len, n_emit = ir.shape
    d = delay.reshape(delay.shape + (1,) * (3 - delay.ndim)) if delay.ndim < 3 else delay
    try:
        d = np.broadcast_to(d, (n_meas, n_rec, n_emit))
    except ValueError:
        raise InputError(f"has shape {delay.shape}, does not match Data.IR", source=src, field="Data.Delay") from None
    if not np.all(np.isfinite(d)):
        raise InputError("contains NaN or missing values", source=src, field="Data.Delay")
    whole = np.round(d)
    if np.any(np.abs(d - whole) > 1e-6):
        bad = float(d.ravel()[np.argmax(np.abs(d - whole).ravel())])
        raise InputError(f"holds a fractional delay of {bad:g} samples", source=src, field="Data.Delay",
                         fix="apply the fractional delays to Data.IR (or round them) and set Data.Delay "
                             "to whole samples before export")
    if np.any(whole < 0):
        raise InputError(f"holds a negative delay of {whole.min():g} samples", source=src, field="Data.Delay")
    whole = whole.astype(int)
    top = int(whole.max())
    if top == 0:
        return ir
    out = np.zeros((n_meas, n_rec, n_len + top, n_emit))
    for k in np.unique(whole):
        mi, ri, ei = np.nonzero(whole == k)
        out[mi, ri, k:k + n_len, ei] = ir[mi, ri, :, ei]
    return out


def _descriptions(sofa: Any, name: str, n: int) -> list[str] | None:
    value = _get(sofa, name)
    if value is None:
        return None
    names = [str(v).strip() for v in np.asarray(value).ravel()]
    if len(names) != n or not all(names) or len(set(names)) != n:
        return None
    return names


def _metadata(sofa: Any, src: str, n_spk: int, n_mic: int, n_samples: int) -> dict | None:
    text = _get(sofa, "GLOBAL:ArrayplanIRSet")
    if text is None:
        return None
    field = "GLOBAL:ArrayplanIRSet"
    try:
        meta = json.loads(str(text))
    except json.JSONDecodeError as exc:
        raise InputError(f"is not valid JSON ({exc})", source=src, field=field) from None
    check(meta, FORMAT_NAME, FORMAT_VERSION, src, field_prefix=field + ".")
    for key, n, what in (("speaker_names", n_spk, "speakers"), ("mic_names", n_mic, "microphones")):
        names = meta.get(key)
        if not isinstance(names, list) or not all(isinstance(v, str) for v in names) or len(names) != n:
            raise InputError(f"must list {n} {what} names to match Data.IR", source=src, field=f"{field}.{key}",
                             fix="correct or delete the attribute")
    if meta.get("units") not in UNITS:
        raise InputError(f"must be one of {', '.join(UNITS)}, got {meta.get('units')!r}", source=src,
                         field=field + ".units")
    latency = meta.get("latency_removed_samples", 0)
    if not isinstance(latency, int) or isinstance(latency, bool):
        raise InputError(f"must be a whole number of samples, got {latency!r}", source=src,
                         field=field + ".latency_removed_samples")
    zero_lag = meta.get("zero_lag_samples", 0)
    problem = zero_lag_problem(zero_lag, n_samples)
    if problem:
        raise InputError(problem, source=src, field=field + ".zero_lag_samples",
                         fix="correct or delete the attribute")
    warn = meta.get("warnings", [])
    extra = meta.get("extra", {})
    if not isinstance(warn, list) or not isinstance(extra, dict):
        raise InputError("warnings must be a list and extra an object", source=src, field=field)
    return {"speaker_names": meta["speaker_names"], "mic_names": meta["mic_names"], "units": meta["units"],
            "latency_removed_samples": latency, "zero_lag_samples": int(zero_lag),
            "warnings": [str(w) for w in warn], "extra": extra}


# --------------------------------------------------------------------------- positions

def _units(text: Any, kind: str, src: str, field: str) -> None:
    parts = [p.strip().lower() for p in str(text if text is not None else "").split(",")]
    if kind == "cartesian":
        ok = all(p in _METRE for p in parts) and len(parts) in (1, 3)
        want = "metre"
    else:
        ok = len(parts) == 3 and parts[0] in _DEGREE and parts[1] in _DEGREE and parts[2] in _METRE
        want = "degree, degree, metre"
    if not ok:
        raise InputError(f"must be '{want}' for {kind} coordinates, got {text!r}", source=src, field=field)


def _coordinates(sofa: Any, name: str, src: str, notes: list[str], described_by: str | None = None
                 ) -> np.ndarray | None:
    """Variable `name` as cartesian metres, shape (k, 3) or (M, k, 3); None if absent or not a position.

    `described_by` names the variable whose ``:Type`` and ``:Units`` apply
    (AES69 gives ``...Up`` the type and units of ``...View``).
    """
    meta = described_by or name
    value = _array(sofa, name, src)
    if value is None:
        return None
    if value.ndim == 1:
        value = value[None, :]
    if value.ndim == 3:                                   # (k, C, M) -> (M, k, C)
        value = np.moveaxis(value, 2, 0)
    if value.shape[-1] != 3:
        raise InputError(f"has shape {value.shape}, needs 3 coordinates", source=src, field=name)
    kind = str(_get(sofa, meta + ":Type") or "cartesian").strip().lower()
    if kind == "cartesian":
        _units(_get(sofa, meta + ":Units"), kind, src, meta + ":Units")
        return value
    if kind == "spherical":
        _units(_get(sofa, meta + ":Units"), kind, src, meta + ":Units")
        az, el, r = np.radians(value[..., 0]), np.radians(value[..., 1]), value[..., 2]
        return np.stack([r * np.cos(el) * np.cos(az), r * np.cos(el) * np.sin(az), r * np.sin(el)], axis=-1)
    notes.append(f"{meta}:Type is '{kind}'; those positions were not kept")
    return None


def _frames(sofa: Any, prefix: str, src: str, notes: list[str]) -> np.ndarray | None:
    """Rotation matrices (k, 3, 3) from `prefix`View and `prefix`Up (columns: x, y, z), or None."""
    view = _coordinates(sofa, prefix + "View", src, notes)
    up = _coordinates(sofa, prefix + "Up", src, notes, described_by=prefix + "View")
    if view is None:
        return None
    up = np.broadcast_to(np.array([[0.0, 0.0, 1.0]]) if up is None else up, view.shape)
    x = view / np.linalg.norm(view, axis=-1, keepdims=True)
    z = up - np.sum(up * x, axis=-1, keepdims=True) * x
    z_norm = np.linalg.norm(z, axis=-1, keepdims=True)
    if not (np.all(np.isfinite(x)) and np.all(z_norm > 1e-12)):
        raise InputError("view and up vectors must be non-zero and not parallel", source=src,
                         field=f"{prefix}View/{prefix}Up")
    z = z / z_norm
    return np.stack([x, np.cross(z, x), z], axis=-1)


def _per_measurement(arr: np.ndarray, n_meas: int, src: str, field: str) -> np.ndarray:
    """Broadcast the leading axis of `arr` (1 or n_meas rows) to n_meas."""
    if arr.shape[0] not in (1, n_meas):
        raise InputError(f"has {arr.shape[0]} rows, Data.IR has {n_meas} measurements", source=src, field=field)
    return np.broadcast_to(arr, (n_meas,) + arr.shape[1:])


def _absolute(sofa: Any, origin: str, element: str, frame: str, n_meas: int, src: str,
              notes: list[str]) -> np.ndarray | None:
    """Absolute element positions in metres, shape (n_meas, k, 3), or None.

    AES69 gives element positions (`element`) in the local frame of the
    object (`origin`), turned by its view and up vectors when given.
    """
    base = _coordinates(sofa, origin, src, notes)
    local = _coordinates(sofa, element, src, notes)
    if base is None or local is None or base.ndim != 2:
        return None
    if local.ndim == 2:
        local = local[None]
    local = _per_measurement(local, n_meas, src, element)
    rot = _frames(sofa, frame, src, notes)
    if rot is not None:
        local = np.einsum("mij,mkj->mki", _per_measurement(rot, n_meas, src, frame + "View"), local)
    return _per_measurement(base, n_meas, src, origin)[:, None, :] + local


def _element_positions(sofa: Any, layout: str, n_meas: int, n_rec: int, n_emit: int, src: str,
                       notes: list[str]) -> tuple[np.ndarray | None, np.ndarray | None]:
    spk = _absolute(sofa, "SourcePosition", "EmitterPosition", "Source", n_meas, src, notes)
    if spk is not None:
        if layout == "emitters":
            spk = spk[0] if spk.shape[1] == n_emit else None
        elif spk.shape[1] == 1:
            spk = spk[:, 0, :]
        else:                                          # several emitters per source: use the source position
            spk = _per_measurement(_coordinates(sofa, "SourcePosition", src, []), n_meas, src, "SourcePosition")
    mic = _absolute(sofa, "ListenerPosition", "ReceiverPosition", "Listener", n_meas, src, notes)
    if mic is not None:
        if mic.shape[1] != n_rec:
            mic = None
        elif n_meas > 1 and not np.allclose(mic, mic[:1], rtol=0, atol=1e-9, equal_nan=True):
            notes.append("the microphones move between measurements; their positions were not kept")
            mic = None
        else:
            mic = mic[0]
    return _known(spk), _known(mic)


def _known(pos: np.ndarray | None) -> np.ndarray | None:
    if pos is None:
        return None
    pos = np.array(pos, dtype=float)
    return None if np.all(np.isnan(pos)) else pos
