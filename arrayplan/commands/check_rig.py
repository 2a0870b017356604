"""``arrayplan check-rig``: check a rig file and explain each problem in plain words.

List every problem in a rig file at once (syntax, keys, values, positions, CSV files), then what
will go wrong physically (spacing against the wavelength, near field, elements facing away, sample
rate, missing calibration). Exit status 0: no errors; 1: warnings with --strict; 2: errors.
"""

from __future__ import annotations

import argparse

from ..rigcheck import check_rig_file, count_by_severity
from ._args import add_memory_limit, command_description, say


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("check-rig",
                       description=command_description(__doc__))
    p.add_argument("rig", metavar="RIG.toml", help="rig file (TOML)")
    p.add_argument("--strict", action="store_true", help="exit with status 1 when there are warnings")
    add_memory_limit(p)
    p.set_defaults(run=run)


def _plural(n: int, word: str) -> str:
    return f"{n} {word}{'' if n == 1 else 's'}"


def run(args: argparse.Namespace) -> int:
    findings = check_rig_file(args.rig)
    for finding in findings:
        print(say(finding.one_line(), args))
    n = count_by_severity(findings)
    counts = f"{_plural(n['error'], 'error')}, {_plural(n['warning'], 'warning')}, {_plural(n['note'], 'note')}"
    if n["error"]:
        print(f"{args.rig}: {counts}: fix the errors; the rig cannot be planned as it is")
        return 2
    if n["warning"]:
        print(f"{args.rig}: {counts}: the rig loads; read the warnings before you mount hardware")
        return 1 if args.strict else 0
    print(f"{args.rig}: {counts}: ready; next: arrayplan plan {args.rig} --out plan/")
    return 0
