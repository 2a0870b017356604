"""Calibration records written through tomlkit read back to the same values, comments kept."""

from __future__ import annotations

import math
import tomllib

from hypothesis import given, settings
from hypothesis import strategies as st

from arrayplan.hardware.calibration import (RANGES, CalibrationRecord, LatencyCalibration, MicCalibration,
                                            OutputCalibration, format_calibration, parse_calibration)


def _in(key: str) -> st.SearchStrategy[float]:
    low, high = RANGES[key]
    return st.floats(min_value=low, max_value=high, allow_nan=False, allow_infinity=False)


# any text TOML can hold: no surrogates (not UTF-8); control characters must be escaped by the writer
_TEXT = st.text(st.characters(blacklist_categories=("Cs",)), max_size=20)

# a microphone's name is how the rig refers to it: the writer leaves empty strings out, so it needs one
_NAME = st.text(st.characters(blacklist_categories=("Cs",)), min_size=1, max_size=20)
_MICS = st.builds(MicCalibration, name=_NAME, input_channel=st.integers(1, 64),
                  sensitivity_mv_per_pa=_in("sensitivity_mv_per_pa"), input_full_scale_vrms=_in("input_full_scale_vrms"),
                  calibrator_level_db_spl=_in("calibrator_level_db_spl"),
                  calibrator_frequency_hz=_in("calibrator_frequency_hz"), calibrator_class=_TEXT,
                  recorded_rms_dbfs=st.none() | _in("recorded_rms_dbfs"), recording=_TEXT, measured_utc=_TEXT)
_OUTPUTS = st.builds(OutputCalibration, channel=st.integers(1, 64), full_scale_vrms=_in("full_scale_vrms"),
                     amplifier_gain_db=_in("amplifier_gain_db"), method=_TEXT, measured_utc=_TEXT)
_LATENCY = st.builds(LatencyCalibration, samples=st.integers(0, 100_000), sample_rate_hz=_in("sample_rate_hz"),
                     output_channel=st.none() | st.integers(1, 64), input_channel=st.none() | st.integers(1, 64),
                     device=_TEXT, measured_utc=_TEXT)


def _close(a: float | None, b: float | None, rel: float) -> bool:
    if a is None or b is None:
        return a is b
    return math.isclose(a, b, rel_tol=rel, abs_tol=1e-3 if rel else 0.0)


@settings(max_examples=40, deadline=None)
@given(mic=_MICS, out=_OUTPUTS, latency=st.none() | _LATENCY, description=_TEXT)
def test_write_then_read_gives_the_same_values(mic, out, latency, description):
    rec = CalibrationRecord(description=description, microphones=(mic,), outputs=(out,), latency=latency)
    back = parse_calibration(format_calibration(rec))
    m, o = back.microphones[0], back.outputs[0]
    # common practice, no source: what is written is read back; sensitivities and full-scale voltages are
    # written to 7 significant digits, the recorded level to 0.001 dB, the rest exactly
    assert (m.name, m.input_channel, m.calibrator_class, m.recording, m.measured_utc) == \
        (mic.name, mic.input_channel, mic.calibrator_class, mic.recording, mic.measured_utc)
    assert _close(m.sensitivity_mv_per_pa, mic.sensitivity_mv_per_pa, 1e-6)
    assert _close(m.input_full_scale_vrms, mic.input_full_scale_vrms, 1e-6)
    assert m.calibrator_level_db_spl == mic.calibrator_level_db_spl
    assert m.calibrator_frequency_hz == mic.calibrator_frequency_hz
    assert _close(m.recorded_rms_dbfs, mic.recorded_rms_dbfs, 1e-9)
    assert (o.channel, o.amplifier_gain_db, o.method, o.measured_utc) == \
        (out.channel, out.amplifier_gain_db, out.method, out.measured_utc)
    assert _close(o.full_scale_vrms, out.full_scale_vrms, 1e-6)
    assert back.latency == latency and back.description == description


def test_the_written_record_keeps_its_comments_beside_the_values():
    rec = CalibrationRecord(microphones=(MicCalibration("M1", 3, 12.5, 1.228),),
                            latency=LatencyCalibration(samples=480, sample_rate_hz=48000.0))
    text = format_calibration(rec)
    assert text.startswith("# arrayplan calibration record")
    line = next(x for x in text.splitlines() if x.startswith("sensitivity_mv_per_pa"))
    assert line.index("#") == 45 and line.endswith("# mV/Pa")
    assert tomllib.loads(text)["latency"]["samples"] == 480
