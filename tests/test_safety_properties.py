"""Properties (hypothesis): the exposure refusal holds for every signal kind and every cap value,
and a resumed measurement equals an uninterrupted one.

The caps are the refusal levels of :mod:`arrayplan.safety`: 100 dBA (NIOSH Publication 98-126, 1998:
15 min a day) and 140 dB SPL peak (EU Directive 2003/10/EC Art. 3).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from arrayplan.errors import InputError
from arrayplan.safety import check_exposure, estimate_exposure

FS = 8000
REFUSE_DBA, REFUSE_PEAK = 100.0, 140.0

caps = st.one_of(st.floats(allow_nan=True, allow_infinity=True), st.sampled_from([100.0, 100.01, 140.0, 200.0]))


def _spl_by_hand(level_dbfs: float, sensitivity_db_spl: float, amp_vrms: float, sensitivity_vrms: float,
                 d_m: float) -> float:
    """dB SPL from a level in dBFS: volts = sqrt(2) * amp * 10^(L/20); sensitivity + 20 log10(V / V_rating)
    - 20 log10(d) (inverse square from 1 m; common practice, no source)."""
    volts = math.sqrt(2.0) * amp_vrms * 10 ** (level_dbfs / 20)
    return sensitivity_db_spl + 20 * math.log10(volts / sensitivity_vrms) - 20 * math.log10(d_m)


@st.composite
def signals(draw):
    """A test signal of one of the library's kinds, at a drawn level (full scale = 1)."""
    from arrayplan.signals.noise import band_limited_noise
    from arrayplan.signals.sweeps import SweepSettings, make_sweep
    from arrayplan.signals.tones import stepped_tones

    kind = draw(st.sampled_from(["sweep", "noise", "tones", "click"]))
    peak = draw(st.floats(0.01, 1.0))
    if kind == "sweep":
        x = make_sweep(SweepSettings(f1_hz=50.0, f2_hz=3000.0, duration_s=0.3, sample_rate_hz=FS,
                                     pad_before_s=0.0, pad_after_s=0.05, peak_dbfs=0.0,
                                     allow_above_cap=True)).signal
    elif kind == "noise":
        x = band_limited_noise("pink", 0.3, FS, 50.0, 3000.0, seed=draw(st.integers(0, 99)))
    elif kind == "tones":
        x = stepped_tones([draw(st.floats(60.0, 3000.0))], 0.2, 0.05, FS, 0.01)
    else:
        x = np.zeros(FS // 4)
        x[draw(st.integers(0, FS // 4 - 1))] = 1.0
    x = np.asarray(x, float).reshape(-1)
    return kind, peak * x / np.max(np.abs(x))


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(signal=signals(), sens=st.floats(50.0, 130.0), amp=st.floats(0.01, 1000.0),
       d=st.floats(0.01, 1000.0), max_dba=caps, max_peak=caps)
def test_without_consent_nothing_above_the_refusal_levels_passes(signal, sens, amp, d, max_dba, max_peak):
    kind, x = signal
    est = estimate_exposure(x, FS, sensitivity_db_spl=sens, amp_vrms_full_scale=amp, distances_m=[d])
    # The peak estimate against a hand computation from the sample peak.
    peak_dbfs = 20 * math.log10(np.max(np.abs(x)))
    assert est.peak_spl_db[0] == pytest.approx(_spl_by_hand(peak_dbfs, sens, amp, 2.83, d), abs=1e-6)
    try:
        check_exposure(est, max_dba=max_dba, max_peak_db_spl=max_peak)
    except InputError:
        return
    # Passed: then every cap was a finite number at or below its refusal level, and the levels under both.
    assert math.isfinite(max_dba) and max_dba <= REFUSE_DBA
    assert math.isfinite(max_peak) and max_peak <= REFUSE_PEAK
    assert est.dba[0] <= min(max_dba, REFUSE_DBA) and est.peak_spl_db[0] <= min(max_peak, REFUSE_PEAK)


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                                  HealthCheck.too_slow])
@given(kind=st.sampled_from(["sweep", "noise", "tones"]), amp=st.floats(0.5, 200.0),
       max_dba=st.sampled_from(["nan", "inf", "-inf", "200", "100", "90", "1e308"]),
       loud=st.booleans())
def test_every_written_signal_respects_the_refusal_levels(tmp_path, capsys, kind, amp, max_dba, loud):
    from arrayplan.cli import main

    capsys.readouterr()
    out = tmp_path / f"{kind}-{amp:.3f}-{max_dba}-{loud}.wav"
    kind_args = {"sweep": ["--f1-hz", "50", "--f2-hz", "3000", "--duration-s", "0.3", "--pad-after-s", "0.05"],
                 "noise": ["--f1-hz", "50", "--f2-hz", "3000", "--duration-s", "0.3", "--seed", "3"],
                 "tones": ["--freqs-hz", "500", "1000", "--tone-s", "0.2"]}[kind]
    rc = main(["signal", kind, *kind_args, "--rate-hz", str(FS), "--out", str(out),
               "--speaker-sensitivity-db-spl", "95", "--amp-vrms", repr(amp), "--listener-distance-m", "1",
               f"--max-dba={max_dba}"]
              + (["--allow-loud"] if loud else []))
    err = capsys.readouterr().err
    if rc != 0:
        assert rc == 2 and not out.exists() and err.count("\n") == 1, err
        return
    side = json.loads(out.with_suffix(".json").read_text())
    expo = side["exposure"]
    too_loud = expo["dba"][0] > REFUSE_DBA or expo["peak_spl_db"][0] > REFUSE_PEAK
    cap = float(max_dba)
    assert loud or (math.isfinite(cap) and cap <= REFUSE_DBA and expo["dba"][0] <= cap and not too_loud)
    if too_loud:
        assert "allowed by --allow-loud" in err


@settings(max_examples=3, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture,
                                                                 HealthCheck.too_slow])
@given(stop_at=st.integers(1, 3), seed=st.integers(0, 2 ** 40))
def test_a_resumed_measurement_equals_an_uninterrupted_one(bench_rig, tmp_path, stop_at, seed):
    import soundfile as sf

    from arrayplan.hardware.measure import MeasurementSettings
    from arrayplan.formats.irset import read_irset
    from arrayplan.rig import load_rig
    from test_measure_simulated import _resumed_and_uninterrupted

    fast = MeasurementSettings(f1_hz=100.0, sweep_s=0.3, ir_s=0.02, max_latency_s=0.05, lead_in_s=0.05)
    whole, parts = _resumed_and_uninterrupted(load_rig(bench_rig), tmp_path, stop_at=stop_at, seed=seed,
                                              fs=16000.0, settings=fast)
    for take in ("001-S1", "002-S2", "003-S3"):
        a, _ = sf.read(whole / "takes" / take / "recording.wav", dtype="float32")
        b, _ = sf.read(parts / "takes" / take / "recording.wav", dtype="float32")
        assert np.array_equal(a, b), take
    assert np.array_equal(read_irset(whole / "irset").data, read_irset(parts / "irset").data)
