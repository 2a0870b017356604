"""Check a rig file and explain every problem in plain words.

:func:`check_rig_file` reads a rig file the way :func:`arrayplan.rig.load_rig`
does, but instead of stopping at the first problem it goes on and lists all
it can find: TOML syntax, unknown keys, missing or wrong-typed values,
non-finite positions, coincident elements, repeated names or channels, bad
directivity, bad frequencies, missing or malformed CSV files.  When the file
loads, it adds physical warnings a practitioner wants before mounting
hardware (:func:`~arrayplan.rigcheck.physics.physical_findings`).

Each problem is a :class:`Finding` with a severity (``"error"``,
``"warning"`` or ``"note"``), the field it is about, an explanation and a fix.
"""

from .findings import SEVERITIES, Finding, SideGroup, count_by_severity
from .physics import physical_findings
from .structure import check_rig_file

__all__ = ["SEVERITIES", "Finding", "SideGroup", "check_rig_file", "count_by_severity", "physical_findings"]
