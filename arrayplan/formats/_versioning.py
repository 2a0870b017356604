"""How every format module names and versions its files: ``format`` + ``format_version``.

Each JSON (or TOML) document arrayplan writes starts with two keys::

    format          "arrayplan-..."   the artefact's name, one per format module
    format_version  1, 2, ...         raised when a reader of the old version would misread the file

:func:`stamp` puts them on a document, :func:`check` checks them on reading:
another format is refused, and so is a version newer than the reader knows.
Files of the previous release that were marked another way are still read,
for one release: those with a ``kind`` key holding the format's name (and
no version, or a ``format_version``), and, for formats that had no marker
at all, documents with neither key (:data:`UNMARKED`).  Such a file reads
as version 0 when it has no version.
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any, Mapping

from ..errors import InputError

__all__ = ["UNMARKED", "stamp", "check", "read_json_document"]

#: `legacy` value of :func:`check` for a format whose files had neither ``format`` nor ``kind`` before.
UNMARKED = object()

_MARKERS = ("format", "format_version", "kind")


def stamp(doc: Mapping[str, Any], fmt: str, version: int) -> dict[str, Any]:
    """`doc` with ``format`` and ``format_version`` first (any older ``kind`` marker dropped).

    Parameters
    ----------
    doc : mapping
        The document's other keys.
    fmt : str
        The format's name, ``"arrayplan-..."``.
    version : int
        Its version, >= 1.

    Returns
    -------
    dict
        A new dict; `doc` is not changed.
    """
    return {"format": fmt, "format_version": int(version), **{k: v for k, v in doc.items() if k not in _MARKERS}}


def _whole(v: Any) -> bool:
    return isinstance(v, int) and not isinstance(v, bool) and v >= 1


def check(doc: Any, fmt: str, max_version: int, source: str | None = None, *, legacy: Any = None,
          field_prefix: str = "", fix: str | None = None) -> int:
    """Check a document's ``format`` and ``format_version``; return the version.

    Parameters
    ----------
    doc : object
        The decoded document.
    fmt : str
        The format's name it must carry.
    max_version : int
        The newest version this arrayplan reads.
    source : str, optional
        The file, for messages.
    legacy : str or UNMARKED, optional
        How the previous release marked this format: the value of its
        ``kind`` key, or :data:`UNMARKED` when its files carried no marker.
    field_prefix : str, optional
        Where the two keys sit in a larger document (``"extra.summary."``).
    fix : str, optional
        What to give instead when the format is wrong.

    Returns
    -------
    int
        The document's ``format_version``; 0 for an unversioned file of the previous release.

    Raises
    ------
    InputError
        Naming `source` and the field: not a JSON object, another format, a
        missing or malformed version, or a version newer than `max_version`.
    """
    got = doc.get("format") if isinstance(doc, dict) else None
    if isinstance(doc, dict) and got is None and legacy is not None:
        if legacy is UNMARKED and "kind" not in doc or isinstance(legacy, str) and doc.get("kind") == legacy:
            if "format_version" not in doc:
                return 0
            got = fmt
    if got != fmt:
        what = repr(got) if isinstance(doc, dict) else f"a JSON {type(doc).__name__}, not an object"
        raise InputError(f"expected format {fmt!r}, got {what}", source=source, field=field_prefix + "format",
                         fix=fix)
    version = doc.get("format_version")
    if not _whole(version):
        raise InputError(f"missing or bad format_version {version!r} (a whole number from 1)", source=source,
                         field=field_prefix + "format_version", fix=fix)
    if version > max_version:
        raise InputError(f"format_version {version} is newer than this arrayplan reads ({max_version})",
                         source=source, field=field_prefix + "format_version", fix="use a newer arrayplan")
    return version


def read_json_document(path: str | os.PathLike, fix: str | None = None) -> Any:
    """The decoded JSON at `path`, or InputError naming the file (missing, unreadable, not JSON).

    Parameters
    ----------
    path : path
    fix : str, optional
        What to point at instead, for the message.

    Returns
    -------
    object
    """
    path = Path(path)
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise InputError(f"cannot read ({exc.strerror or exc})", source=str(path), fix=fix) from None
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"not valid JSON ({' '.join(str(exc).split())})", source=str(path)) from None
