"""Listening zones of a rig: groups of points marked bright or dark.

A rig file may hold ``[[zones]]`` entries.  Each has a ``name``, a ``role``
(``"bright"``: where the programme should be loud, ``"dark"``: where it
should be quiet) and its points, given either as

* ``members = ["A1", "A2", ...]``: microphones of the rig (their coupling
  comes from the rig's kernel, free field, room or measured), or
* a generated group of control points, with the same keys as a generated
  ``[[microphones]]`` group (``shape = "grid"``, ``counts``, ``spacing`` or
  ``size``, ``center``, ``normal``; or a ``line``, ``arc``, ``circle``,
  ``sphere``): points in space that are not real microphones, named
  ``<zone name>1``, ``<zone name>2``, ...

Notes
-----
Positions in metres; indices 0-based in the API, names as in the rig file.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from ..errors import InputError

__all__ = ["Zone", "ROLES", "resolve_zones", "select_zones", "zones_overlap"]

#: The roles a zone may have.
ROLES = ("bright", "dark")
_MEMBER_KEYS = {"name", "role", "members"}
_GROUP_KEYS = {"name", "role", "shape", "count", "counts", "spacing", "length", "size", "center", "direction",
               "normal", "facing", "radius", "start_deg", "stop_deg"}


@dataclass(frozen=True)
class Zone:
    """One listening zone.

    Attributes
    ----------
    name : str
    role : str
        ``"bright"`` or ``"dark"``.
    point_names : tuple of str
        One name per point (microphone names for a zone of members).
    positions : ndarray, shape (n_points, 3)
        Metres.
    mic_indices : tuple of int or None
        0-based rig microphone index of each point when the zone is made of
        microphones; None for generated control points.
    """

    name: str
    role: str
    point_names: tuple[str, ...]
    positions: np.ndarray
    mic_indices: tuple[int, ...] | None = None

    def __len__(self) -> int:
        return len(self.point_names)


def resolve_zones(entries: Any, mic_names: Sequence[str], mic_positions: np.ndarray, r: Any,
                  base: Path) -> tuple[Zone, ...]:
    """Resolve the ``[[zones]]`` entries of a rig file.

    Parameters
    ----------
    entries : list of dict
        The TOML array of tables.
    mic_names : sequence of str
        The rig's microphone names, in order.
    mic_positions : ndarray, shape (n_mic, 3)
        Metres.
    r : FieldReader
        Typed access that names the rig file in its errors.
    base : Path
        Folder of the rig file (unused by the current keys; kept for CSV zones).

    Returns
    -------
    tuple of Zone

    Raises
    ------
    InputError
        Naming the file and the field (``zones[i].members`` ...).
    """
    from .entries import group_elements  # imported here: the rig reader imports this module

    if not isinstance(entries, list):
        raise r.fail("zones", "must be an array of tables ([[zones]])")
    index = {n: i for i, n in enumerate(mic_names)}
    out: list[Zone] = []
    for i, entry in enumerate(entries):
        where = f"zones[{i}]"
        if not isinstance(entry, dict):
            raise r.fail(where, "must be a table")
        name = r.string(entry, "name", where)
        if any(z.name == name for z in out):
            raise r.fail(f"{where}.name", f"zone names must be unique; {name!r} appears twice")
        role = r.string(entry, "role", where)
        if role not in ROLES:
            raise r.fail(f"{where}.role", f"expected 'bright' or 'dark', got {role!r}")
        if "members" in entry:
            r.keys(entry, _MEMBER_KEYS, where)
            members = entry["members"]
            if not isinstance(members, list) or not members or not all(isinstance(m, str) for m in members):
                raise r.fail(f"{where}.members", "expected a non-empty list of microphone names",
                             fix="list the rig's microphones in the zone, e.g. members = [\"A1\", \"A2\"]")
            unknown = [m for m in members if m not in index]
            if unknown:
                raise r.fail(f"{where}.members", f"no microphone named {unknown[0]!r} in the rig",
                             fix="use names from [[microphones]]")
            if len(set(members)) != len(members):
                raise r.fail(f"{where}.members", "a microphone is listed twice")
            idx = tuple(index[m] for m in members)
            pos = np.asarray(mic_positions, dtype=float)[list(idx)].copy()
            pos.setflags(write=False)
            out.append(Zone(name, role, tuple(members), pos, idx))
        elif "shape" in entry:
            r.keys(entry, _GROUP_KEYS, where)
            group = {k: v for k, v in entry.items() if k != "role"}
            names, pos, _ = group_elements(group, where, r, name, 0)
            pos = np.asarray(pos, dtype=float)
            pos.setflags(write=False)
            out.append(Zone(name, role, tuple(names), pos, None))
        else:
            raise r.fail(where, "gives no points",
                         fix="add members = [microphone names] or a generated group (shape = \"grid\", ...)")
    return tuple(out)


def select_zones(zones: Sequence[Zone], names: Sequence[str] | None, role: str, source: str) -> list[Zone]:
    """The zones named in `names` (default: every zone whose role is `role`).

    Parameters
    ----------
    zones : sequence of Zone
        The rig's zones.
    names : sequence of str or None
        Zone names to pick, in the order wanted; None picks by `role`.
    role : str
        ``"bright"`` or ``"dark"``.
    source : str
        The rig file, named in messages.

    Returns
    -------
    list of Zone
        The chosen zones, in the order of `names` (or of the rig).

    Raises
    ------
    InputError
        A name that is no zone of the rig, or no zone at all for the role.
    """
    known = {z.name: z for z in zones}
    if names is None:
        chosen = [z for z in zones if z.role == role]
        if not chosen:
            raise InputError(f"the rig has no {role} zone", source=source, field="zones",
                             fix=f"add a [[zones]] entry with role = \"{role}\"")
        return chosen
    missing = [n for n in names if n not in known]
    if missing:
        raise InputError(f"no zone named {missing[0]!r} (zones: {', '.join(known) or 'none'})",
                         source=source, field="zones", fix="name zones from the rig's [[zones]] entries")
    return [known[n] for n in names]


def zones_overlap(bright: Sequence[Zone], dark: Sequence[Zone], tolerance_m: float = 1e-6) -> str | None:
    """Why the bright and dark zones overlap (a shared zone, microphone or point), or None.

    Parameters
    ----------
    bright, dark : sequence of Zone
        The zones on each side.
    tolerance_m : float
        Points closer than this are the same point (m).

    Returns
    -------
    str or None
        One sentence naming the first zone or pair of points found in both;
        None when the sides are apart.
    """
    for b in bright:
        for d in dark:
            if b.name == d.name:
                return f"zone {b.name!r} is both bright and dark"
            dist = np.linalg.norm(b.positions[:, None, :] - d.positions[None, :, :], axis=-1)
            i, j = np.unravel_index(np.argmin(dist), dist.shape)
            if dist[i, j] < tolerance_m:
                return (f"point {b.point_names[i]!r} of bright zone {b.name!r} is also point "
                        f"{d.point_names[j]!r} of dark zone {d.name!r}")
    return None
