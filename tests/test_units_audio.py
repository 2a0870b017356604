"""Level conversions (one place) and the one reader of audio files."""

from __future__ import annotations

import numpy as np
import pytest
import soundfile as sf

from arrayplan import safety
from arrayplan.formats.audiofiles import read_audio
from arrayplan.errors import InputError
from arrayplan.hardware import calibration
from arrayplan.units import P_REF_PA, dbu_to_vrms, pressure_from_spl, spl_from_pressure


def test_spl_and_pressure_are_inverse_and_match_the_reference_pressure():
    # IEC 60027-3 / ISO 1683: the reference sound pressure in air is 20 µPa; 1 Pa is 93.98 dB SPL (value from memory)
    assert P_REF_PA == 20e-6
    assert float(spl_from_pressure(1.0)) == pytest.approx(93.979, abs=1e-3)
    levels = np.array([0.0, 40.0, 94.0, 140.0])
    assert np.allclose(spl_from_pressure(pressure_from_spl(levels)), levels)
    # 140 dB SPL peak = 200 Pa (EU Directive 2003/10/EC, Art. 3: 200 Pa peak limit)
    assert float(pressure_from_spl(140.0)) == pytest.approx(200.0, rel=1e-12)
    # 0 dBu = sqrt(0.6) V: 1 mW into 600 ohm (common practice, no source)
    assert dbu_to_vrms(0.0) == pytest.approx(np.sqrt(1e-3 * 600.0), rel=1e-12)


def test_safety_and_calibration_use_the_same_conversions():
    assert safety.pressure_from_spl is pressure_from_spl and safety.spl_from_pressure is spl_from_pressure
    assert calibration.pressure_from_db_spl is pressure_from_spl and calibration.dbu_to_vrms is dbu_to_vrms
    assert calibration.REFERENCE_PRESSURE_PA == safety.P_REF_PA


def test_read_audio_returns_float_samples_time_first(tmp_path):
    path = tmp_path / "two.wav"
    x = np.array([[0.5, -0.25], [0.0, 0.125]])
    sf.write(path, x, 8000, subtype="FLOAT")
    data, rate = read_audio(path)
    assert rate == 8000 and data.shape == (2, 2) and np.array_equal(data, x)


def test_read_audio_turns_any_soundfile_error_into_one_line_naming_the_file(tmp_path):
    path = tmp_path / "not-audio.wav"
    path.write_text("this is text\nover two lines\n", encoding="utf-8")
    with pytest.raises(InputError) as info:
        read_audio(path, what="recording", field="recording", fix="record it again")
    text = str(info.value)
    assert "not-audio.wav" in text and "cannot read recording" in text and "\n" not in text
    assert info.value.field == "recording" and info.value.fix == "record it again"
