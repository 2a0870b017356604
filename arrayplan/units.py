"""Acoustic and electrical level conversions: dB SPL <-> Pa, dBu -> V, microphone sensitivity.

Notes
-----
dB SPL is re 20 µPa (RMS, or peak for a peak level); 0 dBu is sqrt(0.6) V RMS
(1 mW into 600 ohm); sensitivity in dB re 1 V/Pa is ``20 log10(mV/Pa / 1000)``.
Digital levels (dBFS) are in :mod:`arrayplan.signals.levels`.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["P_REF_PA", "DBU_REFERENCE_VRMS", "spl_from_pressure", "pressure_from_spl", "dbu_to_vrms",
           "sensitivity_db_re_1v_per_pa"]

#: Reference sound pressure in air, Pa (20 µPa; 1 Pa = 93.98 dB SPL).
P_REF_PA = 20e-6
#: 0 dBu in volts RMS: sqrt(0.6) (1 mW into 600 ohm).
DBU_REFERENCE_VRMS = math.sqrt(0.6)


def spl_from_pressure(p_pa: float | np.ndarray) -> float | np.ndarray:
    """Sound pressure level in dB re 20 µPa of an RMS (or peak) pressure.

    Parameters
    ----------
    p_pa : float or ndarray
        Pressure, Pa; 0 gives -inf.

    Returns
    -------
    float or ndarray
        Level, dB SPL, same shape as `p_pa`.
    """
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(np.asarray(p_pa, dtype=float) / P_REF_PA)


def pressure_from_spl(spl_db: float | np.ndarray) -> float | np.ndarray:
    """Pressure of a sound pressure level in dB re 20 µPa (94 dB -> 1.002 Pa).

    Parameters
    ----------
    spl_db : float or ndarray
        Level, dB SPL.

    Returns
    -------
    float or ndarray
        Pressure, Pa, same shape as `spl_db`.
    """
    return P_REF_PA * 10.0 ** (np.asarray(spl_db, dtype=float) / 20.0)


def dbu_to_vrms(level_dbu: float) -> float:
    """Volts RMS of a level in dBu (+4 dBu -> 1.228 V).

    Parameters
    ----------
    level_dbu : float
        Level, dBu.

    Returns
    -------
    float
        Voltage, V RMS.
    """
    return DBU_REFERENCE_VRMS * 10.0 ** (level_dbu / 20.0)


def sensitivity_db_re_1v_per_pa(mv_per_pa: float) -> float:
    """Microphone sensitivity in dB re 1 V/Pa: ``20 log10(mV/Pa / 1000)``.

    Parameters
    ----------
    mv_per_pa : float
        Sensitivity, mV/Pa (above 0).

    Returns
    -------
    float
        Sensitivity, dB re 1 V/Pa.
    """
    return 20.0 * math.log10(mv_per_pa / 1000.0)
