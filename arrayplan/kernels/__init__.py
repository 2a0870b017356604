"""Kernels: sources of coupling matrices.

* :class:`FreeFieldKernel` — monopoles (with directivity) in an unbounded medium.
* :class:`RoomKernel` — image sources of a rectangular room (J. B. Allen and D. A. Berkley, 1979).
* :class:`MeasuredKernel` — the DFT of measured impulse responses (an IR set).
"""

from .freefield import FreeFieldKernel
from .measured import MeasuredKernel, fade_out_window
from .room import RoomKernel

__all__ = ["FreeFieldKernel", "MeasuredKernel", "RoomKernel", "fade_out_window"]
