"""Shared fixtures.

``audio_server``: a private PulseAudio daemon with an 8-channel null sink
(see tests/audio_server.py), started once per session and only for tests
that ask for it.  Where pulseaudio is not installed those tests are skipped
with the exact reason; under CI (CI=true) they fail instead, because .ci/run
installs it.  No test module may import sounddevice at import time:
PortAudio must be initialised after the daemon is up and PULSE_SERVER set.
"""

from __future__ import annotations

import os
import sys

import pytest

from audio_server import AudioServer, missing_reason

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


#: The invented bench rig of the measurement tests and of calibration/bench-trio.toml:
#: three speakers on outputs 1-3, three microphones on inputs 1-3, and a loopback
#: reference from output 4 to input 4.
BENCH_RIG_TOML = """\
[rig]
name = "bench-trio"
description = "Invented bench rig: three speakers facing three microphones 1.5 m away"

[medium]
speed_of_sound = 343.2

[[speakers]]
name = "S1"
position = [0.0, 0.0, 1.0]
channel = 1

[[speakers]]
name = "S2"
position = [0.4, 0.0, 1.0]
channel = 2

[[speakers]]
name = "S3"
position = [0.8, 0.0, 1.0]
channel = 3

[[microphones]]
name = "M1"
position = [0.0, 1.5, 1.0]
channel = 1

[[microphones]]
name = "M2"
position = [0.4, 1.5, 1.0]
channel = 2

[[microphones]]
name = "M3"
position = [0.8, 1.5, 1.0]
channel = 3

[hardware]
sample_rate_hz = 48000
reference = { output_channel = 4, input_channel = 4 }
"""


@pytest.fixture
def bench_rig(tmp_path):
    """Path of the bench rig file (with its reference loop) in a temporary folder."""
    path = tmp_path / "bench-rig.toml"
    path.write_text(BENCH_RIG_TOML)
    return path


#: Short sweep options for the measure command in tests (keep the suite fast).
FAST_MEASURE_ARGS = ["--f1-hz", "100", "--duration-s", "0.5", "--ir-length-s", "0.05", "--max-latency-s", "0.1",
                     "--lead-in-s", "0.1"]

#: How the tests run the command line in a child process.
ARRAYPLAN_COMMAND = [sys.executable, "-m", "arrayplan"]


def assert_singular_values_match_free_field(irs, rig, fs: float, n: int) -> None:
    """The singular values of a free-field IR set's DFT against those of the analytic kernel.

    On the FFT grid only float32 rounding of the stored responses remains (24-bit mantissa,
    ~6e-8 per sample; summed over 4096 samples ~4e-6 re s_max): allowed 2e-5 re s_max.  Off the
    grid the finite band-limited record is a periodic (Dirichlet) interpolation whose truncated
    tails deviate from the continuous response; measured 0.2 % re s_max on the test rigs, allowed
    1 % re s_max, below 8 kHz (fs = 48 kHz).  Reference: the free-field Green's function
    exp(-jkr)/(4 pi r) (D. A. B. Miller, Applied Optics 39(11), 2000) and numpy.linalg.svd.
    """
    import numpy as np

    from arrayplan.kernels.freefield import FreeFieldKernel
    from arrayplan.kernels.measured import MeasuredKernel

    measured = MeasuredKernel(irs)
    model = FreeFieldKernel(rig)
    assert measured.speaker_names == tuple(rig.speakers.names)
    on_grid = np.arange(20, 700, 23) * fs / n
    off_grid = np.linspace(310.0, 8000.0, 37)
    for hz, tol in ((on_grid, 2e-5), (off_grid, 1e-2)):
        s_meas = np.linalg.svd(measured.evaluate(hz), compute_uv=False)
        s_model = np.linalg.svd(model.evaluate(hz), compute_uv=False)
        err = np.abs(s_meas - s_model) / s_model[:, :1]
        assert err.max() < tol, (tol, err.max())


def known_iir_systems(fs: float) -> dict[str, tuple]:
    """Known linear systems (b, a) for measurement checks, designed with scipy.signal at `fs` Hz.

    A plain gain, 2nd-order Butterworth band-pass (300 Hz-3 kHz) and high-pass (150 Hz), and a
    +6 dB peaking section at 1 kHz (H = 1 + (G - 1) H_bp on the band-pass's denominator).
    """
    import numpy as np
    from scipy.signal import butter, iirpeak

    b_bp, a_bp = iirpeak(1000.0, 5.0, fs=fs)
    boost = 10 ** (6 / 20)
    return {
        "gain": ([0.3], [1.0]),
        "butter-band-pass": butter(2, [300.0, 3000.0], btype="bandpass", fs=fs),
        "butter-high-pass-150": butter(2, 150.0, btype="highpass", fs=fs),
        "peaking+6dB": (np.asarray(a_bp) + (boost - 1) * np.asarray(b_bp), a_bp),
    }
