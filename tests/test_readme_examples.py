"""Every worked example in the README runs.

The README marks its runnable examples as ```sh blocks (synopses of a
command's options are plain ``` blocks).  Each sh block's commands run in
order, in a scratch copy of the demos, through ``python -m arrayplan``, so an
example whose options or files drift from the program fails here.  A command
may end with 0 (done) or 1 (a verdict such as "some channels fail"): the
README says which of its examples are meant to show a failure; 2 (bad input)
or a traceback is always a drifted example.
"""

from __future__ import annotations

import os
import re
import shlex
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from helpers import ARRAYPLAN_COMMAND

ROOT = Path(__file__).resolve().parents[1]
README = ROOT / "README.md"


def readme_commands(text: str) -> list[str]:
    """The commands of the README's ```sh blocks, in order, continuation lines joined."""
    commands = []
    for block in re.findall(r"^```sh\n(.*?)^```", text, flags=re.S | re.M):
        for line in block.replace("\\\n", " ").splitlines():
            line = line.split(" #", 1)[0].strip() if not line.lstrip().startswith("#") else ""
            if line:
                commands.append(line)
    return commands


def test_the_readme_has_runnable_examples():
    commands = readme_commands(README.read_text(encoding="utf-8"))
    assert len(commands) >= 8
    assert all(c.startswith(("arrayplan ", "bash demos/")) for c in commands), \
        [c for c in commands if not c.startswith(("arrayplan ", "bash demos/"))]


def test_every_readme_example_runs(tmp_path):
    shutil.copytree(ROOT / "demos", tmp_path / "demos")
    shutil.copytree(ROOT / "calibration", tmp_path / "calibration")
    env = {k: v for k, v in os.environ.items() if k not in ("ARRAYPLAN_PROGRESS",)}
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT)] + [p for p in env.get("PYTHONPATH", "").split(os.pathsep) if p])
    env["ARRAYPLAN"] = f"{sys.executable} -m arrayplan"
    for command in readme_commands(README.read_text(encoding="utf-8")):
        words = shlex.split(command)
        if words[0] == "arrayplan":
            argv = [*ARRAYPLAN_COMMAND, *words[1:]]
        else:  # bash demos/... walkthrough scripts
            argv = words
        done = subprocess.run(argv, cwd=tmp_path, env=env, capture_output=True, text=True, timeout=600,
                              stdin=subprocess.DEVNULL)
        assert done.returncode in (0, 1) and "Traceback" not in done.stderr, \
            f"README example failed ({done.returncode}): {command}\n{done.stderr[-2000:]}"
