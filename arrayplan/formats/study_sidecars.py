"""The JSON sidecars of the design-study folders: one name and version each, one way to read them.

A study folder (``arrayplan study capacity|tolerance|zones|layout``,
``arrayplan compare``) holds its tables, arrays and figures beside one JSON
sidecar, which names the study.  The folders' writers stay beside their
studies in :mod:`arrayplan.studies` (they draw the studies' figures); this
module owns what the sidecars are called and how they are versioned:

=============  =================  ===============================  ===============
study          sidecar            ``format``                       ``format_version``
=============  =================  ===============================  ===============
capacity       ``capacity.json``  ``arrayplan-capacity-study``     1
tolerance      ``tolerance.json`` ``arrayplan-tolerance-study``    1
zones          ``zones.json``     ``arrayplan-zones-study``        1
layout         ``layout.json``    ``arrayplan-layout-study``       1
comparison     ``compare.json``   ``arrayplan-comparison``         1
=============  =================  ===============================  ===============

The previous release marked them with ``kind`` (the same name), the
capacity and tolerance sidecars with ``format_version`` 1 and the others
with no version; those files are still read, for one release
(:mod:`arrayplan.formats._versioning`).
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

from ._versioning import check, read_json_document, stamp

__all__ = ["StudySidecar", "STUDY_SIDECARS", "stamp_study_sidecar", "read_study_sidecar"]


@dataclass(frozen=True)
class StudySidecar:
    """One study's sidecar: its file name, ``format`` and newest ``format_version``."""

    file: str
    format: str
    version: int


#: Every study's sidecar, by study.
STUDY_SIDECARS: dict[str, StudySidecar] = {
    "capacity": StudySidecar("capacity.json", "arrayplan-capacity-study", 1),
    "tolerance": StudySidecar("tolerance.json", "arrayplan-tolerance-study", 1),
    "zones": StudySidecar("zones.json", "arrayplan-zones-study", 1),
    "layout": StudySidecar("layout.json", "arrayplan-layout-study", 1),
    "comparison": StudySidecar("compare.json", "arrayplan-comparison", 1),
}


def stamp_study_sidecar(doc: Mapping[str, Any], study: str) -> dict[str, Any]:
    """`doc` with the study's ``format`` and ``format_version`` first.

    Parameters
    ----------
    doc : mapping
        The sidecar's other keys.
    study : str
        A key of :data:`STUDY_SIDECARS`.

    Returns
    -------
    dict
    """
    side = STUDY_SIDECARS[study]
    return stamp(doc, side.format, side.version)


def read_study_sidecar(folder: str | os.PathLike, study: str) -> dict[str, Any]:
    """Read and check a study folder's sidecar.

    Parameters
    ----------
    folder : path
        The study folder.
    study : str
        A key of :data:`STUDY_SIDECARS`.

    Returns
    -------
    dict
        The sidecar.

    Raises
    ------
    InputError
        Naming the file: unreadable, not JSON, another format or a newer version.
    """
    side = STUDY_SIDECARS[study]
    path = Path(folder) / side.file
    fix = f"point at a folder written by arrayplan's {study} study"
    doc = read_json_document(path, fix)
    check(doc, side.format, side.version, str(path), legacy=side.format, fix=fix)
    return doc
