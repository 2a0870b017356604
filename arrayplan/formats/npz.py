"""NPZ archives written straight from the arrays' memory.

:func:`write_npz` writes the same archive as ``numpy.savez`` (a ZIP of
``NAME.npy`` members, stored uncompressed, ZIP64 so members may exceed
4 GiB), read back by ``numpy.load``.  ``numpy.savez`` copies every array
through 16 MiB buffers on its way into the archive; here each array's bytes
go to the file in one write from the array itself, which for a plan's
weights (hundreds of MB) roughly halves the time.
"""

from __future__ import annotations

import os
import zipfile
from typing import Mapping

import numpy as np

__all__ = ["write_npz"]


def write_npz(path: str | os.PathLike, arrays: Mapping[str, np.ndarray]) -> None:
    """Write `arrays` to an NPZ archive at `path` (as ``numpy.savez`` would).

    Parameters
    ----------
    path : path
        The archive to write (replaced if it exists).  Write into a
        temporary name and rename (:func:`arrayplan.formats.atomic_files.atomic_path`)
        for an atomic result.
    arrays : mapping of str to array_like
        Member names (without ``.npy``) and arrays of any shape; object
        arrays are refused, as ``numpy.load`` refuses to read them without
        pickle.

    Raises
    ------
    ValueError
        For an array of dtype object.
    """
    with zipfile.ZipFile(path, "w", compression=zipfile.ZIP_STORED, allowZip64=True) as archive:
        for name, value in arrays.items():
            arr = np.asanyarray(value)
            if arr.dtype.hasobject:
                raise ValueError(f"array {name!r} holds Python objects; NPZ files written here never need pickle")
            arr = np.ascontiguousarray(arr) if not (arr.flags.c_contiguous or arr.flags.f_contiguous) else arr
            with archive.open(f"{name}.npy", "w", force_zip64=True) as member:
                np.lib.format.write_array_header_1_0(member, np.lib.format.header_data_from_array_1_0(arr))
                if arr.size:
                    # Fortran-ordered arrays are stored in their own order (the header says so), as numpy.save does
                    member.write(arr.reshape(-1, order="A").view(np.uint8))
