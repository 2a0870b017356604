"""The command line behind a pipe whose reader has gone (``arrayplan ... | head``)."""

from __future__ import annotations

import subprocess
from helpers import ARRAYPLAN_COMMAND


def test_closed_stdout_gives_no_traceback():
    # Python ignores SIGPIPE, so a write to a closed pipe raises BrokenPipeError; the CLI must end
    # quietly as shell tools do (exit status 128 + SIGPIPE = 141; common practice, no source).
    proc = subprocess.Popen(ARRAYPLAN_COMMAND + ["new-rig", "--list"], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE)
    proc.stdout.close()                      # the reader is gone before anything is written
    err = proc.stderr.read().decode()
    code = proc.wait(timeout=60)
    assert "Traceback" not in err and "BrokenPipeError" not in err
    assert code == 141
