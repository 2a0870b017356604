"""``arrayplan deconvolve``: recordings made elsewhere -> IR set, report, warnings; bad input."""

import csv
import json

import numpy as np
import pytest
import soundfile as sf

from arrayplan.formats.irset import read_irset
from helpers import arrayplan_main, assert_flags_exist

FS = 16000
SWEEP = ["--f1-hz", "50", "--f2-hz", "3000", "--duration-s", "0.8", "--pad-after-s", "0.25",
         "--rate-hz", str(FS)]


def _one_line_error(rc, err, *words):
    assert rc == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("arrayplan deconvolve: error:"), err
    assert "Traceback" not in err
    for w in words:
        assert w in lines[0], lines[0]


def _make(tmp_path, capsys, kind="sweep", *extra):
    rc, _, err = arrayplan_main(capsys, "signal", kind, "--out", tmp_path / f"{kind}.wav", *SWEEP, *extra)
    assert rc == 0, err
    data, _ = sf.read(tmp_path / f"{kind}.wav", always_2d=True)
    return data, tmp_path / f"{kind}.json"


def _through(x, delays, gains, length=None):
    """Each column: x delayed and scaled (a wire from speaker to microphone), `length` samples."""
    length = x.size if length is None else length
    out = np.zeros((length, len(delays)))
    for m, (d, g) in enumerate(zip(delays, gains)):
        n = min(x.size, length - d)
        out[d:d + n, m] = g * x[:n]
    return out


def _unity_pulse(data, side):
    """The played file convolved with its inverse filter, from the zero lag on (what a wire gives).

    Returns the whole deconvolution and the index of its zero lag.
    """
    from scipy.signal import fftconvolve

    block = json.loads(side.read_text())["sweep"]
    inverse, _ = sf.read(side.parent / block["inverse_filter_file"])
    return fftconvolve(data, inverse), block["linear_lag_samples"]


def _check_wire(h, full, lag, delay, gain, n0):
    """A wire of `gain` and `delay`: the peak exact to the sample, the waveform the unity pulse times the gain.

    `h` starts `n0` samples before zero lag.  The inverse has unit gain in band (S. Mueller &
    P. Massarani, "Transfer-function measurement with sweeps", JAES 49(6), 2001), so the band-limited
    pulse peaks below 1; PCM_24 files: 1e-4 relative.
    """
    k = int(np.argmax(np.abs(h)))
    assert k == n0 + delay  # exact to the sample
    want = gain * full[lag - n0 - delay:lag - n0 - delay + h.size]
    assert np.max(np.abs(h - want)) < 1e-4 * abs(gain) * np.max(np.abs(full))
    assert 0 < np.max(np.abs(full)) < 1


def test_per_speaker_recordings_to_irset(tmp_path, capsys):
    data, side = _make(tmp_path, capsys)
    x = data[:, 0]
    delays = [[16, 40, 95], [7, 300, 51]]
    gains = [[0.8, 0.25, 0.1], [0.5, 0.05, 0.3]]
    for s in range(2):
        rec = _through(x, delays[s], gains[s])
        sf.write(tmp_path / f"rec{s + 1}.wav", rec, FS, subtype="PCM_24")  # as interface software would
    out = tmp_path / "irs"
    rc, stdout, err = arrayplan_main(capsys, "deconvolve", tmp_path / "rec1.wav", tmp_path / "rec2.wav", "--sweep",
                                     side, "--out", out, "--speaker-names", "Left,Right", "--mic-names", "a,b,c")
    assert rc == 0, err
    irs = read_irset(out)
    n0 = irs.zero_lag_samples
    # Pre-roll: one Fresnel time at f1, sqrt(T / (f1 ln(f2/f1))), under half the 2nd harmonic's offset.
    assert n0 == int(np.sqrt(0.8 / (50 * np.log(3000 / 50))) * FS) == 1000
    assert irs.data.shape == (n0 + 4000, 3, 2)
    assert irs.speaker_names == ["Left", "Right"] and irs.mic_names == ["a", "b", "c"]
    assert irs.sample_rate_hz == FS and irs.units == "full_scale"
    full, lag = _unity_pulse(x, side)
    for s in range(2):
        for m in range(3):
            _check_wire(irs.data[:, m, s], full, lag, delays[s][m], gains[s][m], n0)
    assert irs.warnings == []
    rows = list(csv.DictReader((out / "deconvolution.csv").open()))
    assert len(rows) == 6 and rows[0]["speaker"] == "Left" and rows[0]["mic"] == "a"
    assert float(rows[1]["peak_delay_ms"]) == pytest.approx(1000 * 40 / FS, abs=1e-3)
    # Wires are linear: every product is below a floor, none is reported as distortion.
    assert all(r["harmonic2_db"] == "" and r["harmonic2_status"].startswith("below the") for r in rows)
    h2 = read_irset(out / "harmonic-2")
    assert h2.data.shape[1:] == (3, 2) and h2.extra["harmonic_order"] == 2
    assert h2.zero_lag_samples == h2.extra["nominal_index"]
    assert "before + after zero lag" in stdout
    assert irs.extra["per_pair"]["Right"]["b"]["peak_to_noise_db"] > 60
    assert "Left" in stdout


