"""Result arrays that worker processes on this machine write into directly.

A pool of worker processes normally sends each result back through a pipe:
pickled, copied into the parent and copied again into the final array.  For
results as large as a plan's weights (hundreds of MB) that transfer costs
about half as much as the decomposition itself.  :class:`SharedArrays`
instead places the final arrays in one memory-mapped file (in ``/dev/shm``
where it exists, so it never touches a disk) that the parent and every
worker map; a worker writes its chunk's rows in place and returns only small
values.

>>> import numpy as np
>>> out = SharedArrays({"s": ((4, 2), np.float64)}, in_memory=True)
>>> arrays_for(out.key)["s"][1:3] = 7.0        # what a worker does with its chunk
>>> out.arrays["s"][:, 0].tolist()
[0.0, 7.0, 7.0, 0.0]
>>> out.close()

Notes
-----
The parent keeps its arrays after :meth:`SharedArrays.close`: closing only
removes the file's name (Linux keeps the pages while a mapping exists), so
the arrays live, like any numpy array, until the last reference to them is
gone.  Workers started by ``fork`` inherit the parent's mapping; workers
started afresh open the file by its name.  Workers of a Dask cluster on
other machines cannot see the file: callers send results back there.
A fresh mapping reads as zeros.  The file of a run killed before it
closed is removed by the next run that makes one.
"""

from __future__ import annotations

import mmap
import os
import tempfile
import uuid
from typing import Mapping

import numpy as np

__all__ = ["SharedArrays", "arrays_for"]

_ALIGN = 64
#: Arrays mapped in this process, by key (the parent's own, or a worker's once opened).
_MAPPED: dict[str, dict[str, np.ndarray]] = {}


def _layout(specs: Mapping[str, tuple[tuple[int, ...], type]]) -> tuple[list[tuple[str, tuple, np.dtype, int]], int]:
    """Byte offset of each array in the file (aligned), and the file's size."""
    placed, offset = [], 0
    for name, (shape, dtype) in specs.items():
        dtype = np.dtype(dtype)
        shape = tuple(int(n) for n in shape)
        placed.append((name, shape, dtype, offset))
        size = int(np.prod(shape, dtype=np.int64)) * dtype.itemsize
        offset += -(-size // _ALIGN) * _ALIGN
    return placed, max(offset, _ALIGN)


def _folders() -> list[str]:
    """Where the file may go, best first: ``/dev/shm`` (memory, not disk) when writable, then the temporary folder."""
    shm = "/dev/shm"
    return ([shm] if os.path.isdir(shm) and os.access(shm, os.W_OK) else []) + [tempfile.gettempdir()]


def _remove_stale(folder: str) -> None:
    """Remove the files of runs that died before closing theirs (their process no longer exists)."""
    try:
        names = [n for n in os.listdir(folder) if n.startswith("arrayplan-") and n.endswith(".shared")]
    except OSError:
        return
    for name in names:
        try:
            pid = int(name.split("-")[1])
            os.kill(pid, 0)
        except ProcessLookupError:
            try:
                os.unlink(os.path.join(folder, name))
            except OSError:
                pass
        except (ValueError, IndexError, PermissionError):
            continue


def _map(path: str, size: int, placed, create: bool) -> dict[str, np.ndarray]:
    flags = os.O_RDWR | (os.O_CREAT | os.O_EXCL if create else 0)
    fd = os.open(path, flags, 0o600)
    try:
        if create:
            try:
                # reserve every block now: a mapping that later runs out of space kills the process (SIGBUS)
                os.posix_fallocate(fd, 0, size)
            except OSError:
                os.close(fd)
                fd = -1
                os.unlink(path)
                raise
        buf = mmap.mmap(fd, size)
    finally:
        if fd >= 0:
            os.close(fd)
    return {name: np.frombuffer(buf, dtype=dtype, count=int(np.prod(shape, dtype=np.int64)),
                                offset=offset).reshape(shape)
            for name, shape, dtype, offset in placed}


class SharedArrays:
    """Named arrays in memory that this process's local workers can write into.

    Parameters
    ----------
    specs : mapping of str to (shape, dtype)
        The arrays to make, e.g. ``{"s": ((n_freq, k), np.float64)}``.
    in_memory : bool
        True: plain process memory, for work that runs in this process
        only (no file).  False: a memory-mapped file that worker processes
        open by :attr:`key`.

    Attributes
    ----------
    key : str
        What a worker passes to :func:`arrays_for` (picklable, small).

    Raises
    ------
    OSError
        When no folder has room for the file (its blocks are reserved up
        front, so a full ``/dev/shm`` or disk shows here, not as a crash of
        a worker later).
    arrays : dict of str to ndarray
        The arrays, zero-filled, writable.
    """

    def __init__(self, specs: Mapping[str, tuple[tuple[int, ...], type]], *, in_memory: bool = False):
        placed, size = _layout(specs)
        if in_memory:
            self.key = f"memory:{uuid.uuid4().hex}"
            self.arrays = {name: np.zeros(shape, dtype=dtype) for name, shape, dtype, _ in placed}
            self._path = None
        else:
            fields = ";".join(f"{name}:{','.join(map(str, shape))}:{dtype.str}:{offset}"
                              for name, shape, dtype, offset in placed)
            for i, folder in enumerate(_folders()):
                _remove_stale(folder)
                self._path = os.path.join(folder, f"arrayplan-{os.getpid()}-{uuid.uuid4().hex}.shared")
                self.key = f"{self._path}|{size}|{fields}"
                try:
                    self.arrays = _map(self._path, size, placed, create=True)
                    break
                except OSError:
                    if i == len(_folders()) - 1:
                        raise
        _MAPPED[self.key] = self.arrays

    def close(self) -> None:
        """Forget the arrays here and remove the file's name; the arrays stay valid in this process."""
        _MAPPED.pop(self.key, None)
        if self._path is not None:
            try:
                os.unlink(self._path)
            except FileNotFoundError:
                pass
            self._path = None

    def __enter__(self) -> "SharedArrays":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def arrays_for(key: str) -> dict[str, np.ndarray]:
    """The arrays of a :class:`SharedArrays` by its key, in the parent or in a worker.

    Parameters
    ----------
    key : str
        :attr:`SharedArrays.key`.

    Returns
    -------
    dict of str to ndarray
        Writable views of the shared arrays (mapped once per process).
    """
    found = _MAPPED.get(key)
    if found is not None:
        return found
    if key.startswith("memory:"):
        raise RuntimeError("in-memory shared arrays are visible only in the process that made them")
    path, size, fields = key.split("|", 2)
    placed = []
    for field in fields.split(";"):
        name, shape, dtype, offset = field.split(":")
        placed.append((name, tuple(int(n) for n in shape.split(",") if n), np.dtype(dtype), int(offset)))
    arrays = _map(path, int(size), placed, create=False)
    _MAPPED[key] = arrays
    return arrays
