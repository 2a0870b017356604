"""Exposure estimate and caution block, checked against NIOSH, OSHA and the definition of SPL."""

import io
import math

import numpy as np
import pytest

from arrayplan.errors import InputError
from arrayplan.safety import (CAUTION_NOTE, CAUTION_TEXT, a_weighting_db, check_exposure, estimate_exposure,
                              estimate_spl_at_listeners, format_exposure, max_window_rms,
                              permitted_exposure_niosh, permitted_exposure_osha, pressure_from_spl,
                              print_caution, spl_from_pressure)

FS = 48000
H, MIN = 3600.0, 60.0


@pytest.mark.parametrize("dba, seconds", [
    # NIOSH Criteria for a Recommended Standard, Publication 98-126 (1998): 85 dBA 8 h, 3 dB exchange.
    (85.0, 8 * H), (88.0, 4 * H), (91.0, 2 * H), (94.0, 1 * H), (97.0, 30 * MIN), (100.0, 15 * MIN),
    (103.0, 7.5 * MIN), (106.0, 3.75 * MIN), (109.0, 1.875 * MIN), (112.0, 56.25), (115.0, 28.125),
])
def test_niosh_permitted_durations(dba, seconds):
    assert permitted_exposure_niosh(dba) == pytest.approx(seconds, rel=1e-12)


@pytest.mark.parametrize("dba, seconds", [
    # OSHA 29 CFR 1910.95, Table G-16: 90 dBA 8 h, 5 dB exchange rate.
    (90.0, 8 * H), (95.0, 4 * H), (100.0, 2 * H), (105.0, 1 * H), (110.0, 0.5 * H), (115.0, 0.25 * H),
])
def test_osha_permitted_durations(dba, seconds):
    assert permitted_exposure_osha(dba) == pytest.approx(seconds, rel=1e-12)


@pytest.mark.parametrize("dba, hours", [(92.0, 6.0), (97.0, 3.0), (102.0, 1.5)])
def test_osha_table_g16_intermediate_rows(dba, hours):
    # OSHA Table G-16 lists these rounded (6 h, 3 h, 1.5 h); the formula gives them within 2 %.
    assert permitted_exposure_osha(dba) / H == pytest.approx(hours, rel=0.02)


def test_one_pascal_is_94_db_spl():
    # Reference pressure 20 µPa: 1 Pa = 93.98 dB SPL (REFERENCE-VALUES.md, levels and sensitivities).
    assert spl_from_pressure(1.0) == pytest.approx(93.98, abs=0.005)
    assert pressure_from_spl(94.0) == pytest.approx(1.0, abs=0.003)
    assert pressure_from_spl(114.0) == pytest.approx(10.0, abs=0.03)


def test_a_weighting_reference_points():
    # IEC 61672-1 A-weighting: 0.0 dB at 1 kHz, -19.1 dB at 100 Hz, -2.5 dB at 10 kHz,
    # +1.3 dB at 2.5 kHz (value from memory of the standard's table).
    a = a_weighting_db([1000.0, 100.0, 10000.0, 2500.0])
    np.testing.assert_allclose(a, [0.0, -19.1, -2.5, 1.3], atol=0.06)


def test_spl_inverse_square_and_sensitivity_definition():
    # Sensitivity is SPL at 1 m for 2.83 V; inverse square: -20 log10(2) = -6.02 dB per doubling
    # (common practice, no source).  A full-scale sine with 2.83 V RMS at full scale gives 2.83 V.
    rms_dbfs_sine = 20 * math.log10(1 / math.sqrt(2))
    spl = estimate_spl_at_listeners(sensitivity_db_spl=87.0, amp_vrms_full_scale=2.83,
                                    channel_level_dbfs=[rms_dbfs_sine], distances_m=[1.0, 2.0, 4.0])
    np.testing.assert_allclose(spl, [87.0, 87.0 - 6.0206, 87.0 - 12.0412], atol=1e-3)
    # Twice the voltage: +6.02 dB.
    spl2 = estimate_spl_at_listeners(sensitivity_db_spl=87.0, amp_vrms_full_scale=5.66,
                                     channel_level_dbfs=[rms_dbfs_sine], distances_m=[1.0])
    assert spl2[0] == pytest.approx(87.0 + 6.0206, abs=1e-3)


def test_coherent_sum_is_the_worst_case():
    # N equal pressures in phase add to N times the pressure (+20 log10 N); in power, +10 log10 N.
    kw = dict(sensitivity_db_spl=90.0, amp_vrms_full_scale=2.0, channel_level_dbfs=[-20.0] * 4,
              distances_m=[3.0])
    one = estimate_spl_at_listeners(**{**kw, "channel_level_dbfs": [-20.0]})[0]
    assert estimate_spl_at_listeners(**kw, combine="coherent")[0] == pytest.approx(one + 20 * math.log10(4))
    assert estimate_spl_at_listeners(**kw, combine="incoherent")[0] == pytest.approx(one + 10 * math.log10(4))
    assert estimate_spl_at_listeners(**kw, combine="one_at_a_time")[0] == pytest.approx(one)


