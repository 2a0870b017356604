"""The ``[[speakers]]`` and ``[[microphones]]`` entries of a rig file: points, generated groups and CSV files.

Each entry resolves to an :class:`~arrayplan.rig.model.EntryElements`; the
entries of a side join into one :class:`~arrayplan.rig.model.ElementSet`.
Problems go through a :class:`~arrayplan.formats.tomlfields.FieldReader`, so the same
code fails fast for :func:`~arrayplan.rig.reader.load_rig` and collects every
problem for the rig checker.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any, Sequence

import numpy as np

from . import geometry
from .directivity import OMNI, Directivity, parse_directivity
from ..limits import MAX_CHANNEL_NUMBER, MAX_ELEMENTS_PER_SIDE
from ..formats.tomlfields import FieldReader
from .model import MAX_COORDINATE_M, ElementSet, EntryElements
from .positions_csv import read_positions_csv

__all__ = ["ENTRY_KEYS", "entry_kind", "group_elements", "join_entries", "resolve_entry", "resolve_side",
           "rig_field_reader"]

_POINT_KEYS = {"name", "position", "directivity", "channel"}
_GROUP_KEYS = {"name", "shape", "count", "counts", "spacing", "length", "size", "center", "direction",
               "normal", "facing", "radius", "start_deg", "stop_deg", "directivity", "first_channel"}
_CSV_KEYS = {"csv", "directivity", "first_channel", "name"}


def rig_field_reader(source: str, *, collect: bool = False) -> FieldReader:
    """The :class:`FieldReader` of a rig file: coordinates within :data:`MAX_COORDINATE_M`, counts within
    :data:`MAX_ELEMENTS_PER_SIDE`; with `collect`, recoverable problems are recorded (see
    :mod:`arrayplan.formats.tomlfields`).

    Parameters
    ----------
    source : str
        The rig file's path as shown in messages.
    collect : bool
        Record recoverable problems instead of raising at the first.

    Returns
    -------
    FieldReader
        A reader bound to `source` with the rig file's limits.
    """
    return FieldReader(source, collect=collect, number_range=(-MAX_COORDINATE_M, MAX_COORDINATE_M),
                       integer_max=MAX_ELEMENTS_PER_SIDE)

def entry_kind(entry: dict) -> str:
    """``"csv"``, ``"group"`` or ``"point"``: how a side's entry gives its elements.

    Parameters
    ----------
    entry : dict
        One ``[[speakers]]`` or ``[[microphones]]`` table.

    Returns
    -------
    str
        ``"csv"`` when it has a ``csv`` key, else ``"group"`` when it has a
        ``shape`` key, else ``"point"``.
    """
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

    Returns
    -------
    EntryElements
        The entry's names, positions (m, shape (n, 3)), directivities and
        1-based hardware channels.

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
        nm, pos, outward = group_elements(entry, where, r, prefix if n_entries == 1 else None, n_before)
        ch = None
    else:
        pos = np.array([r.vector(entry, "position", where)])
        nm = [r.string(entry, "name", where, default=f"{prefix}{n_before + 1}")]
        channel = r.integer(entry, "channel", where, default=None, maximum=MAX_CHANNEL_NUMBER)
        ch = [channel] if channel is not None else None
        outward = None
    group_dirs = r.recover(lambda: _directivities(entry.get("directivity"), outward, len(pos), where, r),
                           [OMNI] * len(pos))
    if ch is None:
        first = r.integer(entry, "first_channel", where, default=next_channel,
                          maximum=MAX_CHANNEL_NUMBER - len(pos) + 1)
        ch = list(range(first, first + len(pos)))
    shape = entry["shape"] if kind == "group" else kind
    return EntryElements(shape, tuple(nm), pos, tuple(group_dirs), tuple(ch))


def _directivities(spec: Any, outward: np.ndarray | None, n: int, where: str, r: FieldReader
                   ) -> list[Directivity]:
    """The directivity of each of the `n` elements of an entry; `outward` (n, 3) are a group's outward axes."""
    if isinstance(spec, dict) and spec.get("axis") in ("outward", "inward") and outward is not None:
        sign = 1.0 if spec["axis"] == "outward" else -1.0
        base_spec = {k: v for k, v in spec.items() if k != "axis"}
        return [parse_directivity(dict(base_spec, axis=list(sign * o)), source=r.source,
                                  field=f"{where}.directivity") for o in outward]
    if isinstance(spec, dict) and spec.get("axis") in ("outward", "inward"):
        raise r.fail(f"{where}.directivity.axis", "'outward'/'inward' needs a generated group",
                     fix="give axis = [x, y, z]")
    return [parse_directivity(spec, source=r.source, field=f"{where}.directivity")] * n


