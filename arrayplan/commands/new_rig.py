"""``arrayplan new-rig``: write a commented starter rig file for a chosen layout."""

from __future__ import annotations

import argparse

from ..errors import InputError
from ._args import count, float_in, positive_float
from ..rig import load_rig
from ..rigcheck import check_rig_file
from ..starter import LAYOUTS, write_starter_rig


def _count_or_grid(text: str) -> int | str:
    """A whole number ("8") or grid counts ("4x6"), each at most 100000 (argparse type)."""
    parts = text.strip().lower().split("x")
    if not (1 <= len(parts) <= 2 and all(p.strip().isdigit() for p in parts)):
        raise argparse.ArgumentTypeError(f"expected a count like 8 or grid counts like 4x6, got {text!r}")
    if not all(1 <= int(p) <= 100_000 for p in parts):
        raise argparse.ArgumentTypeError(f"counts must be 1 to 100000, got {text!r}")
    return int(parts[0]) if len(parts) == 1 else text.strip()


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
    g.add_argument("--spacing", type=positive_float, metavar="M", help="speaker spacing, m")
    g.add_argument("--mic-spacing", type=positive_float, metavar="M", help="microphone spacing, m")
    g.add_argument("--distance", type=positive_float, metavar="M", help="distance from speakers to microphones, m")
    g.add_argument("--radius", type=positive_float, metavar="M", help="radius of a ring of speakers, m")
    g.add_argument("--zone-separation", type=positive_float, metavar="M",
                   help="centre-to-centre distance of two zones, m")
    g.add_argument("--fmin", type=positive_float, metavar="HZ", help="lowest planned frequency (default: top / 8)")
    g.add_argument("--fmax", type=positive_float, metavar="HZ",
                   help="highest planned frequency (default: the highest the spacing samples, d <= lambda/2)")
    g.add_argument("--freq-count", type=count(100_000), metavar="N", help="number of planned frequencies (default 48)")
    g.add_argument("--temperature", type=float_in(-100.0, 100.0, "°C"), metavar="C",
                   help="air temperature, °C (default 20)")
    g.add_argument("--speed-of-sound", type=float_in(1.0, 10000.0, "m/s"), metavar="M_PER_S",
                   help="speed of sound instead of temperature")
    g.add_argument("--name", help="rig name (default: the layout's)")
    g.add_argument("--room", metavar="LxWxH",
                   help="centre the layout in a rectangular room of this size, m (adds a [room] table)")
    p.set_defaults(run=run, parameter_flags={"temperature_c": "--temperature"})


def _list() -> int:
    width = max(len(n) for n in LAYOUTS)
    for name, lay in LAYOUTS.items():
        opts = ", ".join(f"--{k.replace('_', '-')} {v}" for k, v in lay.defaults.items() if v is not None)
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
    options = {"speakers": args.speakers, "mics": args.mics, "spacing": args.spacing,
               "mic_spacing": args.mic_spacing, "distance": args.distance, "radius": args.radius,
               "zone_separation": args.zone_separation, "fmin": args.fmin, "fmax": args.fmax,
               "freq_count": args.freq_count, "temperature_c": args.temperature,
               "speed_of_sound": args.speed_of_sound, "name": args.name, "room": args.room}
    path = write_starter_rig(args.out, args.layout, force=args.force, **options)
    rig = load_rig(path)
    hz = rig.frequencies.hz if rig.frequencies is not None else None
    band = f", {hz[0]:g}..{hz[-1]:g} Hz" if hz is not None else ""
    print(f"wrote {path} ({args.layout}: {len(rig.speakers)} speakers, {len(rig.mics)} microphones{band})")
    for finding in check_rig_file(path):
        print(finding.one_line())
    print(f"next: arrayplan check-rig {path}; arrayplan plan {path} --out plan/")
    return 0
