"""Argument types shared by every command: each kind of value is checked in one place, when parsed.

Every type raises :class:`argparse.ArgumentTypeError` with the bad value
quoted; argparse puts the flag in front (``argument --at-m: must be a finite
number, got 'nan'``) and the command-line parser prints that one line and
exits with status 2.
"""

from __future__ import annotations

import argparse
import math
import os
import re
import sys
from typing import Any, Callable

from ..errors import InputError
from ..limits import MAX_CHANNEL_NUMBER

__all__ = ["csv_names", "octaves", "finite_float", "positive_float", "nonnegative_float", "float_in",
           "dbfs_level", "count", "nonnegative_count", "channel_number", "MAX_CHANNEL_NUMBER", "MAX_COUNT",
           "add_measured_kernel_options", "measured_kernel_from_args", "add_memory_limit",
           "text_with_flags", "error_with_flags", "say", "command_parser", "parameter_flags",
           "DefaultsShown", "accept_old_spelling", "renamed_options", "positive_floats", "FlatList",
           "add_sweep_options", "add_exposure_options", "add_frequencies_option", "command_description",
           "add_command_group", "add_output_folder_options", "add_plan_or_rig_argument"]

#: Highest count any option accepts before a command's own size estimate (repeats, bursts, channels...).
MAX_COUNT = 1_000_000


def _number(text: str) -> float:
    try:
        return float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None


def finite_float(text: str) -> float:
    """A finite number (argparse type): NaN and infinities are refused."""
    v = _number(text)
    if not math.isfinite(v):
        raise argparse.ArgumentTypeError(f"must be a finite number, got {text!r}")
    return v


def positive_float(text: str) -> float:
    """A finite number above zero (argparse type)."""
    v = finite_float(text)
    if not v > 0:
        raise argparse.ArgumentTypeError(f"must be above 0, got {text!r}")
    return v


def nonnegative_float(text: str) -> float:
    """A finite number, zero or above (argparse type)."""
    v = finite_float(text)
    if v < 0:
        raise argparse.ArgumentTypeError(f"must be zero or a positive number, got {text!r}")
    return v


def float_in(low: float, high: float, unit: str = "") -> Callable[[str], float]:
    """An argparse type: a finite number in ``[low, high]`` (`unit` is only for the message)."""
    suffix = f" {unit}" if unit else ""

    def parse(text: str) -> float:
        v = finite_float(text)
        if not low <= v <= high:
            raise argparse.ArgumentTypeError(f"must be between {low:g} and {high:g}{suffix}, got {text!r}")
        return v

    parse.__name__ = f"number in {low:g}..{high:g}"
    return parse


#: Quietest level accepted, dBFS (far below anything a 32-bit float file holds usefully).
MIN_DBFS = -300.0


def dbfs_level(text: str) -> float:
    """A level re digital full scale, -300 to 0 dBFS: above 0 dBFS would clip (argparse type)."""
    v = finite_float(text)
    if v > 0:
        raise argparse.ArgumentTypeError(f"levels above 0 dBFS would clip, got {text!r}")
    if v < MIN_DBFS:
        raise argparse.ArgumentTypeError(f"must be at least {MIN_DBFS:g} dBFS, got {text!r}")
    return v


def _whole_number(minimum: int, maximum: int, what: str = "a whole number") -> Callable[[str], int]:
    """An argparse type: a whole number from `minimum` to `maximum`."""

    def parse(text: str) -> int:
        try:
            v = int(text.strip())
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected {what}, got {text!r}") from None
        if not minimum <= v <= maximum:
            raise argparse.ArgumentTypeError(f"must be {what} from {minimum} to {maximum}, got {text!r}")
        return v

    parse.__name__ = what
    return parse


def count(maximum: int = MAX_COUNT) -> Callable[[str], int]:
    """An argparse type: a whole number from 1 to `maximum`."""
    return _whole_number(1, maximum)


def nonnegative_count(maximum: int = MAX_COUNT) -> Callable[[str], int]:
    """An argparse type: a whole number from 0 to `maximum` (samples, dropouts, seeds...)."""
    return _whole_number(0, maximum)


