"""Property tests of input handling and of two invariants of the channels.

* Readers (rig files, CSV positions, IR-set folders, calibration records)
  raise only :class:`InputError` on malformed input, whatever it is.
* Anything ``write_calibration`` (and so ``arrayplan calibrate``) writes,
  ``read_calibration`` (``arrayplan calibrate show``) reads back.
* Singular values do not change when elements are reordered or the rig is
  moved as a whole, checked against an SVD of exp(-jkr)/(4 pi r) written here.
* The drive-phase convention: the largest-magnitude speaker entry of every
  drive vector is real and positive.

The rigs, records and corrupted files are invented fixtures.
"""

from __future__ import annotations

import json
import math
import shutil
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings, strategies as st

from arrayplan import FreeFieldKernel, InputError, Rig, decompose, free_field_irset, load_rig, read_irset, write_irset
from arrayplan.cli import main
from arrayplan.hardware.calibration import (CalibrationRecord, LatencyCalibration, MicCalibration,
                                            OutputCalibration, read_calibration, write_calibration)
from arrayplan.rig import coincident_pairs, read_positions_csv

RIG = """\
[rig]
name = "props"
[medium]
temperature_c = 20
[frequencies]
list = [500.0, 1000.0]
[[speakers]]
name = "A"
position = [0, 0, 0]
channel = 1
[[speakers]]
shape = "line"
count = 2
spacing = 0.1
center = [0, 0.3, 0]
[[microphones]]
shape = "grid"
counts = [2, 2]
spacing = 0.1
center = [0, 0, 1]
[hardware]
sample_rate_hz = 48000
[planning]
snr_db = 40
"""

#: Values a hand-edited file might hold where a number, a vector or a name is expected.
WEIRD = ["nan", "inf", "-inf", "1e308", "-1e308", "-1", "0", "1000000000000", '"text"', '""', "[]", "[1, 2]",
         "[nan, 0, 0]", "[1e308, 1e308, 1e308]", "true", "{ a = 1 }", "-300", "0.5", "[[1]]", '"x" ]']

PATHS = {"rig.toml", "medium.temperature_c"}


def _cheap(max_examples: int):
    return settings(max_examples=max_examples, deadline=None,
                    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])


# ----------------------------------------------------------------------------- readers raise only InputError

@_cheap(60)
@given(line=st.integers(0, RIG.count("\n") - 1), value=st.sampled_from(WEIRD),
       cut=st.one_of(st.none(), st.integers(0, len(RIG))))
def test_rig_reader_raises_only_input_error(tmp_path, line, value, cut):
    lines = RIG.splitlines()
    if "=" in lines[line]:
        key = lines[line].split("=")[0]
        lines[line] = f"{key}= {value}"
    text = "\n".join(lines) + "\n"
    if cut is not None:
        text = text[:cut]
    path = tmp_path / "rig.toml"
    path.write_text(text, encoding="utf-8")
    try:
        rig = load_rig(path)
    except InputError as exc:
        assert "\n" not in exc.one_line() and str(path) in exc.one_line()
        return
    assert np.all(np.isfinite(rig.speakers.positions)) and np.all(np.isfinite(rig.mics.positions))


@_cheap(80)
@given(text=st.text(alphabet="xyzname,channel.0123456789-+einf \n\"", max_size=80))
def test_positions_csv_reader_raises_only_input_error(tmp_path, text):
    path = tmp_path / "p.csv"
    path.write_text(text, encoding="utf-8")
    try:
        names, pos, channels = read_positions_csv(path)
    except InputError as exc:
        assert str(path) in exc.one_line()
        return
    assert pos.ndim == 2 and pos.shape[1] == 3 and np.all(np.isfinite(pos))


@_cheap(40)
@given(extra=st.lists(st.sampled_from(["1", "nan", "x", "1e308", ""]), min_size=1, max_size=3))
def test_positions_csv_with_more_values_than_columns_is_refused(tmp_path, extra):
    # a row longer than its header is an error, not a row silently cut to the header's width
    path = tmp_path / "p.csv"
    path.write_text("x,y,z\n0,0,0\n" + ",".join(["0.1", "0", "0", *extra]) + "\n", encoding="utf-8")
    with pytest.raises(InputError, match="line 3"):
        read_positions_csv(path)


