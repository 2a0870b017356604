"""Check a rig file and explain every problem in plain words.

:func:`check_rig_file` reads a rig file the way :func:`arrayplan.rig.load_rig`
does, but instead of stopping at the first problem it goes on and lists all
it can find: TOML syntax, unknown keys, missing or wrong-typed values,
non-finite positions, coincident elements, repeated names or channels, bad
directivity, bad frequencies, missing or malformed CSV files.  When the file
loads, it adds physical warnings a practitioner wants before mounting
hardware (:func:`physical_findings`).

Each problem is a :class:`Finding` with a severity (``"error"``,
``"warning"`` or ``"note"``), the field it is about, an explanation and a fix.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

import numpy as np
from scipy.spatial import cKDTree

from .errors import InputError
from .heuristics import PARAXIAL_RATIO, aperture_shape
from .medium import speed_of_sound_air
from .rig import (ENTRY_KEYS, TABLE_KEYS, EntryElements, FieldReader, Rig, entry_kind, join_entries,
                  load_rig, read_rig_document, resolve_entry, resolve_section)

__all__ = ["Finding", "SideGroup", "check_rig_file", "count_by_severity", "physical_findings"]

SEVERITIES = ("error", "warning", "note")


@dataclass(frozen=True)
class Finding:
    """One problem (or remark) about a rig file.

    Attributes
    ----------
    severity : str
        ``"error"`` (the rig cannot be loaded), ``"warning"`` (it loads, but
        something physical will go wrong) or ``"note"`` (worth knowing).
    field : str
        Where: ``"speakers[0].spacing"``, ``"frequencies"``, ``"line 7"`` ...
    explanation : str
        What is wrong, in plain words with numbers.
    fix : str or None
        What to do about it.
    """

    severity: str
    field: str
    explanation: str
    fix: str | None = None

    def one_line(self) -> str:
        """``severity: field: explanation; fix: ...`` on one line."""
        text = f"{self.severity}: {self.field}: {self.explanation}"
        if self.fix:
            text += f"; fix: {self.fix}"
        return " ".join(text.split())


@dataclass(frozen=True)
class SideGroup:
    """The elements one rig-file entry gave, for the physical checks.

    Attributes
    ----------
    label : str
        ``"speakers"`` or ``"microphones"``.
    field : str
        ``"speakers[0]"``; for a side given point by point, ``"speakers"``.
    elements : EntryElements
    counts : tuple of int
        (nu, nv) of a grid, else (n,).
    """

    label: str
    field: str
    elements: EntryElements
    counts: tuple[int, ...]


def count_by_severity(findings: list[Finding]) -> dict[str, int]:
    """How many findings of each severity, ``{"error": n, "warning": n, "note": n}``."""
    return {s: sum(f.severity == s for f in findings) for s in SEVERITIES}


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


def _key_of(field: str | None, where: str) -> str | None:
    """The key of table `where` an error's field points at ('speakers[0].directivity.axis' -> 'directivity')."""
    if not field or not field.startswith(where + ".") or field == where:
        return None
    return field[len(where) + 1:].split(".", 1)[0]