def test_linear_sweep_gives_responses_without_harmonics(tmp_path, capsys):
    data, side = _make(tmp_path, capsys, "sweep", "--kind", "linear")
    sf.write(tmp_path / "r.wav", _through(data[:, 0], [33], [0.7]), FS, subtype="FLOAT")
    rc, _, err = arrayplan_main(capsys, "deconvolve", tmp_path / "r.wav", "--sweep", side, "--out", tmp_path / "irs")
    assert rc == 0, err
    irs = read_irset(tmp_path / "irs")
    full, lag = _unity_pulse(data[:, 0], side)
    _check_wire(irs.data[:, 0, 0], full, lag, 33, 0.7, irs.zero_lag_samples)
    # Linear sweep: the pre-roll is twice sqrt(T / (f2 - f1)), the time to cross one Fresnel zone.
    assert irs.zero_lag_samples == int(2 * np.sqrt(0.8 / (3000 - 50)) * FS)
    assert not list(tmp_path.glob("irs/harmonic-*"))
    assert "harmonic2_db" not in (tmp_path / "irs" / "deconvolution.csv").read_text()


def test_clipping_and_low_peak_to_noise_are_warned_and_stored(tmp_path, capsys):
    data, side = _make(tmp_path, capsys)
    x = data[:, 0]
    rng = np.random.default_rng(4)
    clipped = np.clip(_through(x, [10, 10], [6.0, 0.5]), -1, 1)
    noisy = _through(x, [10, 10], [0.5, 0.002]) + np.column_stack(
        [np.zeros(x.size), 0.01 * rng.standard_normal(x.size)])
    sf.write(tmp_path / "r1.wav", clipped, FS, subtype="FLOAT")
    sf.write(tmp_path / "r2.wav", noisy, FS, subtype="FLOAT")
    out = tmp_path / "irs"
    rc, _, err = arrayplan_main(capsys, "deconvolve", tmp_path / "r1.wav", tmp_path / "r2.wav", "--sweep", side,
                                "--out", out)
    assert rc == 0
    warn_lines = [ln for ln in err.splitlines() if "warning:" in ln]
    assert any("speaker S1: recording clipped at M1" in ln for ln in warn_lines)
    assert any("speaker S2: peak-to-noise below 40 dB at M2" in ln for ln in warn_lines)
    irs = read_irset(out)
    assert any("clipped at M1" in w for w in irs.warnings)
    assert any("peak-to-noise below" in w for w in irs.warnings)
    rows = {(r["speaker"], r["mic"]): r for r in csv.DictReader((out / "deconvolution.csv").open())}
    assert int(rows[("S1", "M1")]["clipped_samples"]) > 0 and int(rows[("S1", "M2")]["clipped_samples"]) == 0
    assert float(rows[("S2", "M2")]["peak_to_noise_db"]) < 40
    assert float(rows[("S1", "M1")]["harmonic3_db"]) > -30  # hard clipping: strong odd harmonics


