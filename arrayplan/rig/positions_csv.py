"""Element positions from a CSV file (``name,x,y,z[,channel]``, metres), as a rig file's ``csv`` entries give them."""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..limits import MAX_CHANNEL_NUMBER, MAX_ELEMENTS_PER_SIDE
from .model import MAX_COORDINATE_M

__all__ = ["read_positions_csv"]

#: Key under which :class:`csv.DictReader` collects the values beyond the header's columns.
_EXTRA_VALUES = "\0extra"


def read_positions_csv(path: str | Path, *, field: str = "csv") -> tuple[list[str] | None, np.ndarray,
                                                                          list[int] | None]:
    """Read element positions from a CSV file with a header ``x,y,z`` (metres).

    Optional columns ``name`` and ``channel`` (1-based hardware channel).

    Parameters
    ----------
    path : str or Path
        The CSV file (UTF-8, optional byte-order mark).
    field : str
        Field named in messages about a missing file.

    Returns
    -------
    names : list of str or None
    positions : ndarray, shape (n, 3)
    channels : list of int or None

    Raises
    ------
    InputError
        Missing or unreadable file, a wrong header or row, a non-finite or
        out-of-range coordinate, an empty name, a channel outside
        1..MAX_CHANNEL_NUMBER, or no rows.
    """
    path = Path(path)
    src = str(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError("file not found", source=src, field=field) from None
    except (UnicodeDecodeError, IsADirectoryError) as exc:
        raise InputError(f"cannot read as UTF-8 text ({exc.__class__.__name__})", source=src) from None
    reader = csv.DictReader(io.StringIO(text), restkey=_EXTRA_VALUES)
    header = [h.strip().lower() for h in (reader.fieldnames or [])]
    if not {"x", "y", "z"} <= set(header):
        raise InputError(f"header must contain x,y,z (found {','.join(header) or 'nothing'})", source=src,
                         field="header", fix="first line: name,x,y,z  (positions in metres)")
    reader.fieldnames = header
    names, rows, channels = [], [], []
    for line_no, row in enumerate(reader, start=2):
        if row.get(_EXTRA_VALUES):
            n_values = len(header) + len(row[_EXTRA_VALUES])
            raise InputError(f"{n_values} values under a header of {len(header)} columns",
                             source=src, field=f"line {line_no}", fix=f"one value per column: {','.join(header)}")
        if any(row.get(c) is None for c in header):
            raise InputError(f"fewer values than the {len(header)} columns of the header", source=src,
                             field=f"line {line_no}", fix=f"one value per column: {','.join(header)}")
        if line_no - 1 > MAX_ELEMENTS_PER_SIDE:
            raise InputError(f"more than {MAX_ELEMENTS_PER_SIDE} positions", source=src, field=f"line {line_no}")
        try:
            xyz = [float(row[c]) for c in ("x", "y", "z")]
        except (TypeError, ValueError):
            raise InputError(f"x, y, z must be numbers, got {[row.get(c) for c in 'xyz']}", source=src,
                             field=f"line {line_no}") from None
        if not all(math.isfinite(v) for v in xyz):
            raise InputError("position is not finite", source=src, field=f"line {line_no}")
        if any(abs(v) > MAX_COORDINATE_M for v in xyz):
            raise InputError(f"coordinates must be at most {MAX_COORDINATE_M:g} m in magnitude, got {xyz}",
                             source=src, field=f"line {line_no}")
        rows.append(xyz)
        if "name" in header:
            nm = (row.get("name") or "").strip()
            if not nm:
                raise InputError("empty name", source=src, field=f"line {line_no}")
            names.append(nm)
        if "channel" in header:
            try:
                ch = int(row["channel"])
            except (TypeError, ValueError):
                raise InputError(f"channel must be a whole number, got {row.get('channel')!r}", source=src,
                                 field=f"line {line_no}") from None
            if not 1 <= ch <= MAX_CHANNEL_NUMBER:
                raise InputError(f"channels are numbered from 1 to at most {MAX_CHANNEL_NUMBER}, got {ch}",
                                 source=src, field=f"line {line_no}")
            channels.append(ch)
    if not rows:
        raise InputError("no positions", source=src, fix="add one line per element below the header")
    return (names or None), np.array(rows, dtype=float), (channels or None)