def _peel(resolve: Callable[[dict], Any], table: dict, where: str, rig_source: str,
          keep: frozenset[str] = frozenset()) -> tuple[Any, list[Finding]]:
    """Resolve `table`; after each error, drop the offending key and try again, to find them all.

    Returns the resolved value (with defaults in place of dropped keys) or
    None when some error could not be peeled off, and the findings.
    """
    t = dict(table)
    found: list[Finding] = []
    seen: set[str] = set()
    for _ in range(len(table) + 2):
        try:
            return resolve(t), found
        except InputError as exc:
            f = _from_error(exc, rig_source, where)
            if exc.field in seen:
                return None, found
            seen.add(str(exc.field))
            found.append(f)
            key = _key_of(exc.field, where) if not exc.source or exc.source == rig_source else None
            if key is None or key not in t or key in keep:
                return None, found
            del t[key]
    return None, found


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
                 ) -> tuple[list[Finding], dict[str, list[SideGroup]], dict[str, list[EntryElements]]]:
    """Findings, the groups of each side, and every resolved entry of each side in file order."""
    findings: list[Finding] = []
    groups: dict[str, list[SideGroup]] = {"speakers": [], "microphones": []}
    resolved: dict[str, list[EntryElements]] = {"speakers": [], "microphones": []}
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

            def resolve(t: dict, i: int = i, before: int = sum(len(p.names) for p in parts),
                        nxt: int = next_channel) -> EntryElements:
                return resolve_entry(t, i, label, r, base, n_entries=len(entries), n_before=before,
                                     next_channel=nxt)

            part, errs = _peel(resolve, clean, where, src, keep=frozenset({"shape", "csv"}))
            findings += errs
            if part is None:
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
    return findings, groups, resolved


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
    r = FieldReader(src)
    base = path.parent
    findings = _unknown_keys(doc, TABLE_KEYS[""], "", "a rig file knows at the top level")
    meta = doc.get("rig", {})
    if not isinstance(meta, dict):
        findings.append(Finding("error", "rig", "must be a table [rig]", "write [rig] with name = \"...\""))
    else:
        findings += _unknown_keys(meta, TABLE_KEYS["rig"], "rig", "of [rig]")
    side_findings, groups, resolved = _check_sides(doc, r, base, src)
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
        _, errs = _peel(lambda t, name=name: resolve_section(name, t, r, base), clean, name, src)
        findings += errs
    # the entries that resolved: now the clashes between elements (names, channels, positions);
    # a side whose entries all failed is already reported, so its emptiness is not repeated
    rig = Rig(join_entries(resolved["speakers"]), join_entries(resolved["microphones"]), source=src)
    for exc in rig.problems():
        if exc.problem.startswith("the rig has no ") and any(
                f.field.startswith(str(exc.field)) for f in findings):
            continue
        findings.append(_from_error(exc, src))
    return findings, groups


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


# ------------------------------------------------------------ physical checks

#: Relative tolerance of the boundary tests (d = lambda / 2 exactly is still fine).
_EDGE_RTOL = 1e-9
#: Below this directivity gain (-40 dB re on-axis) a speaker-microphone path counts as absent.
_DEAD_GAIN = 1e-2


def _name_span(names: tuple[str, ...] | list[str]) -> str:
    """'T1..T12' for a run of numbered names, else a short list."""
    names = list(names)
    m = [re.fullmatch(r"(.*?)(\d+)", n) for n in names]
    if len(names) > 2 and all(m) and len({x.group(1) for x in m}) == 1:   # type: ignore[union-attr]
        nums = [int(x.group(2)) for x in m]                                # type: ignore[union-attr]
        if nums == list(range(nums[0], nums[0] + len(nums))):
            return f"{names[0]}..{names[-1]}"
    if len(names) <= 4:
        return ", ".join(names)
    return f"{', '.join(names[:3])} and {len(names) - 3} more"


def _group_spacing(g: SideGroup) -> float | None:
    """Largest distance between neighbouring elements of a group in metres (None for one element)."""
    pos = g.elements.positions
    n = len(pos)
    if n < 2:
        return None
    if g.elements.kind == "grid":
        nu, nv = g.counts
        steps = ([np.linalg.norm(pos[1] - pos[0])] if nu > 1 else []) + \
                ([np.linalg.norm(pos[nu] - pos[0])] if nv > 1 else [])
        return float(max(steps))
    if g.elements.kind in ("line", "arc", "circle"):
        return float(np.linalg.norm(pos[1] - pos[0]))
    nearest = cKDTree(pos).query(pos, k=2)[0][:, 1]
    return float(np.max(nearest))


def aliasing_findings(rig: Rig, groups: dict[str, list[SideGroup]]) -> list[Finding]:
    """A warning for each group whose spacing d exceeds half a wavelength at the top planned frequency.

    A uniformly spaced array forms no grating lobes at any steering angle
    when d <= lambda / 2 (the spatial sampling theorem for arrays); above it,
    from f = c / (2 d), it does.
    """
    if rig.frequencies is None:
        return []
    c = rig.medium.speed_of_sound
    f_top = float(rig.frequencies.hz[-1])
    half = c / (2.0 * f_top)
    out = []
    for label in ("speakers", "microphones"):
        for g in groups.get(label, []):
            d = _group_spacing(g)
            if d is None or d <= half * (1.0 + _EDGE_RTOL):
                continue
            f_alias = c / (2.0 * d)
            effect = "form grating lobes" if label == "speakers" else "alias the sound field (grating lobes)"
            out.append(Finding(
                "warning", g.field,
                f"{label} {_name_span(g.elements.names)} are up to {d:.3g} m apart; at {f_top:.0f} Hz half a "
                f"wavelength is {half:.3g} m, so the array will {effect} above {f_alias:.0f} Hz",
                f"space them closer than {half:.3g} m or plan below {f_alias:.0f} Hz"))
    return out


