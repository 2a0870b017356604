"""Atomic file writes: a file, or several that belong together, appear whole or not at all.

* each file goes to a temporary name in the same folder and is renamed into
  place once complete (:func:`atomic_path`);
* files that belong together but share a folder with others (a signal, its
  sidecar and its inverse filter) are renamed in together, and put back as
  they were when one of them fails (:func:`atomic_paths`).

The temporary and set-aside names are hidden and carry the writer's process
id (:mod:`arrayplan.formats.hidden_names`), so the next write of the same
file removes those a killed run left.  Whole output folders are published by
:mod:`arrayplan.formats.output_folders`.
"""

from __future__ import annotations

import contextlib
import json
import os
import tempfile
from pathlib import Path
from typing import Any, Iterator, Sequence

import numpy as np

from ..errors import InputError
from .hidden_names import _ASIDE_TAG, _STAGING_TAG, _hidden_name, _hidden_prefix, clean_stale_staging

__all__ = [
    "atomic_path",
    "write_text_atomic",
    "write_bytes_atomic",
    "write_json_atomic",
    "atomic_paths",
    "make_folders",
    "json_default",
]


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def make_folders(folder: str | os.PathLike, source: str) -> list[Path]:
    """Create `folder` and its missing parents (like ``mkdir -p``).

    Parameters
    ----------
    folder : path
        The folder to make.
    source : str
        Named in messages (the output the folder is for).

    Returns
    -------
    list of Path
        The folders created, outermost first (empty when `folder` existed).

    Raises
    ------
    InputError
        When a part of the path is a file, or a folder cannot be created
        (naming the path and the cause); nothing is left behind.
    """
    return _make_folders(Path(folder), source)


def _make_folders(folder: Path, source: str) -> list[Path]:
    """Create `folder` and its missing parents (like ``mkdir -p``); return the folders created, outermost first."""
    missing = []
    probe = folder
    while not probe.exists():
        missing.append(probe)
        if probe.parent == probe:
            break
        probe = probe.parent
    if probe.exists() and not probe.is_dir():
        raise InputError(f"{probe} is a file, not a folder", source=source, fix="choose another output path")
    created = []
    try:
        for d in reversed(missing):
            d.mkdir()
            created.append(d)
    except OSError as exc:
        _remove_folders(created)
        raise InputError(f"cannot create folder {exc.filename or folder} ({exc.strerror or exc})", source=source,
                         fix="check the path and its permissions") from None
    return created