def join_entries(parts: Sequence[EntryElements]) -> ElementSet:
    """One :class:`ElementSet` from the entries of a side, in order.

    Parameters
    ----------
    parts : sequence of EntryElements
        The side's resolved entries.

    Returns
    -------
    ElementSet
        Names, read-only positions (m, shape (n, 3)), directivities and
        channels of all entries concatenated; empty when `parts` is.
    """
    if not parts:
        return ElementSet((), np.zeros((0, 3)), (), ())
    pos_all = np.vstack([p.positions for p in parts])
    pos_all.setflags(write=False)
    return ElementSet(tuple(n for p in parts for n in p.names), pos_all,
                      tuple(d for p in parts for d in p.directivities),
                      tuple(c for p in parts for c in p.channels))


def resolve_side(entries: Any, label: str, prefix: str, r: FieldReader, base: Path) -> ElementSet:
    """Resolve every entry of one side of a rig file and join them.

    Channels not given continue from the highest channel of the entries
    before (the first entry starts at 1).

    Parameters
    ----------
    entries : list of dict or None
        The side's array of tables as read from TOML.
    label : str
        ``"speakers"`` or ``"microphones"``.
    prefix : str
        Name prefix of the side (not used: default names come from `label`).
    r : FieldReader
        Typed access that names the rig file in its errors.
    base : Path
        Folder CSV paths are relative to.

    Returns
    -------
    ElementSet
        The side's elements in file order.

    Raises
    ------
    InputError
        The side is missing or not an array of tables, an entry is wrong,
        or the side has more than :data:`MAX_ELEMENTS_PER_SIDE` elements.
    """
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


def group_elements(entry: dict, where: str, r: FieldReader, sole_prefix: str | None, offset: int
           ) -> tuple[list[str], np.ndarray, np.ndarray]:
    """The elements of a generated group (``shape`` = line, grid, arc, circle or sphere).

    Parameters
    ----------
    entry : dict
        The group's TOML table (lengths in m, angles in degrees).
    where : str
        Field name of the entry in messages, e.g. ``"speakers[0]"``.
    r : FieldReader
        Typed access that names the rig file in its errors.
    sole_prefix : str or None
        Name prefix when this is the side's only entry (``"S"`` or ``"M"``);
        None gives ``"G<offset + 1>-"``.  The entry's ``name`` overrides both.
    offset : int
        Elements on this side before this entry.

    Returns
    -------
    names : list of str
        ``prefix`` followed by 1, 2, ...
    positions : ndarray, shape (n, 3)
        Element positions (m).
    outward : ndarray, shape (n, 3)
        Unit outward direction of each element (see
        :mod:`arrayplan.rig.geometry`).

    Raises
    ------
    InputError
        Unknown shape, or a missing or wrong field.
    """
    shape = entry["shape"]
    center = r.vector(entry, "center", where, default=(0.0, 0.0, 0.0))
    if shape == "line":
        count = r.integer(entry, "count", where)
        direction = r.vector(entry, "direction", where, default=(1.0, 0.0, 0.0))
        spacing = _spacing(entry, where, r, count)
        if np.linalg.norm(direction) == 0:
            direction = r.reject(f"{where}.direction", "has zero length", (1.0, 0.0, 0.0))
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
            normal = r.reject(f"{where}.normal", "has zero length", (0.0, 0.0, 1.0))
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
        prefix = r.reject(f"{where}.name", "must be a string (the prefix of the element names)",
                          sole_prefix if sole_prefix is not None else f"G{offset + 1}-")
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

