"""Shared fixtures.

``audio_server``: a private PulseAudio daemon with an 8-channel null sink
(see tests/audio_server.py), started once per session and only for tests
that ask for it.  Where pulseaudio is not installed those tests are skipped
with the exact reason; under CI (CI=true) they fail instead, because .ci/run
installs it.  No test module may import sounddevice at import time:
PortAudio must be initialised after the daemon is up and PULSE_SERVER set.

``bench_rig``: the invented bench rig file; ``run_arrayplan``: the command line in a child process.
Helpers that tests import by name live in tests/helpers.py, not here.
"""

from __future__ import annotations

import os

import pytest

from audio_server import AudioServer, missing_reason
from helpers import BENCH_RIG_TOML, run_arrayplan_process

#: Channels of the null sink used by the real-audio tests.
AUDIO_SERVER_CHANNELS = 8


@pytest.fixture(scope="session")
def audio_server():
    """A running private PulseAudio daemon; PULSE_SERVER points at it."""
    reason = missing_reason()
    if reason:
        if os.environ.get("CI"):
            pytest.fail(f"real-audio tests cannot run in CI: {reason}")
        pytest.skip(f"real-audio test skipped: {reason}")
    server = AudioServer(n_channels=AUDIO_SERVER_CHANNELS).start()
    try:
        yield server
    finally:
        server.stop()


@pytest.fixture
def bench_rig(tmp_path):
    """Path of the bench rig file (with its reference loop) in a temporary folder."""
    path = tmp_path / "bench-rig.toml"
    path.write_text(BENCH_RIG_TOML)
    return path


@pytest.fixture
def run_arrayplan():
    """Run ``python -m arrayplan`` in a child process (see :func:`helpers.run_arrayplan_process`).

    Call it as ``run_arrayplan(*args, cwd=None, env=None, check_exit=None, timeout=300, command=...)``;
    it returns the ``subprocess.CompletedProcess`` with text output.
    """
    return run_arrayplan_process
