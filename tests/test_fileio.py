"""Atomic outputs: missing folders are made like ``mkdir -p`` and removed again when the write fails."""

from __future__ import annotations

import os

import pytest

from arrayplan.errors import InputError
from arrayplan.formats.fileio import atomic_path, staged_output_dir, write_text_atomic


def test_staged_output_creates_missing_parents(tmp_path):
    out = tmp_path / "a" / "b" / "plan"
    with staged_output_dir(out) as stage:
        (stage / "x.csv").write_text("1\n")
    assert (out / "x.csv").read_text() == "1\n"
    assert [p.name for p in (tmp_path / "a" / "b").iterdir()] == ["plan"]      # no staging folder left


def test_failed_staged_output_leaves_nothing_behind(tmp_path):
    out = tmp_path / "a" / "b" / "plan"
    with pytest.raises(RuntimeError):
        with staged_output_dir(out) as stage:
            (stage / "x.csv").write_text("1\n")
            raise RuntimeError("the work failed half-way")
    assert list(tmp_path.iterdir()) == []


def test_failed_staged_output_keeps_folders_that_existed(tmp_path):
    (tmp_path / "a").mkdir()
    (tmp_path / "a" / "keep.txt").write_text("mine")
    with pytest.raises(RuntimeError):
        with staged_output_dir(tmp_path / "a" / "b" / "plan"):
            raise RuntimeError
    assert sorted(p.name for p in (tmp_path / "a").iterdir()) == ["keep.txt"]


def test_atomic_file_in_new_folders_and_cleanup(tmp_path):
    path = tmp_path / "reports" / "2026" / "r.html"
    write_text_atomic(path, "<!DOCTYPE html>")
    assert path.read_text() == "<!DOCTYPE html>"
    other = tmp_path / "new" / "deeper" / "r.html"
    with pytest.raises(ValueError):
        with atomic_path(other) as tmp:
            tmp.write_text("half")
            raise ValueError("failed")
    assert not (tmp_path / "new").exists()


def test_a_file_in_the_way_is_one_clear_error(tmp_path):
    (tmp_path / "notes").write_text("a file, not a folder")
    with pytest.raises(InputError, match="is a file, not a folder"):
        write_text_atomic(tmp_path / "notes" / "r.html", "x")
    with pytest.raises(InputError, match="is a file, not a folder"):
        with staged_output_dir(tmp_path / "notes" / "plan"):
            pass


def test_atomic_files_get_the_usual_permissions(tmp_path):
    # a new file's mode is 0666 minus the umask (POSIX creat(); common practice, no source)
    old = os.umask(0o022)
    try:
        path = write_text_atomic(tmp_path / "r.html", "x")
    finally:
        os.umask(old)
    assert path.stat().st_mode & 0o777 == 0o644


def _dead_pid() -> int:
    import subprocess
    import sys

    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


def test_a_killed_writers_temporary_file_is_removed_by_the_next_write(tmp_path):
    dead = _dead_pid()
    left = tmp_path / f".r.html.staging.{dead}.abc123.html"
    left.write_text("half a report")
    mine = tmp_path / f".r.html.staging.{os.getpid()}.def456.html"     # a live writer's: left alone
    mine.write_text("being written")
    write_text_atomic(tmp_path / "r.html", "<html></html>")
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted([mine.name, "r.html"])


def test_names_up_to_the_file_system_limit_still_stage(tmp_path):
    # NAME_MAX is 255 bytes on Linux file systems (POSIX <limits.h>; value from memory).
    long = "p" * 250
    with staged_output_dir(tmp_path / long) as stage:
        (stage / "a.csv").write_text("1\n")
    assert (tmp_path / long / "a.csv").read_text() == "1\n"
    write_text_atomic(tmp_path / ("f" * 250), "x")
    assert sorted(len(p.name) for p in tmp_path.iterdir()) == [250, 250]