#: A 1-based hardware or file channel number, 1 to :data:`MAX_CHANNEL_NUMBER` (argparse type).
channel_number = _whole_number(1, MAX_CHANNEL_NUMBER, "a 1-based channel number")


def csv_names(text: str) -> list[str]:
    """A comma-separated list of unique, non-empty names (argparse type)."""
    names = [v.strip() for v in text.split(",")]
    if not all(names):
        raise argparse.ArgumentTypeError(f"empty name in {text!r}")
    if len(set(names)) != len(names):
        raise argparse.ArgumentTypeError(f"names must be unique, got {text!r}")
    return names


def octaves(text: str) -> float:
    """A band width in octaves, as a number (0.333) or a fraction (1/3), above 0 and at most 2 (argparse type)."""
    try:
        if "/" in text:
            num, den = text.split("/", 1)
            value = float(num) / float(den)
        else:
            value = float(text)
    except (ValueError, ZeroDivisionError):
        raise argparse.ArgumentTypeError(f"expected a width in octaves like 1/3 or 0.333, got {text!r}") from None
    if not (math.isfinite(value) and 0 < value <= 2):
        raise argparse.ArgumentTypeError(f"must be above 0 and at most 2 octaves (e.g. 1/3), got {text!r}")
    return value


def positive_floats(text: str) -> list[float]:
    """One or more positive numbers (argparse type, for ``nargs="+"``): ``2`` gives ``[2.0]``.

    The comma form (``1,2.5``) of earlier releases is still read, with a note
    on stderr; :class:`FlatList` joins the values of all words into one list.
    """
    parts = [v for v in text.split(",") if v.strip()]
    if not parts:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}")
    if len(parts) > 1:
        print(f"arrayplan: note: comma-separated values ({text!r}) are read for one more release; "
              f"give them space-separated ({' '.join(p.strip() for p in parts)})", file=sys.stderr)
    return [positive_float(v) for v in parts]


#: Most values a list option takes.
MAX_LIST_VALUES = 10_000


class FlatList(argparse.Action):
    """Store the values of an ``nargs="+"`` option whose type gives lists, as one flat list (at most
    :data:`MAX_LIST_VALUES`)."""

    def __call__(self, parser, namespace, values, option_string=None):
        flat = [v for group in values for v in group]
        if len(flat) > MAX_LIST_VALUES:
            parser.error(f"argument {option_string}: expected at most {MAX_LIST_VALUES} values, got {len(flat)}")
        setattr(namespace, self.dest, flat)


# ----------------------------------------------------------------------------- help and old spellings

class DefaultsShown(argparse.HelpFormatter):
    """Help formatter that shows every option's default: ``(default: 48000)``.

    Options without a value of their own (None, flags that are off) and help
    texts that already state their default are left as they are.
    """

    def _get_help_string(self, action: argparse.Action) -> str:
        text = action.help or ""
        default = action.default
        if ("default" in text or not action.option_strings or default in (None, False, argparse.SUPPRESS)
                or action.required):
            return text
        return f"{text} (default: {_shown(default).replace('%', '%%')})"


def _shown(value: Any) -> str:
    """A default as the user types it: ``48000``, ``0.5``, ``1 2`` for a list."""
    if isinstance(value, (list, tuple)):
        return " ".join(_shown(v) for v in value)
    return f"{value:g}" if isinstance(value, float) else str(value)


_RENAMED_CLASSES: dict[type, type] = {}


def _renamed_class(base: type) -> type:
    """`base` (an argparse action class) that prints a note when called by one of its old spellings."""
    if base not in _RENAMED_CLASSES:
        def __call__(self, parser, namespace, values, option_string=None):
            if option_string in self.old_spellings:
                noted = parser.__dict__.setdefault("_old_spellings_noted", set())
                if option_string not in noted:
                    noted.add(option_string)
                    print(f"{parser.prog}: note: {option_string} is now {max(self.option_strings, key=len)}; "
                          "the old spelling is accepted until the next release", file=sys.stderr)
            base.__call__(self, parser, namespace, values, option_string)

        _RENAMED_CLASSES[base] = type(f"Renamed{base.__name__}", (base,), {"__call__": __call__})
    return _RENAMED_CLASSES[base]


