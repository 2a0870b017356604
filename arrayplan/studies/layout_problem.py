"""The layout problem: candidate positions, their couplings to the fixed side, and the criteria a set is scored by.

Each candidate i (a speaker or a microphone position) contributes one column
a_i(f) of the coupling between it and the fixed side, shape (n_other,): for
speakers a column of G, for microphones the conjugate of a row (the
singular values of a chosen set are the same either way).  A set S of
candidates gives the matrix A_S(f) = [a_i(f)], i in S, and is scored by a
criterion summed over the planned frequencies:

* ``capacity``: sum_f log2 det(I + c A_S^H A_S) in bit/s/Hz summed over
  frequencies, with c = rho (4 pi)^2 / n_tx: n_tx the number of transmitting
  speakers (N when choosing speakers, the rig's speakers when choosing
  microphones), which share the drive power equally, and rho the *reference
  SNR*: the SNR at a microphone 1 m from one speaker in free field with all
  the drive power on that speaker (|G| = 1 / (4 pi) there).  The reference
  does not depend on the layout, so layouts of different coupling strength
  are scored at the same power and noise; ``arrayplan compare`` uses the same
  reference, so its capacity of the chosen rig is this value per frequency;
* ``strong``: the number of channels within ``threshold_db`` of the
  strongest, summed over frequencies;
* ``usable``: the number of channels whose own SNR c s_j^2 reaches 1 (0 dB),
  summed over frequencies.

The search is :mod:`arrayplan.studies.layout`, the capacity bound
:mod:`arrayplan.studies.layout_bound`.

Notes
-----
Indices 0-based in the API; log2 throughout, so capacity is in bit/s/Hz per
frequency, summed.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Callable

import numpy as np

from ..errors import InputError
from ..frequency import FrequencyAxis
from ..kernels.freefield import FreeFieldKernel
from ..kernels.room import RoomKernel
from ..rig import COINCIDENT_M, ElementSet, Rig
from ._common import DEFAULT_REFERENCE_SNR_DB, reference_snr_scale

__all__ = ["CRITERIA", "SIDES", "LayoutProblem", "layout_problem", "criterion_values"]

#: The criteria a layout can be chosen by.
CRITERIA = ("capacity", "strong", "usable")
SIDES = ("speakers", "microphones")


@dataclass(frozen=True)
class LayoutProblem:
    """Candidates and their couplings to the fixed side.

    Attributes
    ----------
    side : str
        ``"speakers"`` or ``"microphones"``: the side being chosen.
    candidates : ElementSet
    columns : ndarray, complex, shape (n_freq, n_other, n_cand)
        a_i(f) for each candidate (unit of G).
    axis : FrequencyAxis
    count : int
        N, the number to choose.
    scale : float
        c of the module docstring (1 / unit of G squared).
    reference_snr_db : float
        The reference SNR rho in dB (module docstring: 1 m, one speaker,
        full drive, free field).
    threshold_db : float
        Strong-channel threshold, dB.
    """

    side: str
    candidates: ElementSet
    columns: np.ndarray
    axis: FrequencyAxis
    count: int
    scale: float
    reference_snr_db: float
    threshold_db: float



def layout_problem(rig: Rig, side: str, count: int, axis: FrequencyAxis, *, candidates: ElementSet | None = None,
                   reference_snr_db: float = DEFAULT_REFERENCE_SNR_DB, threshold_db: float | None = None,
                   kernel_for: Callable[[ElementSet, ElementSet], Any] | None = None,
                   source: str = "candidates") -> LayoutProblem:
    """Set up the choice of `count` elements of `side` from `candidates`.

    Parameters
    ----------
    rig : Rig
        The fixed side is the other one; the rig's own elements on `side`
        are the candidates when `candidates` is None (they are replaced).
    side : str
        ``"speakers"`` or ``"microphones"``.
    count : int
        N, 1 <= N <= number of candidates.
    axis : FrequencyAxis
    candidates : ElementSet, optional
    reference_snr_db : float
        rho in dB, the reference SNR of the module docstring (1 m, one
        speaker, full drive, free field); not the plan's SNR of the strongest
        channel.
    threshold_db : float, optional
        Strong-channel threshold, dB (default: the rig's ``[planning]`` value).
    kernel_for : callable, optional
        ``kernel_for(speakers, microphones)`` returns a kernel (``evaluate(hz)
        -> (n, n_mic, n_spk)``); default the rig's room when it has one, else
        the free field, in the rig's medium.
    source : str
        Names the candidates in error messages.

    Returns
    -------
    LayoutProblem
        The candidates' coupling columns of shape (n_freq, n_other, n_cand)
        and the capacity scale c.

    Raises
    ------
    InputError
        Unknown side, a count outside 1..n_cand, a candidate on a fixed
        element or on another candidate, or a candidate outside the room.
    """
    if side not in SIDES:
        raise InputError(f"side must be speakers or microphones, got {side!r}", source=source)
    cand = candidates if candidates is not None else (rig.speakers if side == "speakers" else rig.mics)
    fixed = rig.mics if side == "speakers" else rig.speakers
    n = len(cand)
    if int(count) != count or not 1 <= count <= n:
        raise InputError(f"cannot choose {count} of {n} candidates", source=source,
                         fix=f"choose between 1 and {n}")
    d = np.linalg.norm(cand.positions[:, None] - fixed.positions[None], axis=-1)
    i, j = np.unravel_index(np.argmin(d), d.shape)
    if d[i, j] < COINCIDENT_M:
        raise InputError(f"candidate {cand.names[i]!r} coincides with fixed element {fixed.names[j]!r}",
                         source=source, fix="move or drop that candidate")
    dd = np.linalg.norm(cand.positions[:, None] - cand.positions[None], axis=-1) + np.diag(np.full(n, np.inf))
    i, j = np.unravel_index(np.argmin(dd), dd.shape)
    if dd[i, j] < COINCIDENT_M:
        raise InputError(f"candidates {cand.names[i]!r} and {cand.names[j]!r} are at the same position",
                         source=source, fix="list each position once")
    if rig.room is not None:
        outside = rig.room.element_problems(cand, "candidates", source)
        if outside:
            raise outside[0]
    spk, mic = (cand, fixed) if side == "speakers" else (fixed, cand)
    if kernel_for is not None:
        kern = kernel_for(spk, mic)
    elif rig.room is not None:
        kern = RoomKernel.between(spk, mic, rig.medium, rig.room, 0.0)
    else:
        kern = FreeFieldKernel.between(spk, mic, rig.medium, 0.0)
    g = kern.evaluate(axis.hz)                                            # (n_f, n_mic, n_spk)
    cols = g if side == "speakers" else np.conj(np.swapaxes(g, 1, 2))     # (n_f, n_other, n_cand)
    rho = float(reference_snr_db)
    if not np.isfinite(rho):
        raise InputError(f"must be a finite number of dB, got {reference_snr_db}", source="reference_snr_db")
    thr = rig.planning.threshold_db if threshold_db is None else float(threshold_db)
    n_tx = int(count) if side == "speakers" else len(rig.speakers)
    return LayoutProblem(side, cand, cols, axis, int(count), reference_snr_scale(rho, n_tx), rho, thr)


def criterion_values(problem: LayoutProblem, sets: np.ndarray, criterion: str) -> np.ndarray:
    """The criterion of each candidate set.

    Parameters
    ----------
    problem : LayoutProblem
    sets : ndarray of int, shape (n_sets, k)
        0-based candidate indices, k >= 1.
    criterion : str
        One of :data:`CRITERIA`.

    Returns
    -------
    ndarray, shape (n_sets,)
        Capacity in bit/s/Hz summed over frequencies, or a channel count
        summed over frequencies.
    """
    sets = np.atleast_2d(np.asarray(sets, dtype=int))
    a = problem.columns[:, :, sets]                             # (n_f, n_other, n_sets, k)
    a = np.moveaxis(a, 2, 0)                                     # (n_sets, n_f, n_other, k)
    gram = np.matmul(np.conj(np.swapaxes(a, -1, -2)), a)          # (n_sets, n_f, k, k)
    if criterion == "capacity":
        m = np.eye(a.shape[-1]) + problem.scale * gram
        return np.linalg.slogdet(m)[1].sum(axis=1) / np.log(2.0)
    s = np.sqrt(np.maximum(np.linalg.eigvalsh(gram)[..., ::-1], 0.0))   # singular values, descending
    if criterion == "strong":
        with np.errstate(divide="ignore"):
            level = 20 * np.log10(s / s[..., :1])
        return np.sum(level >= -abs(problem.threshold_db) - 1e-12, axis=(1, 2)).astype(float)
    if criterion == "usable":
        return np.sum(problem.scale * s ** 2 >= 1.0, axis=(1, 2)).astype(float)
    raise InputError(f"unknown criterion {criterion!r}", source="criterion", fix=f"use one of {', '.join(CRITERIA)}")

