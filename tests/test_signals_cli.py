"""``arrayplan signal ...``: real WAV files written and read back, bad input, nothing half-written."""

import json

import numpy as np
import pytest
import soundfile as sf

import arrayplan.cli as cli
from arrayplan.safety import CAUTION_NOTE
from arrayplan.errors import InputError
from arrayplan.formats.signal_sidecar import signal_sidecar
from arrayplan.signals import wavout
from helpers import arrayplan_main

SWEEP = ["--f1-hz", "50", "--f2-hz", "5000", "--duration-s", "0.5", "--pad-after-s", "0.2", "--rate-hz", "16000"]


def _assert_one_line_error(rc, err, *words):
    assert rc == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("arrayplan signal: error:")
    assert "Traceback" not in err
    for w in words:
        assert w in lines[0]


@pytest.mark.parametrize("fmt, subtype", [("float32", "FLOAT"), ("pcm24", "PCM_24")])
def test_sweep_round_trip(tmp_path, capsys, fmt, subtype):
    out = tmp_path / "sweep.wav"
    rc, stdout, err = arrayplan_main(capsys, "signal", "sweep", "--out", str(out), "--format", fmt, *SWEEP)
    assert rc == 0
    assert "CAUTION" in err and "licensed practice" in err
    info = sf.info(out)
    assert info.samplerate == 16000 and info.channels == 1 and info.subtype == subtype
    data, _ = sf.read(out, always_2d=True)
    side = json.loads((tmp_path / "sweep.json").read_text())
    assert side["n_samples"] == data.shape[0] == 1600 + 8000 + 3200
    assert side["caution"] == CAUTION_NOTE and side["provenance"]["tool"] == "arrayplan"
    sw = side["sweep"]
    for key in ("f1_hz", "f2_hz", "duration_s", "sample_rate_hz", "fade_in_s", "fade_out_s", "pad_before_samples",
                "pad_after_samples", "sweep_peak_dbfs", "inverse_filter_file", "linear_lag_samples"):
        assert key in sw
    assert 20 * np.log10(np.max(np.abs(data))) == pytest.approx(-12.0, abs=1e-4)
    assert data[0, 0] == 0.0 and data[-1, 0] == 0.0
    inv, rate = sf.read(tmp_path / sw["inverse_filter_file"])
    assert rate == 16000 and inv.size == sw["n_sweep_samples"] == 8000
    assert sf.info(tmp_path / sw["inverse_filter_file"]).subtype == "FLOAT"
    inv_side = json.loads((tmp_path / "sweep.inverse.json").read_text())
    assert inv_side["inverse_of"] == "sweep.wav" and inv_side["sweep"] == sw and inv_side["caution"] == CAUTION_NOTE
    # the played file and its inverse give the band-limited pulse at the linear lag, with unit
    # magnitude at the band centre (S. Mueller & P. Massarani, "Transfer-function measurement with
    # sweeps", JAES 49(6), 2001: the deconvolved spectrum of a unity system is flat in band)
    from scipy.signal import fftconvolve
    full = fftconvolve(data[:, 0], inv)
    assert int(np.argmax(np.abs(full))) == sw["linear_lag_samples"]
    centre = np.sqrt(sw["f1_hz"] * sw["f2_hz"])
    assert sw["unity_gain_at_hz"] == pytest.approx(centre)
    at_centre = np.dot(full, np.exp(-2j * np.pi * centre / 16000 * np.arange(full.size)))
    assert 20 * np.log10(abs(at_centre)) == pytest.approx(0.0, abs=1e-3)
    assert "no exposure estimate" in err


def test_sweep_fades_default_to_one_fresnel_time_and_given_ones_are_kept(tmp_path, capsys):
    # 1 / sqrt(f ln(f2/f1) / T) at f1 and f2: the time the sweep takes to cross one Fresnel zone
    # (common practice, no source), at most half an octave's time T ln 2 / ln(f2/f1) / 2 (which binds
    # at f1 for this short sweep); recorded in both the conditioning and the sweep block.
    rc, _, err = arrayplan_main(capsys, "signal", "sweep", "--out", str(tmp_path / "a.wav"), *SWEEP)
    assert rc == 0, err
    side = json.loads((tmp_path / "a.json").read_text())
    rate = 0.5 / np.log(5000 / 50)
    half_octave = rate * np.log(2) / 2
    assert 1 / np.sqrt(50 / rate) > half_octave > 1 / np.sqrt(5000 / rate)
    for key, want in (("fade_in_s", half_octave), ("fade_out_s", 1 / np.sqrt(5000 / rate))):
        assert side["conditioning"][key] == side["sweep"][key] == pytest.approx(want, rel=1e-12)
    assert side["sweep"]["fade_rule"].startswith("one Fresnel time")
    assert side["sweep"]["pre_roll_samples"] == int(half_octave * 16000)
    rc, _, err = arrayplan_main(capsys, "signal", "schedule", "--speakers", "2", "--out", str(tmp_path / "s.wav"),
                                *SWEEP, "--fade-in-s", "0.01", "--fade-out-s", "0.002")
    assert rc == 0, err
    side = json.loads((tmp_path / "s.json").read_text())
    assert (side["conditioning"]["fade_in_s"], side["conditioning"]["fade_out_s"]) == (0.01, 0.002)
    assert side["sweep"]["fade_rule"] == "as given"


