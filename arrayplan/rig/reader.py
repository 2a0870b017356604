"""Rig files (TOML) -> :class:`~arrayplan.rig.model.Rig`.

Loading resolves every generated group and CSV file into plain arrays
(:mod:`arrayplan.rig.entries`), reads the optional tables (medium,
frequencies, hardware, planning, ``[room]``, ``[[zones]]``) and checks the
result (:meth:`Rig.validate`).
"""

from __future__ import annotations

import sys
from dataclasses import replace
from pathlib import Path
from typing import Any

from ..errors import InputError
from ..frequency import FrequencyAxis
from ..limits import MAX_CHANNEL_NUMBER, MAX_FREQUENCIES
from .medium import Medium, speed_of_sound_air
from .room import ROOM_KEYS, parse_room
from ..formats.tomlfields import FieldReader
from .entries import resolve_side, rig_field_reader
from .model import TEMPERATURE_RANGE_C, HardwareMap, PlanSettings, Rig

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

__all__ = ["TABLE_KEYS", "load_rig", "read_rig_document", "resolve_section"]

_TOP_KEYS = {"rig", "medium", "frequencies", "speakers", "microphones", "hardware", "planning", "room", "zones"}
#: Keys allowed in each table of a rig file ("" is the top level).
TABLE_KEYS = {
    "": _TOP_KEYS,
    "rig": {"name", "description"},
    "medium": {"speed_of_sound", "temperature_c", "relative_humidity_pct", "pressure_kpa", "air_absorption"},
    "frequencies": {"list", "start", "stop", "count", "spacing"},
    "hardware": {"device", "sample_rate_hz", "reference", "calibration"},
    "hardware.reference": {"output_channel", "input_channel"},
    "planning": {"threshold_db", "snr_db", "track", "chunk_size", "workers", "max_channels", "memory_mb"},
    "room": ROOM_KEYS,
}


def _checked_table(table: Any, r: FieldReader, name: str) -> dict | None:
    """`table` as the rig file's ``[name]``: None when absent; InputError when not a table (or keys unknown)."""
    if table is None:
        return None
    if not isinstance(table, dict):
        raise r.fail(name, "must be a table")
    r.keys(table, TABLE_KEYS[name], name)
    return table


def _medium(table: Any, r: FieldReader) -> Medium:
    table = _checked_table(table, r, "medium")
    if table is None:
        return Medium()
    temp = r.number(table, "temperature_c", "medium", default=20.0, low=TEMPERATURE_RANGE_C[0],
                    high=TEMPERATURE_RANGE_C[1])
    c = r.number(table, "speed_of_sound", "medium", default=None, positive=True, high=10_000.0)
    if c is None:
        c = speed_of_sound_air(temp)
    absorb = r.boolean(table, "air_absorption", "medium", default=False)
    try:
        return Medium(c, temp, r.number(table, "relative_humidity_pct", "medium", default=50.0),
                      r.number(table, "pressure_kpa", "medium", default=101.325, positive=True), absorb)
    except InputError as exc:
        raise InputError(exc.problem, source=r.source, field=exc.field, fix=exc.fix) from None


def _frequencies(table: Any, r: FieldReader) -> FrequencyAxis | None:
    table = _checked_table(table, r, "frequencies")
    if table is None:
        return None
    if "list" in table:
        if set(table) - {"list"}:
            raise r.fail("frequencies", "give either list or start/stop/count, not both")
        vals = table["list"]
        if not isinstance(vals, list) or not all(isinstance(v, (int, float)) and not isinstance(v, bool)
                                                 for v in vals):
            raise r.fail("frequencies.list", "expected a list of numbers in Hz")
        return FrequencyAxis(vals, source=r.source, field="frequencies.list")
    start = r.number(table, "start", "frequencies", positive=True)
    stop = r.number(table, "stop", "frequencies", positive=True)
    count = r.integer(table, "count", "frequencies", maximum=MAX_FREQUENCIES)
    spacing = table.get("spacing", "log")
    return FrequencyAxis.spaced(start, stop, count, spacing, source=r.source, field="frequencies")


def _hardware(table: Any, r: FieldReader, base: Path) -> HardwareMap:
    table = _checked_table(table, r, "hardware")
    if table is None:
        return HardwareMap()
    device = table.get("device")
    if device is not None and (isinstance(device, bool) or not isinstance(device, (str, int))):
        device = r.reject("hardware.device", "expected a device index or a name substring", None)
    rate = r.number(table, "sample_rate_hz", "hardware", default=None, positive=True, high=768_000.0)
    ref_out, ref_in = (r.recover(lambda: _reference(table["reference"], r), (None, None))
                       if "reference" in table else (None, None))
    cal = table.get("calibration")
    if cal is not None and not isinstance(cal, str):
        cal = r.reject("hardware.calibration", "expected a path (string)", None)
    return HardwareMap(device, rate, ref_out, ref_in, (base / cal) if cal else None)


