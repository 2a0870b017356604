"""The propagation medium: speed of sound and air absorption.

Speed of sound in air from temperature, c = 331.3 sqrt(1 + theta / 273.15) m/s
(the usual handbook formula), and the pure-tone atmospheric absorption
coefficient of ISO 9613-1:1993, equations (3) to (5) and (B.1)-(B.3).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import InputError

__all__ = ["Medium", "speed_of_sound_air", "air_absorption_db_per_m", "water_vapour_molar_percent"]

_T0 = 293.15          # reference temperature, K (ISO 9613-1)
_T01 = 273.16         # triple-point isotherm temperature, K (ISO 9613-1)
_P_REF_KPA = 101.325  # reference atmospheric pressure, kPa


def speed_of_sound_air(temperature_c: float) -> float:
    """Speed of sound in dry air in m/s at `temperature_c` degrees Celsius.

    Uses c = 331.3 * sqrt(1 + theta / 273.15).

    Parameters
    ----------
    temperature_c : float
        Air temperature (degrees Celsius), above -273.15.

    Returns
    -------
    float
        Speed of sound (m/s).
    """
    if not math.isfinite(temperature_c) or temperature_c <= -273.15:
        raise InputError(f"temperature must be above absolute zero, got {temperature_c} °C",
                         field="medium.temperature_c")
    return 331.3 * math.sqrt(1.0 + temperature_c / 273.15)


def water_vapour_molar_percent(temperature_c: float, relative_humidity_pct: float,
                               pressure_kpa: float = _P_REF_KPA) -> float:
    """Molar concentration of water vapour h in percent (ISO 9613-1, Annex B).

    Parameters
    ----------
    temperature_c : float
        Air temperature (degrees Celsius).
    relative_humidity_pct : float
        Relative humidity (%).
    pressure_kpa : float
        Atmospheric pressure (kPa).

    Returns
    -------
    float
        Molar concentration of water vapour (%).
    """
    t = temperature_c + 273.15
    c = -6.8346 * (_T01 / t) ** 1.261 + 4.6151
    psat_over_pr = 10.0 ** c
    return relative_humidity_pct * psat_over_pr / (pressure_kpa / _P_REF_KPA)


def air_absorption_db_per_m(frequency_hz: np.ndarray | float, temperature_c: float = 20.0,
                            relative_humidity_pct: float = 50.0,
                            pressure_kpa: float = _P_REF_KPA) -> np.ndarray:
    """Pure-tone attenuation coefficient of air in dB/m (ISO 9613-1:1993).

    Parameters
    ----------
    frequency_hz : array_like
        Frequencies in Hz.
    temperature_c : float
        Air temperature in degrees Celsius.
    relative_humidity_pct : float
        Relative humidity in percent.
    pressure_kpa : float
        Atmospheric pressure in kPa.

    Returns
    -------
    ndarray
        Attenuation in dB per metre, same shape as `frequency_hz`.
    """
    f = np.asarray(frequency_hz, dtype=float)
    t = temperature_c + 273.15
    pa = pressure_kpa / _P_REF_KPA
    h = water_vapour_molar_percent(temperature_c, relative_humidity_pct, pressure_kpa)
    fr_o = pa * (24.0 + 4.04e4 * h * (0.02 + h) / (0.391 + h))
    fr_n = pa * (t / _T0) ** -0.5 * (9.0 + 280.0 * h * math.exp(-4.170 * ((t / _T0) ** (-1.0 / 3.0) - 1.0)))
    return 8.686 * f ** 2 * (
        1.84e-11 / pa * (t / _T0) ** 0.5
        + (t / _T0) ** -2.5 * (
            0.01275 * math.exp(-2239.1 / t) / (fr_o + f ** 2 / fr_o)
            + 0.1068 * math.exp(-3352.0 / t) / (fr_n + f ** 2 / fr_n)
        )
    )


@dataclass(frozen=True)
class Medium:
    """Speed of sound and, optionally, air absorption.

    Parameters
    ----------
    speed_of_sound : float
        m/s.
    temperature_c, relative_humidity_pct, pressure_kpa : float
        Air state, used for absorption.
    air_absorption : bool
        Apply ISO 9613-1 absorption to free-field propagation.
    """

    speed_of_sound: float = 343.2
    temperature_c: float = 20.0
    relative_humidity_pct: float = 50.0
    pressure_kpa: float = _P_REF_KPA
    air_absorption: bool = False

    def __post_init__(self) -> None:
        if not (math.isfinite(self.speed_of_sound) and self.speed_of_sound > 0):
            raise InputError(f"speed of sound must be a positive number of m/s, got {self.speed_of_sound}",
                             field="medium.speed_of_sound")
        if not (0.0 <= self.relative_humidity_pct <= 100.0):
            raise InputError(f"relative humidity must be 0..100 %, got {self.relative_humidity_pct}",
                             field="medium.relative_humidity_pct")
        if not (math.isfinite(self.pressure_kpa) and self.pressure_kpa > 0):
            raise InputError(f"pressure must be positive kPa, got {self.pressure_kpa}", field="medium.pressure_kpa")

    def absorption_db_per_m(self, frequency_hz: np.ndarray) -> np.ndarray:
        """Attenuation in dB/m at `frequency_hz` (zeros when absorption is off).

        Parameters
        ----------
        frequency_hz : array_like
            Frequencies (Hz).

        Returns
        -------
        ndarray
            Pure-tone attenuation (dB/m), same shape as `frequency_hz`.
        """
        f = np.asarray(frequency_hz, dtype=float)
        if not self.air_absorption:
            return np.zeros_like(f)
        return air_absorption_db_per_m(f, self.temperature_c, self.relative_humidity_pct, self.pressure_kpa)
