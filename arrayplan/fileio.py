"""Atomic file output and the provenance header every output file carries.

Nothing arrayplan writes is ever half-written: each file goes to a temporary
name in the same folder and is renamed into place once complete, and a
command that writes several files stages them in a temporary folder that is
moved into place only when every file is done (:func:`staged_output_dir`).
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import hashlib
import json
import os
import shutil
import tempfile
from pathlib import Path
from typing import Any, Iterator

import numpy as np

from ._version import __version__
from .errors import InputError

__all__ = [
    "SIGN_CONVENTION",
    "atomic_path",
    "write_text_atomic",
    "write_bytes_atomic",
    "write_json_atomic",
    "staged_output_dir",
    "provenance",
    "sha256_of_text",
    "json_default",
]

#: Stated in every output header and in the documentation.
SIGN_CONVENTION = (
    "exp(-j*k*r)/(4*pi*r) with time dependence exp(+j*omega*t): the same as "
    "numpy.fft.rfft of a measured impulse response"
)


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


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
    The temporary name keeps the suffix of `path`, so libraries that choose a
    format by suffix (soundfile, matplotlib) still work.
    """
    path = Path(path)
    created = _make_folders(path.parent, str(path))
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.stem}.", suffix=".part" + path.suffix, dir=path.parent)
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
    """Write `data` to `path` atomically and return the path."""
    with atomic_path(path) as tmp:
        tmp.write_bytes(data)
    return Path(path)


def write_text_atomic(path: str | os.PathLike, text: str) -> Path:
    """Write UTF-8 `text` to `path` atomically and return the path."""
    return write_bytes_atomic(path, text.encode("utf-8"))


def json_default(obj: Any) -> Any:
    """``json.dumps(default=...)`` for numpy scalars and arrays and paths."""
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, Path):
        return str(obj)
    raise TypeError(f"cannot write {type(obj).__name__} to JSON")


def write_json_atomic(path: str | os.PathLike, obj: Any) -> Path:
    """Write `obj` as indented JSON to `path` atomically."""
    text = json.dumps(obj, indent=2, default=json_default, allow_nan=False)
    return write_text_atomic(path, text + "\n")


@contextlib.contextmanager
def staged_output_dir(final_dir: str | os.PathLike) -> Iterator[Path]:
    """Stage a command's output files in a temporary folder, then publish them.

    Yields a temporary folder beside `final_dir`.  When the block ends
    without an exception, each staged file is renamed into `final_dir`
    (created with its missing parents if needed; files of the same name are
    replaced, others are left alone).  When it raises, the staging folder and
    any parent folders it created are deleted and `final_dir` is exactly as
    it was.
    """
    final_dir = Path(final_dir)
    parent = final_dir.parent if str(final_dir.parent) else Path(".")
    if final_dir.exists() and not final_dir.is_dir():
        raise InputError("exists and is not a folder", source=str(final_dir),
                         fix="choose another `out` folder")
    created = _make_folders(parent, str(final_dir))
    done = False
    try:
        stage = Path(tempfile.mkdtemp(prefix=f".{final_dir.name}.staging.", dir=parent))
        try:
            yield stage
            final_dir.mkdir(exist_ok=True)
            for item in sorted(stage.rglob("*")):
                if item.is_dir():
                    continue
                target = final_dir / item.relative_to(stage)
                target.parent.mkdir(parents=True, exist_ok=True)
                os.replace(item, target)
            done = True
        finally:
            shutil.rmtree(stage, ignore_errors=True)
    finally:
        if not done:
            _remove_folders(created)


def sha256_of_text(text: str) -> str:
    """Hex SHA-256 of a text, used as the rig hash in file headers."""
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def provenance(**extra: Any) -> dict[str, Any]:
    """The header every output file carries: tool, version, date, conventions.

    Keyword arguments are added to it (for example ``rig_sha256=...``).
    """
    head = {
        "tool": "arrayplan",
        "tool_version": __version__,
        "written_utc": _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat(),
        "sign_convention": SIGN_CONVENTION,
        "units": {"position": "m", "frequency": "Hz", "time": "s", "pressure": "Pa"},
    }
    head.update(extra)
    return head