def test_schedule_recording_is_split_by_its_sidecar(tmp_path, capsys):
    data, side = _make(tmp_path, capsys, "schedule", "--speaker-names", "A,B,C")
    gains = np.array([[0.9, 0.2], [0.3, 0.6], [0.1, 0.05]])
    delays = np.array([[20, 33], [41, 5], [12, 250]])
    rec = np.zeros((data.shape[0] + 400, 2))
    for s in range(3):
        rec += _through(data[:, s], delays[s], gains[s], length=rec.shape[0])
    sf.write(tmp_path / "long.wav", rec, FS, subtype="FLOAT")
    rc, _, err = arrayplan_main(capsys, "deconvolve", tmp_path / "long.wav", "--sweep", side, "--out", tmp_path / "irs")
    assert rc == 0, err
    assert "longer than the played file" in err
    irs = read_irset(tmp_path / "irs")
    assert irs.speaker_names == ["A", "B", "C"]
    single, single_side = _make(tmp_path, capsys)  # the same sweep alone: its unity pulse
    full, lag = _unity_pulse(single[:, 0], single_side)
    for s in range(3):
        for m in range(2):
            _check_wire(irs.data[:, m, s], full, lag, delays[s, m], gains[s, m], irs.zero_lag_samples)


def test_channel_probe_recording_gives_the_channel_response(tmp_path, capsys):
    filters = np.zeros((2401, 3))
    filters[0, 0], filters[800, 1], filters[2400, 2] = 0.5, 0.3, -0.2
    sf.write(tmp_path / "chan.wav", filters, FS, subtype="FLOAT")
    rc, _, err = arrayplan_main(capsys, "signal", "probe", "--filters", tmp_path / "chan.wav", "--out",
                                tmp_path / "p.wav", *SWEEP)
    assert rc == 0, err
    data, _ = sf.read(tmp_path / "p.wav", always_2d=True)
    mic = data.sum(axis=1) * 0.5  # every speaker reaches one microphone with gain 0.5
    sf.write(tmp_path / "prec.wav", mic, FS, subtype="FLOAT")
    rc, _, err = arrayplan_main(capsys, "deconvolve", tmp_path / "prec.wav", "--sweep", tmp_path / "p.json",
                                "--out", tmp_path / "pir")
    assert rc == 0, err
    irs = read_irset(tmp_path / "pir")
    n0 = irs.zero_lag_samples
    assert irs.speaker_names == ["chan"] and irs.n_samples == n0 + 4000 + 2400
    h = irs.data[n0:, 0, 0]
    # The same sweep alone gives the band-limited unity pulse; the probe's inverse is scaled to the
    # sweep's level before the filters, so each filter tap comes back as tap * 0.5 * that pulse.
    single, single_side = _make(tmp_path, capsys)
    full, lag = _unity_pulse(single[:, 0], single_side)
    unity_peak = full[lag]
    for d, g in ((0, 0.5), (800, 0.3), (2400, -0.2)):
        k = d - 3 + int(np.argmax(np.abs(h[d - 3:d + 4]))) if d else int(np.argmax(np.abs(h[:4])))
        assert k == d
        assert h[k] == pytest.approx(0.5 * g * unity_peak, rel=0.01)


def test_pre_ms_sets_the_samples_kept_before_zero_lag(tmp_path, capsys):
    data, side = _make(tmp_path, capsys)
    sf.write(tmp_path / "r.wav", _through(data[:, 0], [12], [0.6]), FS, subtype="FLOAT")
    full, lag = _unity_pulse(data[:, 0], side)
    for pre_ms, n0 in (("0", 0), ("12.5", 200)):
        out = tmp_path / f"irs-{n0}"
        rc, _, err = arrayplan_main(capsys, "deconvolve", tmp_path / "r.wav", "--sweep", side, "--out", out, "--pre-ms",
                                    pre_ms)
        assert rc == 0, err
        irs = read_irset(out)
        assert irs.zero_lag_samples == n0 and irs.n_samples == n0 + 4000
        _check_wire(irs.data[:, 0, 0], full, lag, 12, 0.6, n0)
        assert json.loads((out / "irset.json").read_text())["format_version"] == (1 if n0 == 0 else 2)
        rows = list(csv.DictReader((out / "deconvolution.csv").open()))
        assert float(rows[0]["peak_delay_ms"]) == pytest.approx(1000 * 12 / FS, abs=1e-3)


