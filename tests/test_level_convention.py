"""The piston/omni level convention: stated in weights.json, and true of the coupling."""

from __future__ import annotations

import json

import numpy as np

from arrayplan.rig.directivity import Directivity
from arrayplan.frequency import FrequencyAxis
from arrayplan.kernels.freefield import FreeFieldKernel
from arrayplan.formats.plan_folder import write_plan
from arrayplan.channels.planning import plan_rig
from arrayplan.rig import Rig, load_rig

C = 343.0
RHO = 1.204                      # kg/m^3, air at 20 C (value from memory)


def _pair(directivity=None) -> Rig:
    spk = np.array([[0.0, 0.0, 0.0], [0.3, 0.0, 0.0]])
    mic = np.array([[0.0, 0.0, 40.0], [0.3, 0.0, 40.0]])
    kw = {} if directivity is None else {"speaker_directivity": directivity}
    return Rig.from_positions(spk, mic, speed_of_sound=C, **kw)


def test_piston_is_an_omni_on_axis_while_a_real_baffled_piston_is_6_db_louder():
    # Baffled piston, on-axis pressure for surface velocity U0 (Rayleigh integral in closed form):
    # p = rho c U0 [exp(-jkr) - exp(-jk sqrt(r^2 + a^2))]; monopole of volume velocity Q = pi a^2 U0:
    # |p| = rho c k Q / (4 pi r) (Kinsler et al., Fundamentals of Acoustics, 4th ed., 2000, 7.4 and 7.1).
    a, hz, r = 0.05, 1000.0, 40.0
    k = 2 * np.pi * hz / C
    p_piston = RHO * C * (np.exp(-1j * k * r) - np.exp(-1j * k * np.hypot(r, a)))
    p_monopole = RHO * C * k * np.pi * a ** 2 / (4 * np.pi * r)
    assert abs(20 * np.log10(abs(p_piston) / p_monopole) - 6.02) < 0.01
    # arrayplan's convention (stated in the docs): the same on-axis level as an omni of equal strength
    piston = Directivity("piston", (0.0, 0.0, 1.0), radius=a)
    g_piston = FreeFieldKernel(_pair(piston)).evaluate(np.array([hz]))[0, 0, 0]
    g_omni = FreeFieldKernel(_pair()).evaluate(np.array([hz]))[0, 0, 0]
    assert abs(g_piston / g_omni - 1.0) < 1e-12
    assert abs(abs(g_omni) - 1 / (4 * np.pi * r)) < 1e-12      # exp(-jkr)/(4 pi r), Miller 2000


def test_weights_json_states_the_convention_only_for_rigs_with_pistons(tmp_path):
    axis = FrequencyAxis([500.0, 1000.0])
    piston = Directivity("piston", (0.0, 0.0, 1.0), radius=0.05)
    for name, rig in (("omni", _pair()), ("piston", _pair(piston))):
        write_plan(plan_rig(rig, axis), tmp_path / name, figures=False)
    omni = json.loads((tmp_path / "omni" / "weights.json").read_text())
    with_pistons = json.loads((tmp_path / "piston" / "weights.json").read_text())
    assert "level_convention" not in omni
    note = with_pistons["level_convention"]
    assert "+6 dB" in note and "Rayleigh" in note and "mix" not in note
    # one piston and one omni speaker: the note says what their relative level means
    rig_file = tmp_path / "mixed.toml"
    rig_file.write_text(MIXED_TOML)
    write_plan(plan_rig(load_rig(rig_file), axis), tmp_path / "mixed", figures=False)
    note = json.loads((tmp_path / "mixed" / "weights.json").read_text())["level_convention"]
    assert "speakers mix pistons" in note and "microphones" not in note and "equal on-axis" in note


MIXED_TOML = """
[rig]
name = "mixed"
[medium]
speed_of_sound = 343.0
[[speakers]]
position = [0.0, 0.0, 0.0]
directivity = { type = "piston", radius = 0.05, axis = [0, 0, 1] }
[[speakers]]
position = [0.3, 0.0, 0.0]
[[microphones]]
position = [0.0, 0.0, 40.0]
[[microphones]]
position = [0.3, 0.0, 40.0]
"""
