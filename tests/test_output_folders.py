"""Output folders are all-or-nothing: published whole, checked against their SHA256SUMS, tidied after kills.

Outside checks: the checksum file is verified by GNU coreutils ``sha256sum -c`` and by
``hashlib.sha256`` (FIPS 180-4); process liveness comes from the kernel (a reaped child's id is free).
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from arrayplan.errors import InputError
from arrayplan.formats.fileio import (CHECKSUM_FILE, PUBLISH_PAUSE_ENV, atomic_paths, check_folder, clean_stale_staging,
                              staged_output_dir)

from helpers import ARRAYPLAN_COMMAND, BENCH_RIG_TOML, arrayplan_main

#: A second invented rig: the bench rig with its microphones 2.5 m away, so its plan differs.
FAR_RIG_TOML = BENCH_RIG_TOML.replace('name = "bench-trio"', 'name = "far-trio"').replace(", 1.5, 1.0]", ", 2.5, 1.0]")

PLAN_ARGS = ["--freq-hz", "500", "--freq-hz", "1000", "--no-figures"]


def _hidden(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir() if p.name.startswith("."))


def _sha256sum_ok(folder: Path) -> None:
    """The folder verifies with GNU coreutils ``sha256sum -c`` (an outside implementation)."""
    if shutil.which("sha256sum") is None:
        pytest.skip("sha256sum (GNU coreutils) not installed")
    done = subprocess.run(["sha256sum", "--quiet", "-c", CHECKSUM_FILE], cwd=folder, capture_output=True, text=True)
    assert done.returncode == 0, done.stdout + done.stderr


def _dead_pid() -> int:
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


@pytest.fixture
def rigs(tmp_path):
    bench, far = tmp_path / "bench.toml", tmp_path / "far.toml"
    bench.write_text(BENCH_RIG_TOML)
    far.write_text(FAR_RIG_TOML)
    return bench, far


# ------------------------------------------------------------------ the folder as a whole

def test_a_rerun_replaces_the_folder_whole_and_lists_every_file(tmp_path):
    out = tmp_path / "out"
    with staged_output_dir(out) as stage:
        (stage / "a.csv").write_text("first\n")
        (stage / "old-only.wav").write_bytes(b"stale")
        (stage / "sub").mkdir()
        (stage / "sub" / "b.json").write_text("{}")
    with staged_output_dir(out) as stage:
        (stage / "a.csv").write_text("second\n")
        (stage / "sub").mkdir()
        (stage / "sub" / "b.json").write_text("[]")
    assert sorted(p.relative_to(out).as_posix() for p in out.rglob("*") if p.is_file()) == [
        CHECKSUM_FILE, "a.csv", "sub/b.json"]
    assert (out / "a.csv").read_text() == "second\n"
    # FIPS 180-4 SHA-256 through hashlib: each listed digest is the file's own.
    lines = (out / CHECKSUM_FILE).read_text().splitlines()
    assert lines == [f"{hashlib.sha256(b'second' + bytes([10])).hexdigest()}  a.csv",
                     f"{hashlib.sha256(b'[]').hexdigest()}  sub/b.json"]
    _sha256sum_ok(out)
    assert check_folder(out) is True and _hidden(tmp_path) == []


def test_names_with_newlines_are_escaped_as_sha256sum_does(tmp_path):
    out = tmp_path / "odd"
    with staged_output_dir(out) as stage:
        (stage / "two\nlines.txt").write_text("x")
        (stage / "back\\slash.txt").write_text("y")
    _sha256sum_ok(out)
    assert check_folder(out)


def test_a_mixed_or_damaged_folder_is_refused_naming_the_file(tmp_path):
    out = tmp_path / "out"
    with staged_output_dir(out) as stage:
        (stage / "weights.csv").write_text("1\n")
        (stage / "weights.json").write_text("{}")
    (out / "weights.csv").write_text("2\n")
    with pytest.raises(InputError, match="differs from the file written with this folder") as err:
        check_folder(out)
    assert err.value.source == str(out / "weights.csv")
    (out / "weights.csv").write_text("1\n")
    (out / "weights.extra.csv").write_text("from another run\n")
    assert check_folder(out)                                   # not a file the reader needs
    with pytest.raises(InputError, match="not among the files written"):
        check_folder(out, needed=("weights.*",))
    (out / "weights.json").unlink()
    with pytest.raises(InputError, match="incomplete"):
        check_folder(out)
    (out / CHECKSUM_FILE).write_text("not a checksum line\n")
    with pytest.raises(InputError, match="unreadable checksum file"):
        check_folder(out)
    (out / CHECKSUM_FILE).unlink()
    assert check_folder(out) is False                          # made by hand: nothing to check against


def test_plan_rerun_drops_old_figures_and_a_mixed_plan_is_refused_by_verify_and_report(rigs, tmp_path, capsys):
    bench, far = rigs
    a, b = tmp_path / "proj" / "a", tmp_path / "proj" / "b"
    assert arrayplan_main(capsys, "plan", str(bench), "--out", str(a), "--freq-hz", "500").returncode == 0
    assert (a / "rig.png").is_file()
    assert arrayplan_main(capsys, "plan", str(bench), "--out", str(a), *PLAN_ARGS).returncode == 0
    assert not list(a.glob("*.png"))                           # no figures of the earlier run remain
    _sha256sum_ok(a)
    assert arrayplan_main(capsys, "plan", str(far), "--out", str(b), *PLAN_ARGS).returncode == 0
    shutil.copy(b / "weights.npz", a / "weights.npz")          # the old per-file publish could leave this mix
    from arrayplan.formats.plan_folder import read_weights

    with pytest.raises(InputError, match="differs") as err:
        read_weights(a)
    assert err.value.source == str(a / "weights.npz")
    rc, _, err = arrayplan_main(capsys, "report", str(tmp_path / "proj"), "--out", str(tmp_path / "r.html"))
    assert rc == 0, err
    html = (tmp_path / "r.html").read_text()
    assert "could not be read" in html and "weights.npz" in html


def test_report_lists_a_truncated_weights_file_and_still_writes(rigs, tmp_path, capsys):
    bench, far = rigs
    proj = tmp_path / "proj"
    for name, rig in (("good", far), ("cut", bench)):
        assert arrayplan_main(capsys, "plan", str(rig), "--out", str(proj / name), *PLAN_ARGS).returncode == 0
    npz = proj / "cut" / "weights.npz"
    npz.write_bytes(npz.read_bytes()[:100])
    for folder_has_checksums in (True, False):               # refused by its checksum, or by numpy without one
        if not folder_has_checksums:
            (proj / "cut" / CHECKSUM_FILE).unlink()
        out = tmp_path / f"r{int(folder_has_checksums)}.html"
        rc, _, err = arrayplan_main(capsys, "report", str(proj), "--out", str(out))
        assert rc == 0, err
        html = out.read_text()
        assert "could not be read" in html and str(npz) in html
        assert "far-trio" in html                               # the readable plan is still reported


def test_filter_set_with_a_stale_channel_file_is_refused_by_discovery(tmp_path):
    from arrayplan.report.discover import find_results

    out = tmp_path / "proj" / "filters"
    with staged_output_dir(out) as stage:
        (stage / "filters.json").write_text(json.dumps({"channels": []}))
        (stage / "channel-01-drive.wav").write_bytes(b"RIFF")
    assert find_results(tmp_path / "proj").filters
    (out / "channel-03-drive.wav").write_bytes(b"RIFF")        # a stale loudspeaker filter
    found = find_results(tmp_path / "proj")
    assert not found.filters and "channel-03-drive.wav" in found.problems[0]


def test_an_ir_set_of_two_runs_is_refused(tmp_path):
    from arrayplan.formats.irset import IRSet, read_irset, write_irset

    rng = np.random.default_rng(1)
    sets = [IRSet(rng.normal(0, 0.1, (64, 2, 2)), 8000.0, ["s1", "s2"], ["m1", "m2"]) for _ in range(2)]
    write_irset(tmp_path / "one", sets[0])
    write_irset(tmp_path / "two", sets[1])
    shutil.copy(tmp_path / "two" / "spk-002.wav", tmp_path / "one" / "spk-002.wav")
    with pytest.raises(InputError, match="differs") as err:
        read_irset(tmp_path / "one")
    assert err.value.source == str(tmp_path / "one" / "spk-002.wav")


# ------------------------------------------------------------------ multi-file signals

def test_signal_files_appear_together_and_a_folder_in_the_way_is_one_error(tmp_path, capsys):
    sweep = ["signal", "sweep", "--f1-hz", "100", "--f2-hz", "4000", "--duration-s", "0.3", "--rate-hz", "16000",
             "--pad-after-s", "0.1"]
    (tmp_path / "d.wav").mkdir()
    rc, _, err = arrayplan_main(capsys, *sweep, "--out", str(tmp_path / "d.wav"))
    assert rc == 2 and err.count("\n") == 1, err
    assert "d.wav" in err and "is a folder" in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["d.wav"]
    # One of the later files in the way: nothing of the earlier run is replaced, nothing new appears.
    assert arrayplan_main(capsys, *sweep, "--out", str(tmp_path / "e.wav")).returncode == 0
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir() if p.is_file()}
    assert sorted(before) == ["e.inverse.json", "e.inverse.wav", "e.json", "e.wav"]
    (tmp_path / "e.inverse.json").unlink()
    (tmp_path / "e.inverse.json").mkdir()
    rc, _, err = arrayplan_main(capsys, *sweep, "--out", str(tmp_path / "e.wav"), "--duration-s", "0.4")
    assert rc == 2 and "e.inverse.json" in err and err.count("\n") == 1, err
    after = {p.name: p.read_bytes() for p in tmp_path.iterdir() if p.is_file()}
    assert after == {k: v for k, v in before.items() if k != "e.inverse.json"}


def test_atomic_paths_put_old_files_back_when_a_rename_fails(tmp_path):
    a, b = tmp_path / "x.wav", tmp_path / "x.json"
    a.write_text("old a")
    b.write_text("old b")
    with pytest.raises(InputError, match="is a folder"):
        with atomic_paths([a, b]) as (ta, tb):
            ta.write_text("new a")
            tb.write_text("new b")
            b.unlink()
            b.mkdir()                                          # appears while the files are written
    assert a.read_text() == "old a" and b.is_dir()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["x.json", "x.wav"]


# ------------------------------------------------------------------ leftovers of killed runs

def test_staging_of_dead_runs_is_removed_and_a_set_aside_folder_put_back(tmp_path):
    dead, live = _dead_pid(), os.getpid()
    out = tmp_path / "plan"
    (tmp_path / f".plan.staging.{dead}.0001").mkdir()
    (tmp_path / f".plan.staging.{live}.0002").mkdir()
    aside = tmp_path / f".plan.old.{dead}.0003"
    aside.mkdir()
    (aside / "weights.csv").write_text("the last published plan\n")
    removed = clean_stale_staging(out)
    assert [p.name for p in removed] == [f".plan.staging.{dead}.0001"]
    assert (out / "weights.csv").read_text() == "the last published plan\n"
    assert _hidden(tmp_path) == [f".plan.staging.{live}.0002"]     # a live run's staging is left alone


def test_a_run_killed_while_publishing_leaves_no_mix_and_the_next_run_tidies(rigs, tmp_path, capsys):
    bench, far = rigs
    out = tmp_path / "plan"
    assert arrayplan_main(capsys, "plan", str(bench), "--out", str(out), *PLAN_ARGS).returncode == 0
    old = json.loads((out / "weights.json").read_text())["rig"]["name"]
    env = dict(os.environ, **{PUBLISH_PAUSE_ENV: "60"})
    child = subprocess.Popen(ARRAYPLAN_COMMAND + ["plan", str(far), "--out", str(out), *PLAN_ARGS], env=env,
                             stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, stdin=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 120
        while not any(n.startswith(".plan.old.") for n in _hidden(tmp_path)):   # the old plan is set aside
            assert child.poll() is None and time.monotonic() < deadline
            time.sleep(0.05)
        os.kill(child.pid, signal.SIGKILL)
    finally:
        child.wait()
    assert not out.exists()                                    # never a mix: the folder is either whole or absent
    assert any(n.startswith(".plan.staging.") for n in _hidden(tmp_path))
    from arrayplan.formats.plan_folder import read_weights

    with pytest.raises(InputError, match="missing"):
        read_weights(out)
    # The next run puts the old plan back first, then replaces it whole, and leaves nothing hidden.
    assert arrayplan_main(capsys, "plan", str(far), "--out", str(out), *PLAN_ARGS).returncode == 0
    assert _hidden(tmp_path) == []
    _sha256sum_ok(out)
    assert json.loads((out / "weights.json").read_text())["rig"]["name"] == "far-trio" != old


def test_two_runs_into_one_folder_end_with_one_complete_folder(rigs, tmp_path, capsys):
    bench, far = rigs
    out = tmp_path / "plan"
    assert arrayplan_main(capsys, "plan", str(bench), "--out", str(out), *PLAN_ARGS).returncode == 0
    env = dict(os.environ, **{PUBLISH_PAUSE_ENV: "2"})       # widen the window between set-aside and rename
    children = [subprocess.Popen(ARRAYPLAN_COMMAND + ["plan", str(r), "--out", str(out), *PLAN_ARGS], env=env,
                                 stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, stdin=subprocess.DEVNULL,
                                 text=True) for r in (bench, far)]
    for c in children:
        _, err = c.communicate(timeout=120)
        assert c.returncode == 0, err
    assert _hidden(tmp_path) == []
    _sha256sum_ok(out)
    from arrayplan.formats.plan_folder import read_weights

    w = read_weights(out)
    far = np.allclose(np.asarray(w.sidecar["mic_positions_m"])[:, 1], 2.5)
    assert w.sidecar["rig"]["name"] == ("far-trio" if far else "bench-trio")


# ------------------------------------------------------------------ measure leaves nothing when it cannot start

def test_a_fresh_measure_that_fails_before_its_first_take_leaves_nothing(bench_rig, tmp_path):
    from arrayplan.errors import DeviceError
    from arrayplan.hardware.measure import MeasurementSettings, RigWiring, measure
    from arrayplan.hardware.simulated import SimulatedLink
    from arrayplan.rig import load_rig

    rig = load_rig(bench_rig)
    fast = MeasurementSettings(f1_hz=100.0, sweep_s=0.3, ir_s=0.02, max_latency_s=0.05, lead_in_s=0.05)
    truth = SimulatedLink.from_rig(rig, 16000.0, 320).truth
    unwired = SimulatedLink(truth, [0, 1, 2], [0, 1, 2], reference=None, n_outputs=4, n_inputs=4)
    out = tmp_path / "new" / "meas"
    with pytest.raises(DeviceError, match="loopback reference"):
        measure(unwired, RigWiring.from_rig(rig), out, fast)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bench-rig.toml"]
    # An existing file named as the output folder is one clear error, and is left alone.
    (tmp_path / "file").write_text("mine")
    with pytest.raises(InputError, match="is a file, not a folder"):
        measure(SimulatedLink.from_rig(rig, 16000.0, 320), RigWiring.from_rig(rig), tmp_path / "file", fast)
    assert (tmp_path / "file").read_text() == "mine"


def test_a_folder_holding_someone_elses_files_is_never_replaced(rigs, tmp_path, capsys):
    bench, _ = rigs
    docs = tmp_path / "docs"
    docs.mkdir()
    (docs / "thesis.tex").write_text("years of work")
    rc, _, err = arrayplan_main(capsys, "plan", str(bench), "--out", str(docs), *PLAN_ARGS)
    assert rc == 2 and err.count("\n") == 1 and "thesis.tex" in err, err
    assert sorted(p.name for p in docs.iterdir()) == ["thesis.tex"] and _hidden(tmp_path) == []
    # An arrayplan output with a file added later is refused too; the plain output is replaced.
    out = tmp_path / "plan"
    assert arrayplan_main(capsys, "plan", str(bench), "--out", str(out), *PLAN_ARGS).returncode == 0
    (out / "notes.txt").write_text("mine")
    rc, _, err = arrayplan_main(capsys, "plan", str(bench), "--out", str(out), *PLAN_ARGS)
    assert rc == 2 and "notes.txt" in err
    (out / "notes.txt").unlink()
    assert arrayplan_main(capsys, "plan", str(bench), "--out", str(out), *PLAN_ARGS).returncode == 0
