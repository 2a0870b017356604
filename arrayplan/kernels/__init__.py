"""Kernels: sources of coupling matrices.

* :class:`FreeFieldKernel` — monopoles (with directivity) in an unbounded medium.
* :class:`RoomKernel` — image sources of a rectangular room (J. B. Allen and D. A. Berkley, 1979).
* :class:`MeasuredKernel` — the DFT of measured impulse responses (an IR set).
"""

from .freefield import FreeFieldKernel
from .measured import MeasuredKernel, fade_out_window
from .room import RoomKernel
from ..rig import Rig

__all__ = ["FreeFieldKernel", "MeasuredKernel", "RoomKernel", "fade_out_window", "rig_kernel", "kernel_settings"]


def rig_kernel(rig: Rig, *, free_field: bool = False) -> RoomKernel | FreeFieldKernel:
    """The model kernel of `rig`: its room when it has a ``[room]`` table, else the free field.

    Parameters
    ----------
    rig : Rig
    free_field : bool
        Use the free field even when the rig has a room.

    Returns
    -------
    RoomKernel or FreeFieldKernel
    """
    if rig.room is not None and not free_field:
        return RoomKernel(rig)
    return FreeFieldKernel(rig)


def kernel_settings(kernel: object) -> dict:
    """A kernel's name and settings as plain data, for sidecars.

    Parameters
    ----------
    kernel : object
        Any kernel; one with a ``settings()`` method gives its own.

    Returns
    -------
    dict
        The kernel's ``settings()``, or ``kernel`` (its name) plus, when it
        has a medium, ``speed_of_sound`` (m/s) and ``air_absorption``.
    """
    if hasattr(kernel, "settings"):
        return kernel.settings()
    out = {"kernel": getattr(kernel, "name", "free field" if isinstance(kernel, FreeFieldKernel)
                             else type(kernel).__name__)}
    medium = getattr(kernel, "medium", None)
    if medium is not None:
        out.update(speed_of_sound=medium.speed_of_sound, air_absorption=medium.air_absorption)
    return out
