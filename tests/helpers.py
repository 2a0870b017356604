"""Helpers shared by the test modules: running the command line, the bench rig, reference computations.

Fixtures live in conftest.py; everything a test imports by name lives here (tests/ is on
``sys.path`` through ``[tool.pytest.ini_options] pythonpath`` in pyproject.toml).

Running the command line
    :func:`run_arrayplan_process` runs ``python -m arrayplan`` in a child process (also the
    ``run_arrayplan`` fixture); :func:`arrayplan_main` calls ``arrayplan.cli.main`` in this process
    (faster) and returns what it printed.
Reference computations
    written here with numpy/scipy, independent of arrayplan's kernels.
"""

from __future__ import annotations

import re
import subprocess
import sys
from collections.abc import Sequence
from typing import NamedTuple

import numpy as np

# -- the command line ---------------------------------------------------------------------------

#: How the tests run the command line in a child process.
ARRAYPLAN_COMMAND = [sys.executable, "-m", "arrayplan"]


def run_arrayplan_process(*args, cwd=None, env: dict[str, str] | None = None,
                          check_exit: Sequence[int] | None = None, timeout: float = 300.0,
                          command: Sequence[str] = tuple(ARRAYPLAN_COMMAND)) -> subprocess.CompletedProcess:
    """Run ``python -m arrayplan *args`` in a child process with no stdin; capture its text output.

    Parameters
    ----------
    *args
        The command-line words (paths and numbers are turned into strings).
    cwd, env
        Working folder and environment of the child (default: this process's).
    check_exit
        Where given, the exit statuses that are allowed (asserted, with stderr as the message).
    timeout
        Seconds before the child is killed and the test fails.
    command
        What runs the words (default ``python -m arrayplan``; e.g. ``[python, "-c", code]``).

    Returns
    -------
    subprocess.CompletedProcess
        With ``returncode``, ``stdout`` and ``stderr`` (str).
    """
    done = subprocess.run([*command, *map(str, args)], cwd=cwd, env=env, capture_output=True, text=True,
                          stdin=subprocess.DEVNULL, timeout=timeout)
    if check_exit is not None:
        assert done.returncode in tuple(check_exit), done.stderr
    return done


class CliRun(NamedTuple):
    """What an in-process run printed: unpacks as ``(returncode, stdout, stderr)``."""

    returncode: int
    stdout: str
    stderr: str


def arrayplan_main(capsys, *args) -> CliRun:
    """Run ``arrayplan.cli.main(args)`` in this process; return its status and what it printed.

    Paths and numbers in `args` are turned into strings.  A ``SystemExit`` that escapes the command
    line (argparse's own exit) is returned as its status.  `capsys` is pytest's fixture; it is read
    (and so emptied) here.
    """
    import arrayplan.cli as cli

    try:
        status = cli.main([str(a) for a in args])
    except SystemExit as stop:
        status = stop.code if isinstance(stop.code, int) else 2
    got = capsys.readouterr()
    return CliRun(status, got.out, got.err)


#: An option named in a message: ``--rig``, ``--ir-length-s`` (not part of a longer word or path).
FLAG = re.compile(r"(?<![\w-])--[a-z][a-z0-9-]*")


def command_help(capsys, *command: str) -> str:
    """The ``--help`` text of `command` (e.g. ``"signal", "probe"``)."""
    rc, text, _ = arrayplan_main(capsys, *command, "--help")
    assert rc == 0 and "usage:" in text
    return text


def assert_flags_exist(capsys, message: str, *command: str) -> None:
    """Every option named in `message` is one of `command`'s options (common practice, no source)."""
    help_text = command_help(capsys, *command)
    for flag in set(FLAG.findall(message)):
        assert re.search(rf"(?<![\w-]){re.escape(flag)}(?![\w-])", help_text), (flag, message)


# -- the bench rig of the measurement tests ------------------------------------------------------

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

#: Short sweep options for the measure command in tests (keep the suite fast).
FAST_MEASURE_ARGS = ["--f1-hz", "100", "--duration-s", "0.5", "--ir-length-s", "0.05", "--max-latency-s", "0.1",
                     "--lead-in-s", "0.1"]


# -- reference computations, independent of arrayplan's kernels ----------------------------------

def first_order_box_coupling(spk_m: np.ndarray, mic_m: np.ndarray, hz: np.ndarray, size_m: Sequence[float],
                             beta: float, c: float) -> np.ndarray:
    """Direct path plus the six first-order image sources of a box room, written here with numpy.

    Each path is exp(-jkr) / (4 pi r); the images mirror the speakers across the walls x = 0, x = Lx,
    y = 0, ... of the box [0, L] and are weighted by the pressure reflection coefficient `beta`
    (image method: J. B. Allen and D. A. Berkley, JASA 65(4), 1979).  Omni elements.

    Parameters
    ----------
    spk_m : ndarray, shape (n_spk, 3)
        Speaker positions, m.
    mic_m : ndarray, shape (n_mic, 3)
        Microphone (or field point) positions, m.
    hz : ndarray, shape (n_freq,)
        Frequencies, Hz.
    size_m : sequence of 3 floats
        Room size (Lx, Ly, Lz), m.
    beta : float
        Reflection coefficient of every wall (e.g. sqrt(1 - alpha)).
    c : float
        Speed of sound, m/s.

    Returns
    -------
    ndarray, shape (n_freq, n_mic, n_spk)
        Complex coupling, Pa per unit source strength.
    """
    spk_m, mic_m = np.asarray(spk_m, float), np.asarray(mic_m, float)
    k = 2 * np.pi * np.asarray(hz, float)[:, None, None] / c
    sources = [(spk_m, 1.0)]
    for axis in range(3):
        for wall in (0.0, float(size_m[axis])):
            image = spk_m.copy()
            image[:, axis] = 2 * wall - spk_m[:, axis]
            sources.append((image, beta))
    g = 0
    for points, amp in sources:
        r = np.linalg.norm(mic_m[:, None] - points[None], axis=-1)
        g = g + amp * np.exp(-1j * k * r) / (4 * np.pi * r)
    return g


def assert_singular_values_match_free_field(irs, rig, fs: float, n: int) -> None:
    """The singular values of a free-field IR set's DFT against those of the analytic kernel.

    On the FFT grid only float32 rounding of the stored responses remains (24-bit mantissa,
    ~6e-8 per sample; summed over 4096 samples ~4e-6 re s_max): allowed 2e-5 re s_max.  Off the
    grid the finite band-limited record is a periodic (Dirichlet) interpolation whose truncated
    tails deviate from the continuous response; measured 0.2 % re s_max on the test rigs, allowed
    1 % re s_max, below 8 kHz (fs = 48 kHz).  Reference: the free-field Green's function
    exp(-jkr)/(4 pi r) (D. A. B. Miller, Applied Optics 39(11), 2000) and numpy.linalg.svd.
    """
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
    from scipy.signal import butter, iirpeak

    b_bp, a_bp = iirpeak(1000.0, 5.0, fs=fs)
    boost = 10 ** (6 / 20)
    return {
        "gain": ([0.3], [1.0]),
        "butter-band-pass": butter(2, [300.0, 3000.0], btype="bandpass", fs=fs),
        "butter-high-pass-150": butter(2, 150.0, btype="highpass", fs=fs),
        "peaking+6dB": (np.asarray(a_bp) + (boost - 1) * np.asarray(b_bp), a_bp),
    }
