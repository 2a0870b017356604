"""Kernels: sources of coupling matrices.

* :class:`FreeFieldKernel` — monopoles (with directivity) in an unbounded medium.
"""

from .freefield import FreeFieldKernel

__all__ = ["FreeFieldKernel"]
