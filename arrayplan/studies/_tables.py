"""CSV text of the study tables (shared by the study file writers and ``compare``)."""

from __future__ import annotations

import csv
import io
from typing import Any, Sequence

__all__ = ["csv_text"]


def csv_text(header: Sequence[str], rows: Sequence[Sequence[Any]]) -> str:
    """CSV with a header line; floats as ``%.10g``, other values as ``str``, quoting where needed."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    w.writerows([[f"{x:.10g}" if isinstance(x, float) else x for x in r] for r in rows])
    return buf.getvalue()
