"""The ``arrayplan`` command line: one sub-command per module in :mod:`arrayplan.commands`.

Each command module defines ``register(subparsers)``, which adds its parser
and sets ``run=<function(args) -> int>`` as a default.  Errors caused by the
user's input are printed as one line and give exit status 2; no traceback.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
from typing import Sequence

from ._version import __version__
from .errors import ArrayplanError

__all__ = ["main", "build_parser"]

#: Command modules, in the order they are listed in ``arrayplan --help``: the order of the work.
COMMAND_MODULES = (
    "arrayplan.commands.new_rig",
    "arrayplan.commands.check_rig",
    "arrayplan.commands.plan",
    "arrayplan.commands.field",
    "arrayplan.commands.filters",
    "arrayplan.commands.signals",
    "arrayplan.commands.devices",
    "arrayplan.commands.calibrate",
    "arrayplan.commands.measure",
    "arrayplan.commands.deconvolve",
    "arrayplan.commands.irset",
    "arrayplan.commands.verify",
    "arrayplan.commands.study",
    "arrayplan.commands.compare",
    "arrayplan.commands.report",
)


_FIRST_RUN = """\
The commands are listed in the order of the work.  A first run:
  arrayplan new-rig --list                        the starter layouts
  arrayplan new-rig facing-lines --out rig.toml   a commented rig file to edit
  arrayplan check-rig rig.toml                    every problem, in plain words
  arrayplan plan rig.toml --out project/plan      channels, weights, figures
  arrayplan report project                        one HTML page of it all
Every step on the demo rig, measurement simulated: bash demos/workshop-link/walkthrough.sh
Measuring plays loud signals through real loudspeakers: read the caution 'measure' prints."""


class _OneLineParser(argparse.ArgumentParser):
    """An ArgumentParser whose usage errors are a single line, exit status 2."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.exit(2, f"{self.prog}: error: {message} (see '{self.prog} --help')\n")


def build_parser() -> argparse.ArgumentParser:
    """The top-level parser with every sub-command registered."""
    parser = _OneLineParser(
        prog="arrayplan",
        description="Plan the independent channels of loudspeaker and microphone arrays, "
                    "turn them into filters and test signals, measure the rig, verify the plan.",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog=_FIRST_RUN,
    )
    parser.add_argument("--version", action="version", version=f"arrayplan {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_OneLineParser)
    sub.required = True
    for name in COMMAND_MODULES:
        importlib.import_module(name).register(sub)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line with `argv` (default ``sys.argv[1:]``); return the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        status = int(args.run(args) or 0)
        sys.stdout.flush()                   # a closed pipe shows up here, not at interpreter exit
        return status
    except ArrayplanError as exc:
        text = exc.one_line() if hasattr(exc, "one_line") else " ".join(str(exc).split())
        print(f"arrayplan {args.command}: error: {text}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"arrayplan {args.command}: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # stdout went to a reader that stopped early (| head): not an error of ours; silence the
        # interpreter's flush at exit (Python documentation, "Note on SIGPIPE", signal module)
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 141


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