def accept_old_spelling(parser: argparse.ArgumentParser, new: str, *old: str) -> argparse.Action:
    """Accept the old spellings `old` of `parser`'s option `new` for one release, hidden from ``--help``.

    The old spelling sets the same value (a required option given by its old
    name counts as given) and prints one note on stderr naming `new`.

    Parameters
    ----------
    parser : argparse.ArgumentParser
        The (sub-)command's parser; `new` may sit in one of its argument groups.
    new : str
        The option as it is spelt now, e.g. ``"--rate-hz"``.
    *old : str
        Its spellings of earlier releases, e.g. ``"--rate"``.

    Returns
    -------
    argparse.Action
        The action of `new`, now also reached by `old`.
    """
    action = parser._option_string_actions[new]     # shared by the parser and its argument groups
    for name in old:
        if name in parser._option_string_actions:
            raise ValueError(f"{name} is already an option")
        parser._option_string_actions[name] = action
    action.old_spellings = tuple(getattr(action, "old_spellings", ())) + old
    if type(action) not in _RENAMED_CLASSES.values():
        action.__class__ = _renamed_class(type(action))
    return action


def renamed_options(parser: argparse.ArgumentParser) -> dict[str, str]:
    """Old spelling -> new option of `parser` (not its sub-commands)."""
    return {name: max(a.option_strings, key=len) for name, a in parser._option_string_actions.items()
            if name not in a.option_strings}


def command_description(doc: str) -> str:
    """A command's ``--help`` description: the second paragraph of its module's docstring, on one line."""
    return " ".join(doc.split("\n\n")[1].split())


def add_command_group(sub: argparse._SubParsersAction, name: str, doc: str, *, dest: str, metavar: str,
                      **defaults: Any) -> argparse._SubParsersAction:
    """A command made of sub-commands (``arrayplan study ...``); returns the action that takes them.

    Parameters
    ----------
    sub : argparse._SubParsersAction
        Where the command is added.
    name : str
        The command's name.
    doc : str
        The command module's docstring; its second paragraph is the description.
    dest, metavar : str
        Attribute that receives the sub-command's name, and its placeholder in the usage line.
    **defaults
        Attributes every sub-command's namespace gets (``run=...``), as ``set_defaults``.

    Returns
    -------
    argparse._SubParsersAction
        Add the sub-commands to it; one of them is required.
    """
    p = sub.add_parser(name, description=command_description(doc))
    p.set_defaults(**defaults)
    actions = p.add_subparsers(dest=dest, metavar=metavar, parser_class=type(p))
    actions.required = True
    return actions


def add_plan_or_rig_argument(p: argparse.ArgumentParser) -> None:
    """The ``source`` positional of the studies: a plan folder or a rig file that they plan themselves."""
    p.add_argument("source", metavar="PLAN_DIR|RIG", help="plan folder (from 'arrayplan plan') or rig file (TOML)")


def add_output_folder_options(p: argparse.ArgumentParser, tables_only: str = "write tables only") -> None:
    """``--out`` (a new folder, published whole) and ``--no-figures`` (its help says what is still written)."""
    p.add_argument("--out", required=True, help="output folder (created; files written atomically)")
    p.add_argument("--no-figures", action="store_true", help=tables_only)


def add_memory_limit(p: argparse.ArgumentParser) -> None:
    """The ``--max-memory-gib`` option: lifts the size estimate's limit (:mod:`arrayplan.limits`)."""
    from ..limits import DEFAULT_MAX_MEMORY_GIB

    p.add_argument("--max-memory-gib", type=positive_float, default=None, metavar="GIB",
                   help=f"refuse work whose estimated memory exceeds this (GiB, default {DEFAULT_MAX_MEMORY_GIB:g})")


