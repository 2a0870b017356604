"""The measure command through real PortAudio: the null sink's monitor as the "microphones".

Outputs 1-3 are the speakers, inputs 1-3 (the monitor channels) the
microphones, and output 4 -> input 4 the reference loop, so every impulse
response must come out as the sweep's own zero-lag response (the
band-limited pulse of a unit-gain wire) at the measured latency on its own channel and zero elsewhere.
"""

from __future__ import annotations

import json
import shutil
import signal
import subprocess
import sys
import time

import numpy as np
import pytest
from scipy.signal import fftconvolve

from helpers import ARRAYPLAN_COMMAND, FAST_MEASURE_ARGS

FS = 48000.0


def _measure_args(rig, out, *extra):
    return ["measure", str(rig), "--out", str(out), "--device", "pulse", "--rate-hz", "48000",
            "--yes", *FAST_MEASURE_ARGS, *extra]


def _sweep_zero_lag_response(n, whole=False):
    """The unity pulse from the sweep's pre-roll before zero lag on (n samples), and the pre-roll."""
    from arrayplan.hardware.measure import MeasurementSettings
    from arrayplan.signals.sweeps import make_sweep

    settings = MeasurementSettings(f1_hz=100.0, sweep_s=0.5, ir_s=0.05, max_latency_s=0.1, lead_in_s=0.1)
    sweep = make_sweep(settings.sweep_settings(FS))
    assert (sweep.settings.f1_hz, sweep.settings.f2_hz) == (100.0, 20000.0)
    g = fftconvolve(sweep.sweep, sweep.inverse)
    n0 = sweep.pre_roll_samples
    return g if whole else (g[sweep.n_sweep - 1 - n0:sweep.n_sweep - 1 - n0 + n], n0)


def _check_unit_impulses(folder):
    from arrayplan.formats.irset import read_irset

    irs = read_irset(folder)
    g, n0 = _sweep_zero_lag_response(irs.n_samples)
    assert irs.zero_lag_samples == n0 and irs.data.shape == (n0 + 2400, 3, 3)
    peaks = []
    for s in range(3):
        for m in range(3):
            h = irs.data[:, m, s]
            if m == s:
                assert int(np.argmax(np.abs(h))) == n0     # zero lag, after the pre-roll
                assert np.max(np.abs(h - g)) < 1e-6
                peaks.append(float(h[n0]))
            else:
                assert not np.any(h), f"speaker {s + 1} leaks into mic {m + 1}"
    # The inverse has unit gain in band (S. Mueller & P. Massarani, "Transfer-function measurement
    # with sweeps", JAES 49(6), 2001), so a unit-gain wire gives the band-limited pulse, whose peak
    # lies below 1; its spectrum at the band centre, sqrt(f1 f2), is 0 dB (checked on the whole pulse,
    # which the cut shortens).
    assert peaks == pytest.approx([g[n0]] * 3, abs=1e-6) and 0.5 < g[n0] < 1.0
    whole = _sweep_zero_lag_response(None, whole=True)
    centre = np.sqrt(100.0 * 20000.0)
    at_centre = np.dot(whole, np.exp(-2j * np.pi * centre / FS * np.arange(whole.size)))
    assert 20 * np.log10(abs(at_centre)) == pytest.approx(0.0, abs=0.01)
    return irs, peaks


def test_loopback_gives_unit_impulses_at_the_measured_latency(audio_server, bench_rig, tmp_path, run_arrayplan):
    out = tmp_path / "loop"
    done = run_arrayplan(*_measure_args(bench_rig, out, "--speaker-sensitivity-db-spl", "86", "--amp-vrms", "1.0",
                                        "--listener-distance-m", "2"))
    assert done.returncode == 0, done.stderr
    assert "CAUTION" in done.stderr and "Confirmed by --yes" in done.stderr
    assert "Estimated level at the listeners" in done.stderr and "dBA" in done.stderr
    irs, peaks = _check_unit_impulses(out / "irset")
    lat = []
    for i, name in enumerate(["S1", "S2", "S3"]):
        take = json.loads((out / "takes" / f"{i + 1:03d}-{name}" / "take.json").read_text())
        assert take["status"] == "ok", take["warnings"]
        assert take["latency_source"] == "reference"
        assert 0 < take["latency_samples"] < 0.1 * FS
        assert take["details"]["latency_fractional_samples"] == pytest.approx(take["latency_samples"], abs=0.01)
        lat.append(take["latency_samples"])
    print(f"loopback latencies (samples): {lat}; impulse peaks: {peaks}")
    assert irs.extra["measurement"]["latency_source"] == "reference"
    assert "3 take(s) measured" in done.stdout


