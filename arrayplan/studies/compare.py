"""Two or more layouts side by side on the same frequencies.

For each layout (a plan, or a rig planned here): element counts, aperture
shapes and sizes, and per frequency the strong, usable and effective channel
counts (as in the plan), the paraxial estimate and, when an SNR is stated,
the capacity sum_j log2(1 + c s_j^2) with c = rho (4 pi)^2 / n_spk: rho is
the *reference SNR*, the SNR a microphone has 1 m from one speaker at full
drive in free field (|G| = 1 / (4 pi) there), with the drive power shared
equally among the layout's speakers, so layouts of different sizes and
coupling strengths compare at equal total power and noise.  The layout study
(:mod:`arrayplan.studies.layout`) scores by the same reference; the plan's
own SNR (of the strongest channel) would give every layout the same strongest
channel and cannot compare them.

Notes
-----
Capacity in bit/s/Hz per frequency; counts are whole channels; the effective
count is the participation ratio (sum s^2)^2 / sum s^4.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..frequency import FrequencyAxis
from ..channels.heuristics import aperture_shape
from ..channels.planning import Plan
from ._common import reference_snr_scale

__all__ = ["LayoutSummary", "Comparison", "compare_plans", "capacity_per_frequency"]


@dataclass(frozen=True)
class LayoutSummary:
    """One layout's numbers.

    Attributes
    ----------
    name, source, kernel : str
    n_speakers, n_mics : int
    speaker_aperture, mic_aperture : str
        Shape and size, e.g. ``"line 1.2 m"`` or ``"area 0.36 m^2"``.
    distance_m : float
        Between the two arrays' centres.
    strong, usable, effective, paraxial : ndarray, shape (n_freq,)
    capacity : ndarray, shape (n_freq,) or None
        bit/s/Hz.
    """

    name: str
    source: str
    kernel: str
    n_speakers: int
    n_mics: int
    speaker_aperture: str
    mic_aperture: str
    distance_m: float
    strong: np.ndarray
    usable: np.ndarray
    effective: np.ndarray
    paraxial: np.ndarray
    capacity: np.ndarray | None


@dataclass(frozen=True)
class Comparison:
    """The layouts compared, on one frequency axis.

    Attributes
    ----------
    axis : FrequencyAxis
    layouts : tuple of LayoutSummary
    reference_snr_db : float or None
        The reference SNR of the capacity, dB (module docstring).
    """

    axis: FrequencyAxis
    layouts: tuple[LayoutSummary, ...]
    reference_snr_db: float | None

    def table(self) -> tuple[list[str], list[list]]:
        """Header and rows of the client table: one row per layout, band means and totals.

        Returns
        -------
        head : list of str
            Column titles (distance in m, capacity in bit/s/Hz when a
            reference SNR was given).
        rows : list of list
            One row per layout: name, counts, apertures, distance and the
            means over frequency of the channel counts, paraxial estimate
            (``"n/a"`` when it has none) and capacity.
        """
        head = ["layout", "speakers", "microphones", "speaker aperture", "microphone aperture", "distance (m)",
                "strong (mean)", "usable (mean)", "effective (mean)", "paraxial estimate (mean)"]
        if self.reference_snr_db is not None:
            head.append(f"capacity at reference SNR {self.reference_snr_db:g} dB (bit/s/Hz, mean)")
        rows = []
        for s in self.layouts:
            row = [s.name, s.n_speakers, s.n_mics, s.speaker_aperture, s.mic_aperture, round(s.distance_m, 3),
                   round(float(np.mean(s.strong)), 2), round(float(np.mean(s.usable)), 2),
                   round(float(np.mean(s.effective)), 2),
                   "n/a" if np.all(np.isnan(s.paraxial)) else round(float(np.nanmean(s.paraxial)), 2)]
            if s.capacity is not None:
                row.append(round(float(np.mean(s.capacity)), 2))
            rows.append(row)
        return head, rows


def capacity_per_frequency(singular_values: np.ndarray, n_speakers: int, reference_snr_db: float) -> np.ndarray:
    """Capacity at a reference SNR, bit/s/Hz per frequency.

    Parameters
    ----------
    singular_values : ndarray, shape (n_freq, n_chan)
        Of G, in 1/m (free field or room).
    n_speakers : int
        Speakers sharing the drive power equally.
    reference_snr_db : float
        rho, dB (module docstring).

    Returns
    -------
    ndarray, shape (n_freq,)
        sum_j log2(1 + rho (4 pi)^2 s_j^2 / n_spk).
    """
    c = reference_snr_scale(reference_snr_db, n_speakers)
    return np.sum(np.log2(1.0 + c * np.asarray(singular_values) ** 2), axis=1)


def _aperture(positions: np.ndarray) -> str:
    a = aperture_shape(positions)
    if a.kind == "line":
        return f"line {a.size:.3g} m"
    if a.kind == "area":
        return f"area {a.size:.3g} m^2"
    if a.kind == "volume":
        return f"volume, {a.extent:.3g} m across"
    return "point"


def compare_plans(named: list[tuple[str, str, Plan]], reference_snr_db: float | None = None) -> Comparison:
    """Compare plans made on the same frequencies.

    Parameters
    ----------
    named : list of (name, source, Plan)
        At least two.
    reference_snr_db : float, optional
        rho in dB for the capacity (module docstring); no capacity without it.

    Returns
    -------
    Comparison
        One :class:`LayoutSummary` per plan, in the order given.

    Raises
    ------
    InputError
        Fewer than two layouts, or plans on different frequencies.
    """
    if len(named) < 2:
        raise InputError(f"compare needs at least two layouts, got {len(named)}", source="layouts")
    axis = named[0][2].channels.axis
    out = []
    for name, source, plan in named:
        if plan.channels.axis != axis:
            raise InputError(f"planned on other frequencies than {named[0][0]!r}", source=source,
                             field="frequencies", fix="plan both on the same frequencies")
        rig, ch = plan.rig, plan.channels
        cap = (capacity_per_frequency(ch.singular_values, len(rig.speakers), reference_snr_db)
               if reference_snr_db is not None else None)
        dist = float(np.linalg.norm(rig.speakers.positions.mean(axis=0) - rig.mics.positions.mean(axis=0)))
        out.append(LayoutSummary(name, source, plan.kernel_name, len(rig.speakers), len(rig.mics),
                                 _aperture(rig.speakers.positions), _aperture(rig.mics.positions), dist,
                                 np.asarray(plan.strong_channels), np.asarray(plan.usable_channels),
                                 ch.effective_channels(), np.asarray(plan.estimate.counts, dtype=float), cap))
    return Comparison(axis, tuple(out), reference_snr_db)
