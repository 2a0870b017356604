"""``arrayplan new-rig``: write a commented starter rig file for a chosen layout."""

from __future__ import annotations

import argparse

from ..errors import InputError
from ._args import accept_old_spelling, count, float_in, positive_float
from ..rig import load_rig
from ..rigcheck import check_rig_file
from ..rig.starter import LAYOUTS, write_starter_rig


def _count_or_grid(text: str) -> int | str:
    """A whole number ("8") or grid counts ("4x6"), each at most 100000 (argparse type)."""
    parts = text.strip().lower().split("x")
    if not (1 <= len(parts) <= 2 and all(p.strip().isdigit() for p in parts)):
        raise argparse.ArgumentTypeError(f"expected a count like 8 or grid counts like 4x6, got {text!r}")
    if not all(1 <= int(p) <= 100_000 for p in parts):
        raise argparse.ArgumentTypeError(f"counts must be 1 to 100000, got {text!r}")
    return int(parts[0]) if len(parts) == 1 else text.strip()


#: The "Next:" comment of a starter rig file ({file}: its name).
NEXT_STEPS = ("arrayplan check-rig {file}             explains any problem before you mount hardware",
              "arrayplan plan {file} --out plan/      channels per frequency: counts, weights, figures")


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("new-rig",
                       description="Write a rig file (TOML) for one of the starter layouts, every key commented, "
                                   "ready for 'arrayplan check-rig' and 'arrayplan plan'. Options a layout does "
                                   "not take are refused; see --list.")
    p.add_argument("layout", nargs="?", metavar="LAYOUT", help=f"one of: {', '.join(LAYOUTS)}")
    p.add_argument("--list", action="store_true", help="list the layouts, one line each, and exit")
    p.add_argument("--out", metavar="FILE", help="rig file to write (refused if it exists, unless --force)")
    p.add_argument("--force", action="store_true", help="replace --out if it exists")
    g = p.add_argument_group("layout options (defaults depend on the layout; see --list)")
    g.add_argument("--speakers", type=_count_or_grid, metavar="N|NxM", help="number of speakers (grids: 4x4)")
    g.add_argument("--mics", type=_count_or_grid, metavar="N|NxM", help="number of microphones (grids: 4x4)")
    for key, flag, kind, metavar, text in _LAYOUT_OPTIONS:
        g.add_argument(flag, dest=key, type=kind, metavar=metavar, help=text)
    g.add_argument("--name", help="rig name (default: the layout's)")
    g.add_argument("--room", metavar="LxWxH",
                   help="centre the layout in a rectangular room of this size, m (adds a [room] table)")
    for key, old in _OLD_FLAGS.items():
        accept_old_spelling(p, _FLAGS[key], old)
    p.set_defaults(run=run, parameter_flags={"temperature": "--temperature-c"})   # the starter's name in its messages


#: The layout options that take a number: the starter's parameter, its flag, type, metavar and help.
_LAYOUT_OPTIONS = (
    ("spacing", "--spacing-m", positive_float, "M", "speaker spacing, m"),
    ("mic_spacing", "--mic-spacing-m", positive_float, "M", "microphone spacing, m"),
    ("distance", "--distance-m", positive_float, "M", "distance from speakers to microphones, m"),
    ("radius", "--radius-m", positive_float, "M", "radius of a ring of speakers, m"),
    ("zone_separation", "--zone-separation-m", positive_float, "M", "centre-to-centre distance of two zones, m"),
    ("fmin", "--fmin-hz", positive_float, "HZ", "lowest planned frequency, Hz (default: top / 8)"),
    ("fmax", "--fmax-hz", positive_float, "HZ",
     "highest planned frequency, Hz (default: the highest the spacing samples, d <= lambda/2)"),
    ("freq_count", "--freq-count", count(100_000), "N", "number of planned frequencies (default: 48)"),
    ("temperature_c", "--temperature-c", float_in(-100.0, 100.0, "°C"), "C", "air temperature, °C (default: 20)"),
    ("speed_of_sound", "--speed-of-sound-m-s", float_in(1.0, 10000.0, "m/s"), "M_PER_S",
     "speed of sound instead of temperature, m/s"),
)
#: Flag of each layout option, by the starter's parameter name (for --list and messages).
_FLAGS = {key: flag for key, flag, *_ in _LAYOUT_OPTIONS}
#: Spellings of earlier releases, accepted for one more with a note.
_OLD_FLAGS = {"spacing": "--spacing", "mic_spacing": "--mic-spacing", "distance": "--distance", "radius": "--radius",
              "zone_separation": "--zone-separation", "fmin": "--fmin", "fmax": "--fmax",
              "temperature_c": "--temperature", "speed_of_sound": "--speed-of-sound"}


def _list() -> int:
    width = max(len(n) for n in LAYOUTS)
    for name, lay in LAYOUTS.items():
        opts = ", ".join(f"{_FLAGS.get(k, '--' + k.replace('_', '-'))} {v}" for k, v in lay.defaults.items()
                         if v is not None)
        print(f"{name.ljust(width)}  {lay.summary} [{opts}]")
    return 0


def run(args: argparse.Namespace) -> int:
    if args.list:
        return _list()
    if not args.layout:
        raise InputError("no layout given", source="LAYOUT",
                         fix=f"choose one of {', '.join(LAYOUTS)} (see 'arrayplan new-rig --list')")
    if not args.out:
        raise InputError("no output file given", source="--out", fix="add --out rig.toml")
    options = {key: getattr(args, key) for key in ("speakers", "mics", *_FLAGS, "name", "room")}
    path = write_starter_rig(args.out, args.layout, force=args.force, next_steps=NEXT_STEPS, **options)
    rig = load_rig(path)
    hz = rig.frequencies.hz if rig.frequencies is not None else None
    band = f", {hz[0]:g}..{hz[-1]:g} Hz" if hz is not None else ""
    print(f"wrote {path} ({args.layout}: {len(rig.speakers)} speakers, {len(rig.mics)} microphones{band})")
    for finding in check_rig_file(path):
        print(finding.one_line())
    print(f"next: arrayplan check-rig {path}; arrayplan plan {path} --out plan/")
    return 0
