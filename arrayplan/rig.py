"""Rigs: where the speakers and microphones are, what they are, and the medium.

A rig is read from a TOML file (schema documented in ``docs`` of
:func:`load_rig` and in the README) or built from arrays with
:meth:`Rig.from_positions`.  Loading resolves every generated group and CSV
file into plain arrays, so the rest of arrayplan sees only an
:class:`ElementSet` for each side.
"""

from __future__ import annotations

import csv
import io
import json
import math
import sys
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from . import geometry
from .directivity import OMNI, Directivity, parse_directivity
from .errors import InputError
from .fileio import sha256_of_text
from .frequency import FrequencyAxis
from .limits import MAX_CHANNEL_NUMBER, MAX_ELEMENTS_PER_SIDE, MAX_FREQUENCIES
from .medium import Medium, speed_of_sound_air
from .room import ROOM_KEYS, Room, parse_room

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

__all__ = ["ElementSet", "HardwareMap", "PlanSettings", "Rig", "load_rig", "read_positions_csv",
           "read_rig_document", "resolve_entry", "resolve_section", "join_entries", "EntryElements",
           "FieldReader", "TABLE_KEYS", "ENTRY_KEYS"]

#: Two elements closer than this (metres) are taken as coincident.
COINCIDENT_M = 1e-6
#: Largest coordinate accepted in a rig, m (1000 km: distances between elements stay far from overflow).
MAX_COORDINATE_M = 1e6
#: Coincident pairs listed at most (a rig with every element at one point would have n^2 / 2).
MAX_COINCIDENT_LISTED = 100
#: Air temperatures accepted, °C.
TEMPERATURE_RANGE_C = (-100.0, 100.0)


@dataclass(frozen=True)
class ElementSet:
    """The speakers or the microphones of a rig.

    Attributes
    ----------
    names : tuple of str
        Unique names, in the order of the coupling stack's axis.
    positions : ndarray, shape (n, 3)
        Positions in metres.
    directivities : tuple of Directivity
        One per element.
    channels : tuple of int
        1-based hardware channel per element (output for speakers, input for
        microphones).
    """

    names: tuple[str, ...]
    positions: np.ndarray
    directivities: tuple[Directivity, ...]
    channels: tuple[int, ...]

    def __len__(self) -> int:
        return len(self.names)

    @property
    def all_omni(self) -> bool:
        return all(d.is_omni for d in self.directivities)


@dataclass(frozen=True)
class HardwareMap:
    """How the rig connects to the audio interface (all channels 1-based)."""

    device: str | int | None = None
    sample_rate_hz: float | None = None
    reference_output: int | None = None
    reference_input: int | None = None
    calibration: Path | None = None


@dataclass(frozen=True)
class PlanSettings:
    """Planning options a rig file may set (command-line flags override them).

    Attributes
    ----------
    threshold_db : float
        A channel is *strong* when its power coupling is within this many dB
        of the strongest channel (default 3 dB: at least half its power).
    snr_db : float
        Signal-to-noise ratio of the strongest channel; channels more than
        this many dB below it are under the noise floor.
    track : bool
        Order and phase-align channels from bin to bin (see
        :func:`arrayplan.channels.track_channels`).
    chunk_size : int, optional
        Frequencies evaluated and decomposed at once; default from
        `memory_mb`.
    workers : int, optional
        Worker processes; default every core for a large plan.
    max_channels : int or "auto", optional
        Compute only the strongest channels (see :mod:`arrayplan.topk`).
    memory_mb : float
        Working-memory budget per worker that sets the default chunk size, MB.
    """

    threshold_db: float = 3.0
    snr_db: float = 40.0
    track: bool = False
    chunk_size: int | None = None
    workers: int | None = None
    max_channels: int | str | None = None
    memory_mb: float = 64.0


