"""Outside checks of the propagation medium (speed of sound, ISO 9613-1 absorption)."""
from __future__ import annotations

import numpy as np
import pytest

from arrayplan.rig.medium import air_absorption_db_per_m, speed_of_sound_air, water_vapour_molar_percent


def test_speed_of_sound_at_20c_matches_handbook():
    # Handbook formula c = 331.3 sqrt(1 + theta/273.15): 343.2 m/s at 20 °C
    # (/work/shared/REFERENCE-VALUES.md, "Speed of sound in air").
    assert speed_of_sound_air(20.0) == pytest.approx(343.2, abs=0.05)


def test_speed_of_sound_agrees_with_ideal_gas_form():
    # Ideal-gas form sqrt(1.4 R T / 0.0289645): 331.32 / 343.24 / 349.04 m/s at 0 / 20 / 30 °C;
    # the two handbook forms agree within 0.03 m/s (REFERENCE-VALUES.md, "Speed of sound in air").
    for theta, c_ref in [(0.0, 331.32), (20.0, 343.24), (30.0, 349.04)]:
        assert speed_of_sound_air(theta) == pytest.approx(c_ref, abs=0.05)


def test_water_vapour_concentration_iso9613_1():
    # ISO 9613-1:1993 Annex B, 20 °C, 50 % RH, 101.325 kPa: h = 1.153 % (REFERENCE-VALUES.md).
    assert water_vapour_molar_percent(20.0, 50.0) == pytest.approx(1.153, rel=2e-3)


@pytest.mark.parametrize("frequency_hz, db_per_km", [
    # ISO 9613-1:1993, 20 °C, 50 % RH, 101.325 kPa, exact band centres (REFERENCE-VALUES.md, "Air absorption").
    (125.0, 0.44), (250.0, 1.31), (500.0, 2.73), (1000.0, 4.66),
    (2000.0, 9.86), (4000.0, 29.4), (8000.0, 104.0),
])
def test_air_absorption_iso9613_1_at_20c_50rh(frequency_hz, db_per_km):
    got = float(air_absorption_db_per_m(frequency_hz, 20.0, 50.0)) * 1000.0
    assert got == pytest.approx(db_per_km, rel=0.015)


@pytest.mark.parametrize("temperature_c, table_db_per_km", [
    # ISO 9613-2:1996 Table 2, octave bands 63 Hz .. 8 kHz, 70 % RH (value from memory;
    # REFERENCE-VALUES.md). The table is rounded to 0.1 dB/km and uses nominal band centres.
    (20.0, [0.1, 0.3, 1.1, 2.8, 5.0, 9.0, 22.9, 76.6]),
    (10.0, [0.1, 0.4, 1.0, 1.9, 3.7, 9.7, 32.8, 117.0]),
])
def test_air_absorption_iso9613_2_octave_table(temperature_c, table_db_per_km):
    f = np.array([63.0, 125.0, 250.0, 500.0, 1000.0, 2000.0, 4000.0, 8000.0])
    got = air_absorption_db_per_m(f, temperature_c, 70.0) * 1000.0
    np.testing.assert_allclose(got, table_db_per_km, rtol=0.02, atol=0.05)
