"""Capacity of a plan's channels against the signal-to-noise ratio (water-filling).

The channels of a plan are parallel, independent Gaussian channels with power
couplings ``s_j**2``.  With a total drive power P shared as ``p_j`` over the
channels and white noise of power N0 at each channel output, the capacity at
one frequency is

    C = sum_j log2(1 + p_j s_j**2 / N0)        (bit/s/Hz)

and the allocation that maximises it is water-filling: ``p_j = max(0, mu -
N0 / s_j**2)`` with the water level ``mu`` set so that the powers add up to P
(I. E. Telatar, "Capacity of multi-antenna Gaussian channels", European
Transactions on Telecommunications 10(6), 1999).

Notes
-----
SNR convention, the same as ``arrayplan plan``: ``snr_db`` is the SNR of the
strongest channel with all the power on it, ``SNR = P s_1**2 / N0``.  Powers
below are fractions of P (they add up to 1) and the per-channel SNR with all
power on channel j is ``gamma_j = SNR * s_j**2 / s_1**2``.

Band capacity: the channels found at each planned frequency are taken to
stand for the band around it, from the midpoint to the previous planned
frequency to the midpoint to the next (the outer bins extend by half their
inner spacing).  The capacity in bit/s is ``sum_f C_f * width_f``.  It needs
two or more frequencies.  Noise is white and the same at every frequency.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

from ..errors import InputError
from ..formats.plan_folder import PlanWeights
from ..channels.planning import Plan
from ._common import plan_channels

__all__ = ["CapacityStudy", "capacity_study", "water_fill", "equal_power_capacity", "band_widths_hz",
           "check_snr_list"]


def check_snr_list(values: Sequence[object], source: str = "snr_db") -> np.ndarray:
    """SNR values in dB as a sorted float array, or InputError naming the bad one.

    Parameters
    ----------
    values : sequence of numbers
        Finite SNR values, dB.
    source : str
        Name used in error messages.

    Returns
    -------
    ndarray, shape (n_snr,)
        Unique values in ascending order, dB.
    """
    if len(values) == 0:
        raise InputError("needs at least one value", source=source)
    out = []
    for v in values:
        try:
            x = float(v)  # type: ignore[arg-type]
        except (TypeError, ValueError):
            raise InputError(f"not a number: {v!r}", source=source, fix="give SNR values in dB, e.g. 10 20 30") \
                from None
        if not np.isfinite(x):
            raise InputError(f"must be a finite number of dB, got {v!r}", source=source)
        if not -100.0 <= x <= 300.0:
            raise InputError(f"{x:g} dB is outside -100..300 dB", source=source)
        out.append(x)
    return np.unique(np.asarray(out, dtype=float))


def water_fill(gamma: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Water-filling power fractions over parallel channels.

    Parameters
    ----------
    gamma : ndarray, shape (..., n_chan)
        Per-channel SNR with all the power on that channel (linear, >= 0).

    Returns
    -------
    power : ndarray, shape (..., n_chan)
        Power fractions ``max(0, mu - 1/gamma_j)``, adding up to 1 along the
        last axis.
    level : ndarray, shape (...)
        The water level ``mu`` (fraction of the total power).

    Notes
    -----
    Exact: the channels are sorted by gamma, and the number k of active ones
    is the largest for which the water level
    ``mu_k = (1 + sum_{i<=k} 1/gamma_i) / k`` lies above ``1/gamma_k``.
    """
    g = np.asarray(gamma, dtype=float)
    order = np.argsort(-g, axis=-1)
    gs = np.take_along_axis(g, order, axis=-1)
    with np.errstate(divide="ignore"):
        inv = np.where(gs > 0, 1.0 / gs, np.inf)
    k = np.arange(1, g.shape[-1] + 1)
    cum = np.cumsum(np.where(np.isfinite(inv), inv, 0.0), axis=-1)
    mu_k = (1.0 + cum) / k
    ok = (mu_k > inv) & np.isfinite(inv)
    n_active = np.maximum(np.sum(ok, axis=-1), 1)          # ok is True for a leading run of channels
    level = np.take_along_axis(mu_k, (n_active - 1)[..., None], axis=-1)[..., 0]
    p_sorted = np.where(k <= n_active[..., None], np.maximum(level[..., None] - inv, 0.0), 0.0)
    p_sorted = np.where(np.isfinite(p_sorted), p_sorted, 0.0)
    power = np.empty_like(p_sorted)
    np.put_along_axis(power, order, p_sorted, axis=-1)
    return power, level


def equal_power_capacity(gamma: np.ndarray, active: np.ndarray) -> np.ndarray:
    """Capacity with the power split equally over the `active` channels, bit/s/Hz.

    Parameters
    ----------
    gamma : ndarray, shape (..., n_chan)
        Per-channel SNR with all the power on that channel (linear).
    active : ndarray of bool, shape (..., n_chan)
        The channels that get power (at least one per row).

    Returns
    -------
    ndarray, shape (...)
    """
    n = np.maximum(np.sum(active, axis=-1, keepdims=True), 1)
    return np.sum(np.where(active, np.log2(1.0 + gamma / n), 0.0), axis=-1)