def test_other_signals_round_trip(tmp_path, capsys):
    cases = {
        "noise.wav": ["noise", "--colour", "white", "--duration-s", "1", "--seed", "3", "--rms-dbfs", "-30"],
        "tones.wav": ["tones", "--freqs-hz", "250", "1000", "--tone-s", "0.3", "--gap-s", "0.1"],
        "bursts.wav": ["bursts", "--freq-hz", "1000", "--cycles", "8", "--count", "3", "--period-s", "0.1"],
        "silence.wav": ["silence", "--duration-s", "0.5", "--channels", "2"],
        "sched.wav": ["schedule", "--speaker-names", "L,R,Sub", *SWEEP],
    }
    for name, args in cases.items():
        out = tmp_path / name
        rc, _, err = arrayplan_main(capsys, "signal", args[0], "--out", str(out), "--rate-hz", "16000", *args[1:])
        assert rc == 0, err
        data, rate = sf.read(out, always_2d=True)
        side = json.loads(out.with_suffix(".json").read_text())
        assert rate == 16000 and side["n_samples"] == data.shape[0] and side["n_channels"] == data.shape[1]
        assert side["caution"] == CAUTION_NOTE
        assert data[0].max() == 0.0 and abs(data[-1]).max() == 0.0
        assert ("CAUTION" in err) == (name != "silence.wav")
    noise, _ = sf.read(tmp_path / "noise.wav")
    active = noise[1600:-16000]
    assert 20 * np.log10(np.sqrt(np.mean(active ** 2))) == pytest.approx(-30.0, abs=0.05)
    assert abs(np.mean(noise)) < 1e-9
    side = json.loads((tmp_path / "sched.json").read_text())
    assert side["channel_names"] == ["L", "R", "Sub"]
    assert [e["channel"] for e in side["schedule"]["speakers"]] == [1, 2, 3]


def test_exposure_estimate_warns_refuses_and_overrides(tmp_path, capsys):
    out = tmp_path / "loud.wav"
    expo = ["--speaker-sensitivity-db-spl", "95", "--amp-vrms", "20", "--listener-distance-m", "1"]
    rc, _, err = arrayplan_main(capsys, "signal", "sweep", "--out", str(out), *SWEEP, *expo)
    _assert_one_line_error(rc, err, "exceeds the cap of 100 dBA", "--allow-loud")
    assert list(tmp_path.iterdir()) == []
    rc, stdout, err = arrayplan_main(capsys, "signal", "sweep", "--out", str(out), *SWEEP, *expo, "--allow-loud")
    assert rc == 0 and "allowed by --allow-loud" in err and "NIOSH" in stdout
    side = json.loads((tmp_path / "loud.json").read_text())
    assert side["exposure"]["dba"][0] > 100
    assert any("above 85 dBA" in w for w in side["warnings"])
    rc, _, err = arrayplan_main(capsys, "signal", "sweep", "--out", str(tmp_path / "x.wav"), *SWEEP,
                                "--speaker-sensitivity-db-spl", "95")
    _assert_one_line_error(rc, err, "needs both", "--amp-vrms")
    # without distances the estimate is made for a listener 1 m away, as in 'measure'
    rc, _, err = arrayplan_main(capsys, "signal", "sweep", "--out", str(tmp_path / "near.wav"), *SWEEP, *expo[:4],
                                "--allow-loud")
    assert rc == 0, err
    assert json.loads((tmp_path / "near.json").read_text())["exposure"]["listener_distances_m"] == [1.0]


@pytest.mark.parametrize("extra, words", [
    (["--f2-hz", "8000"], ["--f2-hz", "outside (0, 8000)"]),
    (["--f2-hz", "9000"], ["outside"]),
    (["--f1-hz", "0"], ["--f1-hz"]),
    (["--duration-s", "0.03"], ["too short"]),
    (["--peak-dbfs", "-6"], ["above the cap", "--allow-above-cap"]),
    (["--peak-dbfs", "1", "--allow-above-cap"], ["would clip"]),
    (["--fade-in-s", "0"], ["fade"]),
])
def test_bad_sweep_input_is_one_line_and_writes_nothing(tmp_path, capsys, extra, words):
    rc, _, err = arrayplan_main(capsys, "signal", "sweep", "--out", str(tmp_path / "s.wav"), *SWEEP, *extra)
    assert rc == 2 and len(err.strip().splitlines()) == 1 and "Traceback" not in err, err
    assert all(w in err for w in words), err
    assert list(tmp_path.iterdir()) == []


