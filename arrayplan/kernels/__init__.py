"""Kernels: sources of coupling matrices.

* :class:`FreeFieldKernel` — monopoles (with directivity) in an unbounded medium.
* :class:`MeasuredKernel` — the DFT of measured impulse responses (an IR set).
"""

from .freefield import FreeFieldKernel
from .measured import MeasuredKernel, fade_out_window

__all__ = ["FreeFieldKernel", "MeasuredKernel", "fade_out_window"]