@dataclass(frozen=True)
class Rig:
    """A complete rig description."""

    speakers: ElementSet
    mics: ElementSet
    medium: Medium = field(default_factory=Medium)
    frequencies: FrequencyAxis | None = None
    hardware: HardwareMap = field(default_factory=HardwareMap)
    planning: PlanSettings = field(default_factory=PlanSettings)
    name: str = "rig"
    description: str = ""
    source: str = "<arrays>"
    room: Room | None = None
    zones: tuple = ()  # of arrayplan.zones.Zone, from [[zones]]

    @property
    def sha256(self) -> str:
        """Hash of the resolved geometry, directivities and medium (not of file layout)."""
        canon = {
            "speakers": _canon(self.speakers),
            "mics": _canon(self.mics),
            "medium": [self.medium.speed_of_sound, self.medium.air_absorption, self.medium.temperature_c,
                       self.medium.relative_humidity_pct, self.medium.pressure_kpa],
        }
        if self.room is not None:
            canon["room"] = self.room.settings()
        return sha256_of_text(json.dumps(canon, sort_keys=True))

    @classmethod
    def from_positions(cls, speaker_positions: np.ndarray, mic_positions: np.ndarray, *,
                       speed_of_sound: float = 343.2, frequencies: Sequence[float] | None = None,
                       speaker_names: Sequence[str] | None = None, mic_names: Sequence[str] | None = None,
                       speaker_directivity: Directivity = OMNI, mic_directivity: Directivity = OMNI,
                       name: str = "rig", source: str = "<arrays>") -> "Rig":
        """A rig from position arrays in metres, shapes (n_spk, 3) and (n_mic, 3)."""
        spk = _element_set(speaker_positions, speaker_names, "S", speaker_directivity, source, "speakers")
        mic = _element_set(mic_positions, mic_names, "M", mic_directivity, source, "microphones")
        rig = cls(spk, mic, Medium(speed_of_sound=float(speed_of_sound)),
                  FrequencyAxis(frequencies, source=source) if frequencies is not None else None,
                  name=name, source=source)
        rig.validate()
        return rig

    def validate(self) -> None:
        """Check positions for NaN, coincidences and name or channel clashes.

        Raises
        ------
        InputError
            The first of :meth:`problems`.
        """
        found = self.problems(limit=1)
        if found:
            raise found[0]

    def problems(self, limit: int | None = None) -> list[InputError]:
        """Every structural problem of the rig, in the order :meth:`validate` meets them.

        Parameters
        ----------
        limit : int, optional
            Stop after this many problems.

        Returns
        -------
        list of InputError
            Empty sides, non-finite positions, repeated names or channels,
            coincident elements (each pair once).
        """
        out: list[InputError] = []
        for label, es in (("speakers", self.speakers), ("microphones", self.mics)):
            out += _side_problems(es, label, self.source)
        if len(self.speakers) and len(self.mics):
            out += _coincident(self.speakers, self.mics, self.source, "speakers/microphones", same=False)
        if self.room is not None:
            out += self.room.element_problems(self.speakers, "speakers", self.source)
            out += self.room.element_problems(self.mics, "microphones", self.source)
        return out[:limit] if limit is not None else out


def _side_problems(es: ElementSet, label: str, source: str) -> list[InputError]:
    if len(es) == 0:
        return [InputError(f"the rig has no {label}", source=source, field=label,
                           fix=f"add at least one entry under [[{label}]]")]
    out = []
    bad = ~np.all(np.isfinite(es.positions), axis=1)
    for i in np.flatnonzero(bad):
        out.append(InputError(f"position of {es.names[i]!r} is not finite", source=source,
                              field=f"{label}[{es.names[i]}].position"))
    out += _repeats(es.names, f"{label} names", source, label)
    out += _repeats([str(c) for c in es.channels], f"{label} channels", source, label)
    out += _coincident(es, es, source, label, same=True)
    return out


def _canon(es: ElementSet) -> list:
    return [[n, [round(float(x), 9) for x in p], repr(d)] for n, p, d in
            zip(es.names, es.positions, es.directivities)]


