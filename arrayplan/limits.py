"""Size limits: estimate the memory a piece of work needs before allocating it, and refuse absurd sizes.

A rig of 10^9 elements, a signal of 10^9 seconds or a filter of 10^9 taps
would exhaust the machine's memory long after the user's typo.  Code that
allocates in proportion to an input size calls :func:`check_memory` first
with its estimate; above the limit it raises an :class:`InputError` whose
single line gives the estimate and says how to lift the limit.

The limit is a library parameter, ``max_memory_gib`` (default
:data:`DEFAULT_MAX_MEMORY_GIB`), set for a block of work with
:func:`memory_limit`; the command line maps it to an option.
"""

from __future__ import annotations

import contextlib
import math
from typing import Iterator

from .errors import InputError

__all__ = ["DEFAULT_MAX_MEMORY_GIB", "MAX_ELEMENTS_PER_SIDE", "MAX_CHANNEL_NUMBER", "MAX_FREQUENCIES", "check_memory",
           "memory_limit",
           "current_limit_gib", "format_bytes"]

#: Default limit of one estimate, GiB (a few times below a small workstation's memory).
DEFAULT_MAX_MEMORY_GIB = 4.0
#: Most elements one side of a rig may have whatever the memory limit (a 128 x 128 panel is 16384).
MAX_ELEMENTS_PER_SIDE = 100_000

#: Highest 1-based hardware channel number (the largest audio networks carry a few hundred channels).
MAX_CHANNEL_NUMBER = 4096
#: Most planned frequencies in a rig file (a 1 Hz grid to 1 MHz).
MAX_FREQUENCIES = 1_000_000

_limit_gib = [DEFAULT_MAX_MEMORY_GIB]


def current_limit_gib() -> float:
    """The memory limit now in force.

    Returns
    -------
    float
        Limit (GiB).
    """
    return _limit_gib[-1]


@contextlib.contextmanager
def memory_limit(max_memory_gib: float | None) -> Iterator[float]:
    """Set the limit of :func:`check_memory` inside a ``with`` block (None keeps the current one).

    Parameters
    ----------
    max_memory_gib : float or None
        Largest estimate accepted, GiB; finite and positive.

    Yields
    ------
    float
        The limit in force inside the block (GiB).
    """
    if max_memory_gib is None:
        max_memory_gib = current_limit_gib()
    if not (isinstance(max_memory_gib, (int, float)) and math.isfinite(max_memory_gib) and max_memory_gib > 0):
        raise InputError(f"must be a positive number of GiB, got {max_memory_gib!r}", field="max_memory_gib")
    _limit_gib.append(float(max_memory_gib))
    try:
        yield float(max_memory_gib)
    finally:
        _limit_gib.pop()


def format_bytes(n_bytes: float) -> str:
    """A byte count in the largest binary unit that keeps it at 1 or more (``'37.3 GiB'``).

    Parameters
    ----------
    n_bytes : float
        Bytes.

    Returns
    -------
    str
        Value to three significant digits and its unit (B, KiB, ... PiB).
    """
    value = float(n_bytes)
    for unit in ("B", "KiB", "MiB", "GiB", "TiB", "PiB"):
        if value < 1024 or unit == "PiB":
            return f"{value:.3g} {unit}"
        value /= 1024
    raise AssertionError("unreachable")


def check_memory(n_bytes: float, what: str, *, source: str | None = None, field: str | None = None) -> None:
    """Refuse work whose estimated memory `n_bytes` is above the current limit.

    Parameters
    ----------
    n_bytes : float
        Estimated peak memory of the work, bytes (may be larger than any machine's).
    what : str
        The work, for the message (``"a 4e+09-sample signal"``).
    source, field : str, optional
        Where the size came from (a file and its field, or a parameter name).

    Raises
    ------
    InputError
        The estimate is above :func:`current_limit_gib`, or not a number.
    """
    limit = current_limit_gib()
    if not (math.isfinite(n_bytes) and n_bytes <= limit * 2 ** 30):
        size = format_bytes(n_bytes) if math.isfinite(n_bytes) else "an unbounded amount"
        raise InputError(f"{what} needs about {size} of memory, above the limit of {limit:g} GiB",
                         source=source, field=field,
                         fix=f"check the size; to lift the limit raise `max_memory_gib` above {limit:g}")