def add_frequencies_option(p: argparse.ArgumentParser, what: str, default: str) -> None:
    """``--freq-hz``, repeatable: the frequencies a command works at (``args.freq``, a list or None).

    ``--freq`` (earlier releases) is read too.

    Parameters
    ----------
    p : argparse.ArgumentParser
        The command's parser.
    what : str
        What happens at the frequency, for the help ("plan", "score").
    default : str
        Where the frequencies come from without the option, for the help.
    """
    p.add_argument("--freq-hz", dest="freq", type=positive_float, action="append", metavar="HZ",
                   help=f"{what} at this frequency, Hz (repeatable; default: {default})")
    accept_old_spelling(p, "--freq-hz", "--freq")


def add_sweep_options(p: argparse.ArgumentParser, *, f1_hz: float, duration_s: float, what: str = "sweep",
                      title: str | None = None) -> argparse._ArgumentGroup:
    """The band and duration of a sweep or noise: ``--f1-hz``, ``--f2-hz``, ``--duration-s``.

    Parameters
    ----------
    p : argparse.ArgumentParser
        The command's parser.
    f1_hz, duration_s : float
        Defaults, Hz and s: pass the library's settings (``SweepSettings()``,
        ``MeasurementSettings()``) so that ``--help`` shows what the library uses.
    what : str
        The signal, for the help texts ("sweep", "noise").
    title : str, optional
        Title of the argument group (default: `what`).

    Returns
    -------
    argparse._ArgumentGroup
        The group, for the command's own options of the same kind.
    """
    g = p.add_argument_group(title or what)
    low, high = ("start", "end") if what == "sweep" else ("lowest", "highest")
    g.add_argument("--f1-hz", type=positive_float, default=f1_hz, metavar="HZ", help=f"{low} frequency, Hz")
    g.add_argument("--f2-hz", type=positive_float, metavar="HZ",
                   help=f"{high} frequency, Hz (default: 20000 or 0.45 x the sample rate if lower)")
    g.add_argument("--duration-s", type=positive_float, default=duration_s, metavar="S",
                   help=f"{what} duration without padding, s")
    return g


def add_exposure_options(p: argparse.ArgumentParser, title: str, amp_help: str) -> argparse._ArgumentGroup:
    """The sound-level estimate's inputs: speaker rating, amplifier voltage, listener distances, ``--allow-loud``.

    The rating's voltage and the listeners' distance default to the library's
    (:data:`arrayplan.safety.exposure_estimate.RATING_VRMS`,
    :data:`arrayplan.safety.exposure_estimate.DEFAULT_LISTENER_DISTANCE_M`).

    Parameters
    ----------
    p : argparse.ArgumentParser
        The command's parser.
    title : str
        Title of the argument group.
    amp_help : str
        Help of ``--amp-vrms`` (where its default comes from differs by command).

    Returns
    -------
    argparse._ArgumentGroup
        The group, for the command's own options of the same kind.
    """
    from ..safety.exposure_estimate import DEFAULT_LISTENER_DISTANCE_M, RATING_VRMS

    g = p.add_argument_group(title)
    g.add_argument("--speaker-sensitivity-db-spl", type=float_in(0.0, 200.0, "dB SPL"), metavar="DB",
                   help="speaker sensitivity, dB SPL at 1 m for --sensitivity-vrms volts")
    g.add_argument("--sensitivity-vrms", type=positive_float, default=RATING_VRMS, metavar="V",
                   help="drive voltage of that rating, V RMS; 2.83 V is 1 W into 8 ohm")
    g.add_argument("--amp-vrms", type=positive_float, metavar="V", help=amp_help)
    g.add_argument("--listener-distance-m", type=positive_floats, nargs="+", action=FlatList,
                   default=[DEFAULT_LISTENER_DISTANCE_M],
                   metavar="M", help="distance of each person present from the speakers, m, space-separated")
    g.add_argument("--allow-loud", action="store_true",
                   help="go ahead even when the estimate exceeds the exposure caps (hearing protection in place)")
    return g