def test_sidecar_without_pre_roll_takes_the_default_rule(tmp_path, capsys):
    # Sidecars written before the pre-roll existed: the rule gives the same value as a new sidecar.
    data, side = _make(tmp_path, capsys)
    obj = json.loads(side.read_text())
    want = obj["sweep"].pop("pre_roll_samples")
    old = tmp_path / "old.json"
    old.write_text(json.dumps(obj))
    sf.write(tmp_path / "r.wav", _through(data[:, 0], [3], [0.5]), FS, subtype="FLOAT")
    rc, _, err = arrayplan_main(capsys, "deconvolve", tmp_path / "r.wav", "--sweep", old, "--out", tmp_path / "irs")
    assert rc == 0, err
    assert read_irset(tmp_path / "irs").zero_lag_samples == want


@pytest.fixture
def sweep_and_rec(tmp_path, capsys):
    data, side = _make(tmp_path, capsys)
    sf.write(tmp_path / "ok.wav", _through(data[:, 0], [5, 9], [0.5, 0.5]), FS, subtype="FLOAT")
    return data, side


@pytest.mark.parametrize("case, words", [
    ("rate", ["recorded at 48000 Hz but the sweep is at 16000 Hz"]),
    ("short", ["samples", "the played file has"]),
    ("long", ["more than twice"]),
    ("channels", ["has 1 channels, the first recording 2"]),
    ("nan", ["NaN"]),
    ("notjson", ["not valid JSON"]),
    ("nosweep", ["no 'sweep' block"]),
    ("noinverse", ["not found"]),
    ("names", ["3 speaker names for 1 speakers"]),
    ("irlen", ["longer than the silence after the sweep"]),
    ("missing", ["recording not found"]),
    ("notwav", ["cannot read audio file"]),
    ("prenegative", ["--pre-ms", "zero or a positive"]),
    ("prelong", ["--pre-ms", "half-way to the 2nd harmonic"]),
    ("sidecarpre", ["sweep.pre_roll_samples", "half-way to the 2nd harmonic"]),
])
def test_bad_input_is_one_line_and_writes_nothing(tmp_path, capsys, sweep_and_rec, case, words):
    data, side = sweep_and_rec
    ok = tmp_path / "ok.wav"
    bad = tmp_path / "bad.wav"
    args = [ok, "--sweep", side]
    if case == "rate":
        sf.write(bad, data, 48000, subtype="FLOAT")
        args = [bad, "--sweep", side]
    elif case == "short":
        sf.write(bad, data[:-100], FS, subtype="FLOAT")
        args = [bad, "--sweep", side]
    elif case == "long":
        sf.write(bad, np.concatenate([data, data, data]), FS, subtype="FLOAT")
        args = [bad, "--sweep", side]
    elif case == "channels":
        sf.write(bad, data, FS, subtype="FLOAT")
        args = [ok, bad, "--sweep", side]
    elif case == "nan":
        d = data.copy()
        d[10] = np.nan
        sf.write(bad, d, FS, subtype="FLOAT")
        args = [bad, "--sweep", side]
    elif case == "notjson":
        (tmp_path / "b.json").write_text("{not json")
        args = [ok, "--sweep", tmp_path / "b.json"]
    elif case == "nosweep":
        obj = json.loads(side.read_text())
        obj["sweep"] = None
        (tmp_path / "b.json").write_text(json.dumps(obj))
        args = [ok, "--sweep", tmp_path / "b.json"]
    elif case == "noinverse":
        (tmp_path / "sweep.inverse.wav").unlink()
    elif case == "names":
        args += ["--speaker-names", "a,b,c"]
    elif case == "irlen":
        args += ["--ir-length-s", "1"]
    elif case == "missing":
        args = [tmp_path / "nothere.wav", "--sweep", side]
    elif case == "notwav":
        bad.write_text("RIFF? no")
        args = [bad, "--sweep", side]
    elif case == "prenegative":
        args += ["--pre-ms", "-1"]
    elif case == "prelong":
        args += ["--pre-ms", "80"]   # half the 2nd harmonic's offset is 67.7 ms
    elif case == "sidecarpre":
        obj = json.loads(side.read_text())
        obj["sweep"]["pre_roll_samples"] = 5000
        (tmp_path / "b.json").write_text(json.dumps(obj))
        args = [ok, "--sweep", tmp_path / "b.json"]
    out = tmp_path / "irs"
    rc, _, err = arrayplan_main(capsys, "deconvolve", *args, "--out", out)
    _one_line_error(rc, err, *words)
    assert_flags_exist(capsys, err, "deconvolve")
    assert not out.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]
