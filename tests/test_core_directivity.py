"""Outside checks of the directivity patterns (piston and first-order)."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import special

from arrayplan.rig.directivity import FIRST_ORDER_ALPHA, Directivity, piston_factor
from arrayplan.kernels.freefield import FreeFieldKernel
from arrayplan.rig import Rig


def test_piston_first_null_at_first_zero_of_j1():
    # Baffled piston D = 2 J1(v)/v, first null at v = first zero of J1
    # (Kinsler et al., Fundamentals of Acoustics; zero from scipy.special.jn_zeros).
    v0 = special.jn_zeros(1, 1)[0]
    assert abs(float(piston_factor(np.array([v0]))[0])) < 1e-12
    assert float(piston_factor(np.array([0.0]))[0]) == 1.0


# "-6 dB" is the half-pressure point, 20 log10(0.5) = -6.02 dB.
@pytest.mark.parametrize("v, level_db", [(1.6137, -3.0), (2.2151, 20.0 * np.log10(0.5))])
def test_piston_half_power_and_half_pressure_points(v, level_db):
    # -3 dB at v = 1.6137 and -6 dB at v = 2.2151 (Kinsler et al.; Beranek, Acoustics;
    # REFERENCE-VALUES.md, "Baffled circular piston").
    d = float(piston_factor(np.array([v]))[0])
    assert 20.0 * np.log10(d) == pytest.approx(level_db, abs=0.01)


def test_piston_first_side_lobe():
    # First side lobe -17.6 dB at v = 5.136 (Kinsler et al.; REFERENCE-VALUES.md).
    v = np.linspace(4.5, 6.0, 3001)
    d = np.abs(piston_factor(v))
    i = int(np.argmax(d))
    assert v[i] == pytest.approx(5.136, abs=0.005)
    assert 20.0 * np.log10(d[i]) == pytest.approx(-17.6, abs=0.05)


def test_cardioid_rear_null_and_side_half():
    # Cardioid D = 0.5 + 0.5 cos(theta): 0 at 180 degrees, 0.5 at 90 degrees (common practice, no source).
    assert FIRST_ORDER_ALPHA["cardioid"] == 0.5
    card = Directivity("cardioid", (0.0, 0.0, 1.0), alpha=FIRST_ORDER_ALPHA["cardioid"])
    g = card.gain(np.cos(np.radians([0.0, 90.0, 180.0])))
    np.testing.assert_allclose(g, [1.0, 0.5, 0.0], atol=1e-12)


def test_figure8_side_null():
    # Figure-of-eight D = cos(theta): null at 90 degrees, -1 at the rear (common practice, no source).
    fig8 = Directivity("figure8", (0.0, 0.0, 1.0), alpha=FIRST_ORDER_ALPHA["figure8"])
    np.testing.assert_allclose(fig8.gain(np.cos(np.radians([0.0, 90.0, 180.0]))), [1.0, 0.0, -1.0], atol=1e-12)


def test_piston_speaker_in_free_field_kernel_null_direction():
    # A mic at the piston's first-null angle, k a sin(theta) = j'_{1,1} (Kinsler et al.), gets
    # (near) zero coupling; an on-axis mic at the same distance gets the omni value 1/(4 pi r).
    c, f, a, r = 343.2, 8000.0, 0.05, 3.0
    k = 2 * np.pi * f / c
    theta = np.arcsin(special.jn_zeros(1, 1)[0] / (k * a))
    mics = np.array([[0.0, 0.0, r], [r * np.sin(theta), 0.0, r * np.cos(theta)],
                     [r * np.sin(theta / 2), 0.0, r * np.cos(theta / 2)]])
    piston = Directivity("piston", (0.0, 0.0, 1.0), radius=a)
    rig = Rig.from_positions(np.zeros((1, 3)), mics, speed_of_sound=c, frequencies=[f],
                             speaker_directivity=piston)
    g = np.abs(FreeFieldKernel(rig).evaluate(np.array([f]))[0, :, 0])
    assert g[0] == pytest.approx(1.0 / (4 * np.pi * r), rel=1e-9)
    assert g[1] / g[0] < 1e-6
    # half-way angle: the piston pattern itself (Kinsler et al., 2 J1(v)/v)
    v_half = k * a * np.sin(theta / 2)
    assert g[2] / g[0] == pytest.approx(abs(2 * special.j1(v_half) / v_half), rel=1e-9)
