"""Commented starter rig files for layouts practitioners build.

:func:`starter_rig_text` writes a rig file (TOML) for one of :data:`LAYOUTS`
with every key commented (what it is, its unit) and the next commands to run
on it; :func:`write_starter_rig` writes it atomically and refuses to replace
an existing file unless asked.  Every starter loads with
:func:`arrayplan.rig.load_rig` and plans with
:func:`arrayplan.channels.planning.plan_rig`.

By default the top planned frequency is the highest the layout samples
without grating lobes (element spacing d <= lambda / 2, rounded down to two
significant digits), and the band spans three octaves below it.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Sequence

import numpy as np
import tomlkit

from .._version import __version__
from ..errors import InputError
from ..formats.atomic_files import write_text_atomic
from .commented_toml import Part, _document, _kv, _Pair, _table, toml_value
from .medium import speed_of_sound_air

__all__ = ["Layout", "LAYOUTS", "starter_rig_text", "write_starter_rig", "parse_counts", "toml_value", "Part"]


# ------------------------------------------------------------ options

@dataclass(frozen=True)
class Layout:
    """A starter layout.

    Attributes
    ----------
    name : str
        What to type after ``arrayplan new-rig``.
    summary : str
        One line for the list of layouts.
    defaults : dict
        The options the layout takes, with their defaults (None: computed).
    body : callable
        ``body(options, speed_of_sound) -> (lines, spacings_m)``: the
        speaker/microphone tables and the element spacings that set the
        default top frequency.
    """

    name: str
    summary: str
    defaults: dict[str, Any]
    body: Callable[[dict[str, Any], float], tuple[list[Part], list[float]]]


def parse_counts(value: Any, option: str) -> tuple[int, int]:
    """Grid counts from ``"4x6"``, ``6`` (a square) or a pair of whole numbers.

    Parameters
    ----------
    value : str, int or pair of int
        ``"NxM"`` (``×`` also accepted; ``"N"`` for a square), one whole
        number for a square, or two whole numbers.
    option : str
        Option named in messages.

    Returns
    -------
    (int, int)
        Counts along the grid's first and second axis.

    Raises
    ------
    InputError
        Not counts, a count below 1, or fewer than 2 elements in all.
    """
    if isinstance(value, str):
        parts = value.lower().replace("×", "x").split("x")
        try:
            nums = [int(p) for p in parts]
        except ValueError:
            raise InputError(f"expected counts like 4x4, got {value!r}", source=option) from None
        value = nums * 2 if len(nums) == 1 else nums
    elif isinstance(value, int) and not isinstance(value, bool):
        value = (value, value)
    if not (isinstance(value, (list, tuple)) and len(value) == 2 and all(isinstance(v, int) for v in value)):
        raise InputError(f"expected counts like 4x4, got {value!r}", source=option)
    if min(value) < 1 or value[0] * value[1] < 2:
        raise InputError(f"a grid needs at least 2 elements, got {value[0]}x{value[1]}", source=option)
    return int(value[0]), int(value[1])


def _count(value: Any, option: str, minimum: int = 2) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or value < minimum:
        raise InputError(f"expected a whole number >= {minimum}, got {value!r}", source=option)
    return value


def _positive(value: Any, option: str, unit: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value <= 0:
        raise InputError(f"expected a positive number of {unit}, got {value!r}", source=option)
    return float(value)


def _round_down(x: float) -> float:
    """`x` rounded down to two significant digits (4288 -> 4200)."""
    step = 10.0 ** (math.floor(math.log10(x)) - 1)
    return math.floor(x / step + 1e-9) * step


def _driver_radius(spacing: float, largest: float) -> float:
    """A piston radius that fits the spacing: 40 % of it, at most `largest` metres."""
    return round(min(largest, 0.4 * spacing), 4)


# ------------------------------------------------------------ layouts

#: A microphone that hears equally from every direction.
_OMNI = _kv("directivity", "omni", "pressure microphones, equal in every direction")


def _piston(radius: float, axis: Any, facing: str) -> _Pair:
    """The ``directivity`` pair of a baffled piston of `radius` m pointing along `axis`."""
    return _kv("directivity", {"type": "piston", "radius": radius, "axis": axis},
               f"baffled piston, radius in m, {facing}")


def _io(label: str) -> str:
    """The interface side an element of table `label` is wired to."""
    return "output" if label == "speakers" else "input"


def _line_block(label: str, comment: str, prefix: str, count: int, what: str, spacing: float,
                center: list[float], center_note: str, direction_note: str, directivity: _Pair,
                channel_note: str = "") -> list[Part]:
    """The ``[[label]]`` table of a line of `count` `what` named `prefix`1.. running along x."""
    return [
        _table(label, comment, array=True),
        _kv("shape", "line", "a straight line of equally spaced elements"),
        _kv("name", prefix, f"element names {prefix}1..{prefix}{count}"),
        _kv("count", count, f"number of {what}"),
        _kv("spacing", spacing, "centre-to-centre distance, m"),
        _kv("center", center, center_note),
        _kv("direction", [1.0, 0.0, 0.0], direction_note),
        directivity,
        _kv("first_channel", 1, f"interface {_io(label)} of {prefix}1 (1-based){channel_note}"),
    ]


def _grid_block(label: str, comment: str, prefix: str, counts: tuple[int, int], counts_note: str,
                spacing: float, center: list[float], center_note: str, normal: list[float], normal_note: str,
                directivity: _Pair, first_channel: int = 1) -> list[Part]:
    """The ``[[label]]`` table of a flat grid of ``counts[0] x counts[1]`` elements named `prefix`1.."""
    return [
        _table(label, comment, array=True),
        _kv("shape", "grid", "a rectangular grid in one plane"),
        _kv("name", prefix, f"element names {prefix}1..{prefix}{counts[0] * counts[1]}, row by row"),
        _kv("counts", list(counts), counts_note),
        _kv("spacing", spacing, "centre-to-centre distance both ways, m"),
        _kv("center", center, center_note),
        _kv("normal", normal, normal_note),
        directivity,
        _kv("first_channel", first_channel, f"interface {_io(label)} of {prefix}1 (1-based)"),
    ]


def _listening_grid(comment: str, prefix: str, counts: tuple[int, int], spacing: float, center: list[float],
                    center_note: str, first_channel: int = 1) -> list[Part]:
    """A horizontal grid of pressure microphones at ear height sampling a listening area."""
    return _grid_block("microphones", comment, prefix, counts, "microphones along x and along y", spacing,
                       center, center_note, [0.0, 0.0, 1.0], "a horizontal grid at ear height", _OMNI,
                       first_channel)


def _facing_spacings(o: dict[str, Any]) -> tuple[float, float, float, float]:
    """Speaker and microphone spacing, distance between the arrays (m) and driver radius of a facing layout."""
    d_s = _positive(o["spacing"], "spacing", "metres")
    d_m = _positive(o["mic_spacing"] if o["mic_spacing"] is not None else d_s, "mic_spacing", "metres")
    dist = _positive(o["distance"], "distance", "metres")
    return d_s, d_m, dist, _driver_radius(d_s, 0.015)


def _facing_lines(o: dict[str, Any], c: float) -> tuple[list[Part], list[float]]:
    n_s, n_m = _count(o["speakers"], "speakers"), _count(o["mics"], "mics")
    d_s, d_m, dist, a = _facing_spacings(o)
    return [
        *_line_block("speakers", "the transmitting line: small drivers on a bar", "T", n_s, "drivers", d_s,
                     [0.0, 0.0, 1.2], "middle of the line (x, y, z), m", "the line runs along x",
                     _piston(a, [0.0, 1.0, 0.0], "facing +y"), channel_note="; T2 the next"),
        "",
        *_line_block("microphones", "the receiving line, facing the drivers", "R", n_m, "microphones", d_m,
                     [0.0, dist, 1.2], "middle of the line, m (distance along y)", "parallel to the drivers",
                     _kv("directivity", {"type": "cardioid", "axis": [0.0, -1.0, 0.0]},
                         "cardioid, facing the drivers (-y)")),
    ], [d_s, d_m]


def _facing_grids(o: dict[str, Any], c: float) -> tuple[list[Part], list[float]]:
    (su, sv), (mu, mv) = parse_counts(o["speakers"], "speakers"), parse_counts(o["mics"], "mics")
    d_s, d_m, dist, a = _facing_spacings(o)
    width_height = "elements along the panel's width and height"
    return [
        *_grid_block("speakers", "a flat panel of drivers", "P", (su, sv), width_height, d_s,
                     [0.0, 0.0, 1.2], "middle of the panel (x, y, z), m",
                     [0.0, 1.0, 0.0], "the panel faces +y (rows run along x)",
                     _piston(a, [0.0, 1.0, 0.0], "facing +y")),
        "",
        *_grid_block("microphones", "a flat panel of microphones, facing the drivers", "Q", (mu, mv), width_height,
                     d_m, [0.0, dist, 1.2], "middle of the panel, m (distance along y)",
                     [0.0, 1.0, 0.0], "parallel to the drivers' panel", _OMNI),
    ], [d_s, d_m]


def _ring_zone(o: dict[str, Any], c: float) -> tuple[list[Part], list[float]]:
    n_s = _count(o["speakers"], "speakers", minimum=3)
    mu, mv = parse_counts(o["mics"], "mics")
    radius = _positive(o["radius"], "radius", "metres")
    d_m = _positive(o["mic_spacing"], "mic_spacing", "metres")
    if max(mu - 1, mv - 1) * d_m * math.sqrt(2) / 2 >= 0.9 * radius:
        raise InputError(f"a {mu}x{mv} grid at {d_m:g} m does not fit well inside a ring of radius {radius:g} m",
                         source="mic_spacing", fix="use fewer microphones, closer spacing or a larger `radius`")
    chord = 2.0 * radius * math.sin(math.pi / n_s)
    a = _driver_radius(chord, 0.05)
    return [
        _table("speakers", "a ring of loudspeakers around the listening area", array=True),
        _kv("shape", "circle", "equally spaced on a full circle"),
        _kv("name", "L", f"element names L1..L{n_s}, anticlockwise from +x"),
        _kv("count", n_s, "number of loudspeakers"),
        _kv("radius", radius, "circle radius, m"),
        _kv("center", [0.0, 0.0, 1.2], "centre of the ring (ear height), m"),
        _kv("normal", [0.0, 0.0, 1.0], "the ring lies in a horizontal plane"),
        _piston(a, "inward", "each facing the centre"),
        _kv("first_channel", 1, "interface output of L1 (1-based)"),
        "",
        *_listening_grid("the listening area, sampled by a grid of microphones", "Z", (mu, mv), d_m,
                         [0.0, 0.0, 1.2], "middle of the listening area, m"),
    ], [chord, d_m]


def _two_zones(o: dict[str, Any], c: float) -> tuple[list[Part], list[float]]:
    n_s = _count(o["speakers"], "speakers")
    mu, mv = parse_counts(o["mics"], "mics")
    d_s = _positive(o["spacing"], "spacing", "metres")
    d_m = _positive(o["mic_spacing"], "mic_spacing", "metres")
    dist = _positive(o["distance"], "distance", "metres")
    gap = _positive(o["zone_separation"], "zone_separation", "metres")
    if gap <= (mu - 1) * d_m:
        raise InputError(f"zones {gap:g} m apart overlap: each is {(mu - 1) * d_m:g} m wide",
                         source="zone_separation", fix="separate the zones further or use fewer microphones")
    a = _driver_radius(d_s, 0.04)
    lines = _line_block("speakers", "a line array in front of both zones", "S", n_s, "loudspeakers", d_s,
                        [0.0, 0.0, 1.2], "middle of the line (x, y, z), m", "the line runs along x",
                        _piston(a, [0.0, 1.0, 0.0], "facing the zones (+y)"))
    for zone, x, first in (("A", -gap / 2, 1), ("B", gap / 2, 1 + mu * mv)):
        lines += ["", *_listening_grid(f"listening zone {zone}", zone, (mu, mv), d_m, [x, dist, 1.2],
                                       f"middle of zone {zone}, m", first)]
    return lines, [d_s, d_m]


def _bench(o: dict[str, Any], c: float) -> tuple[list[Part], list[float]]:
    n_s, n_m = _count(o["speakers"], "speakers", minimum=1), _count(o["mics"], "mics", minimum=1)
    d = _positive(o["spacing"], "spacing", "metres")
    dist = _positive(o["distance"], "distance", "metres")
    a = _driver_radius(d, 0.015)
    lines: list[Part] = []
    for label, n, y, prefix, what in (("speakers", n_s, 0.0, "D", "driver"), ("microphones", n_m, dist, "K",
                                                                                 "microphone")):
        for i in range(n):
            x = (i - (n - 1) / 2) * d
            lines += [
                _table(label, f"one {what}; copy this block for another", array=True),
                _kv("name", f"{prefix}{i + 1}", "a unique name"),
                _kv("position", [round(x, 6), y, 0.1], "x, y, z in m (z: height above the bench)"),
            ]
            if label == "speakers":
                lines.append(_piston(a, [0.0, 1.0, 0.0], "facing +y"))
            else:
                lines.append(_kv("directivity", "omni", "pressure microphone"))
            lines += [_kv("channel", i + 1, f"interface {_io(label)} (1-based)"), ""]
    lines += [
        _table("hardware", "the audio interface (for measurement)"),
        "# device = \"USB\"                 # interface by index or part of its name; see 'arrayplan devices'",
        _kv("sample_rate_hz", 48000.0, "sample rate, Hz"),
        _kv("reference", {"output_channel": n_s + 1, "input_channel": n_m + 1},
            "loopback cable: output -> input (1-based)"),
        "# calibration = \"cal.toml\"       # level calibration from 'arrayplan calibrate'",
    ]
    return lines, [d]


LAYOUTS: dict[str, Layout] = {lay.name: lay for lay in (
    Layout("facing-lines", "two facing line arrays, drivers to microphones (an in-air data link)",
           {"speakers": 16, "mics": 16, "spacing": 0.04, "mic_spacing": None, "distance": 1.25}, _facing_lines),
    Layout("facing-grids", "two facing flat grids, a panel of drivers to a panel of microphones",
           {"speakers": "8x8", "mics": "8x8", "spacing": 0.04, "mic_spacing": None, "distance": 0.8},
           _facing_grids),
    Layout("ring-zone", "a ring of loudspeakers around a grid of microphones (zone reproduction)",
           {"speakers": 24, "mics": "5x5", "radius": 1.5, "mic_spacing": 0.1}, _ring_zone),
    Layout("two-zones", "a line array in front of two grids of microphones (two-zone reproduction)",
           {"speakers": 16, "mics": "3x3", "spacing": 0.1, "mic_spacing": 0.1, "distance": 2.0,
            "zone_separation": 1.5}, _two_zones),
    Layout("bench", "a small bench rig: a few drivers and microphones as single points, with [hardware]",
           {"speakers": 4, "mics": 4, "spacing": 0.05, "distance": 0.4}, _bench),
)}

#: Options every layout takes (besides its own).
COMMON_DEFAULTS: dict[str, Any] = {"fmin": None, "fmax": None, "freq_count": 48, "temperature_c": 20.0,
                                   "speed_of_sound": None, "name": None, "room": None}
#: Space kept between a starter layout placed in a room and the room's walls, m.
ROOM_MARGIN_M = 0.1


def option_flag(option: str) -> str:
    """A starter option as messages name it (```spacing```); the command line shows its own flag there.

    Parameters
    ----------
    option : str
        Option name, e.g. ``"spacing"``.

    Returns
    -------
    str
        The name between backticks.
    """
    return f"`{option}`"


def _resolve_options(layout: str, options: dict[str, Any]) -> tuple[Layout, dict[str, Any]]:
    if layout not in LAYOUTS:
        raise InputError(f"unknown layout {layout!r}", source="LAYOUT",
                         fix=f"choose one of {', '.join(LAYOUTS)} (the starter layouts)")
    lay = LAYOUTS[layout]
    allowed = dict(COMMON_DEFAULTS, **lay.defaults)
    given = {k: v for k, v in options.items() if v is not None}
    unknown = sorted(set(given) - set(allowed))
    if unknown:
        raise InputError(f"does not apply to the {layout} layout", source=unknown[0],
                         fix=f"{layout} takes {', '.join(option_flag(k) for k in allowed)}")
    return lay, dict(allowed, **given)


def starter_rig_text(layout: str, *, file_name: str = "rig.toml", next_steps: Sequence[str] = (),
                     **options: Any) -> str:
    """The commented rig file of `layout` (a key of :data:`LAYOUTS`).

    Parameters
    ----------
    layout : str
        ``"facing-lines"``, ``"facing-grids"``, ``"ring-zone"``, ``"two-zones"`` or ``"bench"``.
    file_name : str
        The file's name, for `next_steps`.
    next_steps : sequence of str
        Lines of the "Next:" comment near the top (for example the commands
        to run on the file; ``{file}`` is replaced by `file_name`); none
        leaves the comment out.
    **options
        The layout's options (see ``LAYOUTS[layout].defaults``): counts
        (``speakers``, ``mics``; ``"NxM"`` for grids), spacings and
        distances in m (``spacing``, ``mic_spacing``, ``distance``,
        ``radius``, ``zone_separation``), and for every layout ``fmin``,
        ``fmax`` (Hz), ``freq_count``, ``temperature_c`` (°C) or
        ``speed_of_sound`` (m/s), ``name``, and ``room``: the size of a
        rectangular room (Lx, Ly, Lz in m, or text ``"LxWxH"``) to centre the
        layout in, written as a ``[room]`` table.  None means the default.

    Returns
    -------
    str
        TOML text.

    Raises
    ------
    InputError
        An unknown layout or option, or a value out of range (the source
        is the command-line flag).
    """
    lay, o = _resolve_options(layout, options)
    temp = o["temperature_c"]
    if isinstance(temp, bool) or not isinstance(temp, (int, float)) or not -60.0 <= temp <= 60.0:
        raise InputError(f"expected an air temperature from -60 to 60 °C, got {temp!r}", source="temperature")
    if o["speed_of_sound"] is not None:
        c = _positive(o["speed_of_sound"], "speed_of_sound", "m/s")
        medium = [_kv("speed_of_sound", c, "m/s, as measured (or give temperature_c instead)")]
    else:
        c = speed_of_sound_air(float(temp))
        medium = [_kv("temperature_c", float(temp), f"air temperature, °C; sets c = {c:.1f} m/s")]
    body, spacings = lay.body(o, c)
    f_alias = c / (2.0 * max(spacings))
    fmax = _positive(o["fmax"], "fmax", "Hz") if o["fmax"] is not None else _round_down(f_alias)
    fmin = _positive(o["fmin"], "fmin", "Hz") if o["fmin"] is not None else _round_down(fmax / 8.0)
    if fmin >= fmax:
        raise InputError(f"must be below the top frequency {fmax:g} Hz, got {fmin:g} Hz", source="fmin")
    count = _count(o["freq_count"], "freq_count", minimum=2)
    name = o["name"] or layout
    lay_note = (f"the top frequency {fmax:g} Hz is the highest this spacing samples without grating lobes"
                if o["fmax"] is None else f"top frequency as asked; spacing allows up to {f_alias:.0f} Hz")
    head = [
        f"# Rig file: {lay.summary}.",
        f"# Written by 'arrayplan new-rig {layout}' (arrayplan {__version__}) as a starting point: edit the",
        "# positions to match what you build.  Lengths in metres, frequencies in Hz, channels from 1.",
        "#",
        *((["# Next:"] + [f"#   {line.format(file=file_name)}" for line in next_steps] + ["#"]) if next_steps else []),
        "# Caution: measuring this rig drives its loudspeakers with test signals that can harm hearing",
        "# and loudspeakers.  Start quiet, protect your hearing near loud rigs, and follow local codes",
        "# and licensed practice.",
        "",
        _table("rig", "what this rig is"),
        _kv("name", name, "short name, used in output files"),
        _kv("description", lay.summary, "free text"),
        "",
        _table("medium", "the air between the elements"),
        *medium,
        _kv("relative_humidity_pct", 50.0, "relative humidity, %"),
        _kv("air_absorption", False, "true: add ISO 9613-1 air absorption"),
        "",
        _table("frequencies", f"planned band; {lay_note}"),
        _kv("start", fmin, "lowest frequency, Hz"),
        _kv("stop", fmax, "highest frequency, Hz"),
        _kv("count", count, "number of frequencies"),
        _kv("spacing", "log", "\"log\" (equal ratios) or \"linear\""),
        "",
    ]
    tail = [
        "",
        _table("planning", "how channels are counted"),
        _kv("threshold_db", 3.0, "strong: within this many dB of the strongest"),
        _kv("snr_db", 40.0, "signal-to-noise ratio of the strongest, dB"),
        _kv("track", False, "true: follow each channel from bin to bin"),
    ]
    while body and body[-1] == "":
        body = body[:-1]
    text = tomlkit.dumps(_document(head + body + tail))
    if o["room"] is None:
        return text
    size = parse_room_size(o["room"], option_flag("room"))
    return _placed_in_room(head, body, tail, text, size, option_flag("room"))


def parse_room_size(value: Any, source: str) -> tuple[float, float, float]:
    """Room size from three numbers or text ``"LxWxH"`` (metres); InputError naming `source` otherwise.

    Parameters
    ----------
    value : str or sequence of float
        ``"5x4x2.7"`` or three numbers (m).
    source : str
        Option named in messages.

    Returns
    -------
    (float, float, float)
        Lx, Ly, Lz (m), each finite and positive.
    """
    parts = value.lower().split("x") if isinstance(value, str) else value
    try:
        size = tuple(float(p) for p in parts)
    except (TypeError, ValueError):
        size = ()
    if len(size) != 3 or not all(math.isfinite(x) and x > 0 for x in size):
        raise InputError(f"expected the room's length, width and height in metres as LxWxH, got {value!r}",
                         source=source, fix="for example 5x4x2.7")
    return size  # type: ignore[return-value]


def _placed_in_room(head: list[Part], body: list[Part], tail: list[Part], text: str,
                    size: tuple[float, float, float], source: str) -> str:
    """The starter text with the layout centred on the room's floor plan and a [room] table added."""
    import tempfile

    from . import load_rig

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "rig.toml"
        path.write_text(text, encoding="utf-8")
        rig = load_rig(path)
    pts = np.vstack([rig.speakers.positions, rig.mics.positions])
    lo, hi = pts.min(axis=0), pts.max(axis=0)
    room = np.asarray(size)
    shift = np.array([(room[0] - lo[0] - hi[0]) / 2, (room[1] - lo[1] - hi[1]) / 2, 0.0])
    if np.any(lo + shift < ROOM_MARGIN_M) or np.any(hi + shift > room - ROOM_MARGIN_M):
        span = hi - lo
        raise InputError(f"the layout spans {span[0]:.2f} x {span[1]:.2f} m up to {hi[2]:.2f} m high, which does not "
                         f"fit a {size[0]:g} x {size[1]:g} x {size[2]:g} m room with {ROOM_MARGIN_M:g} m to spare",
                         source=source, fix="give a larger room or a smaller layout")

    def moved(part: Part) -> Part:
        if not (isinstance(part, _Pair) and part.key in ("center", "position")):
            return part
        xyz = np.asarray(part.value, dtype=float) + shift
        return _Pair(part.key, [round(float(v), 6) for v in xyz], part.comment)

    room_table = [
        "",
        _table("room", "a rectangular room, one corner at the origin, walls on the coordinate planes"),
        _kv("size_m", [float(x) for x in size], "length (x), width (y), height (z), m"),
        _kv("absorption", 0.2, "0 rigid .. 1 open; one number or a [room.absorption] table"),
        _kv("reflection_order", 8, "highest number of reflections kept (image sources)"),
        "# The room model is specular image sources with angle-independent reflection: a guide to",
        "# what the room adds, not a measurement.  Measure the built rig ('arrayplan measure').",
    ]
    return tomlkit.dumps(_document(head + [moved(b) for b in body] + room_table + tail))


def write_starter_rig(path: str | os.PathLike, layout: str, *, force: bool = False, next_steps: Sequence[str] = (),
                      **options: Any) -> Path:
    """Write the starter rig of `layout` to `path` atomically; refuse to replace a file unless `force`.

    Parameters
    ----------
    path : str or PathLike
        The rig file to write.
    layout : str
        A key of :data:`LAYOUTS`.
    force : bool
        Replace an existing file.
    next_steps : sequence of str
        As for :func:`starter_rig_text`.
    **options
        The layout's options, as for :func:`starter_rig_text`.

    Returns
    -------
    Path
        The path written.

    Raises
    ------
    InputError
        Bad options, an existing file without `force`, or a folder at
        `path`; nothing is written.
    """
    path = Path(path)
    if path.exists() and not force:
        raise InputError("already exists; not replaced", source=str(path),
                         fix="choose another `out` or add `force`")
    if path.is_dir():
        raise InputError("is a folder", source=str(path), fix="give a file name such as rig.toml")
    text = starter_rig_text(layout, file_name=path.name, next_steps=next_steps, **options)
    return write_text_atomic(path, text)
