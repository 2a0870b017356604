"""Structural checks of a rig file: everything :func:`arrayplan.rig.load_rig` would refuse, all at once.

With a ``[room]`` table this includes every element outside the room or
nearer than :data:`arrayplan.rig.room.WALL_CLEARANCE_M` to a wall, each named.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any, Callable

from ..errors import InputError
from ..rig import (ENTRY_KEYS, TABLE_KEYS, EntryElements, Rig, entry_kind, join_entries, load_rig, read_rig_document,
                   resolve_entry, resolve_section, rig_field_reader)
from ..rig.room import Room, parse_room
from ..formats.tomlfields import FieldReader
from .findings import SEVERITIES, Finding, SideGroup
from .physics import physical_findings

__all__ = ["check_rig_file"]


def _from_error(exc: InputError, rig_source: str, where: str | None = None) -> Finding:
    problem = exc.problem
    field = exc.field or where or "(file)"
    if exc.source and exc.source != rig_source:
        # a CSV file named by an entry: say which entry and which line of that file
        field = f"{where}.csv ({exc.source}{', ' + exc.field if exc.field and exc.field != f'{where}.csv' else ''})"
    if problem == "missing":
        key = field.rsplit(".", 1)[-1]
        problem = f"'{key}' is required but missing"
    return Finding("error", field, problem, exc.fix)


def _collected(resolve: Callable[[], Any], r: FieldReader, where: str, rig_source: str
               ) -> tuple[Any, list[Finding]]:
    """Resolve with the collecting reader `r`: the value (None when a problem stopped it) and every finding."""
    try:
        value, stop = resolve(), []
    except InputError as exc:
        value, stop = None, [exc]
    return value, [_from_error(exc, rig_source, where) for exc in r.take() + stop]


def _unknown_keys(table: dict, allowed: set[str], where: str, what: str) -> list[Finding]:
    out = []
    for key in sorted(set(table) - allowed):
        close = [a for a in sorted(allowed) if a.replace("_", "") in key.replace("_", "")
                 or key.replace("_", "") in a.replace("_", "")]
        hint = f"did you mean '{close[0]}'? " if close else ""
        out.append(Finding("error", f"{where}.{key}" if where else key,
                           f"'{key}' is not a key {what}, so it would be ignored or refused",
                           f"{hint}allowed: {', '.join(sorted(allowed))}"))
    return out


def _frequency_list(values: Any) -> list[Finding]:
    """Every problem in ``frequencies.list`` at once (FrequencyAxis stops at the first)."""
    if not isinstance(values, list) or not values:
        return [Finding("error", "frequencies.list", f"expected a non-empty list of numbers in Hz, got {values!r}",
                        "list = [500.0, 1000.0, 2000.0]")]
    out = []
    bad = [v for v in values if isinstance(v, bool) or not isinstance(v, (int, float))]
    if bad:
        return [Finding("error", "frequencies.list", f"entries {bad!r} are not numbers", "give frequencies in Hz")]
    nums = [float(v) for v in values]
    nonfinite = [v for v in nums if v != v or v in (float("inf"), float("-inf"))]
    if nonfinite:
        out.append(Finding("error", "frequencies.list", f"{len(nonfinite)} value(s) are not finite numbers",
                           "remove nan and inf"))
    nonpos = [v for v in nums if v <= 0]
    if nonpos:
        out.append(Finding("error", "frequencies.list",
                           f"frequencies must be above 0 Hz; {', '.join(f'{v:g}' for v in nonpos)} Hz is not",
                           "drop 0 Hz and negative values"))
    order = [i + 1 for i in range(len(nums) - 1) if not nums[i] < nums[i + 1]]
    if order:
        out.append(Finding("error", "frequencies.list",
                           f"frequencies must rise strictly; entry {order[0] + 1} ({nums[order[0]]:g} Hz) is not "
                           f"above the one before it ({nums[order[0] - 1]:g} Hz)"
                           + (f", and {len(order) - 1} more like it" if len(order) > 1 else ""),
                           "sort the list and remove repeats"))
    return out


def _check_sides(doc: dict, r: FieldReader, base: Path, src: str
                 ) -> tuple[list[Finding], dict[str, list[SideGroup]], dict[str, list[EntryElements]],
                            dict[str, list[str]]]:
    """Findings, the groups of each side, every resolved entry of each side in file order, and the names
    of the point entries that did not resolve (so that a repeated name is found even there)."""
    findings: list[Finding] = []
    groups: dict[str, list[SideGroup]] = {"speakers": [], "microphones": []}
    resolved: dict[str, list[EntryElements]] = {"speakers": [], "microphones": []}
    unresolved: dict[str, list[str]] = {"speakers": [], "microphones": []}
    for label in ("speakers", "microphones"):
        entries = doc.get(label)
        if entries is None:
            findings.append(Finding("error", label, f"the rig has no [[{label}]]",
                                    f"add at least one [[{label}]] entry (a point, a group with shape, or a csv)"))
            continue
        if not isinstance(entries, list):
            findings.append(Finding("error", label, f"must be an array of tables written [[{label}]], "
                                    f"not [{label}]", f"write [[{label}]] above each entry"))
            continue
        parts: list[EntryElements] = []
        points: list[EntryElements] = []
        next_channel = 1
        for i, entry in enumerate(entries):
            where = f"{label}[{i}]"
            if not isinstance(entry, dict):
                findings.append(Finding("error", where, "must be a table", f"write [[{label}]] and key = value lines"))
                continue
            kind = entry_kind(entry)
            allowed = ENTRY_KEYS[kind]
            findings += _unknown_keys(entry, allowed, where, f"of a {kind} entry")
            clean = {k: v for k, v in entry.items() if k in allowed}

            def resolve(i: int = i, before: int = sum(len(p.names) for p in parts),
                        nxt: int = next_channel) -> EntryElements:
                return resolve_entry(clean, i, label, r, base, n_entries=len(entries), n_before=before,
                                     next_channel=nxt)

            part, errs = _collected(resolve, r, where, src)
            findings += errs
            if part is None:
                if kind == "point" and isinstance(entry.get("name"), str) and entry["name"]:
                    unresolved[label].append(entry["name"])
                continue
            parts.append(part)
            next_channel = max(c for p in parts for c in p.channels) + 1
            if kind == "point":
                points.append(part)
            else:
                counts = tuple(int(c) for c in entry["counts"]) if part.kind == "grid" else (len(part.names),)
                groups[label].append(SideGroup(label, where, part, counts))
        if points:
            joined = join_entries(points)
            groups[label].append(SideGroup(label, label, EntryElements("points", joined.names, joined.positions,
                                                                       joined.directivities, joined.channels),
                                           (len(joined.names),)))
        resolved[label] = parts
    return findings, groups, resolved, unresolved


def _names_repeated_in_failed_entries(resolved: dict[str, list[EntryElements]],
                                      unresolved: dict[str, list[str]]) -> list[Finding]:
    """Repeated names that involve an entry with another error (the resolved ones are checked by the rig)."""
    out = []
    for label, failed in unresolved.items():
        seen = {n for p in resolved[label] for n in p.names}
        for name in failed:
            if name in seen:
                out.append(Finding("error", label, f"{label} names must be unique; {name!r} appears twice",
                                   "give each element its own name"))
            seen.add(name)
    return out


def _structure(path: Path) -> tuple[list[Finding], dict[str, list[SideGroup]]]:
    src = str(path)
    try:
        doc = read_rig_document(path)
    except InputError as exc:
        m = re.search(r"at line (\d+)", exc.problem)
        field = f"line {m.group(1)}" if m else "(file)"
        fix = exc.fix or ("TOML wants key = value, text in \"double quotes\", tables in [brackets] and "
                          "repeated entries in [[double brackets]]" if m else None)
        return [Finding("error", field, exc.problem, fix)], {}
    r = rig_field_reader(src, collect=True)
    base = path.parent
    findings = _unknown_keys(doc, TABLE_KEYS[""], "", "a rig file knows at the top level")
    meta = doc.get("rig", {})
    if not isinstance(meta, dict):
        findings.append(Finding("error", "rig", "must be a table [rig]", "write [rig] with name = \"...\""))
    else:
        findings += _unknown_keys(meta, TABLE_KEYS["rig"], "rig", "of [rig]")
    side_findings, groups, resolved, unresolved = _check_sides(doc, r, base, src)
    findings += side_findings
    for name in ("medium", "frequencies", "hardware", "planning"):
        table = doc.get(name)
        if table is None:
            continue
        if not isinstance(table, dict):
            findings.append(Finding("error", name, f"must be a table [{name}]", f"write [{name}] above its keys"))
            continue
        findings += _unknown_keys(table, TABLE_KEYS[name], name, f"of [{name}]")
        clean = {k: v for k, v in table.items() if k in TABLE_KEYS[name]}
        if name == "frequencies" and "list" in clean:
            if set(clean) - {"list"}:
                findings.append(Finding("error", "frequencies", "gives both list and start/stop/count",
                                        "keep one of the two forms"))
            findings += _frequency_list(clean["list"])
            continue
        if name == "hardware" and isinstance(clean.get("reference"), dict):
            findings += _unknown_keys(clean["reference"], TABLE_KEYS["hardware.reference"],
                                      "hardware.reference", "of hardware.reference")
            clean["reference"] = {k: v for k, v in clean["reference"].items()
                                  if k in TABLE_KEYS["hardware.reference"]}
        _, errs = _collected(lambda: resolve_section(name, clean, r, base), r, name, src)
        findings += errs
    room = _room(doc.get("room"), r, src, findings)
    # the entries that resolved: now the clashes between elements (names, channels, positions) and,
    # with a room, every element outside it or too near a wall; a side whose entries all failed is
    # already reported, so its emptiness is not repeated
    rig = Rig(join_entries(resolved["speakers"]), join_entries(resolved["microphones"]), source=src, room=room)
    for exc in rig.problems():
        if exc.problem.startswith("the rig has no ") and any(
                f.field.startswith(str(exc.field)) for f in findings):
            continue
        findings.append(_from_error(exc, src))
    findings += _names_repeated_in_failed_entries(resolved, unresolved)
    return findings, groups


def _room(table: Any, r: FieldReader, src: str, findings: list[Finding]) -> Room | None:
    """The ``[room]`` table resolved (None when absent or wrong), its problems appended to `findings`."""
    if table is None:
        return None
    if not isinstance(table, dict):
        findings.append(Finding("error", "room", "must be a table [room]", "write [room] above its keys"))
        return None
    findings += _unknown_keys(table, TABLE_KEYS["room"], "room", "of [room]")
    clean = {k: v for k, v in table.items() if k in TABLE_KEYS["room"]}
    room, errs = _collected(lambda: parse_room(clean, r), r, "room", src)
    findings += errs
    return room


def check_rig_file(path: str | Path) -> list[Finding]:
    """Check the rig file at `path`; return every finding, errors first.

    Parameters
    ----------
    path : str or Path
        A rig file (TOML).

    Returns
    -------
    list of Finding
        Structural errors first; when there are none, the physical warnings
        and notes of :func:`physical_findings`.
    """
    path = Path(path)
    findings, groups = _structure(path)
    if any(f.severity == "error" for f in findings):
        return findings
    try:
        rig = load_rig(path)
    except InputError as exc:   # anything the one-by-one pass missed
        return findings + [_from_error(exc, str(path))]
    findings += physical_findings(rig, groups, _raw_medium(path))
    order = {s: i for i, s in enumerate(SEVERITIES)}
    return sorted(findings, key=lambda f: order[f.severity])


def _raw_medium(path: Path) -> dict:
    table = read_rig_document(path).get("medium", {})
    return table if isinstance(table, dict) else {}