def _element_set(positions: np.ndarray, names: Sequence[str] | None, prefix: str, directivity: Directivity,
                 source: str, label: str) -> ElementSet:
    pos = np.asarray(positions, dtype=float)
    if pos.ndim != 2 or pos.shape[1] != 3:
        raise InputError(f"positions must have shape (n, 3), got {pos.shape}", source=source, field=label)
    n = pos.shape[0]
    names = tuple(str(x) for x in names) if names is not None else tuple(f"{prefix}{i + 1}" for i in range(n))
    if len(names) != n:
        raise InputError(f"{len(names)} names for {n} positions", source=source, field=label)
    pos = pos.copy()
    pos.setflags(write=False)
    return ElementSet(names, pos, (directivity,) * n, tuple(range(1, n + 1)))


def _repeats(values: Sequence[str], what: str, source: str, label: str) -> list[InputError]:
    seen: set[str] = set()
    out = []
    for v in values:
        if v in seen:
            out.append(InputError(f"{what} must be unique; {v!r} appears twice", source=source, field=label))
        seen.add(v)
    return out


def coincident_pairs(a: np.ndarray, b: np.ndarray | None = None, radius_m: float = COINCIDENT_M,
                     limit: int = MAX_COINCIDENT_LISTED) -> list[tuple[int, int]]:
    """Pairs of points closer than `radius_m`, found with a KD-tree (n log n time, linear memory).

    Parameters
    ----------
    a : ndarray, shape (n, 3)
        Positions, m; rows that are not finite are skipped.
    b : ndarray, shape (m, 3), optional
        Second set; None pairs `a` with itself (each pair once, ``i < j``).
    radius_m : float
        Pairs strictly closer than this are returned, m.
    limit : int
        Stop after this many pairs.

    Returns
    -------
    list of (int, int)
        Row indices into `a` and `b` (or `a`), ordered by the first index, then the second.
    """
    from scipy.spatial import cKDTree

    same = b is None
    b = a if same else b
    ia = np.flatnonzero(np.all(np.isfinite(a), axis=1))
    ib = np.flatnonzero(np.all(np.isfinite(b), axis=1))
    if not len(ia) or not len(ib):
        return []
    r = float(np.nextafter(radius_m, 0.0))            # strictly closer than radius_m
    tree_b = cKDTree(b[ib])
    counts = tree_b.query_ball_point(a[ia], r, return_length=True)
    out: list[tuple[int, int]] = []
    for k in np.flatnonzero(counts > (1 if same else 0)):
        i = int(ia[k])
        for j in sorted(int(ib[m]) for m in tree_b.query_ball_point(a[i], r)):
            if not same or j > i:
                out.append((i, j))
                if len(out) >= limit:
                    return out
    return out


def _coincident(a: ElementSet, b: ElementSet, source: str, label: str, same: bool) -> list[InputError]:
    close = coincident_pairs(a.positions, None if same else b.positions)
    return [InputError(f"{a.names[i]!r} and {b.names[j]!r} are at the same position "
                       f"{[float(x) for x in np.round(a.positions[i], 6)]}", source=source, field=label,
                       fix="move one of them; elements must be at least 1 µm apart") for i, j in close]


# ---------------------------------------------------------------- rig files

_TOP_KEYS = {"rig", "medium", "frequencies", "speakers", "microphones", "hardware", "planning", "room", "zones"}
_POINT_KEYS = {"name", "position", "directivity", "channel"}
_GROUP_KEYS = {"name", "shape", "count", "counts", "spacing", "length", "size", "center", "direction",
               "normal", "facing", "radius", "start_deg", "stop_deg", "directivity", "first_channel"}
_CSV_KEYS = {"csv", "directivity", "first_channel", "name"}
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


