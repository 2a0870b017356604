"""Test helper: the options an error message names exist on the command that printed it."""

import re

import arrayplan.cli as cli

#: An option named in a message: ``--rig``, ``--ir-length-s`` (not part of a longer word or path).
FLAG = re.compile(r"(?<![\w-])--[a-z][a-z0-9-]*")


def command_help(capsys, *command: str) -> str:
    """The ``--help`` text of `command` (e.g. ``"signal", "probe"``)."""
    try:
        rc = cli.main([*command, "--help"])
    except SystemExit as stop:      # argparse's own exit, where the command line does not catch it
        rc = stop.code
    text = capsys.readouterr().out
    assert rc == 0 and "usage:" in text
    return text


def assert_flags_exist(capsys, message: str, *command: str) -> None:
    """Every option named in `message` is one of `command`'s options (common practice, no source)."""
    help_text = command_help(capsys, *command)
    for flag in set(FLAG.findall(message)):
        assert re.search(rf"(?<![\w-]){re.escape(flag)}(?![\w-])", help_text), (flag, message)
