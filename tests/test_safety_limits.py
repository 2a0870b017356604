"""Safety limits fail closed: no value of an option lifts a refusal without the explicit consent.

The exposure caps (100 dBA: NIOSH Publication 98-126, 1998, permits 15 min a day at that level;
140 dB SPL peak: EU Directive 2003/10/EC Art. 3) must hold against NaN, raised caps and absurd
sensitivities, voltages and distances; and hot outputs of unknown level need their own consent.
"""

from __future__ import annotations

import argparse
import io
import math

import numpy as np
import pytest

from arrayplan.commands.measure import print_level_estimate
from arrayplan.errors import InputError
from arrayplan.safety import check_exposure, estimate_exposure

from helpers import FAST_MEASURE_ARGS, arrayplan_main

FS = 16000
SWEEP = ["signal", "sweep", "--f1-hz", "50", "--f2-hz", "5000", "--duration-s", "0.5", "--pad-after-s", "0.2",
         "--rate-hz", str(FS)]
#: An invented loud setup: about 112 dBA at 1 m for the -12 dBFS sweep.
LOUD = ["--speaker-sensitivity-db-spl", "100", "--amp-vrms", "40", "--listener-distance-m", "1"]


def _one_line(rc, err, *words):
    assert rc == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in err, err
    for w in words:
        assert w in lines[0], lines[0]


def _tone_estimate(dba_at_1m: float, **kw):
    """A 1 kHz sine (A-weighting 0 dB there, IEC 61672-1) set to `dba_at_1m` at 1 m."""
    t = np.arange(FS) / FS
    x = 0.5 * np.sin(2 * np.pi * 1000 * t)
    # 0.5 peak = -9.03 dBFS RMS; sqrt(2) * 2.83 V * 0.5 / sqrt(2) = 1.415 V: 20 log10(2.83 / 1.415) = 6.02 dB
    # below the rating (definition of dB SPL from voltage, common practice, no source).
    return estimate_exposure(x, FS, sensitivity_db_spl=dba_at_1m + 6.0206, amp_vrms_full_scale=2.83,
                             distances_m=[1.0], **kw)


def test_the_estimate_itself_matches_the_voltage_rule():
    # 20 log10(V / 2.83) above the rating at 1 m (common practice, no source).
    est = _tone_estimate(103.0)
    assert est.dba[0] == pytest.approx(103.0, abs=0.05)


@pytest.mark.parametrize("max_dba", [math.nan, math.inf, -math.inf])
def test_a_cap_that_is_not_a_number_refuses(max_dba):
    with pytest.raises(InputError, match="finite"):
        check_exposure(_tone_estimate(70.0), max_dba=max_dba)
    with pytest.raises(InputError, match="finite"):
        check_exposure(_tone_estimate(70.0), max_peak_db_spl=max_dba)


@pytest.mark.parametrize("cap", [100.5, 120.0, 200.0, 1e300])
def test_raising_the_cap_above_the_refusal_level_needs_consent(cap):
    with pytest.raises(InputError, match="above the refusal level of 100 dBA"):
        check_exposure(_tone_estimate(90.0), max_dba=cap)
    with pytest.raises(InputError, match="above the refusal level of 140 dB SPL"):
        check_exposure(_tone_estimate(90.0), max_peak_db_spl=cap + 40)
    warnings = check_exposure(_tone_estimate(110.0), max_dba=cap, allow_loud=True)
    assert any("above 85 dBA" in w for w in warnings)


def test_lower_caps_still_refuse_and_nan_levels_refuse():
    with pytest.raises(InputError, match="exceeds the cap of 80 dBA"):
        check_exposure(_tone_estimate(85.0), max_dba=80.0)
    est = _tone_estimate(70.0)
    est.dba = np.array([math.nan])
    with pytest.raises(InputError, match="exceeds the cap"):
        check_exposure(est)
    est = _tone_estimate(70.0)
    est.peak_spl_db = np.array([math.nan])
    with pytest.raises(InputError, match="peak"):
        check_exposure(est)


@pytest.mark.parametrize("field, value", [
    ("sensitivity_vrms", 1e9), ("sensitivity_vrms", 1e-9), ("sensitivity_vrms", math.nan),
    ("sensitivity_db_spl", -50.0), ("sensitivity_db_spl", 300.0), ("sensitivity_db_spl", math.nan),
    ("amp_vrms_full_scale", 1e-9), ("amp_vrms_full_scale", 1e9), ("amp_vrms_full_scale", math.inf),
])
def test_absurd_inputs_of_the_estimate_are_refused_with_the_numbers(field, value):
    kw = dict(sensitivity_db_spl=90.0, amp_vrms_full_scale=2.83, sensitivity_vrms=2.83)
    kw[field] = value
    t = np.arange(FS) / FS
    with pytest.raises(InputError, match="plausible range") as err:
        estimate_exposure(0.1 * np.sin(2 * np.pi * 1000 * t), FS, distances_m=[1.0], **kw)
    assert err.value.field == field and repr(value) in err.value.problem


