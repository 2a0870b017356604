"""Whole output folders: built under a staging name, given checksums, published by one rename.

An output folder is built whole under a hidden staging name beside it,
given :data:`CHECKSUM_FILE` (every file's SHA-256 and name), and published
with one rename: an existing folder is moved aside, the new one renamed in,
the old one removed (:func:`staged_output_dir`).  A rerun so replaces the
folder whole, and readers refuse a folder whose files do not match its
checksums (:func:`check_folder`).  A folder that holds files arrayplan did
not write there as one output is never replaced (:func:`foreign_files`).

Hidden staging and set-aside names carry the writer's process id.  The next
run into the same place removes those of processes that are no longer
alive, and when a run was killed between setting the old folder aside and
renaming the new one in, it first puts the old folder back
(:func:`arrayplan.formats.hidden_names.clean_stale_staging`).
"""

from __future__ import annotations

import contextlib
import errno
import hashlib
import os
import re
import shutil
from pathlib import Path
from typing import Iterator, Sequence

from ..errors import InputError
from .atomic_files import _make_folders, _remove_folders, _umask, write_text_atomic
from .hidden_names import _ASIDE_TAG, _STAGING_TAG, _hidden_name, clean_stale_staging

__all__ = [
    "CHECKSUM_FILE",
    "PUBLISH_PAUSE_ENV",
    "write_checksums",
    "check_folder",
    "foreign_files",
    "new_staging_folder",
    "publish_folder",
    "staged_output_dir",
]

#: Name of the checksum file in every output folder: one line per file,
#: ``<sha256 hex>  <relative path>``, the format ``sha256sum -c`` checks
#: (GNU coreutils; names holding a backslash or newline are escaped its way).
CHECKSUM_FILE = "SHA256SUMS"
#: Environment variable (seconds) that pauses a publish between setting the old
#: folder aside and renaming the new one in; only for interruption tests.
PUBLISH_PAUSE_ENV = "ARRAYPLAN_TEST_PUBLISH_PAUSE_S"


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