def band_widths_hz(hz: np.ndarray) -> np.ndarray:
    """Width of the band each planned frequency stands for (see module Notes).

    Band edges are the midpoints between neighbours, the outer edges half a
    step beyond the ends (the lower one not below 0 Hz).

    Parameters
    ----------
    hz : array_like, shape (n_freq,)
        Planned frequencies (Hz), increasing.

    Returns
    -------
    ndarray, shape (n_freq,)
        Band widths (Hz); NaN for a single frequency.
    """
    hz = np.asarray(hz, dtype=float)
    if hz.size < 2:
        return np.full(hz.shape, np.nan)
    edges = np.concatenate([[hz[0] - (hz[1] - hz[0]) / 2], (hz[1:] + hz[:-1]) / 2,
                            [hz[-1] + (hz[-1] - hz[-2]) / 2]])
    edges[0] = max(edges[0], 0.0)
    return np.diff(edges)


@dataclass(frozen=True)
class CapacityStudy:
    """Water-filling capacity of a plan at each SNR and frequency.

    Attributes
    ----------
    hz : ndarray, shape (n_freq,)
        Planned frequencies, Hz.
    snr_db : ndarray, shape (n_snr,)
        SNR of the strongest channel with all power on it, dB.
    capacity : ndarray, shape (n_snr, n_freq)
        Water-filling capacity, bit/s/Hz.
    power : ndarray, shape (n_snr, n_freq, n_chan)
        Water-filling power fractions (add up to 1 per SNR and frequency).
    water_level : ndarray, shape (n_snr, n_freq)
        Water level mu, fraction of the total power.
    noise_floor : ndarray, shape (n_snr, n_freq, n_chan)
        ``1 / gamma_j``: the power fraction below which channel j gets none.
    active : ndarray of int, shape (n_snr, n_freq)
        Channels that get power.
    equal_capacity : ndarray, shape (n_snr, n_freq)
        Capacity with equal power on the strong channels, bit/s/Hz.
    strong : ndarray of int, shape (n_freq,)
        Strong channels (within `threshold_db` of the strongest).
    band_width_hz : ndarray, shape (n_freq,)
        Band each frequency stands for, Hz (NaN with one frequency).
    band_capacity : ndarray, shape (n_snr,)
        ``sum_f capacity * band_width_hz``, bit/s (NaN with one frequency).
    band_equal_capacity : ndarray, shape (n_snr,)
        The same with equal power on the strong channels, bit/s.
    threshold_db : float
    measured : bool
        True when the plan's couplings came from measured responses (then
        the SNR is the user's assumption about the noise, not a property of
        the measurement).
    """

    hz: np.ndarray
    snr_db: np.ndarray
    capacity: np.ndarray
    power: np.ndarray
    water_level: np.ndarray
    noise_floor: np.ndarray
    active: np.ndarray
    equal_capacity: np.ndarray
    strong: np.ndarray
    band_width_hz: np.ndarray
    band_capacity: np.ndarray
    band_equal_capacity: np.ndarray
    threshold_db: float
    measured: bool


def capacity_study(plan: Plan | PlanWeights, snr_db: float | Sequence[float], *,
                   threshold_db: float | None = None) -> CapacityStudy:
    """Water-filling capacity of `plan` at each SNR in `snr_db`.

    Parameters
    ----------
    plan : Plan or PlanWeights
        From :func:`arrayplan.channels.planning.plan_rig`, :func:`arrayplan.formats.plan_folder.read_plan`
        or :func:`arrayplan.formats.plan_folder.read_weights` (positions are not needed).
    snr_db : float or sequence of float
        SNR of the strongest channel with all the power on it, dB.
    threshold_db : float, optional
        Strong channels (for the equal-power comparison) are within this of
        the strongest, dB (default: the plan's, else 3).

    Returns
    -------
    CapacityStudy
    """
    snr = check_snr_list(np.atleast_1d(np.asarray(snr_db, dtype=object)).tolist())
    hz, sv, plan_thr, kernel = plan_channels(plan)
    thr = plan_thr if threshold_db is None else float(threshold_db)
    p = np.asarray(sv, dtype=float) ** 2                                # (n_freq, n_chan)
    rel = p / np.max(p, axis=1, keepdims=True)
    gamma = 10.0 ** (snr[:, None, None] / 10.0) * rel[None]             # (n_snr, n_freq, n_chan)
    power, level = water_fill(gamma)
    cap = np.sum(np.log2(1.0 + power * gamma), axis=-1)
    with np.errstate(divide="ignore"):
        strong_mask = 10.0 * np.log10(rel) >= -abs(thr) - 1e-12
        floor = np.where(gamma > 0, 1.0 / gamma, np.inf)
    eq = equal_power_capacity(gamma, np.broadcast_to(strong_mask, gamma.shape))
    widths = band_widths_hz(hz)
    return CapacityStudy(np.asarray(hz, dtype=float).copy(), snr, cap, power, level, floor,
                         np.sum(power > 0, axis=-1), eq, np.sum(strong_mask, axis=1), widths, cap @ widths,
                         eq @ widths, thr, measured=kernel.lower().startswith("measured"))
