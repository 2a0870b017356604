"""Shared result arrays and work run beside the caller (arrayplan.shared_arrays, arrayplan.parallel.alongside)."""

from __future__ import annotations

import multiprocessing
import os

import numpy as np
import pytest

from arrayplan.errors import InputError
from arrayplan.parallel import alongside
from arrayplan.shared_arrays import SharedArrays, arrays_for


def _fill(key: str, rows: slice, value: float) -> None:
    arrays_for(key)["x"][rows] = value
    arrays_for(key)["z"][rows] = value * (1 + 2j)


@pytest.mark.parametrize("method", ["fork", "spawn"])
def test_workers_write_into_the_parents_arrays(method):
    """A worker forked (inheriting the mapping) or spawned (opening the file by name) writes in place."""
    out = SharedArrays({"x": ((6, 3), np.float64), "z": ((6,), np.complex128)})
    try:
        ctx = multiprocessing.get_context(method)
        procs = [ctx.Process(target=_fill, args=(out.key, slice(a, a + 3), float(a + 1))) for a in (0, 3)]
        for p in procs:
            p.start()
        for p in procs:
            p.join()
            assert p.exitcode == 0
    finally:
        out.close()
    np.testing.assert_array_equal(out.arrays["x"][:, 0], [1, 1, 1, 4, 4, 4])
    np.testing.assert_array_equal(out.arrays["z"], np.array([1, 1, 1, 4, 4, 4]) * (1 + 2j))
    # the file's name is gone, the arrays stay valid here
    path = out.key.split("|")[0]
    assert not os.path.exists(path)
    assert out.arrays["x"].sum() == 3 * 3 * (1 + 4)


def test_in_memory_arrays_are_plain_and_local():
    out = SharedArrays({"a": ((2, 2), np.float32)}, in_memory=True)
    arrays_for(out.key)["a"][0] = 5
    assert out.arrays["a"].dtype == np.float32 and out.arrays["a"][0, 1] == 5
    out.close()
    with pytest.raises(RuntimeError):
        arrays_for(out.key)


def _write(path: str, text: str) -> None:
    with open(path, "w") as fh:
        fh.write(text)


def _fail(kind: str) -> None:
    if kind == "input":
        raise InputError("bad thing", source="x.csv", field="row 3")
    raise OSError(28, "No space left on device", "x.csv")


def test_alongside_runs_the_function_and_waits(tmp_path):
    target = tmp_path / "beside.txt"
    with alongside(_write, str(target), "written by the child"):
        pass
    assert target.read_text() == "written by the child"


@pytest.mark.parametrize("kind, exc", [("input", InputError), ("disk", OSError)])
def test_alongside_raises_the_childs_failure_here(kind, exc):
    with pytest.raises(exc) as info:
        with alongside(_fail, kind):
            pass
    assert ("bad thing" in str(info.value)) if kind == "input" else info.value.errno == 28


def test_alongside_stops_the_child_when_the_block_fails(tmp_path):
    import time

    with pytest.raises(KeyError):
        with alongside(time.sleep, 30):
            t0 = time.monotonic()
            raise KeyError("block failed")
    assert time.monotonic() - t0 < 10


def test_files_of_dead_runs_are_removed(tmp_path, monkeypatch):
    import subprocess
    import sys

    from arrayplan import shared_arrays

    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    pid = int(dead.stdout)
    monkeypatch.setattr(shared_arrays, "_folders", lambda: [str(tmp_path)])
    stale = tmp_path / f"arrayplan-{pid}-0123.shared"
    stale.write_bytes(b"x")
    mine = tmp_path / f"arrayplan-{os.getpid()}-4567.shared"
    mine.write_bytes(b"x")
    with SharedArrays({"a": ((2,), np.float64)}) as out:
        assert out.key.startswith(str(tmp_path))
    assert not stale.exists() and mine.exists()


def test_no_room_for_the_file_is_an_oserror_not_a_crash(tmp_path, monkeypatch):
    """posix_fallocate reserves the blocks up front: a too-large request fails at once (ENOSPC/EFBIG)."""
    from arrayplan import shared_arrays

    monkeypatch.setattr(shared_arrays, "_folders", lambda: [str(tmp_path)])
    with pytest.raises(OSError):
        SharedArrays({"huge": ((2 ** 47,), np.float64)})     # 1 PiB
    assert not list(tmp_path.iterdir())


def test_plan_falls_back_to_pipes_without_room(monkeypatch):
    """Without room for the shared file the workers send results back; the plan is the same, bit for bit."""
    from arrayplan import FreeFieldKernel, FrequencyAxis, Rig, decompose
    from arrayplan import shared_arrays

    rng = np.random.default_rng(2)
    rig = Rig.from_positions(rng.uniform(size=(6, 3)), rng.uniform(size=(5, 3)) + [0, 0, 2])
    axis = FrequencyAxis(np.linspace(200, 2000, 24))
    ref = decompose(FreeFieldKernel(rig), axis, workers=2, chunk_size=4)

    def no_room(*args, **kwargs):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(shared_arrays, "_map", no_room)
    piped = decompose(FreeFieldKernel(rig), axis, workers=2, chunk_size=4)
    for a, b in ((ref.singular_values, piped.singular_values), (ref.drive, piped.drive),
                 (ref.combine, piped.combine)):
        np.testing.assert_array_equal(a, b)
