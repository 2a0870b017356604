"""Rigs: where the speakers and microphones are, what they are, and the medium.

* :mod:`arrayplan.rig.model`: the data model (:class:`ElementSet`, :class:`Rig`,
  :class:`HardwareMap`, :class:`PlanSettings`) and its structural problems;
* :mod:`arrayplan.rig.entries`: the ``[[speakers]]`` / ``[[microphones]]``
  entries of a rig file (points, generated groups, CSV files);
* :mod:`arrayplan.rig.positions_csv`: element positions from CSV;
* :mod:`arrayplan.rig.reader`: a rig file (TOML) -> :class:`Rig` (:func:`load_rig`).

Every public name is importable from ``arrayplan.rig``.
"""

from ..formats.tomlfields import FieldReader
from .entries import ENTRY_KEYS, entry_kind, group_elements, join_entries, resolve_entry, resolve_side, rig_field_reader
from .model import (COINCIDENT_M, MAX_COINCIDENT_LISTED, MAX_COORDINATE_M, TEMPERATURE_RANGE_C, ElementSet,
                    EntryElements, HardwareMap, PlanSettings, Rig, coincident_pairs)
from .positions_csv import read_positions_csv
from .reader import TABLE_KEYS, load_rig, read_rig_document, resolve_section

__all__ = ["COINCIDENT_M", "ENTRY_KEYS", "MAX_COINCIDENT_LISTED", "MAX_COORDINATE_M", "TABLE_KEYS",
           "TEMPERATURE_RANGE_C", "ElementSet", "EntryElements", "FieldReader", "HardwareMap", "PlanSettings", "Rig",
           "coincident_pairs", "entry_kind", "group_elements", "join_entries", "load_rig", "read_positions_csv",
           "read_rig_document", "resolve_entry", "resolve_section", "resolve_side", "rig_field_reader"]
