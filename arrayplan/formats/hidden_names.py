"""Hidden staging and set-aside names beside an output, and tidying those killed runs left.

A file or folder is written under a hidden staging name beside its final
name, and an existing one is moved aside under a hidden set-aside name while
the new one is renamed in.  Both names carry the writer's process id.  The
next run into the same place removes those of processes that are no longer
alive, and when a run was killed between setting the old version aside and
renaming the new one in, it first puts the old version back
(:func:`clean_stale_staging`).
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import shutil
from pathlib import Path

__all__ = ["clean_stale_staging"]

_STAGING_TAG, _ASIDE_TAG = "staging", "old"
#: Characters of the final name kept in hidden names, so a long name stays under NAME_MAX (255).
_NAME_KEEP = 120


def _hidden_prefix(name: str, tag: str) -> str:
    if len(name) > _NAME_KEEP:   # shortened, with a hash so two long names never share a prefix
        name = f"{name[:_NAME_KEEP]}~{hashlib.sha256(name.encode('utf-8', 'surrogateescape')).hexdigest()[:12]}"
    return f".{name}.{tag}."


def _hidden_name(name: str, tag: str) -> str:
    return f"{_hidden_prefix(name, tag)}{os.getpid()}.{os.urandom(4).hex()}"


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except (ProcessLookupError, OverflowError):
        return False
    except PermissionError:      # alive, another user's
        pass
    return True


def _dead_hidden(parent: Path, name: str, tag: str) -> list[Path]:
    """Hidden `tag` folders or files beside `name` in `parent` whose writer process is gone."""
    prefix = _hidden_prefix(name, tag)
    found = []
    try:
        entries = list(parent.iterdir())
    except OSError:
        return []
    for p in entries:
        if not p.name.startswith(prefix):
            continue
        pid_text = p.name[len(prefix):].split(".", 1)[0]
        if pid_text.isdigit() and not _pid_alive(int(pid_text)):
            found.append(p)
    return found


def _remove(p: Path) -> None:
    if p.is_dir() and not p.is_symlink():
        shutil.rmtree(p, ignore_errors=True)
    with contextlib.suppress(OSError):
        p.unlink()


def _mtime(p: Path) -> float:
    with contextlib.suppress(OSError):
        return p.lstat().st_mtime
    return 0.0


def clean_stale_staging(final: str | os.PathLike) -> list[Path]:
    """Tidy what killed runs left beside `final`.

    A set-aside old version whose writer died before renaming the new one in
    is put back as `final` when `final` is missing (the newest such one);
    every other staging or set-aside folder or file of a dead process is
    removed.  Those of live processes are left alone.

    Parameters
    ----------
    final : path
        A file or folder arrayplan writes.

    Returns
    -------
    list of Path
        The hidden paths removed.
    """
    final = Path(final)
    parent = final.parent if str(final.parent) else Path(".")
    aside = sorted(_dead_hidden(parent, final.name, _ASIDE_TAG), key=_mtime)
    if aside and not os.path.lexists(final):
        with contextlib.suppress(OSError):
            os.rename(aside[-1], final)
            aside = aside[:-1]
    removed = aside + _dead_hidden(parent, final.name, _STAGING_TAG)
    for p in removed:
        _remove(p)
    return removed
