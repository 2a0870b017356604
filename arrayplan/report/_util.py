"""Small helpers shared by the report's section builders: relative paths, anchors, numbers, figures."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from .html import figure_html

__all__ = ["_rel", "_anchor", "_fmt", "_figures_html"]


def _rel(path: Path, root: Path) -> str:
    """`path` relative to the project folder; the folder's own name when it is the project folder itself."""
    try:
        rel = path.relative_to(root)
    except ValueError:
        return str(path)
    return (Path(root).resolve().name or str(root)) if str(rel) == "." else str(rel)


def _anchor(kind: str, path: Path, root: Path) -> str:
    return kind + "-" + "".join(c if c.isalnum() else "-" for c in _rel(path, root)).strip("-")


def _fmt(x: float, spec: str = ".3g") -> str:
    if x is None or not np.isfinite(x):
        return "-"
    text = format(x, spec)
    return text[1:] if text.startswith("-") and not text.strip("-0.") else text     # no "-0.0"


def _figures_html(figs: list[tuple[str, bytes]], label: str) -> str:
    """The ``<figure>`` elements of a section's drawn figures, (caption, PNG bytes) each."""
    return "\n".join(figure_html(png, caption, f"{label}, figure {k}") for k, (caption, png) in enumerate(figs, 1))