@pytest.mark.parametrize("d", [1e9, 0.0, -1.0, math.nan])
def test_absurd_listener_distances_are_refused(d):
    with pytest.raises(InputError, match="distances"):
        estimate_exposure(np.ones(100) * 0.1, FS, sensitivity_db_spl=90.0, amp_vrms_full_scale=2.83,
                          distances_m=[1.0, d])


@pytest.mark.parametrize("extra, words", [
    (["--max-dba", "nan"], ["--max-dba", "finite"]),
    (["--max-dba", "200"], ["--max-dba", "above the refusal level", "--allow-loud"]),
    (["--max-dba", "inf"], ["--max-dba", "finite"]),
    (["--sensitivity-vrms", "1e9"], ["--sensitivity-vrms", "1000000000.0", "plausible range"]),
    (["--sensitivity-vrms", "nan"], ["--sensitivity-vrms", "nan"]),
])
def test_signal_command_keeps_the_refusal(tmp_path, capsys, extra, words):
    rc, _, err = arrayplan_main(capsys, *SWEEP, "--out", str(tmp_path / "s.wav"), *LOUD, *extra)
    _one_line(rc, err, *words)
    assert list(tmp_path.iterdir()) == []
    # The same estimate is refused without the extra option, and only --allow-loud passes it.
    rc, _, err = arrayplan_main(capsys, *SWEEP, "--out", str(tmp_path / "s.wav"), *LOUD)
    _one_line(rc, err, "exceeds the cap of 100 dBA")
    assert list(tmp_path.iterdir()) == []


def test_raised_cap_with_consent_writes_and_warns(tmp_path, capsys):
    rc, _, err = arrayplan_main(capsys, *SWEEP, "--out", str(tmp_path / "s.wav"), *LOUD, "--max-dba", "120",
                                "--allow-loud")
    assert rc == 0 and "above 85 dBA" in err and (tmp_path / "s.wav").is_file()


def _level_args(**kw):
    base = dict(speaker_sensitivity_db_spl=None, sensitivity_vrms=2.83, amp_vrms=None, listener_distance_m=[1.0],
                allow_loud=False, allow_unknown_level=False, yes=True)
    base.update(kw)
    return argparse.Namespace(**base)


def _sweep():
    from arrayplan.signals.sweeps import SweepSettings, make_sweep

    return make_sweep(SweepSettings(f1_hz=100.0, f2_hz=7000.0, duration_s=0.5, sample_rate_hz=FS,
                                    pad_before_s=0.05, pad_after_s=0.05)).signal


def test_hot_outputs_at_an_unknown_level_need_their_own_consent():
    x = _sweep()
    hot = 200.0  # V RMS at full scale, e.g. 2 V RMS converter output and a 40 dB amplifier
    buf = io.StringIO()
    with pytest.raises(InputError, match="HOT OUTPUTS AT AN UNKNOWN LEVEL") as err:
        print_level_estimate(_level_args(), x, FS, hot, stream=buf)
    assert "--allow-unknown-level" in err.value.one_line() and "UNKNOWN" in buf.getvalue()
    # --allow-loud is not that consent.
    with pytest.raises(InputError, match="UNKNOWN LEVEL"):
        print_level_estimate(_level_args(allow_loud=True), x, FS, hot, stream=io.StringIO())
    buf = io.StringIO()
    warnings = print_level_estimate(_level_args(allow_unknown_level=True), x, FS, hot, stream=buf)
    assert warnings and "unknown level" in warnings[0] and "200 V RMS" in buf.getvalue()
    # A quiet line output (1 V RMS) through the same assumed speaker stays under the caps: no consent needed.
    assert print_level_estimate(_level_args(), x, FS, 1.0, stream=io.StringIO()) == []
    # An absurd --amp-vrms is refused rather than estimated.
    with pytest.raises(InputError, match="plausible range"):
        print_level_estimate(_level_args(amp_vrms=1e-9, speaker_sensitivity_db_spl=90.0), x, FS, None,
                             stream=io.StringIO())


def test_measure_refuses_hot_calibrated_outputs_of_unknown_level(audio_server, bench_rig, tmp_path, run_arrayplan):
    from arrayplan.hardware.calibration import CalibrationRecord, OutputCalibration, write_calibration

    cal = tmp_path / "hot.toml"
    write_calibration(cal, CalibrationRecord(outputs=tuple(
        OutputCalibration(channel=c, full_scale_vrms=2.0, amplifier_gain_db=40.0) for c in (1, 2, 3))))
    out = tmp_path / "never"
    done = run_arrayplan("measure", bench_rig, "--out", out, "--device", "pulse", "--rate-hz", "48000",
                         "--calibration", cal, "--yes", *FAST_MEASURE_ARGS)
    assert done.returncode == 2, done.stderr
    last = done.stderr.strip().splitlines()[-1]
    assert "HOT OUTPUTS AT AN UNKNOWN LEVEL" in last and "--allow-unknown-level" in last
    assert "Confirmed by --yes" not in done.stderr and not out.exists()