def add_measured_kernel_options(p: argparse.ArgumentParser, prefix: str = "") -> None:
    """The options that shape coupling matrices taken from impulse responses (plan --irset, verify)."""
    p.add_argument("--window-ms", type=positive_float, metavar="MS",
                   help=f"{prefix}keep this much of each response after zero lag (ms); the last quarter is a "
                        "half-Hann fade-out, which drops the late room response")
    p.add_argument("--latency-samples", type=nonnegative_count(), default=0, metavar="N",
                   help=f"{prefix}common latency to remove first (samples, default 0)")
    p.add_argument("--smooth-octaves", type=octaves, metavar="B",
                   help=f"{prefix}complex-smooth each response over B octaves (e.g. 1/3) about its own direct "
                        "arrival: reflections and noise average out, the direct sound and its phase stay")


def measured_kernel_from_args(irs, args: argparse.Namespace):
    """A :class:`~arrayplan.kernels.measured.MeasuredKernel` from the options above (checked when parsed)."""
    from ..kernels.measured import MeasuredKernel

    return MeasuredKernel(irs, window_s=None if args.window_ms is None else args.window_ms / 1000.0,
                          latency_samples=args.latency_samples, smoothing_octaves=args.smooth_octaves)


# ----------------------------------------------------------------------------- library names -> flags

#: A library parameter named in a message's text: ```f2_hz```.
_PARAMETER = re.compile(r"`([A-Za-z_][A-Za-z0-9_]*)`")
#: A parameter given as a message's field or source, optionally indexed: ``freqs_hz[3]``.
_FIELD = re.compile(r"([A-Za-z_][A-Za-z0-9_]*)(\[[^\]]*\])?")


def command_parser(parser: argparse.ArgumentParser, args: argparse.Namespace) -> argparse.ArgumentParser:
    """The (sub-)parser that parsed `args`: ``signal sweep`` gives the parser of ``sweep``."""
    current = parser
    while True:
        subs = [a for a in current._actions if isinstance(a, argparse._SubParsersAction)]
        if not subs or getattr(args, subs[0].dest, None) is None:
            return current
        current = subs[0].choices[getattr(args, subs[0].dest)]


def parameter_flags(parser: argparse.ArgumentParser, args: argparse.Namespace) -> dict[str, str]:
    """Library parameter name -> this command's flag: every option by its dest, then the command's own map.

    A command whose flags differ from the library's parameter names sets
    ``parameter_flags={"sample_rate_hz": "--rate-hz", ...}`` as a parser default.
    """
    flags = {a.dest: max(a.option_strings, key=len) for a in command_parser(parser, args)._actions
             if a.option_strings and a.dest not in ("help", "version")}
    flags.update(getattr(args, "parameter_flags", None) or {})
    return flags


def error_with_flags(error: InputError, flags: dict[str, str]) -> str:
    """The one-line message of `error` with the library's parameter names given as the command's flags.

    Parameters named in the text (```f2_hz```) become flags (``--f2-hz``) or, where
    the command has none, the bare name.  A field or source that is a parameter
    name (``f2_hz``, ``peak_dbfs/rms_dbfs``, ``freqs_hz[2]``) becomes the flag,
    unless the error names a file: its fields are the file's own.
    """
    def text(value: str | None) -> str | None:
        return None if value is None else text_with_flags(value, flags)

    def names(value: str | None) -> str | None:
        if value is None:
            return None
        pieces = []
        for piece in re.split(r"([/,])", value):
            m = _FIELD.fullmatch(piece.strip())
            pieces.append(flags[m.group(1)] + (m.group(2) or "") if m and m.group(1) in flags else piece)
        return text("".join(pieces))

    from_file = error.source is not None and error.source not in flags and (
        os.sep in error.source or "." in error.source or os.path.exists(error.source))
    field = text(error.field) if from_file else names(error.field)
    source = error.source if from_file else names(error.source)
    return InputError(text(error.problem) or "", source=source, field=field, fix=text(error.fix)).one_line()


def text_with_flags(text: str, flags: dict[str, str]) -> str:
    """`text` with each library parameter named in it (```f2_hz```) given as its flag, else as its bare name."""
    return _PARAMETER.sub(lambda m: flags.get(m.group(1), m.group(1)), text)


def say(text: str, args: argparse.Namespace) -> str:
    """A library message (a warning) as this command's user reads it: parameters named by their flags."""
    return text_with_flags(text, getattr(args, "flag_names", None) or {})