@pytest.fixture(scope="module")
def irset_folder(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("irs")
    (root / "rig.toml").write_text(RIG)
    write_irset(root / "irs", free_field_irset(load_rig(root / "rig.toml"), 16000.0, 256))
    return root / "irs"


IRSET_PATHS = [("sample_rate_hz",), ("n_samples",), ("zero_lag_samples",), ("units",), ("format_version",),
               ("latency_removed_samples",), ("speakers",), ("microphones",), ("speakers", 0, "name"),
               ("speakers", 0, "position_m"), ("speakers", 1, "file"), ("microphones", 1, "position_m"),
               ("microphones", 0, "name"), ("warnings",), ("format",)]
JSON_WEIRD = [None, -1, 0, 1e308, -1e308, "text", "", [], [1, 2], {"a": 1}, True, 10 ** 12, 0.5,
              [float("nan")] * 3, "../../etc/passwd", "spk-002.wav"]


@_cheap(60)
@given(where=st.sampled_from(IRSET_PATHS), value=st.sampled_from(JSON_WEIRD))
def test_irset_reader_raises_only_input_error(irset_folder, tmp_path, where, value):
    folder = tmp_path / "irs"
    if folder.exists():
        shutil.rmtree(folder)
    shutil.copytree(irset_folder, folder)
    manifest = json.loads((folder / "irset.json").read_text())
    target = manifest
    for key in where[:-1]:
        target = target[key]
    target[where[-1]] = value
    (folder / "irset.json").write_text(json.dumps(manifest))
    try:
        irs = read_irset(folder)
    except InputError as exc:
        assert "\n" not in exc.one_line()
        return
    assert np.all(np.isfinite(irs.data))


@_cheap(20)
@given(keep=st.integers(0, 400))
def test_irset_reader_truncated_wav_raises_only_input_error(irset_folder, tmp_path, keep):
    folder = tmp_path / "irs"
    if folder.exists():
        shutil.rmtree(folder)
    shutil.copytree(irset_folder, folder)
    wav = folder / "spk-001.wav"
    wav.write_bytes(wav.read_bytes()[:keep])
    with pytest.raises(InputError):
        read_irset(folder)


CAL = """\
format = "arrayplan-calibration"
format_version = 1
description = "bench"
[[microphones]]
name = "M1"
input_channel = 1
sensitivity_mv_per_pa = 12.5
input_full_scale_vrms = 1.23
[[outputs]]
channel = 2
full_scale_vrms = 1.5
amplifier_gain_db = 20
[latency]
samples = 300
sample_rate_hz = 48000
"""


@_cheap(80)
@given(line=st.integers(0, CAL.count("\n") - 1), value=st.sampled_from(WEIRD + ["1e300", "-0.0", "4097"]))
def test_calibration_reader_raises_only_input_error(tmp_path, line, value):
    lines = CAL.splitlines()
    if "=" in lines[line]:
        lines[line] = lines[line].split("=")[0] + "= " + value
    path = tmp_path / "cal.toml"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    try:
        rec = read_calibration(path)
    except InputError as exc:
        assert str(path) in exc.one_line()
        return
    for o in rec.outputs:                      # what is read is usable: finite volts at the speaker
        assert math.isfinite(o.volts_per_full_scale) and o.volts_per_full_scale > 0


# ----------------------------------------------------------------------------- calibration round trip

names = st.text(min_size=1, max_size=12)
any_float = st.floats(allow_nan=True, allow_infinity=True)
channels = st.integers(-2, 5000)


@_cheap(120)
@given(mic_name=names, description=st.text(max_size=20), in_ch=channels, sens=any_float, in_fs=any_float,
       cal_db=any_float, cal_hz=any_float, out_ch=channels, out_fs=any_float, gain=any_float,
       lat=st.integers(-5, 20_000_000), rate=any_float)
def test_whatever_is_written_reads_back(tmp_path, mic_name, description, in_ch, sens, in_fs, cal_db, cal_hz,
                                        out_ch, out_fs, gain, lat, rate):
    rec = CalibrationRecord(
        description=description,
        microphones=(MicCalibration(mic_name, in_ch, sens, in_fs, cal_db, cal_hz),),
        outputs=(OutputCalibration(out_ch, out_fs, gain),),
        latency=LatencyCalibration(lat, rate, 1, 1, "dev"))
    path = tmp_path / "cal.toml"
    if path.exists():
        path.unlink()
    try:
        write_calibration(path, rec)
    except InputError:
        assert not path.exists()               # refused: nothing written
        return
    back = read_calibration(path)              # written: must read back, with the same values
    assert back.description == description and back.microphones[0].name == mic_name
    assert back.outputs[0].channel == out_ch and back.latency.samples == lat
    np.testing.assert_allclose([back.microphones[0].sensitivity_mv_per_pa, back.outputs[0].full_scale_vrms,
                                back.outputs[0].amplifier_gain_db], [sens, out_fs, gain], rtol=1e-6)


@pytest.fixture(scope="module")
def tone(tmp_path_factory) -> Path:
    import soundfile as sf

    path = tmp_path_factory.mktemp("tone") / "tone.wav"
    t = np.arange(24000) / 48000.0
    sf.write(path, 0.1 * np.sin(2 * np.pi * 1000.0 * t), 48000, subtype="FLOAT")
    return path


@_cheap(25)
@given(gain=st.one_of(any_float, st.floats(-150, 150)), out_ch=st.integers(-3, 10 ** 13),
       peak=st.one_of(any_float, st.floats(-130, 5)))
def test_calibrate_output_writes_only_what_calibrate_show_reads(tone, tmp_path, capsys, gain, out_ch, peak):
    record = tmp_path / "cal.toml"
    if record.exists():
        record.unlink()
    rc = main(["calibrate", "output", str(record), "--output-channel", str(out_ch), "--recording", str(tone),
               "--played-peak-dbfs", repr(peak), "--input-full-scale-vrms", "1", "--amplifier-gain-db", repr(gain)])
    capsys.readouterr()
    if rc != 0:
        assert rc == 2 and not record.exists()
        return
    assert main(["calibrate", "show", str(record)]) == 0
    capsys.readouterr()


# ----------------------------------------------------------------------------- channel invariants

C = 343.0


def reference_singular_values(spk: np.ndarray, mic: np.ndarray, hz: float) -> np.ndarray:
    """Singular values of G_ij = exp(-j k r_ij) / (4 pi r_ij), computed here with numpy.

    Free-field Green's function (Kinsler, Frey, Coppens & Sanders, Fundamentals of Acoustics, 2000);
    singular values from numpy.linalg.svd (LAPACK gesdd).
    """
    r = np.sqrt(((mic[:, None, :] - spk[None, :, :]) ** 2).sum(axis=-1))
    k = 2 * np.pi * hz / C
    return np.linalg.svd(np.exp(-1j * k * r) / (4 * np.pi * r), compute_uv=False)


def _rotation(angles: tuple[float, float, float]) -> np.ndarray:
    a, b, c = angles
    rx = np.array([[1, 0, 0], [0, np.cos(a), -np.sin(a)], [0, np.sin(a), np.cos(a)]])
    ry = np.array([[np.cos(b), 0, np.sin(b)], [0, 1, 0], [-np.sin(b), 0, np.cos(b)]])
    rz = np.array([[np.cos(c), -np.sin(c), 0], [np.sin(c), np.cos(c), 0], [0, 0, 1]])
    return rz @ ry @ rx


@_cheap(25)
@given(seed=st.integers(0, 2 ** 31 - 1), n_spk=st.integers(1, 6), n_mic=st.integers(1, 6),
       hz=st.floats(100.0, 4000.0), angles=st.tuples(*[st.floats(-np.pi, np.pi)] * 3),
       shift=st.tuples(*[st.floats(-50.0, 50.0)] * 3))
def test_singular_values_unchanged_by_reordering_and_moving_the_rig(seed, n_spk, n_mic, hz, angles, shift):
    rng = np.random.default_rng(seed)
    spk = rng.uniform(-0.5, 0.5, (n_spk, 3))
    mic = rng.uniform(-0.5, 0.5, (n_mic, 3)) + [0.0, 0.0, 1.5]
    assume(not coincident_pairs(np.vstack([spk, mic]), radius_m=1e-3))
    rot = _rotation(angles)
    moved_spk = spk[rng.permutation(n_spk)] @ rot.T + shift
    moved_mic = mic[rng.permutation(n_mic)] @ rot.T + shift
    s = {}
    for label, (a, b) in {"as drawn": (spk, mic), "reordered and moved": (moved_spk, moved_mic)}.items():
        rig = Rig.from_positions(a, b, speed_of_sound=C, frequencies=[hz])
        s[label] = decompose(FreeFieldKernel(rig), rig.frequencies).singular_values[0]
        # against the SVD of the Green's-function matrix written above (not arrayplan's kernel)
        np.testing.assert_allclose(s[label], reference_singular_values(a, b, hz), rtol=1e-9,
                                   atol=1e-12 * s[label][0])
    np.testing.assert_allclose(s["reordered and moved"], s["as drawn"], rtol=1e-8, atol=1e-11 * s["as drawn"][0])


@_cheap(25)
@given(seed=st.integers(0, 2 ** 31 - 1), n_spk=st.integers(1, 6), n_mic=st.integers(1, 6),
       hz=st.floats(100.0, 4000.0))
def test_largest_speaker_entry_of_every_drive_vector_is_real_and_positive(seed, n_spk, n_mic, hz):
    # the phase convention stated in arrayplan.channels.svd (the SVD leaves one phase per channel free)
    rng = np.random.default_rng(seed)
    spk = rng.uniform(-0.5, 0.5, (n_spk, 3))
    mic = rng.uniform(-0.5, 0.5, (n_mic, 3)) + [0.0, 0.0, 1.5]
    rig = Rig.from_positions(spk, mic, speed_of_sound=C, frequencies=[hz])
    ch = decompose(FreeFieldKernel(rig), rig.frequencies)
    v = ch.drive[0]
    top = v[np.argmax(np.abs(v), axis=0), np.arange(v.shape[1])]
    assert np.all(top.real > 0)
    np.testing.assert_allclose(top.imag, 0.0, atol=1e-12)
    # and the channel is still a singular pair: G v = s conj(w) with unit-norm columns (Golub & Van Loan)
    g = FreeFieldKernel(rig).evaluate(np.array([hz]))[0]
    np.testing.assert_allclose(g @ v, np.conj(ch.combine[0]) * ch.singular_values[0], atol=1e-12 * np.abs(g).max())
