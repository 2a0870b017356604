"""Calibration records: outside facts, files, recordings, calibrated measurements, the command."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import soundfile as sf

from arrayplan.errors import InputError
from arrayplan.hardware.calibration import (CalibrationRecord, LatencyCalibration, MicCalibration,
                                            OutputCalibration, calibration_factors, dbu_to_vrms,
                                            format_calibration, mic_from_calibrator_recording,
                                            output_from_loopback_recording, pressure_from_db_spl,
                                            read_calibration, sensitivity_db_re_1v_per_pa, tone_rms,
                                            write_calibration)


REPO = Path(__file__).resolve().parents[1]
FS = 48000


class TestOutsideFacts:
    def test_94_db_spl_is_1_pa(self):
        # Reference pressure 20 µPa: 1 Pa = 93.98 dB SPL (REFERENCE-VALUES.md, levels and sensitivities).
        assert pressure_from_db_spl(93.98) == pytest.approx(1.0, abs=1e-4)
        assert pressure_from_db_spl(94.0) == pytest.approx(1.0024, abs=1e-4)
        assert pressure_from_db_spl(114.0) == pytest.approx(10.024, abs=1e-3)

    def test_sensitivity_in_db_re_1_v_per_pa(self):
        # 20 log10(mV/Pa / 1000): 50 mV/Pa = -26.0 dB re 1 V/Pa (REFERENCE-VALUES.md).
        assert sensitivity_db_re_1v_per_pa(50.0) == pytest.approx(-26.02, abs=0.01)
        assert sensitivity_db_re_1v_per_pa(1000.0) == pytest.approx(0.0, abs=1e-12)

    def test_dbu(self):
        # 0 dBu = sqrt(0.6) V = 0.7746 V RMS; +4 dBu = 1.228 V (common practice, no source).
        assert dbu_to_vrms(0.0) == pytest.approx(0.7746, abs=1e-4)
        assert dbu_to_vrms(4.0) == pytest.approx(1.228, abs=1e-3)


def _tone(path, amplitude, freq=1000.0, seconds=2.0, channels=2, on=1, noise=1e-5, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(int(seconds * FS)) / FS
    data = rng.normal(0, noise, (t.size, channels))
    data[:, on - 1] += amplitude * np.sin(2 * np.pi * freq * t)
    sf.write(path, data.astype(np.float32), FS, subtype="FLOAT")
    return path


class TestFromRecordings:
    def test_mic_sensitivity_from_a_calibrator_recording(self, tmp_path):
        # A 50 mV/Pa mic on an input whose full-scale sine is +4 dBu, with a 94 dB
        # calibrator: the tone's RMS in volts is 50 mV/Pa * 1.0024 Pa.
        fs_vrms = dbu_to_vrms(4.0)
        volts = 0.050 * pressure_from_db_spl(94.0)
        amplitude = volts / fs_vrms  # a full-scale sine (peak 1) is fs_vrms RMS
        wav = _tone(tmp_path / "cal.wav", amplitude, on=2)
        mic = mic_from_calibrator_recording(wav, 2, "M2", input_full_scale_vrms=fs_vrms, calibrator_class="1")
        assert mic.sensitivity_mv_per_pa == pytest.approx(50.0, rel=2e-3)
        assert mic.input_channel == 2 and mic.calibrator_level_db_spl == 94.0
        assert mic.recorded_rms_dbfs == pytest.approx(20 * math.log10(amplitude / math.sqrt(2)), abs=0.02)
        # One full-scale sample stands for sqrt(2) * fs_vrms / 50 mV/Pa pascals.
        assert mic.pascal_per_full_scale == pytest.approx(math.sqrt(2) * fs_vrms / 0.050, rel=2e-3)

    def test_output_gain_from_a_loopback_recording(self, tmp_path):
        # A -20 dBFS-peak sine from an output with a 2.0 V RMS full-scale sine, recorded
        # on an input with 1.228 V RMS full scale.
        played = 0.1
        rec_amp = played * 2.0 / 1.228
        wav = _tone(tmp_path / "out.wav", rec_amp, channels=1)
        out = output_from_loopback_recording(wav, 1, 3, played_peak=played, input_full_scale_vrms=1.228,
                                             amplifier_gain_db=20.0)
        assert out.full_scale_vrms == pytest.approx(2.0, rel=2e-3)
        assert out.volts_per_full_scale == pytest.approx(math.sqrt(2) * 2.0 * 10.0, rel=2e-3)

    def test_bad_recordings(self, tmp_path):
        with pytest.raises(InputError, match="no 1000 Hz tone found: the strongest component is at 250"):
            mic_from_calibrator_recording(_tone(tmp_path / "a.wav", 0.1, freq=250.0), 1, "M1",
                                          input_full_scale_vrms=1.0)
        with pytest.raises(InputError, match="clipped"):
            tone_rms(np.clip(2 * np.sin(np.arange(FS) * 2 * np.pi * 1000 / FS), -1, 1), FS, 1000.0)
        with pytest.raises(InputError, match="too much noise"):
            mic_from_calibrator_recording(_tone(tmp_path / "n.wav", 0.01, noise=0.05), 1, "M1",
                                          input_full_scale_vrms=1.0)
        with pytest.raises(InputError, match="channel 3 asked for, the file has 2"):
            mic_from_calibrator_recording(_tone(tmp_path / "c.wav", 0.1), 3, "M1", input_full_scale_vrms=1.0)
        with pytest.raises(InputError, match="recording not found"):
            mic_from_calibrator_recording(tmp_path / "none.wav", 1, "M1", input_full_scale_vrms=1.0)


class TestRecordFiles:
    RECORD = CalibrationRecord(
        description="bench",
        microphones=(MicCalibration("M1", 1, 12.5, 1.228, calibrator_class="1", recorded_rms_dbfs=-31.2),),
        outputs=(OutputCalibration(1, 2.0, 26.0, method="voltmeter"),),
        latency=LatencyCalibration(1234, 48000.0, 9, 9, "pulse"))

    def test_round_trip(self, tmp_path):
        path = write_calibration(tmp_path / "c.toml", self.RECORD)
        back = read_calibration(path)
        assert back.microphones == self.RECORD.microphones
        assert back.outputs == self.RECORD.outputs and back.latency == self.RECORD.latency
        assert "sensitivity_db_re_1v_per_pa = -38.062" in path.read_text()

    @pytest.mark.parametrize("edit, message", [
        (lambda t: t.replace('format = "arrayplan-calibration"', 'format = "x"'), r"format: expected format"),
        (lambda t: t.replace("sensitivity_mv_per_pa = 12.5", "sensitivity_mv_per_pa = -1"),
         r"microphones\[0\]\.sensitivity_mv_per_pa: must be positive"),
        (lambda t: t.replace("sensitivity_db_re_1v_per_pa = -38.062", "sensitivity_db_re_1v_per_pa = -30"),
         r"disagrees with 12.5 mV/Pa"),
        (lambda t: t.replace("samples = 1234", "samples = 1.5"), r"latency\.samples: expected a whole number"),
        (lambda t: t + "\n[[outputs]]\nchannel = 1\nfull_scale_vrms = 1.0\n", r"output channel 1 appears twice"),
        (lambda t: t.replace("[latency]", "[latency]\ncolour = 3"), r"latency: unknown key\(s\) colour"),
        (lambda t: t + "\n[[[", r"not valid TOML"),
    ])
    def test_malformed_records_name_the_field(self, tmp_path, edit, message):
        path = tmp_path / "c.toml"
        path.write_text(edit(format_calibration(self.RECORD)))
        with pytest.raises(InputError, match=message):
            read_calibration(path)

    def test_missing_record(self, tmp_path):
        with pytest.raises(InputError, match="calibration record not found"):
            read_calibration(tmp_path / "nope.toml")

    def test_the_demo_record_in_the_repository_reads(self):
        rec = read_calibration(REPO / "calibration" / "bench-trio.toml")
        assert [m.name for m in rec.microphones] == ["M1", "M2", "M3"]
        assert [o.channel for o in rec.outputs] == [1, 2, 3]
        assert rec.latency is not None and rec.latency.sample_rate_hz == 48000.0


def test_calibrated_measurement_carries_pascal_per_volt(bench_rig, tmp_path):
    from arrayplan.hardware.measure import MeasurementSettings, RigWiring, measure
    from arrayplan.hardware.simulated import SimulatedLink
    from arrayplan.formats.irset import read_irset
    from arrayplan.rig import load_rig

    rig = load_rig(bench_rig)
    wiring = RigWiring.from_rig(rig)
    fast = MeasurementSettings(f1_hz=100.0, sweep_s=0.5, ir_s=0.05, max_latency_s=0.1, lead_in_s=0.1)
    link = SimulatedLink.from_rig(rig, 48000.0, 2400, nonlinearity=(), noise_rms_dbfs=None)
    plain = measure(link, wiring, tmp_path / "plain", fast)
    rec = read_calibration(REPO / "calibration" / "bench-trio.toml")
    cal = measure(link, wiring, tmp_path / "cal", fast, calibration=rec)
    a, b = read_irset(plain.irset_path), read_irset(cal.irset_path)
    assert a.units == "full_scale" and b.units == "pascal_per_volt"
    pa, volts, units, notes = calibration_factors(rec, wiring.mic_names, [1, 2, 3], [1, 2, 3])
    assert units == "pascal_per_volt" and notes == []
    expect = a.data * pa[None, :, None] / volts[None, None, :]
    assert np.allclose(b.data, expect, rtol=1e-5, atol=1e-9 * np.max(np.abs(expect)))
    # In the band the calibrated response is the true transfer function in Pa/V, not a peak-normalised
    # pulse: at the sweep's band centre sqrt(f1 f2) its magnitude equals the simulated truth's times
    # the calibration factors within 0.05 dB (S. Mueller & P. Massarani, "Transfer-function
    # measurement with sweeps", JAES 49(6), 2001: the deconvolved spectrum of a unity system is flat
    # in band; truth from the simulated link, exact arithmetic otherwise).
    centre = math.sqrt(100.0 * 20000.0)
    assert b.zero_lag_samples > 0 and b.n_samples == b.zero_lag_samples + 2400   # pre-roll kept before zero lag
    phasor = np.exp(-2j * np.pi * centre / 48000.0 * (np.arange(b.n_samples) - b.zero_lag_samples))
    truth_phasor = np.exp(-2j * np.pi * centre / 48000.0 * np.arange(link.truth.n_samples))
    for m in range(3):
        for s in range(3):
            got = abs(np.dot(b.data[:, m, s], phasor))
            want = abs(np.dot(link.truth.data[:, m, s], truth_phasor)) * pa[m] / volts[s]
            assert 20 * math.log10(got / want) == pytest.approx(0.0, abs=0.05)
    # Without output gains the responses are Pa per full scale, with a warning.
    mics_only = CalibrationRecord(microphones=rec.microphones)
    warned = []
    c = measure(link, wiring, tmp_path / "mics", fast, calibration=mics_only, on_warning=warned.append)
    assert read_irset(c.irset_path).units == "pascal_per_full_scale"
    assert any("not in the calibration record" in w for w in warned)
    with pytest.raises(InputError, match="microphone 'M3' is not in the calibration record"):
        measure(link, wiring, tmp_path / "bad", fast,
                calibration=CalibrationRecord(microphones=rec.microphones[:2]))


def test_calibrate_command_builds_a_record(tmp_path, run_arrayplan):
    record = tmp_path / "bench.toml"
    fs_vrms = dbu_to_vrms(4.0)
    wav = _tone(tmp_path / "m1.wav", 0.020 * pressure_from_db_spl(94.0) / fs_vrms)
    done = run_arrayplan("calibrate", "mic", str(record), "--recording", str(wav), "--mic", "M1",
                         "--input-full-scale-dbu", "4", "--calibrator-class", "1")
    assert done.returncode == 0, done.stderr
    assert "M1: 20.0" in done.stdout and "-33.9" in done.stdout  # 20 log10(0.020) = -33.98 dB re 1 V/Pa
    out_wav = _tone(tmp_path / "o1.wav", 0.1 * 2.0 / fs_vrms, channels=1)
    done = run_arrayplan("calibrate", "output", str(record), "--output-channel", "1", "--recording", str(out_wav),
                         "--played-peak-dbfs", "-20", "--input-full-scale-dbu", "4")
    assert done.returncode == 0, done.stderr
    rec = read_calibration(record)
    assert rec.mic("M1").sensitivity_mv_per_pa == pytest.approx(20.0, rel=2e-3)
    assert rec.output(1).full_scale_vrms == pytest.approx(2.0, rel=2e-3)
    shown = run_arrayplan("calibrate", "show", str(record))
    assert shown.returncode == 0 and "mic M1 on input 1" in shown.stdout and "output 1" in shown.stdout
    bad = run_arrayplan("calibrate", "mic", str(record), "--recording", str(wav), "--mic", "M1")
    assert bad.returncode == 2 and "give exactly one of --input-full-scale-dbu" in bad.stderr
    assert read_calibration(record).mic("M1") == rec.mic("M1")  # untouched by the failed call


def test_calibrate_latency_through_real_audio(audio_server, bench_rig, tmp_path, run_arrayplan):
    record = tmp_path / "lat.toml"
    for _attempt in range(3):
        # A software audio server can drop a block under load; the command then refuses to write and
        # says "run it again", as a user would: the test does the same, at most three times.
        done = run_arrayplan("calibrate", "latency", str(record), "--output-channel", "4", "--input-channel", "4",
                             "--device", "pulse", "--rate-hz", "48000", "--yes")
        if "the stream lost samples" not in done.stderr:
            break
        assert not record.exists()                  # nothing written after a lost block
    assert done.returncode == 0, done.stderr
    assert "CAUTION" in done.stderr
    lat = read_calibration(record).latency
    assert lat.sample_rate_hz == 48000.0 and 0 < lat.samples < 4800
    print(f"calibrated loopback latency: {lat.samples} samples")
