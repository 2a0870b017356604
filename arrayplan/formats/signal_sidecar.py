"""The signal sidecar: the JSON file beside every test-signal WAV.

``arrayplan signal`` writes ``FILE.json`` beside ``FILE.wav`` (and, for
sweeps, ``FILE.inverse.json`` beside the inverse filter ``FILE.inverse.wav``);
``arrayplan deconvolve`` reads it back to find the sweep, the schedule or the
probe it was made from.  Schema (JSON object, UTF-8)::

    format            "arrayplan-signal"
    format_version    1
    signal            kind of signal: "exponential_sweep", "pink_noise", "channel_probe_sweep",
                      "inverse_filter", ...
    file              the WAV's file name (in the same folder)
    sample_rate_hz    number > 0, Hz
    n_samples         whole number > 0: samples in the WAV
    n_channels        whole number > 0: audio channels in the WAV
    channel_names     list of n_channels names (signals; not inverse filters)
    sample_format     "float32" or "pcm24"
    level             object: levels in dBFS and their basis (signals)
    conditioning      object or null: fades (s), DC block, high-pass (Hz)
    parameters        object: what the signal was made from
    sweep             object or null: the sweep block (arrayplan.signals.sweep_record)
    schedule          object or null: segment length and each speaker's start sample
    probe             object or null: the channel probed and its filter file
    exposure          object or null: the estimated level at the listeners
    warnings          list of text
    caution           text
    provenance        object (arrayplan.formats.fileio.provenance)

An inverse filter's sidecar also has ``inverse_of`` (the signal's file name)
and ``parameters_in`` (the signal's sidecar) and a ``note``.  Readers refuse
another ``format`` and a newer ``format_version``.
"""

from __future__ import annotations

import math
import os
from pathlib import Path
from typing import Any, Mapping, Sequence

from ..errors import InputError
from ._versioning import check, read_json_document, stamp
from .atomic_files import write_json_atomic

__all__ = ["SIGNAL_FORMAT", "SIGNAL_FORMAT_VERSION", "signal_sidecar", "inverse_filter_sidecar",
           "check_signal_sidecar", "read_signal_sidecar", "write_signal_sidecar"]

SIGNAL_FORMAT = "arrayplan-signal"
SIGNAL_FORMAT_VERSION = 1

#: Blocks that are an object or null when present.
_BLOCKS = ("level", "conditioning", "parameters", "sweep", "schedule", "probe", "exposure", "provenance")


