"""Distortion figures only above the sweep method's own floor and the noise floor.

Known cases: a linear system (delays, gains, reflections, noise) must report no distortion; a
memoryless polynomial y = x + a x^2 + b x^3 driven by a sine of amplitude A has, by the
trigonometric identities sin^2 = (1 - cos 2p) / 2 and sin^3 = (3 sin p - sin 3p) / 4 (common
practice, no source), a fundamental of A (1 + 3 b A^2 / 4), a 2nd harmonic of a A^2 / 2 and a 3rd
of b A^3 / 4; an exponential sweep separates them in time (A. Farina, "Simultaneous measurement of
impulse response and distortion with a swept-sine technique", 108th AES Convention, Paris, 2000).
"""

import csv
import json
import math

import numpy as np
import pytest
import soundfile as sf

from arrayplan.signals import SweepSettings, make_sweep
from arrayplan.signals.deconvolve import impulse_responses
from arrayplan.signals.distortion_floor import BELOW_METHOD_FLOOR, MEASURED
from helpers import arrayplan_main

FS = 16000
SWEEP = ["--f1-hz", "50", "--f2-hz", "3000", "--duration-s", "0.8", "--pad-after-s", "0.25", "--rate-hz", str(FS)]


def _sweep_file(tmp_path, capsys):
    rc, _, err = arrayplan_main(capsys, "signal", "sweep", "--out", tmp_path / "sweep.wav", *SWEEP)
    assert rc == 0, err
    data, _ = sf.read(tmp_path / "sweep.wav")
    return data, tmp_path / "sweep.json"


def _delayed(y, d):
    out = np.zeros_like(y)
    out[d:] = y[:y.size - d]
    return out


def test_linear_rig_with_reflections_and_noise_reports_no_distortion(tmp_path, capsys):
    x, side = _sweep_file(tmp_path, capsys)
    rng = np.random.default_rng(11)
    rec = np.zeros((x.size, 3))
    for m, (d, g) in enumerate(((9, 0.7), (61, 0.3), (240, 0.1))):
        h = np.zeros(1200)
        h[d] = g
        h[d + 37 + rng.integers(0, 900, 6)] += 0.3 * g * rng.standard_normal(6)     # a few reflections
        rec[:, m] = np.convolve(x, h)[:x.size] + 10 ** (-85 / 20) * rng.standard_normal(x.size)
    sf.write(tmp_path / "rec.wav", rec, FS, subtype="FLOAT")
    rc, stdout, err = arrayplan_main(capsys, "deconvolve", tmp_path / "rec.wav", "--sweep", side, "--out",
                                     tmp_path / "o")
    assert rc == 0, err
    rows = list(csv.DictReader((tmp_path / "o" / "deconvolution.csv").open()))
    for r in rows:
        for n in range(2, 6):
            assert r[f"harmonic{n}_db"] == "" and r[f"harmonic{n}_status"].startswith("below the"), r
        assert r["thd_db"] == "" and r["thd_status"] == "below the floors"
    assert "H2 below the" in stdout and "floor" in stdout
    per_pair = json.loads((tmp_path / "o" / "irset.json").read_text())
    floor = json.dumps(per_pair)
    assert "method_floor_db" in floor and "below the" in floor


def test_clean_sweep_alone_is_below_the_method_floor():
    sw = make_sweep(SweepSettings(f1_hz=50.0, f2_hz=3000.0, duration_s=0.8, sample_rate_hz=FS, pad_before_s=0.1,
                                  pad_after_s=0.25))
    r = impulse_responses([0.5 * sw.signal[:, None]], sw.inverse, linear_lag=sw.linear_lag, ir_length=sw.n_pad_after,
                          harmonic_offsets=sw.harmonic_offsets_samples(5), speaker_names=["S"], mic_names=["M"],
                          pre_roll_samples=sw.pre_roll_samples, clean_recording=sw.signal)
    assert all(r.harmonic_status[n][0, 0] == BELOW_METHOD_FLOOR for n in range(2, 6))
    assert math.isinf(r.thd_db[0, 0])
    # Without the clean recording the floor is the (noiseless) tail only, and the artefact would pass.
    bare = impulse_responses([0.5 * sw.signal[:, None]], sw.inverse, linear_lag=sw.linear_lag,
                             ir_length=sw.n_pad_after, harmonic_offsets=sw.harmonic_offsets_samples(5),
                             speaker_names=["S"], mic_names=["M"], pre_roll_samples=sw.pre_roll_samples)
    assert bare.harmonic_status[2][0, 0] == MEASURED


def test_known_polynomial_distortion_is_reported_above_the_floor_at_its_level(tmp_path, capsys):
    x, side = _sweep_file(tmp_path, capsys)
    amp = np.max(np.abs(x))                     # the sweep's amplitude (its envelope is flat between the fades)
    a, b = 0.05, 0.2
    rec = _delayed(x + a * x ** 2 + b * x ** 3, 23)
    sf.write(tmp_path / "rec.wav", rec[:, None], FS, subtype="FLOAT")
    rc, stdout, err = arrayplan_main(capsys, "deconvolve", tmp_path / "rec.wav", "--sweep", side, "--out",
                                     tmp_path / "o")
    assert rc == 0, err
    row = next(csv.DictReader((tmp_path / "o" / "deconvolution.csv").open()))
    fundamental = amp * (1 + 3 * b * amp ** 2 / 4)
    want2 = 20 * math.log10(a * amp ** 2 / 2 / fundamental)     # closed form (module docstring)
    want3 = 20 * math.log10(b * amp ** 3 / 4 / fundamental)
    assert row["harmonic2_status"] == MEASURED and row["harmonic3_status"] == MEASURED
    assert float(row["harmonic2_db"]) == pytest.approx(want2, abs=0.5)
    assert float(row["harmonic3_db"]) == pytest.approx(want3, abs=0.5)
    assert float(row["harmonic2_db"]) > float(row["harmonic2_floor_db"]) + 6
    assert row["harmonic4_status"].startswith("below the")         # no 4th or 5th order term
    thd = 10 * math.log10(10 ** (want2 / 10) + 10 ** (want3 / 10))
    assert float(row["thd_db"]) == pytest.approx(thd, abs=0.5)
    assert f"H2 {float(row['harmonic2_db']):.1f} dB" in stdout