def _reference(ref: Any, r: FieldReader) -> tuple[int, int]:
    """The 1-based (output, input) channels of ``[hardware.reference]``."""
    if not isinstance(ref, dict):
        raise r.fail("hardware.reference", "must be a table { output_channel = N, input_channel = M }")
    r.keys(ref, TABLE_KEYS["hardware.reference"], "hardware.reference")
    return (r.integer(ref, "output_channel", "hardware.reference", maximum=MAX_CHANNEL_NUMBER),
            r.integer(ref, "input_channel", "hardware.reference", maximum=MAX_CHANNEL_NUMBER))


def _planning(table: Any, r: FieldReader) -> PlanSettings:
    table = _checked_table(table, r, "planning")
    if table is None:
        return PlanSettings()
    track = r.boolean(table, "track", "planning", default=False)
    top = table.get("max_channels")
    if top is not None and top != "auto":
        top = r.integer(table, "max_channels", "planning", default=None)
    return PlanSettings(r.number(table, "threshold_db", "planning", default=3.0, positive=True),
                        r.number(table, "snr_db", "planning", default=40.0, positive=True), track,
                        r.integer(table, "chunk_size", "planning", default=None),
                        r.integer(table, "workers", "planning", default=None), top,
                        r.number(table, "memory_mb", "planning", default=64.0, positive=True))


def resolve_section(name: str, table: Any, r: FieldReader, base: Path) -> Any:
    """Resolve one optional table of a rig file: ``medium``, ``frequencies``, ``hardware`` or ``planning``.

    Parameters
    ----------
    name : str
        ``"medium"``, ``"frequencies"``, ``"hardware"`` or ``"planning"``.
    table : dict or None
        The table as read from TOML; None when the file has none.
    r : FieldReader
        Typed access that names the rig file in its errors.
    base : Path
        Folder the ``hardware.calibration`` path is relative to.

    Returns
    -------
    Medium, FrequencyAxis or None, HardwareMap or PlanSettings
        The resolved table; defaults when it is absent (None for
        frequencies).

    Raises
    ------
    InputError
        At the first problem in the table.
    """
    if name == "hardware":
        return _hardware(table, r, base)
    return {"medium": _medium, "frequencies": _frequencies, "planning": _planning}[name](table, r)


def read_rig_document(path: str | Path) -> dict:
    """The TOML document of a rig file, unchecked.

    Parameters
    ----------
    path : str or Path
        The rig file.

    Returns
    -------
    dict
        The parsed TOML, keys and values as :mod:`tomllib` gives them.

    Raises
    ------
    InputError
        When the file is missing, a folder, not UTF-8 or not valid TOML
        (the message gives the line and column).
    """
    path = Path(path)
    src = str(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise InputError("rig file not found", source=src, fix="check the path") from None
    except IsADirectoryError:
        raise InputError("is a folder, not a rig file", source=src) from None
    try:
        return tomllib.loads(raw.decode("utf-8"))
    except UnicodeDecodeError:
        raise InputError("not UTF-8 text", source=src) from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML: {exc}", source=src) from None


def load_rig(path: str | Path) -> Rig:
    """Read a rig file (TOML).

    Tables: ``[rig]`` (name, description), ``[medium]`` (speed_of_sound in
    m/s, or temperature_c; relative_humidity_pct, pressure_kpa,
    air_absorption), ``[frequencies]`` (list, or start/stop/count with
    spacing "log" or "linear"), ``[[speakers]]`` and ``[[microphones]]``
    (each entry one point, one generated group with ``shape``, or one CSV
    file with ``csv``), ``[hardware]``, ``[planning]`` and ``[room]``
    (:func:`arrayplan.rig.room.parse_room`).  See the README
    for every key.

    Parameters
    ----------
    path : str or Path
        The rig file; CSV and calibration paths in it are relative to its
        folder.

    Returns
    -------
    Rig
        The validated rig, with ``[[zones]]`` resolved; its name defaults
        to the file's stem.

    Raises
    ------
    InputError
        Naming the file and the field for any problem.
    """
    path = Path(path)
    src = str(path)
    doc = read_rig_document(path)
    r = rig_field_reader(src)
    r.keys(doc, _TOP_KEYS, "(top level)")
    base = path.parent
    meta = doc.get("rig", {})
    if not isinstance(meta, dict):
        raise r.fail("rig", "must be a table")
    r.keys(meta, TABLE_KEYS["rig"], "rig")
    rig = Rig(
        speakers=resolve_side(doc.get("speakers"), "speakers", "S", r, base),
        mics=resolve_side(doc.get("microphones"), "microphones", "M", r, base),
        medium=resolve_section("medium", doc.get("medium"), r, base),
        frequencies=resolve_section("frequencies", doc.get("frequencies"), r, base),
        hardware=resolve_section("hardware", doc.get("hardware"), r, base),
        planning=resolve_section("planning", doc.get("planning"), r, base),
        name=str(meta.get("name", path.stem)),
        description=str(meta.get("description", "")),
        source=src,
        room=parse_room(doc.get("room"), r),
    )
    rig.validate()
    if "zones" in doc:
        from .zones import resolve_zones
        rig = replace(rig, zones=resolve_zones(doc["zones"], rig.mics.names, rig.mics.positions, r, base))
    return rig
