"""The project report: one self-contained HTML page a practitioner can hand over.

:func:`build_report` finds every result under a project folder
(:mod:`~arrayplan.report.discover`), draws the figures
(:mod:`~arrayplan.report.figures`) and writes the page
(:mod:`~arrayplan.report.html`): rig summary, channels and counts, field
maps, filters and their planned crosstalk, impulse responses, the
verification verdict, the cautions and the provenance of every file.
"""

from .build import build_report, write_report
from .discover import ProjectResults, find_results

__all__ = ["build_report", "write_report", "find_results", "ProjectResults"]
