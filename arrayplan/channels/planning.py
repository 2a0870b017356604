"""The planning pipeline in one call: rig -> kernel -> channels -> counts.

>>> from arrayplan import load_rig, plan_rig, write_plan
>>> plan = plan_rig(load_rig("demos/corridor-link/rig.toml"))   # doctest: +SKIP
>>> write_plan(plan, "out/")                                   # doctest: +SKIP
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from .svd import ChannelSet, decompose
from ..kernels.coupling import Kernel
from ..errors import InputError
from ..frequency import FrequencyAxis
from .heuristics import ParaxialEstimate, paraxial_estimate
from ..kernels import kernel_settings, rig_kernel
from ..rig import Rig

__all__ = ["Plan", "plan_rig"]


@dataclass(frozen=True)
class Plan:
    """The result of planning a rig.

    Attributes
    ----------
    rig : Rig
    channels : ChannelSet
    estimate : ParaxialEstimate
    threshold_db, snr_db : float
        The settings the strong and usable counts were made with.
    kernel_name : str
    kernel_settings : dict
        The kernel and its settings (for a room: size, absorption, order).
    """

    rig: Rig
    channels: ChannelSet
    estimate: ParaxialEstimate
    threshold_db: float
    snr_db: float
    kernel_name: str = "free field"
    kernel_settings: dict | None = None

    @property
    def strong_channels(self) -> np.ndarray:
        """Channels within :attr:`threshold_db` of the strongest, per frequency.

        Returns
        -------
        ndarray of int, shape (n_freq,)
            Counts from :meth:`ChannelSet.strong_channels`.
        """
        return self.channels.strong_channels(self.threshold_db)

    @property
    def usable_channels(self) -> np.ndarray:
        """Channels above the noise floor at :attr:`snr_db`, per frequency.

        Returns
        -------
        ndarray of int, shape (n_freq,)
            Counts from :meth:`ChannelSet.usable_channels`.
        """
        return self.channels.usable_channels(self.snr_db)


def plan_rig(rig: Rig, axis: FrequencyAxis | None = None, *, kernel: Kernel | None = None,
             threshold_db: float | None = None, snr_db: float | None = None, track: bool | None = None,
             chunk_size: int | None = None, progress: Callable[[int, int], None] | None = None,
             workers: int | None = None, scheduler: str | None = None, max_channels: int | str | None = None,
             memory_mb: float | None = None, precision: str = "double") -> Plan:
    """Plan the channels of `rig`.

    Parameters
    ----------
    rig : Rig
    axis : FrequencyAxis, optional
        Frequencies (default: the rig file's ``[frequencies]``).
    kernel : Kernel, optional
        Source of the coupling matrices (default: the rig's room when it has
        one, else its free field).  It must pickle to run on workers.
    threshold_db, snr_db, track, chunk_size, workers, max_channels, memory_mb : optional
        Override the rig file's ``[planning]`` settings (see
        :func:`arrayplan.channels.svd.decompose`; ``max_channels="auto"`` starts
        from the paraxial estimate and grows to below the `snr_db` floor).
    progress : callable, optional
        ``progress(done, total)`` after each chunk.
    scheduler : str, optional
        ``"local:N"`` or a Dask scheduler address (:mod:`arrayplan.parallel`).
    precision : {"double", "single"}
        Arithmetic of the SVD (see :func:`arrayplan.channels.svd.decompose`).

    Returns
    -------
    Plan
    """
    axis = axis if axis is not None else rig.frequencies
    if axis is None:
        raise InputError("no frequencies to plan at", source=rig.source, field="frequencies",
                         fix="add a [frequencies] table or give the frequencies to plan at")
    settings = rig.planning
    kern = kernel if kernel is not None else rig_kernel(rig)
    estimate = paraxial_estimate(rig.speakers.positions, rig.mics.positions,
                                 axis.wavelengths(rig.medium.speed_of_sound))
    snr = settings.snr_db if snr_db is None else float(snr_db)
    top = settings.max_channels if max_channels is None else max_channels
    try:
        channels: ChannelSet = decompose(
            kern, axis, chunk_size=chunk_size or settings.chunk_size, track=settings.track if track is None else track,
            progress=progress, workers=settings.workers if workers is None else workers, scheduler=scheduler,
            max_channels=top, floor_db=snr, first_guess=estimate.counts,
            memory_mb=settings.memory_mb if memory_mb is None else memory_mb, precision=precision)
    except InputError as exc:
        if exc.field != "max_channels" or max_channels is not None:
            raise
        raise InputError(exc.problem, source=rig.source, field="planning.max_channels", fix=exc.fix) from None
    described = kernel_settings(kern)
    return Plan(rig, channels, estimate,
                settings.threshold_db if threshold_db is None else float(threshold_db), snr,
                getattr(kern, "name", described["kernel"]), described)
