"""Findings of the rig check: severity, field, plain-words explanation, fix."""

from __future__ import annotations

from dataclasses import dataclass

from ..rig.model import EntryElements

__all__ = ["SEVERITIES", "Finding", "SideGroup", "count_by_severity"]

SEVERITIES = ("error", "warning", "note")


@dataclass(frozen=True)
class Finding:
    """One problem (or remark) about a rig file.

    Attributes
    ----------
    severity : str
        ``"error"`` (the rig cannot be loaded), ``"warning"`` (it loads, but
        something physical will go wrong) or ``"note"`` (worth knowing).
    field : str
        Where: ``"speakers[0].spacing"``, ``"frequencies"``, ``"line 7"`` ...
    explanation : str
        What is wrong, in plain words with numbers.
    fix : str or None
        What to do about it.
    """

    severity: str
    field: str
    explanation: str
    fix: str | None = None

    def one_line(self) -> str:
        """``severity: field: explanation; fix: ...`` on one line.

        Returns
        -------
        str
            Without the fix when there is none.
        """
        text = f"{self.severity}: {self.field}: {self.explanation}"
        if self.fix:
            text += f"; fix: {self.fix}"
        return " ".join(text.split())


@dataclass(frozen=True)
class SideGroup:
    """The elements one rig-file entry gave, for the physical checks.

    Attributes
    ----------
    label : str
        ``"speakers"`` or ``"microphones"``.
    field : str
        ``"speakers[0]"``; for a side given point by point, ``"speakers"``.
    elements : EntryElements
    counts : tuple of int
        (nu, nv) of a grid, else (n,).
    """

    label: str
    field: str
    elements: EntryElements
    counts: tuple[int, ...]


def count_by_severity(findings: list[Finding]) -> dict[str, int]:
    """How many findings of each severity, ``{"error": n, "warning": n, "note": n}``.

    Parameters
    ----------
    findings : list of Finding
        The checker's findings.

    Returns
    -------
    dict of str to int
        Count per severity, every severity present.
    """
    return {s: sum(f.severity == s for f in findings) for s in SEVERITIES}
