"""A filter length that meets the crosstalk limit: design and check at doubling tap counts.

Longer filters follow the planned weights more closely between the design
bins (the bins come closer together and the time window cuts less of each
response), so a channel that fails the check for its filters' sake passes
with more taps; a channel whose crosstalk comes from the kernel itself (two
channels of nearly equal strength whose weights turn quickly) may not.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from ..kernels.coupling import Kernel
from ..formats.irset import IRSet
from ..rig import Rig
from .check import FilterCheck, check_filters
from .design import FilterSet, design_filters, minimum_taps

__all__ = ["TapsTrial", "search_taps", "first_taps", "MAX_AUTO_TAPS"]

#: The longest filter the search tries, samples.
MAX_AUTO_TAPS = 16384
#: The shortest filter the search starts from, samples.
MIN_AUTO_TAPS = 512


@dataclass(frozen=True)
class TapsTrial:
    """One filter length tried: the filters and their check.

    Attributes
    ----------
    taps : int
        Filter length, samples.
    filters : FilterSet
        The filters designed at that length.
    check : FilterCheck
        Their check against the kernel they were designed on.
    """

    taps: int
    filters: FilterSet
    check: FilterCheck

    @property
    def passed(self) -> bool:
        """Whether every kept channel meets the crosstalk limit.

        Returns
        -------
        bool
            True when :meth:`FilterCheck.passed` holds for every kept channel
            (also when none is kept).
        """
        return bool(np.all(self.check.passed()))

    @property
    def worst_crosstalk_db(self) -> float:
        """The worst crosstalk into any kept channel.

        Returns
        -------
        float
            dB re that channel's own gain; -inf when no channel is kept.
        """
        w = self.check.worst_crosstalk_db()
        return float(np.max(w)) if w.size else float("-inf")


def first_taps(spread: Rig | IRSet | float, sample_rate_hz: float) -> int:
    """Where the search starts: the power of two at or above the shortest usable length (and 512).

    Parameters
    ----------
    spread : Rig, IRSet or float
        Source of the delay spread (:func:`arrayplan.filters.design.minimum_taps`).
    sample_rate_hz : float

    Returns
    -------
    int
    """
    need = max(MIN_AUTO_TAPS, minimum_taps(spread, sample_rate_hz))
    return int(2 ** int(np.ceil(np.log2(need))))


def search_taps(kernel: Kernel, sample_rate_hz: float, band_hz: tuple[float, float], start_taps: int, *,
                limit_db: float, min_level_db: float, spread: Rig | IRSet | float | None = None,
                max_taps: int = MAX_AUTO_TAPS,
                on_trial: Callable[[TapsTrial], None] | None = None) -> list[TapsTrial]:
    """Design and check at `start_taps`, twice that, ... up to `max_taps`; stop at the first that passes.

    Parameters
    ----------
    kernel : Kernel
        The coupling the filters are designed on and checked against.
    sample_rate_hz : float
    band_hz : (low, high)
        Hz.
    start_taps : int
        First length tried.
    limit_db : float
        Crosstalk limit of the check, dB.
    min_level_db : float
        Channel choice (see :func:`arrayplan.filters.design.design_filters`).
    spread : Rig, IRSet or float, optional
        Delay-spread source for the taps' lower limit.
    max_taps : int
        Longest length tried.
    on_trial : callable, optional
        Called with each trial as it finishes (to print it).

    Returns
    -------
    list of TapsTrial
        Every length tried, in order; the last passed, or none did.
    """
    trials: list[TapsTrial] = []
    taps = int(start_taps)
    while True:
        filters = design_filters(kernel, sample_rate_hz, taps, band_hz, min_level_db=min_level_db, spread=spread)
        trial = TapsTrial(taps, filters, check_filters(kernel, filters, limit_db=limit_db))
        trials.append(trial)
        if on_trial is not None:
            on_trial(trial)
        if trial.passed or 2 * taps > max_taps:
            return trials
        taps *= 2