def test_interrupted_run_keeps_its_takes_and_resumes(audio_server, bench_rig, tmp_path, run_arrayplan):
    out = tmp_path / "resume"
    cmd = _measure_args(bench_rig, out)
    proc = subprocess.Popen(ARRAYPLAN_COMMAND + cmd, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 60
    first = out / "takes" / "001-S1" / "take.json"
    while not first.exists():
        assert proc.poll() is None, proc.communicate()
        assert time.monotonic() < deadline
        time.sleep(0.01)
    proc.send_signal(signal.SIGINT)  # Ctrl-C while the second take plays
    stdout, stderr = proc.communicate(timeout=60)
    assert proc.returncode == 130, stderr
    assert "stopped by Ctrl-C: 1 of 3 takes are kept" in stderr
    kept = sorted(p.name for p in (out / "takes").iterdir())
    assert kept == ["001-S1"], kept  # nothing half-written beside it
    assert not (out / "irset").exists()

    again = run_arrayplan(*cmd)
    assert again.returncode == 0, again.stderr
    assert "2 take(s) measured, 1 kept from before" in again.stdout
    assert "S1: ok" in again.stdout and "(kept from before)" in again.stdout
    _check_unit_impulses(out / "irset")


def test_nothing_plays_without_confirmation(audio_server, bench_rig, tmp_path, run_arrayplan):
    cmd = [c for c in _measure_args(bench_rig, tmp_path / "never") if c != "--yes"]
    done = run_arrayplan(*cmd)
    assert done.returncode == 2
    assert "CAUTION" in done.stderr and "Estimated level: UNKNOWN" in done.stderr
    assert "no terminal to ask on" in done.stderr and "pass --yes" in done.stderr
    assert not (tmp_path / "never").exists()


def test_missing_device_and_short_device_are_one_line_errors(audio_server, bench_rig, tmp_path, run_arrayplan):
    done = run_arrayplan("measure", bench_rig, "--out", tmp_path / "x", "--device", "no-such-interface", "--yes")
    assert done.returncode == 2 and done.stderr.count("\n") == 1
    assert "no device name contains 'no-such-interface'" in done.stderr
    rig = bench_rig.read_text().replace("channel = 3\n", "channel = 40\n")
    wide = tmp_path / "wide.toml"
    wide.write_text(rig)
    done = run_arrayplan(*_measure_args(wide, tmp_path / "y"))
    assert done.returncode == 2 and "has too few channels: 40 outputs needed" in done.stderr
    assert not (tmp_path / "y").exists()


def _small_filesystem(path):
    """Mount a 1 MB tmpfs at `path` (root only); return an unmount function, or None."""
    path.mkdir()
    if shutil.which("mount") is None or shutil.which("umount") is None:
        return None
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=1m", "tmpfs", str(path)], capture_output=True)
    if done.returncode != 0:
        return None
    return lambda: subprocess.run(["umount", str(path)], check=True)


def test_full_disk_keeps_finished_takes_and_writes_nothing_half(bench_rig, tmp_path, run_arrayplan):
    """A real full disk (a 1 MB tmpfs) where the system allows mounting one; else a file-size limit."""
    disk = tmp_path / "disk"
    unmount = _small_filesystem(disk)
    out = disk / "m"
    cmd = ["measure", str(bench_rig), "--out", str(out), "--simulate", *FAST_MEASURE_ARGS]
    try:
        if unmount is not None:
            # Each take is about 0.6 MB: the first fits, the second fills the disk.
            done = run_arrayplan(*cmd)
            expect_kept = ["001-S1"]
            assert "No space left on device" in done.stderr
        else:
            limit = 200_000  # bytes per file: the first recording already exceeds it
            code = ("import resource, signal, sys; signal.signal(signal.SIGXFSZ, signal.SIG_IGN); "
                    f"resource.setrlimit(resource.RLIMIT_FSIZE, ({limit}, {limit})); "
                    "from arrayplan.cli import main; sys.exit(main(sys.argv[1:]))")
            done = run_arrayplan(*cmd, command=[sys.executable, "-c", code])
            expect_kept = []
        assert done.returncode == 2, done.stderr
        errors = [line for line in done.stderr.splitlines() if line.startswith("arrayplan measure: error")]
        assert len(errors) == 1 and errors[0] == done.stderr.splitlines()[-1]
        assert "could not save the take of speaker" in done.stderr
        assert f"the {len(expect_kept)} finished take(s) are intact" in done.stderr
        assert sorted(p.name for p in (out / "takes").iterdir()) == expect_kept
        for name in expect_kept:
            from arrayplan.formats.irset import read_irset

            assert json.loads((out / "takes" / name / "take.json").read_text())["status"] == "ok"
            assert read_irset(out / "takes" / name / "irset").n_spk == 1
        assert not (out / "irset").exists()
    finally:
        if unmount is not None:
            unmount()
