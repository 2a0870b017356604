"""Atomic file output, whole output folders with checksums, and the provenance header.

Nothing arrayplan writes is ever half-written:

* each file goes to a temporary name in the same folder and is renamed into
  place once complete (:func:`atomic_path`);
* files that belong together but share a folder with others (a signal, its
  sidecar and its inverse filter) are renamed in together, and put back as
  they were when one of them fails (:func:`atomic_paths`);
* an output folder is built whole under a hidden staging name beside it,
  given :data:`CHECKSUM_FILE` (every file's SHA-256 and name), and
  published with one rename: an existing folder is moved aside, the new one
  renamed in, the old one removed (:func:`staged_output_dir`).  A rerun so
  replaces the folder whole, and readers refuse a folder whose files do not
  match its checksums (:func:`check_folder`).

Hidden staging and set-aside names carry the writer's process id.  The next
run into the same place removes those of processes that are no longer
alive, and when a run was killed between setting the old folder aside and
renaming the new one in, it first puts the old folder back.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import errno
import hashlib
import json
import os
import re
import shutil
import tempfile
from pathlib import Path
from typing import Any, Iterator, Sequence

import numpy as np

from .._version import __version__
from ..errors import InputError

__all__ = [
    "SIGN_CONVENTION",
    "atomic_path",
    "write_text_atomic",
    "write_bytes_atomic",
    "write_json_atomic",
    "staged_output_dir",
    "atomic_paths",
    "make_folders",
    "CHECKSUM_FILE",
    "write_checksums",
    "check_folder",
    "clean_stale_staging",
    "new_staging_folder",
    "publish_folder",
    "foreign_files",
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


#: Name of the checksum file in every output folder: one line per file,
#: ``<sha256 hex>  <relative path>``, the format ``sha256sum -c`` checks
#: (GNU coreutils; names holding a backslash or newline are escaped its way).
CHECKSUM_FILE = "SHA256SUMS"
#: Environment variable (seconds) that pauses a publish between setting the old
#: folder aside and renaming the new one in; only for interruption tests.
PUBLISH_PAUSE_ENV = "ARRAYPLAN_TEST_PUBLISH_PAUSE_S"
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


def _sha256_file(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _folder_files(folder: Path) -> list[Path]:
    return sorted(p for p in folder.rglob("*") if p.is_file() and p != folder / CHECKSUM_FILE)


def _escape(name: str) -> tuple[str, str]:
    if "\\" in name or "\n" in name or "\r" in name:
        return "\\", name.replace("\\", "\\\\").replace("\n", "\\n").replace("\r", "\\r")
    return "", name


def _unescape(name: str) -> str:
    return re.sub(r"\\(.)", lambda m: {"n": "\n", "r": "\r"}.get(m.group(1), m.group(1)), name)


def write_checksums(folder: str | os.PathLike) -> Path:
    """Write :data:`CHECKSUM_FILE` listing every file below `folder` with its SHA-256.

    Parameters
    ----------
    folder : path
        The folder, complete.

    Returns
    -------
    Path
        The checksum file.
    """
    folder = Path(folder)
    lines = []
    for p in _folder_files(folder):
        flag, name = _escape(p.relative_to(folder).as_posix())
        lines.append(f"{flag}{_sha256_file(p)}  {name}\n")
    return write_text_atomic(folder / CHECKSUM_FILE, "".join(lines))


def _read_checksums(path: Path) -> dict[str, str]:
    listed = {}
    for k, line in enumerate(path.read_text(encoding="utf-8").split("\n"), start=1):
        if not line:
            continue
        escaped = line.startswith("\\")
        body = line[1:] if escaped else line
        digest, sep, name = body.partition("  ")
        if not sep or len(digest) != 64 or any(c not in "0123456789abcdef" for c in digest) or not name:
            raise ValueError(f"line {k} is not '<sha256>  <file>'")
        listed[_unescape(name) if escaped else name] = digest
    return listed


def check_folder(folder: str | os.PathLike, needed: Sequence[str] = ()) -> bool:
    """Check a folder against its :data:`CHECKSUM_FILE`; refuse a mixed or damaged folder.

    Parameters
    ----------
    folder : path
        The folder to check.
    needed : sequence of str
        Glob patterns (relative to `folder`) of the files the caller will
        read; a file matching one of them that the checksums do not list
        (left by another run, or added by hand) is refused.

    Returns
    -------
    bool
        True when the folder has checksums and matches them; False when it
        has none (a folder made by hand or by another program: nothing to
        check against).

    Raises
    ------
    InputError
        A listed file missing or of other content, an unlisted file the
        caller needs, or an unreadable checksum file; the message names the
        file.
    """
    folder = Path(folder)
    path = folder / CHECKSUM_FILE
    if not path.is_file():
        return False
    fix = "write the folder again with the command that made it"
    try:
        listed = _read_checksums(path)
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise InputError(f"unreadable checksum file ({exc})", source=str(path), fix=fix) from None
    for name, digest in sorted(listed.items()):
        p = folder / name
        if not p.is_file():
            raise InputError(f"missing, though {CHECKSUM_FILE} lists it: the folder is incomplete", source=str(p),
                             fix=fix)
        if _sha256_file(p) != digest:
            raise InputError(f"differs from the file written with this folder ({CHECKSUM_FILE}): the folder "
                             "mixes files of different runs or the file was changed or damaged", source=str(p),
                             fix=fix)
    for pattern in needed:
        for p in sorted(folder.glob(pattern)):
            rel = p.relative_to(folder).as_posix()
            if p.is_file() and rel != CHECKSUM_FILE and rel not in listed:
                raise InputError(f"not among the files written with this folder ({CHECKSUM_FILE}): left by "
                                 "another run or added later", source=str(p), fix=fix)
    return True


def new_staging_folder(final: str | os.PathLike) -> Path:
    """Create a hidden staging folder beside `final`, named with this process's id.

    Publish it with :func:`publish_folder`; :func:`clean_stale_staging`
    removes it if this process dies first.

    Parameters
    ----------
    final : path
        The folder it will become.

    Returns
    -------
    Path
        The new, empty staging folder.
    """
    final = Path(final)
    stage = final.parent / _hidden_name(final.name, _STAGING_TAG)
    stage.mkdir()
    return stage


def publish_folder(stage: str | os.PathLike, final: str | os.PathLike, *, ours_only: bool = True) -> None:
    """Rename the complete folder `stage` to `final`, replacing a folder there as a whole.

    An existing `final` is set aside under a hidden name, `stage` renamed in
    and the old one removed; a concurrent writer that publishes in between
    is set aside in turn (the last complete folder wins, never a mix).

    Parameters
    ----------
    stage, final : path
        The complete folder, and the name it is published under.
    ours_only : bool
        Refuse to replace a `final` that holds files its ``SHA256SUMS`` does
        not list (see :func:`foreign_files`), so a mistyped output path never
        deletes someone's folder.  False for folders that only arrayplan
        writes into (a measurement's take folders).
    """
    _publish_folder(Path(stage), Path(final), ours_only=ours_only)


def foreign_files(folder: str | os.PathLike) -> list[Path]:
    """Files in `folder` that arrayplan did not write there as one output.

    Those its :data:`CHECKSUM_FILE` does not list (every file when it has
    none); hidden files (names starting with ".") are not counted.

    Parameters
    ----------
    folder : path
        An existing folder.

    Returns
    -------
    list of Path
        Sorted; empty for an empty folder or a complete arrayplan output.
    """
    folder = Path(folder)
    try:
        listed = set(_read_checksums(folder / CHECKSUM_FILE)) if (folder / CHECKSUM_FILE).is_file() else set()
    except (OSError, UnicodeDecodeError, ValueError):
        listed = set()
    return [p for p in _folder_files(folder)
            if not p.name.startswith(".") and p.relative_to(folder).as_posix() not in listed]


def _refuse_foreign(final: Path) -> None:
    foreign = foreign_files(final) if final.is_dir() and not final.is_symlink() else []
    if foreign:
        shown = ", ".join(p.relative_to(final).as_posix() for p in foreign[:3])
        raise InputError(f"exists and holds files this output would delete but arrayplan did not write as one "
                         f"output ({shown}{', ...' if len(foreign) > 3 else ''})", source=str(final),
                         fix="choose a new or empty output folder (a rerun replaces the whole folder)")


def _publish_folder(stage: Path, final: Path, *, ours_only: bool = True) -> None:
    """Rename `stage` to `final`, replacing a folder there as a whole (retrying against concurrent writers)."""
    parent = final.parent
    pause = os.environ.get(PUBLISH_PAUSE_ENV)
    asides: list[Path] = []
    try:
        for _ in range(50):
            if os.path.lexists(final):
                if not final.is_dir() or final.is_symlink():
                    raise InputError("exists and is not a folder", source=str(final),
                                     fix="choose another output folder")
                if ours_only:
                    _refuse_foreign(final)
                aside = parent / _hidden_name(final.name, _ASIDE_TAG)
                try:
                    os.rename(final, aside)
                except FileNotFoundError:      # another run moved it first
                    continue
                asides.append(aside)
                if pause:
                    import time

                    time.sleep(float(pause))
            try:
                os.rename(stage, final)
                return
            except OSError as exc:
                if exc.errno in (errno.ENOTEMPTY, errno.EEXIST, errno.EISDIR):
                    continue                   # another run published in between: set it aside too
                raise
        raise InputError("other runs keep writing this folder; gave up after 50 tries", source=str(final),
                         fix="run one command at a time into each output folder")
    except BaseException:
        # Put the newest old version back if nothing took its place.
        if asides and not os.path.lexists(final):
            with contextlib.suppress(OSError):
                os.rename(asides.pop(), final)
        raise
    finally:
        for a in asides:
            if a.exists():
                shutil.rmtree(a, ignore_errors=True)


@contextlib.contextmanager
def staged_output_dir(final_dir: str | os.PathLike) -> Iterator[Path]:
    """Build a command's output folder under a staging name, then publish it whole.

    Yields a hidden temporary folder beside `final_dir` (its name carries
    this process's id).  When the block ends without an exception,
    :data:`CHECKSUM_FILE` is written into it and it replaces `final_dir` in
    one rename: an existing folder is set aside, the new one renamed in and
    the old one removed, so no file of an earlier run survives.  When the
    block raises, the staging folder and any parent folders it created are
    deleted and `final_dir` is exactly as it was.  Leftovers of killed runs
    beside `final_dir` are tidied first (:func:`clean_stale_staging`).

    Parameters
    ----------
    final_dir : path
        The output folder.

    Yields
    ------
    Path
        The staging folder to write the output into.

    Raises
    ------
    InputError
        When `final_dir` exists and is not a folder, holds files that are
        not one arrayplan output (:func:`foreign_files`: replacing it would
        delete them), or a folder cannot be created (naming the path and the
        cause).
    """
    final_dir = Path(final_dir)
    parent = final_dir.parent if str(final_dir.parent) else Path(".")
    created = _make_folders(parent, str(final_dir))
    done = False
    try:
        clean_stale_staging(final_dir)
        if os.path.lexists(final_dir) and (not final_dir.is_dir() or final_dir.is_symlink()):
            raise InputError("exists and is not a folder", source=str(final_dir), fix="choose another output folder")
        _refuse_foreign(final_dir)       # before any work, and again when publishing
        stage = parent / _hidden_name(final_dir.name, _STAGING_TAG)
        try:
            stage.mkdir()
        except OSError as exc:
            raise InputError(f"cannot create a folder beside it ({exc.strerror or exc})", source=str(final_dir),
                             fix="check the path and its permissions") from None
        try:
            yield stage
            write_checksums(stage)
            os.chmod(stage, 0o777 & ~_umask())
            _publish_folder(stage, final_dir)
            done = True
        finally:
            if not done:
                shutil.rmtree(stage, ignore_errors=True)
    finally:
        if not done:
            _remove_folders(created)


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


def sha256_of_text(text: str) -> str:
    """SHA-256 of a text's UTF-8 bytes, used as the rig hash in file headers.

    Parameters
    ----------
    text : str
        The text (a rig file's content).

    Returns
    -------
    str
        64 lowercase hex digits.
    """
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def provenance(**extra: Any) -> dict[str, Any]:
    """The header every output file carries: tool, version, date, conventions.

    Parameters
    ----------
    **extra
        Added to it (for example ``rig_sha256=...``).

    Returns
    -------
    dict
        ``tool``, ``tool_version``, ``written_utc`` (ISO 8601),
        ``sign_convention`` (:data:`SIGN_CONVENTION`), ``units`` (m, Hz, s,
        Pa), then `extra`.
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
