"""One naming style for options: units in the names, defaults in --help, old spellings for one release.

Checks of the command line's own conventions (common practice, no source):
every renamed option still parses under its old spelling, to the same value,
with one note naming the new option; the README lists every renamed option;
every default shows in ``--help``; usage errors point to the sub-command's help.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import pytest

import arrayplan.cli as cli
from arrayplan.commands._args import renamed_options

README = Path(__file__).resolve().parents[1] / "README.md"


def _parsers(parser: argparse.ArgumentParser, words: tuple[str, ...] = ()):
    """Every (sub-)command parser with the words that select it."""
    yield words, parser
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                yield from _parsers(sub, words + (name,))


def _renamed() -> list[tuple[tuple[str, ...], str, str]]:
    return [(words, old, new) for words, p in _parsers(cli.build_parser()) for old, new in renamed_options(p).items()]


RENAMED = _renamed()


def _values(action: argparse.Action) -> list[str]:
    """A value every typed option here accepts ("2": a positive number, a count, a channel, an in-range level)."""
    if action.nargs == 0:
        return []
    if action.choices:
        return [str(next(iter(action.choices)))]
    n = action.nargs if isinstance(action.nargs, int) else 1
    return ["2"] * n


def _required_argv(parser: argparse.ArgumentParser, skip: argparse.Action) -> list[str]:
    """The positionals and required options of `parser` (except `skip`), filled with plain values."""
    argv: list[str] = []
    for a in parser._actions:
        if a is skip or isinstance(a, argparse._SubParsersAction):
            continue
        if not a.option_strings:
            argv += ["x"]
        elif a.required:
            argv += [a.option_strings[0], *_values(a)]
    return argv


def test_every_command_parser_is_found_and_some_options_were_renamed():
    commands = {w for w, _ in ((words, p) for words, p in _parsers(cli.build_parser())) if w}
    assert ("signal", "noise") in commands and ("measure",) in commands
    assert {old for _, old, _ in RENAMED} >= {"--f1", "--rate", "--ir-s", "--min-pnr-db", "--sensitivity-db-spl"}


@pytest.mark.parametrize("words, old, new", RENAMED, ids=[f"{' '.join(w)} {o}" for w, o, _ in RENAMED])
def test_old_spelling_parses_to_the_new_option_with_one_note(words, old, new, capsys):
    top = cli.build_parser(words[:1])
    parser = dict(_parsers(top))[words]
    action = parser._option_string_actions[new]
    base = [*words, *_required_argv(parser, action)]
    value = _values(action)
    new_args = top.parse_args(base + [new, *value])
    assert capsys.readouterr().err == ""
    old_args = top.parse_args(base + [old, *value])
    err = capsys.readouterr().err.strip().splitlines()
    assert vars(old_args) == vars(new_args)
    assert len(err) == 1 and f"{old} is now {new}" in err[0] and err[0].startswith(f"arrayplan {' '.join(words)}")
    assert old not in parser.format_help().split()       # hidden from --help


def test_readme_lists_every_renamed_option():
    text = README.read_text(encoding="utf-8")
    table = text[text.index("### Renamed options"):]
    table = table[:table.index("\n## ")]
    for words, old, new in RENAMED:
        row = next((line for line in table.splitlines() if line.startswith(f"| `{old}` | `{new}` |")), None)
        assert row is not None, (old, new)
        assert f"`{' '.join(words)}`" in row or f"`{words[0]}`" in row, (words, row)


def test_every_default_shows_in_help():
    for words, parser in _parsers(cli.build_parser()):
        formatter = parser._get_formatter()
        for a in parser._actions:
            if a.option_strings and a.default not in (None, False, argparse.SUPPRESS) and not a.required \
                    and a.help not in (None, argparse.SUPPRESS) and a.dest not in ("help", "version"):
                assert "default" in formatter._expand_help(a), (words, a.option_strings)


def test_library_defaults_reach_help():
    from arrayplan.hardware.measure import MeasurementSettings
    from arrayplan.signals.sweeps import SweepSettings

    measure = " ".join(dict(_parsers(cli.build_parser(["measure"])))[("measure",)].format_help().split())
    assert f"(default: {MeasurementSettings().ir_s:g})" in measure
    sweep = " ".join(dict(_parsers(cli.build_parser(["signal"])))[("signal", "sweep")].format_help().split())
    assert f"start frequency, Hz (default: {SweepSettings().f1_hz:g})" in sweep


def test_noise_help_speaks_of_noise_not_sweeps():
    noise = dict(_parsers(cli.build_parser(["signal"])))[("signal", "noise")].format_help()
    assert "sweep duration" not in noise and "noise duration" in " ".join(noise.split())


def test_sub_command_usage_error_points_to_its_own_help(capsys):
    assert cli.main(["signal", "sweep", "--out", "x.wav", "--no-such-option"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].endswith("(see 'arrayplan signal sweep --help')")


def test_listener_distances_are_space_separated_and_default_to_1_m(capsys):
    parser = cli.build_parser(["signal"])
    assert parser.parse_args(["signal", "sweep", "--out", "x.wav"]).listener_distance_m == [1.0]
    spaced = parser.parse_args(["signal", "sweep", "--out", "x.wav", "--listener-distance-m", "1.5", "3"])
    assert spaced.listener_distance_m == [1.5, 3.0] and capsys.readouterr().err == ""
    commas = parser.parse_args(["signal", "sweep", "--out", "x.wav", "--listener-distance-m", "1.5,3"])
    assert commas.listener_distance_m == [1.5, 3.0]
    assert "space-separated (1.5 3)" in capsys.readouterr().err
    measure = cli.build_parser(["measure"]).parse_args(["measure", "rig.toml", "--out", "m",
                                                        "--listener-distance-m", "2", "4"])
    assert measure.listener_distance_m == [2.0, 4.0]