def _remove_folders(created: list[Path]) -> None:
    """Remove folders made by :func:`_make_folders` (innermost first) that are still empty."""
    for d in reversed(created):
        with contextlib.suppress(OSError):
            d.rmdir()


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path next to `path`; rename it onto `path` on success.

    Missing parent folders are created (and removed again on failure).  On
    any exception the temporary file is removed and `path` is untouched.
    The temporary name carries this process's id, so the next write of
    `path` removes one a killed run left (:func:`clean_stale_staging`).
    The temporary name keeps the suffix of `path`, so libraries that choose a
    format by suffix (soundfile, matplotlib) still work.

    Parameters
    ----------
    path : path
        The file to write.

    Yields
    ------
    Path
        The temporary file to write to (it exists, empty).
    """
    path = Path(path)
    created = _make_folders(path.parent, str(path))
    try:
        clean_stale_staging(path)
        fd, tmp = tempfile.mkstemp(prefix=_hidden_prefix(path.name, _STAGING_TAG) + f"{os.getpid()}.",
                                   suffix=path.suffix, dir=path.parent)
    except BaseException:
        _remove_folders(created)
        raise
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        os.chmod(tmp_path, 0o666 & ~_umask())      # mkstemp makes 0600; give the usual permissions
        os.replace(tmp_path, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp_path.unlink()
        _remove_folders(created)
        raise


def write_bytes_atomic(path: str | os.PathLike, data: bytes) -> Path:
    """Write `data` to `path` atomically (:func:`atomic_path`).

    Parameters
    ----------
    path : path
        The file to write; missing parent folders are created.
    data : bytes
        Its whole content.

    Returns
    -------
    Path
        `path`.
    """
    with atomic_path(path) as tmp:
        tmp.write_bytes(data)
    return Path(path)


def write_text_atomic(path: str | os.PathLike, text: str) -> Path:
    """Write `text` to `path` as UTF-8, atomically.

    Parameters
    ----------
    path
        As for :func:`write_bytes_atomic`.
    text : str
        Its whole content.

    Returns
    -------
    Path
        `path`.
    """
    return write_bytes_atomic(path, text.encode("utf-8"))


def json_default(obj: Any) -> Any:
    """``json.dumps(default=...)`` for numpy scalars and arrays and paths.

    Parameters
    ----------
    obj : object
        A value the json module cannot write itself.

    Returns
    -------
    object
        A Python number, a (nested) list, or a string.

    Raises
    ------
    TypeError
        For any other type, as json expects.
    """
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, Path):
        return str(obj)
    raise TypeError(f"cannot write {type(obj).__name__} to JSON")


def write_json_atomic(path: str | os.PathLike, obj: Any) -> Path:
    """Write `obj` as indented JSON to `path` atomically (NaN and infinities refused).

    Parameters
    ----------
    path : path
        The file to write, as for :func:`write_bytes_atomic`.
    obj : object
        JSON-ready data; numpy values and paths allowed (:func:`json_default`).

    Returns
    -------
    Path
        `path`.
    """
    text = json.dumps(obj, indent=2, default=json_default, allow_nan=False)
    return write_text_atomic(path, text + "\n")


@contextlib.contextmanager
def atomic_paths(paths: Sequence[str | os.PathLike]) -> Iterator[list[Path]]:
    """Temporary paths for several files that appear together or not at all.

    Yields one temporary path per target (beside it, keeping its suffix).
    When the block succeeds, existing targets are set aside under hidden
    names, the new files renamed in, and the old ones removed; when a rename
    fails, the files renamed so far are removed and the old ones put back,
    and the error is raised.  A target that is a folder is refused before
    anything is renamed.

    Parameters
    ----------
    paths : sequence of path
        The files to write together.

    Yields
    ------
    list of Path
        One temporary path per target, in the order of `paths`.

    Raises
    ------
    InputError
        When a target is an existing folder, or a folder cannot be created.
    """
    targets = [Path(p) for p in paths]
    for t in targets:
        if t.is_dir():
            raise InputError("is a folder, not a file", source=str(t), fix="choose another output file name")
    created: list[Path] = []
    for parent in dict.fromkeys(t.parent for t in targets):
        created += _make_folders(parent, str(parent))
    temps: list[Path] = []
    try:
        for t in targets:
            clean_stale_staging(t)
            fd, tmp = tempfile.mkstemp(prefix=_hidden_prefix(t.name, _STAGING_TAG) + f"{os.getpid()}.",
                                       suffix=t.suffix, dir=t.parent)
            os.close(fd)
            temps.append(Path(tmp))
        yield list(temps)
        for t in targets:     # checked again: something may have appeared meanwhile
            if t.is_dir():
                raise InputError("is a folder, not a file", source=str(t), fix="choose another output file name")
        placed: list[tuple[Path, Path | None]] = []
        try:
            for t, tmp in zip(targets, temps):
                aside = None
                if os.path.lexists(t):
                    aside = t.parent / _hidden_name(t.name, _ASIDE_TAG)
                    os.rename(t, aside)
                placed.append((t, aside))
                os.chmod(tmp, 0o666 & ~_umask())
                os.replace(tmp, t)
        except BaseException:
            for t, aside in reversed(placed):
                with contextlib.suppress(OSError):
                    if aside is not None:
                        os.replace(aside, t)
                    elif t.is_file():
                        t.unlink()
            raise
        for _, aside in placed:
            if aside is not None:
                with contextlib.suppress(OSError):
                    aside.unlink()
    except BaseException:
        for tmp in temps:
            with contextlib.suppress(OSError):
                tmp.unlink()
        _remove_folders(created)
        raise