def test_estimate_exposure_of_a_1khz_tone():
    # 1 kHz sine at -6.02 dBFS peak, 2.83 V RMS at full scale, 90 dB / 2.83 V / 1 m speaker:
    # 84 dB SPL at 1 m, and 84 dBA (A-weighting is 0 dB at 1 kHz), peak = RMS + 3.01 dB.
    t = np.arange(FS) / FS
    x = 0.5 * np.sin(2 * np.pi * 1000 * t)
    est = estimate_exposure(x, FS, sensitivity_db_spl=90.0, amp_vrms_full_scale=2.83, distances_m=[1.0, 0.5])
    np.testing.assert_allclose(est.spl_db, [90 - 6.0206, 90 - 6.0206 + 6.0206], atol=0.01)
    np.testing.assert_allclose(est.dba, est.spl_db, atol=0.05)
    np.testing.assert_allclose(est.peak_spl_db, est.spl_db + 3.0103, atol=0.01)
    assert est.niosh_s[1] == pytest.approx(permitted_exposure_niosh(est.dba[1]))
    assert est.play_s == pytest.approx(1.0, abs=1e-3)
    assert "dBA" in format_exposure(est)


def test_silence_padding_does_not_dilute_the_level():
    t = np.arange(FS // 2) / FS
    tone = 0.5 * np.sin(2 * np.pi * 500 * t)
    padded = np.concatenate([np.zeros(10 * FS), tone, np.zeros(10 * FS)])
    assert max_window_rms(padded, FS)[0] == pytest.approx(max_window_rms(tone, FS)[0], rel=1e-9)


def _estimate(dba_target_db_at_1m: float):
    t = np.arange(FS) / FS
    x = 0.5 * np.sin(2 * np.pi * 1000 * t)
    return estimate_exposure(x, FS, sensitivity_db_spl=dba_target_db_at_1m + 6.0206, amp_vrms_full_scale=2.83,
                             distances_m=[1.0])


def test_check_exposure_warns_refuses_and_can_be_overridden():
    assert check_exposure(_estimate(80.0)) == []
    warnings = check_exposure(_estimate(91.0))
    assert len(warnings) == 1 and "above 85 dBA" in warnings[0] and "2.0 h" in warnings[0]
    with pytest.raises(InputError, match="exceeds the cap of 100 dBA") as err:
        check_exposure(_estimate(103.0))
    assert "`allow_loud`" in err.value.one_line()
    with pytest.raises(InputError):
        check_exposure(_estimate(95.0), max_dba=94.0)
    allowed = check_exposure(_estimate(103.0), allow_loud=True)
    assert any("allowed by `allow_loud`" in w for w in allowed)
    # A peak above 140 dB SPL (200 Pa, EU Directive 2003/10/EC limit value) is refused too.
    click = np.zeros(FS)
    click[100] = 0.9
    est = estimate_exposure(click, FS, sensitivity_db_spl=100.0, amp_vrms_full_scale=300.0, distances_m=[1.0])
    assert est.peak_spl_db[0] == pytest.approx(100 + 20 * math.log10(math.sqrt(2) * 300 * 0.9 / 2.83), abs=1e-6)
    assert est.peak_spl_db[0] > 140
    est.dba = np.array([90.0])  # keep the A-weighted level under its cap, so the peak cap is what refuses
    with pytest.raises(InputError, match="peak"):
        check_exposure(est)


def test_bad_exposure_inputs():
    with pytest.raises(InputError, match="distances"):
        estimate_spl_at_listeners(sensitivity_db_spl=90.0, amp_vrms_full_scale=2.0, channel_level_dbfs=[-20.0],
                                  distances_m=[0.0])
    with pytest.raises(InputError, match="plausible range"):
        estimate_spl_at_listeners(sensitivity_db_spl=90.0, amp_vrms_full_scale=-1.0, channel_level_dbfs=[-20.0],
                                  distances_m=[1.0])
    with pytest.raises(InputError):
        permitted_exposure_niosh(float("nan"))


def test_caution_block_covers_the_usual_cautions():
    text = " ".join(CAUTION_TEXT.lower().split())
    for phrase in ("hearing", "tweeter", "high-frequency", "start quiet and raise slowly", "clip indicators",
                   "local codes", "licensed practice"):
        assert phrase in text
    buf = io.StringIO()
    print_caution(buf)
    assert buf.getvalue().strip() == CAUTION_TEXT.strip()
    assert "\n" not in CAUTION_NOTE and "hearing" in CAUTION_NOTE