class FieldReader:
    """Typed access to a TOML table with errors that name the file and field.

    Each method returns the value of `key` in `table` (or `default` when it is
    absent) and raises :class:`InputError` with field ``"<where>.<key>"``.
    """

    def __init__(self, source: str) -> None:
        self.source = source

    def fail(self, field: str, problem: str, fix: str | None = None) -> InputError:
        return InputError(problem, source=self.source, field=field, fix=fix)

    def number(self, table: dict, key: str, where: str, default: Any = ..., positive: bool = False,
               low: float = -MAX_COORDINATE_M, high: float = MAX_COORDINATE_M) -> float:
        """A finite number in ``[low, high]`` (above 0 with `positive`)."""
        if key not in table:
            if default is ...:
                raise self.fail(f"{where}.{key}", "missing", fix=f"add {key} = <number>")
            return default
        v = table[key]
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
            raise self.fail(f"{where}.{key}", f"expected a finite number, got {v!r}")
        if positive and v <= 0:
            raise self.fail(f"{where}.{key}", f"must be positive, got {v!r}")
        if not low <= v <= high:
            raise self.fail(f"{where}.{key}", f"must be between {low:g} and {high:g}, got {v!r}")
        return float(v)

    def integer(self, table: dict, key: str, where: str, default: Any = ..., minimum: int = 1,
                maximum: int = MAX_ELEMENTS_PER_SIDE) -> int:
        """A whole number in ``[minimum, maximum]``."""
        if key not in table:
            if default is ...:
                raise self.fail(f"{where}.{key}", "missing", fix=f"add {key} = <whole number>")
            return default
        v = table[key]
        if isinstance(v, bool) or not isinstance(v, int) or v < minimum:
            raise self.fail(f"{where}.{key}", f"expected a whole number >= {minimum}, got {v!r}")
        if v > maximum:
            raise self.fail(f"{where}.{key}", f"{v} is above the limit of {maximum}")
        return int(v)

    def vector(self, table: dict, key: str, where: str, n: int = 3, default: Any = ...) -> tuple:
        """`n` finite numbers, each at most :data:`MAX_COORDINATE_M` in magnitude."""
        if key not in table:
            if default is ...:
                raise self.fail(f"{where}.{key}", "missing", fix=f"add {key} = [{', '.join(['0'] * n)}]")
            return default
        v = table[key]
        ok = (isinstance(v, list) and len(v) == n
              and all(isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x) for x in v))
        if not ok:
            raise self.fail(f"{where}.{key}", f"expected {n} finite numbers, got {v!r}")
        if any(abs(x) > MAX_COORDINATE_M for x in v):
            raise self.fail(f"{where}.{key}", f"values must be at most {MAX_COORDINATE_M:g} in magnitude, got {v!r}")
        return tuple(float(x) for x in v)

    def string(self, table: dict, key: str, where: str, default: Any = ...) -> str:
        if key not in table:
            if default is ...:
                raise self.fail(f"{where}.{key}", "missing")
            return default
        v = table[key]
        if not isinstance(v, str) or not v:
            raise self.fail(f"{where}.{key}", f"expected a non-empty string, got {v!r}")
        return v

    def keys(self, table: dict, allowed: set[str], where: str) -> None:
        unknown = sorted(set(table) - allowed)
        if unknown:
            raise self.fail(where, f"unknown key(s) {', '.join(unknown)}",
                            fix=f"allowed here: {', '.join(sorted(allowed))}")


#: Key under which :class:`csv.DictReader` collects the values beyond the header's columns.
_EXTRA_VALUES = "\0extra"