def paraxial_findings(rig: Rig) -> list[Finding]:
    """A warning when two facing arrays are too close for the paraxial channel estimate.

    Criterion: the estimate Ls Lr / (lambda L) (lines) or As Ar / (lambda L)^2
    (areas) assumes small angles (paraxial regime); it is called rough when
    half the sum of the two apertures exceeds half the distance L, the same
    rule :func:`arrayplan.heuristics.paraxial_estimate` uses.
    """
    spk, mic = aperture_shape(rig.speakers.positions), aperture_shape(rig.mics.positions)
    if spk.kind != mic.kind or spk.kind not in ("line", "area"):
        return []
    dist = float(np.linalg.norm(mic.centre - spk.centre))
    span = (spk.extent + mic.extent) / 2.0
    if dist < 0.05 * max(spk.extent, mic.extent):
        return [Finding("note", "speakers/microphones",
                        "the two arrays share a centre (one surrounds the other), so the quick estimate of "
                        "Ls Lr / (lambda L) does not apply; the SVD counts from 'arrayplan plan' are the ones "
                        "to trust")]
    if span <= PARAXIAL_RATIO * dist:
        return []
    angle = float(np.degrees(np.arctan(span / dist)))
    return [Finding(
        "warning", "speakers/microphones",
        f"the arrays span {spk.extent:.3g} m and {mic.extent:.3g} m but are only {dist:.3g} m apart "
        f"(less than the {span / PARAXIAL_RATIO:.3g} m the paraxial estimate needs): paths reach {angle:.0f} "
        f"degrees off axis, in the near field of the apertures, so the quick count of the estimate is rough",
        f"move the arrays at least {span / PARAXIAL_RATIO:.3g} m apart, or rely on the SVD counts of "
        f"'arrayplan plan' rather than the estimate")]


