"""The per-speaker measurement schedule: every speaker plays the sweep in turn.

One multichannel file, one channel per speaker (rig order).  Speaker k's
sweep starts at ``n_pad_before + k (n_sweep + n_gap)``; the gap after each
sweep is the sweep's silence-after (the room's decay time), so each
speaker's segment of a recording of the whole schedule looks exactly like a
recording of the single sweep file, and the segments are cut apart with
:func:`arrayplan.signals.deconvolve.split_schedule`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from .sweeps import SweepSignal

__all__ = ["Schedule", "measurement_schedule"]


@dataclass
class Schedule:
    """A per-speaker schedule.

    Attributes
    ----------
    signal : ndarray, shape (n_samples, n_speakers)
        The file content.
    sweep_starts : list of int
        Sample where each speaker's sweep starts.
    segment_starts : list of int
        Sample where each speaker's segment (its sweep minus the silence
        before it) starts; every segment is `segment_length` samples.
    segment_length : int
        Samples per segment: the single-sweep file length.
    """

    signal: np.ndarray
    sweep_starts: list[int]
    segment_starts: list[int]
    segment_length: int


def measurement_schedule(sweep: SweepSignal, n_speakers: int, *, source: str | None = None) -> Schedule:
    """Lay out `sweep` once per speaker, in turn, with its decay gap after each.

    Parameters
    ----------
    sweep : SweepSignal
        The sweep (its silence-after is the gap between speakers).
    n_speakers : int
        Number of speakers (channels), >= 1.
    source : str, optional
        Named in messages.

    Returns
    -------
    Schedule
    """
    if int(n_speakers) < 1:
        raise InputError(f"a schedule needs at least one speaker, got {n_speakers}", source=source,
                         field="speakers")
    n_spk = int(n_speakers)
    step = sweep.n_sweep + sweep.n_pad_after
    total = sweep.n_pad_before + n_spk * step
    out = np.zeros((total, n_spk))
    sweep_starts = []
    for k in range(n_spk):
        start = sweep.n_pad_before + k * step
        out[start:start + sweep.n_sweep, k] = sweep.sweep
        sweep_starts.append(start)
    return Schedule(signal=out, sweep_starts=sweep_starts,
                    segment_starts=[s - sweep.n_pad_before for s in sweep_starts],
                    segment_length=sweep.signal.size)
