"""The ``arrayplan`` command line: one sub-command per module in :mod:`arrayplan.commands`.

Each command module defines ``register(subparsers)``, which adds its parser
and sets ``run=<function(args) -> int>`` as a default.  Errors caused by the
user's input are printed as one line and give exit status 2; no traceback.
"""

from __future__ import annotations

import argparse
import importlib
import os
import signal
import sys
import threading
from typing import Sequence

from ._version import __version__
from .commands._args import DefaultsShown, command_parser, error_with_flags, parameter_flags
from .errors import ArrayplanError, InputError

__all__ = ["main", "build_parser"]

#: The commands, in the order ``arrayplan --help`` lists them (the order of the work): name, module,
#: one-line help.  A module is imported only when its command runs (or every parser is wanted), so that
#: ``arrayplan --help`` and ``--version`` start without numpy, scipy or matplotlib.
COMMANDS: tuple[tuple[str, str, str], ...] = (
    ("new-rig", "arrayplan.commands.new_rig",
     "write a commented starter rig file for a chosen layout"),
    ("check-rig", "arrayplan.commands.check_rig",
     "check a rig file and explain every problem in plain words"),
    ("plan", "arrayplan.commands.plan",
     "plan the channels of a rig (counts, strengths, weights, figures)"),
    ("field", "arrayplan.commands.field",
     "map the pressure one channel produces over a plane (PNG + NPY)"),
    ("filters", "arrayplan.commands.filters",
     "write each channel's drive and combine weights as FIR filter files"),
    ("signal", "arrayplan.commands.signals",
     "write safe test signals (sweeps, noise, tones, schedules, probes)"),
    ("devices", "arrayplan.commands.devices",
     "list audio devices and host APIs (PortAudio)"),
    ("calibrate", "arrayplan.commands.calibrate",
     "create or show calibration records (mic sensitivity, output gain, latency)"),
    ("measure", "arrayplan.commands.measure",
     "measure the rig's impulse responses through the audio interface"),
    ("deconvolve", "arrayplan.commands.deconvolve",
     "recordings of a sweep (any recorder) -> impulse responses"),
    ("irset", "arrayplan.commands.irset",
     "convert impulse-response sets to and from AES69 (SOFA) files; summarise one"),
    ("verify", "arrayplan.commands.verify",
     "verify a plan, or the FIR filters made from it, against measured impulse responses"),
    ("study", "arrayplan.commands.study",
     "design studies: questions a plan alone does not answer"),
    ("compare", "arrayplan.commands.compare",
     "compare two or more layouts on the same frequencies (counts, capacity, figures)"),
    ("report", "arrayplan.commands.report",
     "write one self-contained HTML report of a project folder"),
)
#: The command modules, in order.
COMMAND_MODULES = tuple(module for _, module, _ in COMMANDS)


class _WithHelp:
    """The sub-parsers action as a command module sees it: its parser gets the table's one-line help."""

    def __init__(self, sub: argparse._SubParsersAction, help_text: str) -> None:
        self._sub, self._help = sub, help_text

    def add_parser(self, name: str, **kwargs):
        kwargs.setdefault("help", self._help)
        return self._sub.add_parser(name, **kwargs)


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
    """An ArgumentParser whose usage errors are a single line, exit status 2, pointing to the (sub-)command's
    own help; its help shows every option's default."""

    def __init__(self, *args, **kwargs) -> None:
        kwargs.setdefault("formatter_class", DefaultsShown)
        super().__init__(*args, **kwargs)

    def error(self, message: str) -> None:  # type: ignore[override]
        self.exit(2, f"{self.prog}: error: {message} (see '{self.prog} --help')\n")

    def parse_args(self, args=None, namespace=None):  # type: ignore[override]
        """As argparse's, but unknown options are reported by the sub-command that was given them."""
        parsed, extras = self.parse_known_args(args, namespace)
        if extras:
            command_parser(self, parsed).error(f"unrecognized arguments: {' '.join(extras)}")
        return parsed


def build_parser(commands: Sequence[str] | None = None) -> argparse.ArgumentParser:
    """The top-level parser; the sub-commands named in `commands` (default: all) get their full parsers.

    The others are listed with their one-line help only, without importing their modules.
    """
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
    for name, module, help_text in COMMANDS:
        if module not in COMMAND_MODULES:
            continue
        if commands is None or name in commands:
            importlib.import_module(module).register(_WithHelp(sub, help_text))
        else:
            sub.add_parser(name, help=help_text)
    return parser


def _os_error_text(exc: OSError) -> str:
    """One line for an operating-system fault: the path(s) and the cause."""
    cause = exc.strerror or exc.__class__.__name__
    paths = [str(p) for p in (exc.filename, exc.filename2) if p is not None]
    if not paths:
        return " ".join(str(exc).split()) or cause
    return " ".join(f"{' -> '.join(paths)}: {cause}".split())


#: Set once Ctrl-C has been pressed in this process (see :func:`_interrupt`).
_interrupted: list[bool] = []


def _interrupt(signum: int, frame) -> None:
    """SIGINT handler: Python's KeyboardInterrupt, remembered so that an error it turns into is still reported
    as an interruption."""
    _interrupted.append(True)
    raise KeyboardInterrupt


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line with `argv` (default ``sys.argv[1:]``); return the exit status.

    Errors caused by the user's input (:class:`~arrayplan.errors.ArrayplanError`)
    and by the operating system (:class:`OSError`: permissions, missing or
    over-long paths, a full disk) are printed as one line and give exit status 2;
    Ctrl-C, even while the modules are still loading, gives status 130 without
    a traceback.
    """
    command, parser, args = "", None, None
    _interrupted.clear()
    try:
        if threading.current_thread() is threading.main_thread():
            signal.signal(signal.SIGINT, _interrupt)   # Ctrl-C is a KeyboardInterrupt again, and remembered
        words = list(sys.argv[1:] if argv is None else argv)
        wanted = words[0] if words and not words[0].startswith("-") else None
        parser = build_parser([wanted] if wanted else [])
        try:
            args = parser.parse_args(argv)
        except SystemExit as exc:            # --help, --version, or a usage error already printed as one line
            return exc.code if isinstance(exc.code, int) else 2
        command = f" {args.command}"
        args.flag_names = parameter_flags(parser, args)
        from .limits import memory_limit

        with memory_limit(getattr(args, "max_memory_gib", None)):
            status = int(args.run(args) or 0)
        sys.stdout.flush()                   # a closed pipe shows up here, not at interpreter exit
        return status
    except InputError as exc:
        flags = parameter_flags(parser, args) if parser is not None and args is not None else {}
        print(f"arrayplan{command}: error: {error_with_flags(exc, flags)}", file=sys.stderr)
        return 2
    except ArrayplanError as exc:
        text = exc.one_line() if hasattr(exc, "one_line") else " ".join(str(exc).split())
        print(f"arrayplan{command}: error: {text}", file=sys.stderr)
        return 2
    except BrokenPipeError:
        # stdout went to a reader that stopped early (| head): not an error of ours; silence the
        # interpreter's flush at exit (Python documentation, "Note on SIGPIPE", signal module)
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return 141
    except OSError as exc:
        print(f"arrayplan{command}: error: {_os_error_text(exc)}", file=sys.stderr)
        return 2
    except MemoryError:
        print(f"arrayplan{command}: error: out of memory (fix: use smaller sizes)", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"arrayplan{command}: interrupted", file=sys.stderr)
        return 130
    except Exception:
        if not _interrupted:
            raise
        # an interrupt inside a C extension's import can surface as another error (numpy: ImportError)
        print(f"arrayplan{command}: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