def test_usage_errors_exit_2(tmp_path, capsys):
    assert cli.main(["signal", "sweep", "--out", str(tmp_path / "s.wav"), "--format", "pcm8"]) == 2
    assert len(capsys.readouterr().err.strip().splitlines()) == 1
    (tmp_path / "notes").write_text("a file where a folder is wanted")
    rc, _, err = arrayplan_main(capsys, "signal", "sweep", "--out", str(tmp_path / "notes" / "s.wav"), *SWEEP)
    _assert_one_line_error(rc, err, "is a file, not a folder")


def test_missing_output_folders_are_created(tmp_path, capsys):
    rc, _, _ = arrayplan_main(capsys, "signal", "sweep", "--out", str(tmp_path / "new" / "s.wav"), *SWEEP)
    assert rc == 0 and (tmp_path / "new" / "s.wav").is_file() and (tmp_path / "new" / "s.json").is_file()


def test_probe_sends_the_signal_through_each_filter(tmp_path, capsys):
    fs = 16000
    filters = np.zeros((32, 3))
    filters[2, 0], filters[10, 1], filters[31, 2] = 0.5, -0.25, 1.0
    sf.write(tmp_path / "ch1.wav", filters, fs, subtype="FLOAT")
    (tmp_path / "ch1.json").write_text(json.dumps({"speaker_names": ["L", "C", "R"]}))
    rc, _, err = arrayplan_main(capsys, "signal", "probe", "--filters", str(tmp_path / "ch1.wav"),
                                "--out", str(tmp_path / "probe.wav"), *SWEEP)
    assert rc == 0, err
    data, _ = sf.read(tmp_path / "probe.wav", always_2d=True)
    side = json.loads((tmp_path / "probe.json").read_text())
    assert data.shape[1] == 3 and side["channel_names"] == ["L", "C", "R"]
    assert side["n_samples"] == 1600 + 8000 + 31 + 3200
    assert 20 * np.log10(np.max(np.abs(data))) == pytest.approx(-12.0, abs=1e-4)
    # each speaker's drive is the same signal through its own filter: delays 2, 10, 31, gains 0.5, -0.25, 1
    ref = data[:, 2]
    np.testing.assert_allclose(data[:-29, 0], 0.5 * ref[29:], atol=3e-4)
    np.testing.assert_allclose(data[:-21, 1], -0.25 * ref[21:], atol=3e-4)
    # noise source, no names sidecar
    (tmp_path / "ch1.json").unlink()
    rc, _, err = arrayplan_main(capsys, "signal", "probe", "--filters", str(tmp_path / "ch1.wav"), "--source", "pink",
                                "--out", str(tmp_path / "pn.wav"), *SWEEP, "--seed", "1")
    assert rc == 0, err
    side = json.loads((tmp_path / "pn.json").read_text())
    assert side["channel_names"] == ["S1", "S2", "S3"] and side["sweep"] is None
    # wrong rate
    rc, _, err = arrayplan_main(capsys, "signal", "probe", "--filters", str(tmp_path / "ch1.wav"),
                                "--out", str(tmp_path / "p2.wav"), *SWEEP[:-2], "--rate-hz", "48000")
    _assert_one_line_error(rc, err, "16000 Hz")
    assert not (tmp_path / "p2.wav").exists()


def test_nothing_half_written_when_a_later_file_fails(tmp_path, monkeypatch):
    def boom(*a, **k):
        raise OSError("disk full")

    monkeypatch.setattr(wavout, "write_signal_sidecar", boom)
    x = np.zeros(100)
    x[50] = 0.1
    side = signal_sidecar(signal="silence", file="a.wav", sample_rate_hz=16000, n_samples=100, n_channels=1,
                          channel_names=["S1"], sample_format="float32", level=None, conditioning=None,
                          parameters={})
    with pytest.raises(OSError):
        wavout.write_signal_files(tmp_path / "a.wav", x, 16000, "float32", side, {tmp_path / "a.inverse.wav": x})
    assert list(tmp_path.iterdir()) == []


def test_a_sidecar_that_breaks_its_schema_writes_nothing(tmp_path):
    x = np.zeros(100)
    x[50] = 0.1
    with pytest.raises(InputError, match="channel_names"):
        wavout.write_signal_files(tmp_path / "a.wav", x, 16000, "float32",
                                  {"format": "arrayplan-signal", "format_version": 1, "signal": "silence",
                                   "file": "a.wav", "sample_rate_hz": 16000.0, "n_samples": 100, "n_channels": 1,
                                   "channel_names": ["S1", "S2"]})
    assert list(tmp_path.iterdir()) == []