def signal_sidecar(*, signal: str, file: str, sample_rate_hz: float, n_samples: int, n_channels: int,
                   channel_names: Sequence[str], sample_format: str, level: Mapping[str, Any] | None,
                   conditioning: Mapping[str, Any] | None, parameters: Mapping[str, Any],
                   sweep: Mapping[str, Any] | None = None, schedule: Mapping[str, Any] | None = None,
                   probe: Mapping[str, Any] | None = None, exposure: Mapping[str, Any] | None = None,
                   warnings: Sequence[str] = (), caution: str = "",
                   provenance: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """The sidecar of a signal file, checked (module docstring for each field).

    Parameters
    ----------
    signal : str
        Kind of signal.
    file : str
        The WAV's file name.
    sample_rate_hz : float
        Hz.
    n_samples, n_channels : int
        The WAV's shape, (n_samples, n_channels).
    channel_names : sequence of str
        One per channel (speakers, in rig order).
    sample_format : str
    level, conditioning, parameters, sweep, schedule, probe, exposure, provenance : mapping or None
        The blocks, as JSON-ready mappings.
    warnings : sequence of str
    caution : str

    Returns
    -------
    dict
        Ready for :func:`write_signal_sidecar`.
    """
    obj = stamp({"signal": signal, "file": file,
                 "sample_rate_hz": float(sample_rate_hz), "n_samples": int(n_samples), "n_channels": int(n_channels),
                 "channel_names": list(channel_names), "sample_format": sample_format,
                 "level": None if level is None else dict(level),
                 "conditioning": None if conditioning is None else dict(conditioning), "parameters": dict(parameters),
                 "sweep": None if sweep is None else dict(sweep), "schedule": None if schedule is None else dict(schedule),
                 "probe": None if probe is None else dict(probe), "exposure": None if exposure is None else dict(exposure),
                 "warnings": list(warnings), "caution": caution,
                 "provenance": None if provenance is None else dict(provenance)}, SIGNAL_FORMAT, SIGNAL_FORMAT_VERSION)
    return check_signal_sidecar(obj)


def inverse_filter_sidecar(*, file: str, signal_file: str, sample_rate_hz: float, n_samples: int,
                           sweep: Mapping[str, Any] | None, caution: str = "",
                           provenance: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """The sidecar of a sweep's inverse filter (one float32 channel, not a signal to play).

    Parameters
    ----------
    file : str
        The inverse filter's file name.
    signal_file : str
        The sweep (or schedule, or probe) file it inverts.
    sample_rate_hz : float
        Hz.
    n_samples : int
        Taps of the inverse filter.
    sweep : mapping or None
        The sweep block it belongs to.
    caution : str
    provenance : mapping, optional

    Returns
    -------
    dict
    """
    obj = stamp({"signal": "inverse_filter", "file": file, "inverse_of": signal_file,
                 "parameters_in": Path(signal_file).with_suffix(".json").name,
                 "sample_rate_hz": float(sample_rate_hz), "n_samples": int(n_samples), "n_channels": 1,
                 "sample_format": "float32", "sweep": None if sweep is None else dict(sweep),
                 "note": "inverse filter for deconvolution: not a signal to play", "caution": caution,
                 "provenance": None if provenance is None else dict(provenance)}, SIGNAL_FORMAT, SIGNAL_FORMAT_VERSION)
    return check_signal_sidecar(obj)


def _whole(v: Any) -> bool:
    return isinstance(v, int) and not isinstance(v, bool) and v > 0


def check_signal_sidecar(obj: Any, source: str | None = None) -> dict[str, Any]:
    """Check a sidecar against the schema; return it, or raise InputError naming the field.

    Parameters
    ----------
    obj : object
        A decoded sidecar.
    source : str, optional
        Its file, for the message.

    Returns
    -------
    dict
        `obj` itself.
    """
    fix = "give the .json written beside the file by 'arrayplan signal'"
    check(obj, SIGNAL_FORMAT, SIGNAL_FORMAT_VERSION, source, fix=fix)
    for key in ("signal", "file"):
        if not (isinstance(obj.get(key), str) and obj[key]):
            raise InputError("missing or not a text", source=source, field=key, fix=fix)
    rate = obj.get("sample_rate_hz")
    if isinstance(rate, bool) or not isinstance(rate, (int, float)) or not (math.isfinite(rate) and rate > 0):
        raise InputError(f"must be a positive number of Hz, got {rate!r}", source=source, field="sample_rate_hz")
    for key in ("n_samples", "n_channels"):
        if not _whole(obj.get(key)):
            raise InputError(f"missing or bad {key} {obj.get(key)!r}", source=source, field=key)
    names = obj.get("channel_names")
    if names is not None and not (isinstance(names, list) and len(names) == obj["n_channels"]
                                  and all(isinstance(n, str) and n for n in names)):
        raise InputError(f"must list {obj['n_channels']} channel names", source=source, field="channel_names")
    for key in _BLOCKS:
        if obj.get(key) is not None and not isinstance(obj[key], dict):
            raise InputError("must be an object or null", source=source, field=key)
    warnings = obj.get("warnings", [])
    if not (isinstance(warnings, list) and all(isinstance(w, str) for w in warnings)):
        raise InputError("must be a list of texts", source=source, field="warnings")
    return obj


def read_signal_sidecar(path: str | os.PathLike) -> dict[str, Any]:
    """Read and check a signal sidecar.

    Parameters
    ----------
    path : path
        ``FILE.json`` beside a signal (or inverse filter) written by ``arrayplan signal``.

    Returns
    -------
    dict
        The sidecar (module docstring).

    Raises
    ------
    InputError
        When the file is missing, not JSON, or not a sidecar of this format.
    """
    path = Path(path)
    src = str(path)
    if not path.is_file():
        raise InputError("signal sidecar not found", source=src, fix="give the .json written beside the signal file")
    return check_signal_sidecar(read_json_document(path), source=src)


def write_signal_sidecar(path: str | os.PathLike, sidecar: Mapping[str, Any]) -> Path:
    """Check `sidecar` and write it as JSON to `path`, atomically.

    Parameters
    ----------
    path : path
        Usually ``FILE.json`` beside the WAV (:func:`arrayplan.signals.wavout.sidecar_path`).
    sidecar : mapping
        From :func:`signal_sidecar` or :func:`inverse_filter_sidecar`.

    Returns
    -------
    Path
    """
    return write_json_atomic(path, check_signal_sidecar(dict(sidecar), source=str(path)))