def read_positions_csv(path: str | Path, *, field: str = "csv") -> tuple[list[str] | None, np.ndarray,
                                                                          list[int] | None]:
    """Read element positions from a CSV file with a header ``x,y,z`` (metres).

    Optional columns ``name`` and ``channel`` (1-based hardware channel).

    Returns
    -------
    names : list of str or None
    positions : ndarray, shape (n, 3)
    channels : list of int or None
    """
    path = Path(path)
    src = str(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError("file not found", source=src, field=field) from None
    except (UnicodeDecodeError, IsADirectoryError) as exc:
        raise InputError(f"cannot read as UTF-8 text ({exc.__class__.__name__})", source=src) from None
    reader = csv.DictReader(io.StringIO(text), restkey=_EXTRA_VALUES)
    header = [h.strip().lower() for h in (reader.fieldnames or [])]
    if not {"x", "y", "z"} <= set(header):
        raise InputError(f"header must contain x,y,z (found {','.join(header) or 'nothing'})", source=src,
                         field="header", fix="first line: name,x,y,z  (positions in metres)")
    reader.fieldnames = header
    names, rows, channels = [], [], []
    for line_no, row in enumerate(reader, start=2):
        if row.get(_EXTRA_VALUES):
            n_values = len(header) + len(row[_EXTRA_VALUES])
            raise InputError(f"{n_values} values under a header of {len(header)} columns",
                             source=src, field=f"line {line_no}", fix=f"one value per column: {','.join(header)}")
        if any(row.get(c) is None for c in header):
            raise InputError(f"fewer values than the {len(header)} columns of the header", source=src,
                             field=f"line {line_no}", fix=f"one value per column: {','.join(header)}")
        if line_no - 1 > MAX_ELEMENTS_PER_SIDE:
            raise InputError(f"more than {MAX_ELEMENTS_PER_SIDE} positions", source=src, field=f"line {line_no}")
        try:
            xyz = [float(row[c]) for c in ("x", "y", "z")]
        except (TypeError, ValueError):
            raise InputError(f"x, y, z must be numbers, got {[row.get(c) for c in 'xyz']}", source=src,
                             field=f"line {line_no}") from None
        if not all(math.isfinite(v) for v in xyz):
            raise InputError("position is not finite", source=src, field=f"line {line_no}")
        if any(abs(v) > MAX_COORDINATE_M for v in xyz):
            raise InputError(f"coordinates must be at most {MAX_COORDINATE_M:g} m in magnitude, got {xyz}",
                             source=src, field=f"line {line_no}")
        rows.append(xyz)
        if "name" in header:
            nm = (row.get("name") or "").strip()
            if not nm:
                raise InputError("empty name", source=src, field=f"line {line_no}")
            names.append(nm)
        if "channel" in header:
            try:
                ch = int(row["channel"])
            except (TypeError, ValueError):
                raise InputError(f"channel must be a whole number, got {row.get('channel')!r}", source=src,
                                 field=f"line {line_no}") from None
            if not 1 <= ch <= MAX_CHANNEL_NUMBER:
                raise InputError(f"channels are numbered from 1 to at most {MAX_CHANNEL_NUMBER}, got {ch}",
                                 source=src, field=f"line {line_no}")
            channels.append(ch)
    if not rows:
        raise InputError("no positions", source=src, fix="add one line per element below the header")
    return (names or None), np.array(rows, dtype=float), (channels or None)


@dataclass(frozen=True)
class EntryElements:
    """The elements one ``[[speakers]]`` or ``[[microphones]]`` entry of a rig file resolves to.

    Attributes
    ----------
    kind : str
        ``"point"``, ``"csv"`` or the group's shape (``"line"``, ``"grid"``, ...).
    names : tuple of str
    positions : ndarray, shape (n, 3), metres
    directivities : tuple of Directivity
    channels : tuple of int
        1-based hardware channels.
    """

    kind: str
    names: tuple[str, ...]
    positions: np.ndarray
    directivities: tuple[Directivity, ...]
    channels: tuple[int, ...]


def entry_kind(entry: dict) -> str:
    """``"csv"``, ``"group"`` or ``"point"``: how a side's entry gives its elements."""
    return "csv" if "csv" in entry else "group" if "shape" in entry else "point"


#: Keys allowed in each kind of [[speakers]] / [[microphones]] entry.
ENTRY_KEYS = {"point": _POINT_KEYS, "group": _GROUP_KEYS, "csv": _CSV_KEYS}


def resolve_entry(entry: Any, index: int, label: str, r: "FieldReader", base: Path, *, n_entries: int,
                  n_before: int, next_channel: int) -> EntryElements:
    """Resolve entry `index` of side `label` (``"speakers"`` or ``"microphones"``).

    Parameters
    ----------
    entry : dict
        The TOML table.
    index : int
        0-based position of the entry in its array of tables.
    label : str
        ``"speakers"`` or ``"microphones"``.
    r : FieldReader
        Typed access that names the rig file in its errors.
    base : Path
        Folder CSV paths are relative to.
    n_entries, n_before, next_channel : int
        Entries on this side, elements resolved before this entry, and the
        channel the entry starts at when it gives none (default names and
        channels depend on them).

    Raises
    ------
    InputError
        At the first problem in the entry.
    """
    prefix = "S" if label == "speakers" else "M"
    where = f"{label}[{index}]"
    if not isinstance(entry, dict):
        raise r.fail(where, "must be a table")
    kind = entry_kind(entry)
    r.keys(entry, ENTRY_KEYS[kind], where)
    if kind == "csv":
        csv_path = base / r.string(entry, "csv", where)
        nm, pos, ch = read_positions_csv(csv_path, field=f"{where}.csv")
        prefix_i = entry.get("name", f"{prefix}{n_before + 1}-" if n_entries > 1 else prefix)
        nm = nm or [f"{prefix_i}{j + 1}" for j in range(len(pos))]
        outward = None
    elif kind == "group":
        nm, pos, outward = _group(entry, where, r, prefix if n_entries == 1 else None, n_before)
        ch = None
    else:
        pos = np.array([r.vector(entry, "position", where)])
        nm = [r.string(entry, "name", where, default=f"{prefix}{n_before + 1}")]
        ch = [r.integer(entry, "channel", where, maximum=MAX_CHANNEL_NUMBER)] if "channel" in entry else None
        outward = None
    spec = entry.get("directivity")
    if isinstance(spec, dict) and spec.get("axis") in ("outward", "inward") and outward is not None:
        sign = 1.0 if spec["axis"] == "outward" else -1.0
        base_spec = {k: v for k, v in spec.items() if k != "axis"}
        group_dirs = [parse_directivity(dict(base_spec, axis=list(sign * o)), source=r.source,
                                        field=f"{where}.directivity") for o in outward]
    else:
        if isinstance(spec, dict) and spec.get("axis") in ("outward", "inward"):
            raise r.fail(f"{where}.directivity.axis", "'outward'/'inward' needs a generated group",
                         fix="give axis = [x, y, z]")
        d = parse_directivity(spec, source=r.source, field=f"{where}.directivity")
        group_dirs = [d] * len(pos)
    if ch is None:
        first = r.integer(entry, "first_channel", where, default=next_channel,
                          maximum=MAX_CHANNEL_NUMBER - len(pos) + 1)
        ch = list(range(first, first + len(pos)))
    shape = entry["shape"] if kind == "group" else kind
    return EntryElements(shape, tuple(nm), pos, tuple(group_dirs), tuple(ch))


def join_entries(parts: Sequence[EntryElements]) -> ElementSet:
    """One :class:`ElementSet` from the entries of a side, in order."""
    if not parts:
        return ElementSet((), np.zeros((0, 3)), (), ())
    pos_all = np.vstack([p.positions for p in parts])
    pos_all.setflags(write=False)
    return ElementSet(tuple(n for p in parts for n in p.names), pos_all,
                      tuple(d for p in parts for d in p.directivities),
                      tuple(c for p in parts for c in p.channels))


def _resolve_side(entries: Any, label: str, prefix: str, r: FieldReader, base: Path) -> ElementSet:
    if entries is None:
        raise r.fail(label, "missing", fix=f"add at least one [[{label}]] entry")
    if not isinstance(entries, list):
        raise r.fail(label, f"must be an array of tables ([[{label}]])")
    parts: list[EntryElements] = []
    next_channel = 1
    for i, entry in enumerate(entries):
        part = resolve_entry(entry, i, label, r, base, n_entries=len(entries),
                             n_before=sum(len(p.names) for p in parts), next_channel=next_channel)
        parts.append(part)
        total = sum(len(p.names) for p in parts)
        if total > MAX_ELEMENTS_PER_SIDE:
            raise r.fail(f"{label}[{i}]", f"{total} {label} in all, above the limit of {MAX_ELEMENTS_PER_SIDE}")
        next_channel = max(c for p in parts for c in p.channels) + 1
    return join_entries(parts)


def _group(entry: dict, where: str, r: FieldReader, sole_prefix: str | None, offset: int
           ) -> tuple[list[str], np.ndarray, np.ndarray]:
    shape = entry["shape"]
    center = r.vector(entry, "center", where, default=(0.0, 0.0, 0.0))
    if shape == "line":
        count = r.integer(entry, "count", where)
        direction = r.vector(entry, "direction", where, default=(1.0, 0.0, 0.0))
        spacing = _spacing(entry, where, r, count)
        if np.linalg.norm(direction) == 0:
            raise r.fail(f"{where}.direction", "has zero length")
        facing = r.vector(entry, "facing", where, default=None)
        pos, out = geometry.line(count, spacing, center, direction, facing)
    elif shape == "grid":
        counts = r.vector(entry, "counts", where, n=2)
        if any(c != int(c) or c < 1 for c in counts):
            raise r.fail(f"{where}.counts", f"expected two whole numbers >= 1, got {list(counts)}")
        if counts[0] * counts[1] > MAX_ELEMENTS_PER_SIDE:
            raise r.fail(f"{where}.counts", f"{int(counts[0] * counts[1])} elements, above the limit of "
                                            f"{MAX_ELEMENTS_PER_SIDE}")
        nu, nv = int(counts[0]), int(counts[1])
        if "spacing" in entry and "size" in entry:
            raise r.fail(where, "give spacing or size, not both")
        if "size" in entry:
            size = r.vector(entry, "size", where, n=2)
            spacing = (size[0] / max(nu - 1, 1), size[1] / max(nv - 1, 1))
        else:
            sp = entry.get("spacing")
            spacing = (r.vector(entry, "spacing", where, n=2) if isinstance(sp, list)
                       else (r.number(entry, "spacing", where, positive=True),) * 2)
        normal = r.vector(entry, "normal", where, default=(0.0, 0.0, 1.0))
        if np.linalg.norm(normal) == 0:
            raise r.fail(f"{where}.normal", "has zero length")
        pos, out = geometry.grid((nu, nv), spacing, center, normal)
    elif shape in ("arc", "circle"):
        count = r.integer(entry, "count", where)
        radius = r.number(entry, "radius", where, positive=True)
        normal = r.vector(entry, "normal", where, default=(0.0, 0.0, 1.0))
        start = r.number(entry, "start_deg", where, default=0.0)
        stop = r.number(entry, "stop_deg", where, default=start + 360.0)
        pos, out = geometry.arc(count, radius, center, normal, start, stop)
    elif shape == "sphere":
        count = r.integer(entry, "count", where)
        radius = r.number(entry, "radius", where, positive=True)
        pos, out = geometry.sphere(count, radius, center)
    else:
        raise r.fail(f"{where}.shape", f"unknown shape {shape!r}", fix="use line, grid, arc, circle or sphere")
    prefix = entry.get("name", sole_prefix if sole_prefix is not None else f"G{offset + 1}-")
    if not isinstance(prefix, str):
        raise r.fail(f"{where}.name", "must be a string (the prefix of the element names)")
    return [f"{prefix}{j + 1}" for j in range(len(pos))], pos, out


def _spacing(entry: dict, where: str, r: FieldReader, count: int) -> float:
    if "spacing" in entry and "length" in entry:
        raise r.fail(where, "give spacing or length, not both")
    if "length" in entry:
        length = r.number(entry, "length", where, positive=True)
        return length / max(count - 1, 1)
    if count == 1:
        return 0.0
    return r.number(entry, "spacing", where, positive=True)


def _medium(table: Any, r: FieldReader) -> Medium:
    if table is None:
        return Medium()
    if not isinstance(table, dict):
        raise r.fail("medium", "must be a table")
    r.keys(table, TABLE_KEYS["medium"], "medium")
    temp = r.number(table, "temperature_c", "medium", default=20.0, low=TEMPERATURE_RANGE_C[0],
                    high=TEMPERATURE_RANGE_C[1])
    if "speed_of_sound" in table:
        c = r.number(table, "speed_of_sound", "medium", positive=True, high=10_000.0)
    else:
        c = speed_of_sound_air(temp)
    absorb = table.get("air_absorption", False)
    if not isinstance(absorb, bool):
        raise r.fail("medium.air_absorption", f"expected true or false, got {absorb!r}")
    try:
        return Medium(c, temp, r.number(table, "relative_humidity_pct", "medium", default=50.0),
                      r.number(table, "pressure_kpa", "medium", default=101.325, positive=True), absorb)
    except InputError as exc:
        raise InputError(exc.problem, source=r.source, field=exc.field, fix=exc.fix) from None


def _frequencies(table: Any, r: FieldReader) -> FrequencyAxis | None:
    if table is None:
        return None
    if not isinstance(table, dict):
        raise r.fail("frequencies", "must be a table")
    r.keys(table, TABLE_KEYS["frequencies"], "frequencies")
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
    if table is None:
        return HardwareMap()
    if not isinstance(table, dict):
        raise r.fail("hardware", "must be a table")
    r.keys(table, TABLE_KEYS["hardware"], "hardware")
    device = table.get("device")
    if device is not None and (isinstance(device, bool) or not isinstance(device, (str, int))):
        raise r.fail("hardware.device", "expected a device index or a name substring")
    rate = r.number(table, "sample_rate_hz", "hardware", default=None, positive=True, high=768_000.0)
    ref_out = ref_in = None
    if "reference" in table:
        ref = table["reference"]
        if not isinstance(ref, dict):
            raise r.fail("hardware.reference", "must be a table { output_channel = N, input_channel = M }")
        r.keys(ref, TABLE_KEYS["hardware.reference"], "hardware.reference")
        ref_out = r.integer(ref, "output_channel", "hardware.reference", maximum=MAX_CHANNEL_NUMBER)
        ref_in = r.integer(ref, "input_channel", "hardware.reference", maximum=MAX_CHANNEL_NUMBER)
    cal = table.get("calibration")
    if cal is not None and not isinstance(cal, str):
        raise r.fail("hardware.calibration", "expected a path (string)")
    return HardwareMap(device, rate, ref_out, ref_in, (base / cal) if cal else None)


def _planning(table: Any, r: FieldReader) -> PlanSettings:
    if table is None:
        return PlanSettings()
    if not isinstance(table, dict):
        raise r.fail("planning", "must be a table")
    r.keys(table, TABLE_KEYS["planning"], "planning")
    track = table.get("track", False)
    if not isinstance(track, bool):
        raise r.fail("planning.track", f"expected true or false, got {track!r}")
    top = table.get("max_channels")
    if top is not None and top != "auto":
        top = r.integer(table, "max_channels", "planning")
    return PlanSettings(r.number(table, "threshold_db", "planning", default=3.0, positive=True),
                        r.number(table, "snr_db", "planning", default=40.0, positive=True), track,
                        r.integer(table, "chunk_size", "planning", default=None),
                        r.integer(table, "workers", "planning", default=None), top,
                        r.number(table, "memory_mb", "planning", default=64.0, positive=True))


def resolve_section(name: str, table: Any, r: FieldReader, base: Path) -> Any:
    """Resolve one optional table of a rig file: ``medium``, ``frequencies``, ``hardware`` or ``planning``.

    Returns the :class:`Medium`, :class:`FrequencyAxis` (or None),
    :class:`HardwareMap` or :class:`PlanSettings`; raises InputError at the
    first problem.
    """
    if name == "hardware":
        return _hardware(table, r, base)
    return {"medium": _medium, "frequencies": _frequencies, "planning": _planning}[name](table, r)


def read_rig_document(path: str | Path) -> dict:
    """The TOML document of a rig file, unchecked.

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
    (:func:`arrayplan.room.parse_room`).  See the README
    for every key.

    Raises
    ------
    InputError
        Naming the file and the field for any problem.
    """
    path = Path(path)
    src = str(path)
    doc = read_rig_document(path)
    r = FieldReader(src)
    r.keys(doc, _TOP_KEYS, "(top level)")
    base = path.parent
    meta = doc.get("rig", {})
    if not isinstance(meta, dict):
        raise r.fail("rig", "must be a table")
    r.keys(meta, TABLE_KEYS["rig"], "rig")
    rig = Rig(
        speakers=_resolve_side(doc.get("speakers"), "speakers", "S", r, base),
        mics=_resolve_side(doc.get("microphones"), "microphones", "M", r, base),
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