def _gains(rig: Rig, k: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Directivity gains (n_freq, n_mic, n_spk) of the speakers towards the mics and of the mics towards them."""
    diff = rig.mics.positions[:, None, :] - rig.speakers.positions[None, :, :]
    unit = diff / np.linalg.norm(diff, axis=-1, keepdims=True)              # speaker -> mic
    g_spk = np.ones((len(k),) + unit.shape[:2])
    g_mic = np.ones_like(g_spk)
    for j, d in enumerate(rig.speakers.directivities):
        cos = unit[:, j, :] @ np.asarray(d.axis)
        g_spk[:, :, j] = d.gain(cos, k) if d.depends_on_frequency else d.gain(cos)[None]
    for i, d in enumerate(rig.mics.directivities):
        cos = -unit[i] @ np.asarray(d.axis)
        g_mic[:, i, :] = d.gain(cos, k) if d.depends_on_frequency else d.gain(cos)[None]
    return np.abs(g_spk), np.abs(g_mic)


def coupling_findings(rig: Rig, freqs_hz: np.ndarray) -> list[Finding]:
    """Microphones that hear no speaker and speakers no microphone hears (baffles, nulls)."""
    k = 2.0 * np.pi * freqs_hz / rig.medium.speed_of_sound
    g_spk, g_mic = _gains(rig, k)
    path = (g_spk * g_mic).max(axis=0)                                       # (n_mic, n_spk)
    dead = path < _DEAD_GAIN
    if dead.all():
        return [Finding("error", "speakers/microphones",
                        "no microphone hears any speaker: every path lies behind a piston's baffle or in the null "
                        "of a directional pattern, so the rig carries no channel at all",
                        "check the signs of the directivity axes: speakers should point towards the "
                        "microphones and the microphones towards the speakers")]
    out = []
    deaf = np.flatnonzero(dead.all(axis=1))
    if deaf.size:
        by_speakers = (g_spk.max(axis=0)[deaf] < _DEAD_GAIN).all(axis=1)
        why = ("behind the baffle or in the null of every speaker" if by_speakers.all() else
               "in the null of its own pattern towards every speaker" if not by_speakers.any() else
               "behind the speakers' baffles or in the null of its own pattern")
        names = [rig.mics.names[i] for i in deaf]
        out.append(Finding("warning", "microphones",
                           f"microphones {_name_span(names)} hear none of the speakers: each is {why}",
                           "turn the microphones or the speakers to face each other (directivity axis)"))
    mute = np.flatnonzero(dead.all(axis=0))
    if mute.size:
        names = [rig.speakers.names[j] for j in mute]
        out.append(Finding("warning", "speakers",
                           f"speakers {_name_span(names)} reach none of the microphones (behind their own baffle "
                           f"or in a null of every microphone)",
                           "turn them towards the microphones (directivity axis)"))
    n_dead = int(dead.sum()) - int(dead[deaf].sum()) - int(dead[:, mute].sum()) + int(dead[np.ix_(deaf, mute)].sum())
    if n_dead:
        out.append(Finding("note", "speakers/microphones",
                           f"{n_dead} of {dead.size} speaker-microphone paths have no direct sound (behind a "
                           f"baffle or in a null, below -40 dB)", None))
    return out


def piston_findings(rig: Rig, f_top: float) -> list[Finding]:
    """Pistons that overlap their neighbours, and microphones inside a piston's Rayleigh distance.

    The far-field piston pattern 2 J1(ka sin theta) / (ka sin theta) holds
    beyond the Rayleigh distance pi a^2 / lambda.
    """
    out = []
    spk = rig.speakers
    radii = np.array([d.radius if d.kind == "piston" else 0.0 for d in spk.directivities])
    if radii.max(initial=0.0) == 0.0:
        return out
    if len(spk) > 1:
        gap = np.linalg.norm(spk.positions[:, None] - spk.positions[None], axis=-1) + np.diag(np.full(len(spk), np.inf))
        clash = np.argwhere(np.triu(gap < radii[:, None] + radii[None, :], 1))
        if clash.size:
            i, j = clash[0]
            out.append(Finding("warning", "speakers",
                               f"pistons {spk.names[i]} and {spk.names[j]} are {gap[i, j]:.3g} m apart but "
                               f"{2 * radii[i]:.3g} m and {2 * radii[j]:.3g} m across, so they cannot both be "
                               f"mounted there ({len(clash)} such pair(s))",
                               "space the drivers wider or give smaller radii"))
    lam = rig.medium.speed_of_sound / f_top
    rayleigh = np.pi * radii ** 2 / lam
    dist = np.linalg.norm(rig.mics.positions[:, None] - spk.positions[None], axis=-1)
    close = np.argwhere(dist < rayleigh[None, :])
    if close.size:
        i, j = close[0]
        out.append(Finding("warning", "speakers/microphones",
                           f"microphone {rig.mics.names[i]} is {dist[i, j]:.3g} m from piston {spk.names[j]}, inside "
                           f"its Rayleigh distance pi a^2 / lambda = {rayleigh[j]:.3g} m at {f_top:.0f} Hz, where "
                           f"the far-field piston pattern does not hold ({len(close)} such pair(s))",
                           "move the microphones further out or plan below that frequency"))
    return out


def proximity_findings(rig: Rig, f_low: float) -> list[Finding]:
    """Directional microphones within kr < 1 of a speaker at the lowest frequency (proximity effect)."""
    c = rig.medium.speed_of_sound
    k = 2.0 * np.pi * f_low / c
    idx = [i for i, d in enumerate(rig.mics.directivities) if not d.is_omni and d.kind != "piston"]
    if not idx:
        return []
    dist = np.linalg.norm(rig.mics.positions[idx][:, None] - rig.speakers.positions[None], axis=-1).min(axis=1)
    near = [(rig.mics.names[i], r) for i, r in zip(idx, dist) if k * r < 1.0]
    if not near:
        return []
    names = [n for n, _ in near]
    r_min = min(r for _, r in near)
    return [Finding("warning", "microphones",
                    f"directional microphones {_name_span(names)} are as close as {r_min:.3g} m to a speaker; at "
                    f"{f_low:.0f} Hz that is kr = {k * r_min:.2f} < 1, where a pressure-gradient microphone "
                    f"boosts the bass (proximity effect) and the far-field pattern in the model does not hold",
                    f"keep them further than {1.0 / k:.3g} m away or plan above {c / (2 * np.pi * r_min):.0f} Hz")]


def compact_findings(rig: Rig, f_top: float) -> list[Finding]:
    """A side much smaller than a wavelength at the top frequency (k a < 1) carries one strong channel."""
    c = rig.medium.speed_of_sound
    k = 2.0 * np.pi * f_top / c
    out = []
    for label, es in (("speakers", rig.speakers), ("microphones", rig.mics)):
        if len(es) < 2:
            out.append(Finding("note", label, f"the rig has a single {label[:-1]}: one channel at most"))
            continue
        radius = float(np.max(np.linalg.norm(es.positions - es.positions.mean(axis=0), axis=1)))
        if k * radius < 1.0:
            out.append(Finding(
                "warning", label,
                f"the {label} fit in a sphere of radius {radius:.3g} m; at the top planned frequency "
                f"{f_top:.0f} Hz a wavelength is {c / f_top:.3g} m (k a = {k * radius:.2f} < 1), so the {label} act "
                f"like one point and the rig carries one strong channel at most",
                f"plan above {c / (2 * np.pi * radius):.0f} Hz or spread the {label} wider"))
    return out


def hardware_findings(rig: Rig, f_top: float | None) -> list[Finding]:
    """Sample rate against the planned band, missing calibration file, reference channel clashes."""
    hw, out = rig.hardware, []
    if hw.sample_rate_hz and f_top is not None and f_top >= hw.sample_rate_hz / 2.0:
        out.append(Finding("warning", "hardware.sample_rate_hz",
                           f"the top planned frequency {f_top:g} Hz is at or above half the sample rate "
                           f"({hw.sample_rate_hz / 2:g} Hz), so the interface cannot play or record it",
                           f"plan below {hw.sample_rate_hz / 2:g} Hz (in practice below "
                           f"{0.45 * hw.sample_rate_hz:g} Hz) or raise the sample rate"))
    if hw.calibration is not None and not hw.calibration.exists():
        out.append(Finding("warning", "hardware.calibration",
                           f"names {hw.calibration}, which does not exist (yet); a measurement that applies it will fail",
                           "run 'arrayplan calibrate' to make it, or remove the key"))
    if hw.reference_output is not None and hw.reference_output in rig.speakers.channels:
        name = rig.speakers.names[rig.speakers.channels.index(hw.reference_output)]
        out.append(Finding("warning", "hardware.reference.output_channel",
                           f"output channel {hw.reference_output} is both the reference loop and speaker {name}",
                           "give the reference loop an output channel no speaker uses"))
    if hw.reference_input is not None and hw.reference_input in rig.mics.channels:
        name = rig.mics.names[rig.mics.channels.index(hw.reference_input)]
        out.append(Finding("warning", "hardware.reference.input_channel",
                           f"input channel {hw.reference_input} is both the reference loop and microphone {name}",
                           "give the reference loop an input channel no microphone uses"))
    return out


def medium_findings(rig: Rig, raw_medium: dict) -> list[Finding]:
    """speed_of_sound and temperature_c that disagree by more than 0.5 %."""
    if "speed_of_sound" in raw_medium and "temperature_c" in raw_medium:
        c_t = speed_of_sound_air(rig.medium.temperature_c)
        c = rig.medium.speed_of_sound
        if abs(c - c_t) > 0.005 * c_t:
            return [Finding("warning", "medium.speed_of_sound",
                            f"{c:g} m/s is given, but air at {rig.medium.temperature_c:g} °C carries sound at "
                            f"{c_t:.1f} m/s; the planner uses {c:g} m/s",
                            "give only one of speed_of_sound and temperature_c, or make them agree")]
    return []


def physical_findings(rig: Rig, groups: dict[str, list[SideGroup]], raw_medium: dict | None = None
                      ) -> list[Finding]:
    """Warnings and notes about a rig that loads: what will go wrong on the real rig.

    Parameters
    ----------
    rig : Rig
    groups : dict
        ``{"speakers": [SideGroup, ...], "microphones": [...]}``, one group per
        generated/CSV entry and one for the points of a side.
    raw_medium : dict, optional
        The ``[medium]`` table as written (to see which keys were given).

    Returns
    -------
    list of Finding
    """
    out = medium_findings(rig, raw_medium or {})
    if rig.frequencies is None:
        out.append(Finding("note", "frequencies",
                           "no [frequencies] table: 'arrayplan plan' will need --freq, and the checks that depend "
                           "on frequency (spacing, near field, nulls, sample rate) were skipped",
                           "add [frequencies] with start, stop and count in Hz"))
        return out + paraxial_findings(rig) + hardware_findings(rig, None)
    hz = rig.frequencies.hz
    out += aliasing_findings(rig, groups)
    out += paraxial_findings(rig)
    out += coupling_findings(rig, hz)
    out += piston_findings(rig, float(hz[-1]))
    out += proximity_findings(rig, float(hz[0]))
    out += compact_findings(rig, float(hz[-1]))
    out += hardware_findings(rig, float(hz[-1]))
    return out
