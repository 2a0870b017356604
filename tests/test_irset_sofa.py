"""AES69 (SOFA) import and export of IR sets, with the real sofar and netCDF4 libraries."""

from __future__ import annotations

import os
import subprocess
import sys

import netCDF4
import numpy as np
import pytest
import sofar

from arrayplan.cli import main
from arrayplan.errors import InputError
from arrayplan.frequency import FrequencyAxis
from arrayplan.formats.irset import IRSet, read_irset, write_irset
from arrayplan.formats.irset_sofa import read_irset_sofa, write_irset_sofa
from arrayplan.formats.plan_folder import write_plan
from arrayplan.channels.planning import plan_rig
from arrayplan.rig import Rig
from arrayplan.kernels.model_irs import free_field_irset
from helpers import assert_singular_values_match_free_field

FS = 48000.0
N = 4096
C = 343.2


def _rig() -> Rig:
    spk = np.c_[np.linspace(-0.3, 0.3, 4), np.zeros(4), np.zeros(4)]
    mic = np.c_[np.linspace(-0.3, 0.3, 4), np.full(4, 1.0), np.zeros(4)]
    return Rig.from_positions(spk, mic, speed_of_sound=C)


def _irset(seed: int = 5) -> IRSet:
    rng = np.random.default_rng(seed)
    spk_pos = rng.uniform(-1.0, 1.0, (3, 3))
    spk_pos[1] = np.nan                                   # one unknown position
    return IRSet(data=rng.standard_normal((200, 2, 3)), sample_rate_hz=44100.0,
                 speaker_names=["L1", "L2", "Mitte-ü"], mic_names=["m1", "m2"],
                 speaker_positions=spk_pos, mic_positions=rng.uniform(-1.0, 1.0, (2, 3)),
                 units="pascal_per_volt", latency_removed_samples=12,
                 warnings=["speaker L2: peak 0.2 dB below full scale"], extra={"room": "test bench"})


def _files(folder) -> set[str]:
    return {str(p.relative_to(folder)) for p in folder.rglob("*")}


# --------------------------------------------------------------------------- export / import

def test_round_trip_keeps_everything(tmp_path):
    irs = _irset()
    path = write_irset_sofa(tmp_path / "set.sofa", irs)
    back = read_irset(path)                              # through the read_irset dispatch
    assert back.data.dtype == np.float64
    assert np.array_equal(back.data, irs.data)           # float64 storage: exact
    assert back.sample_rate_hz == irs.sample_rate_hz
    assert back.speaker_names == irs.speaker_names and back.mic_names == irs.mic_names
    np.testing.assert_array_equal(back.speaker_positions, irs.speaker_positions)   # NaN row kept
    np.testing.assert_array_equal(back.mic_positions, irs.mic_positions)
    assert back.units == irs.units and back.latency_removed_samples == 12
    assert back.warnings == irs.warnings and back.extra == irs.extra
    assert _files(tmp_path) == {"set.sofa"}              # no temporary file left behind


def test_round_trip_through_folder_and_cli(tmp_path, capsys):
    irs = _irset()
    write_irset_sofa(tmp_path / "a.sofa", irs)
    assert main(["irset", "convert", str(tmp_path / "a.sofa"), str(tmp_path / "folder")]) == 0
    assert main(["irset", "convert", str(tmp_path / "folder"), str(tmp_path / "b.sofa")]) == 0
    back = read_irset_sofa(tmp_path / "b.sofa")
    # The folder stores float32 WAV files: 24-bit mantissa, relative error <= 2**-24 (IEEE 754).
    np.testing.assert_allclose(back.data, irs.data, rtol=2.0 ** -24, atol=0)
    assert back.speaker_names == irs.speaker_names and back.warnings == irs.warnings
    np.testing.assert_array_equal(back.speaker_positions, irs.speaker_positions)


def test_zero_lag_survives_sofa_and_folder_round_trips(tmp_path, capsys):
    import json

    irs = _irset()
    irs = IRSet(irs.data, irs.sample_rate_hz, irs.speaker_names, irs.mic_names, irs.speaker_positions,
                irs.mic_positions, irs.units, 12, irs.warnings, irs.extra, zero_lag_samples=40)
    back = read_irset(write_irset_sofa(tmp_path / "z.sofa", irs))
    assert back.zero_lag_samples == 40 and np.array_equal(back.data, irs.data)
    # foreign readers see the responses as they are (starting 40 samples early), and the comment says so
    sofa = sofar.read_sofa(str(tmp_path / "z.sofa"), verify=False, verbose=False)
    assert np.array_equal(sofa.Data_IR[0].transpose(1, 0, 2), irs.data)
    assert "zero lag (the moment of driving) is sample 40" in sofa.GLOBAL_Comment
    assert json.loads(sofa.GLOBAL_ArrayplanIRSet)["format_version"] == 2
    assert main(["irset", "convert", str(tmp_path / "z.sofa"), str(tmp_path / "folder")]) == 0
    assert read_irset(tmp_path / "folder").zero_lag_samples == 40
    assert main(["irset", "convert", str(tmp_path / "folder"), str(tmp_path / "again.sofa")]) == 0
    assert read_irset(tmp_path / "again.sofa").zero_lag_samples == 40
    # metadata written before the field existed: zero lag is sample 0
    assert read_irset(write_irset_sofa(tmp_path / "plain.sofa", _irset())).zero_lag_samples == 0


@pytest.mark.parametrize("value, words", [(-3, "must lie in 0..199"), (200, "must lie in 0..199"),
                                          (2.5, "whole number")])
def test_bad_zero_lag_in_the_metadata_is_one_line(tmp_path, capsys, value, words):
    import json

    path = write_irset_sofa(tmp_path / "z.sofa", _irset())
    with netCDF4.Dataset(str(path), "r+") as ds:
        meta = json.loads(ds.getncattr("ArrayplanIRSet"))
        meta["zero_lag_samples"] = value
        ds.setncattr("ArrayplanIRSet", json.dumps(meta))
    assert main(["irset", "show", str(path)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and str(path) in err[0] and words in err[0], err
    assert "GLOBAL:ArrayplanIRSet.zero_lag_samples" in err[0]


def test_no_positions_read_back_as_none(tmp_path):
    irs = IRSet(np.eye(8)[:, :2, None] + 0.0, 8000.0, ["s"], ["a", "b"])
    back = read_irset_sofa(write_irset_sofa(tmp_path / "p.sofa", irs))
    assert back.speaker_positions is None and back.mic_positions is None
    assert np.array_equal(back.data, irs.data)


def test_written_file_passes_sofar_verify(tmp_path):
    # Outside reference: AES69-2022, "AES standard for file exchange - Spatial acoustic data file
    # format", as its conventions and verification rules are encoded in the sofar library.
    path = write_irset_sofa(tmp_path / "v.sofa", free_field_irset(_rig(), FS, 512))
    sofa = sofar.read_sofa(str(path), verify=True, verbose=False)
    assert sofa.verify(issue_handling="return", mode="write") is None
    assert sofa.GLOBAL_SOFAConventions == "GeneralFIR-E" and sofa.GLOBAL_DataType == "FIR-E"
    assert sofa.GLOBAL_RoomType == "free field"          # the simulated set says so
    measured = write_irset_sofa(tmp_path / "m.sofa", _irset())
    sofa = sofar.read_sofa(str(measured), verify=True, verbose=False)
    assert sofa.verify(issue_handling="return", mode="write") is None
    assert sofa.GLOBAL_RoomType == "reverberant" and sofa.GLOBAL_RoomDescription


def test_data_ir_dimensions_as_the_standard_prescribes(tmp_path):
    # AES69-2022, convention GeneralFIR-E: Data.IR has dimensions M x R x N x E (measurements,
    # receivers, samples, emitters), EmitterPosition E x C, ReceiverPosition R x C, C = 3
    # (value from memory; REFERENCE-VALUES.md gives the same M x R x N x E for SingleRoomMIMOSRIR).
    irs = _irset()
    path = write_irset_sofa(tmp_path / "d.sofa", irs)
    with netCDF4.Dataset(str(path)) as ds:
        var = ds.variables["Data.IR"]
        assert var.dimensions == ("M", "R", "N", "E")
        assert var.shape == (1, irs.n_mic, irs.n_samples, irs.n_spk)
        assert var.dtype == np.float64
        assert ds.variables["EmitterPosition"].dimensions == ("E", "C")
        assert ds.variables["ReceiverPosition"].dimensions == ("R", "C")
        assert ds.dimensions["C"].size == 3
        assert float(ds.variables["Data.SamplingRate"][:][0]) == irs.sample_rate_hz
        assert ds.variables["Data.SamplingRate"].Units == "hertz"
        ir = np.asarray(var[:])
        # Receiver m, emitter s is our microphone m, speaker s.
        np.testing.assert_array_equal(ir[0].transpose(1, 0, 2), irs.data)
        np.testing.assert_array_equal(np.asarray(ds.variables["EmitterPosition"][:]), irs.speaker_positions)


def _general_fir(path, ir, *, rate=48000.0, delay=None, source_position=None, source_type="cartesian",
                 source_units="metre"):
    """A GeneralFIR file built directly with sofar: Data.IR M x R x N, one emitter."""
    sofa = sofar.Sofa("GeneralFIR")
    sofa.Data_IR = ir
    sofa.Data_SamplingRate = rate
    sofa.Data_Delay = np.zeros((1, ir.shape[1])) if delay is None else delay
    if source_position is not None:
        sofa.SourcePosition = source_position
        sofa.SourcePosition_Type = source_type
        sofa.SourcePosition_Units = source_units
    sofar.write_sofa(str(path), sofa)
    return path


def test_one_speaker_per_measurement_layout(tmp_path):
    rng = np.random.default_rng(8)
    ir = rng.standard_normal((3, 2, 32))                  # M = 3 speakers, R = 2 mics, N = 32
    # Spherical AES69 coordinates (azimuth counter-clockwise from x, elevation up from the
    # horizontal plane, radius; value from memory): (0, 0, 2) -> (2, 0, 0), (90, 0, 2) -> (0, 2, 0),
    # (180, 0, 2) -> (-2, 0, 0), (0, 90, 1) would be (0, 0, 1).
    path = _general_fir(tmp_path / "m.sofa", ir, source_position=np.array([[0, 0, 2], [90, 0, 2], [180, 0, 2]]),
                        source_type="spherical", source_units="degree, degree, metre")
    irs = read_irset(path)
    assert (irs.n_samples, irs.n_mic, irs.n_spk) == (32, 2, 3)
    assert irs.speaker_names == ["S1", "S2", "S3"] and irs.mic_names == ["M1", "M2"]
    np.testing.assert_array_equal(irs.data, ir.transpose(2, 1, 0))
    np.testing.assert_allclose(irs.speaker_positions, [[2, 0, 0], [0, 2, 0], [-2, 0, 0]], atol=1e-12)
    assert irs.units == "full_scale"
    assert irs.extra["sofa"]["convention"] == "GeneralFIR" and irs.extra["sofa"]["speakers_are"] == "measurements"


def _mimo_file(path, tmp_path):
    """A SingleRoomMIMOSRIR file: sofar writes it, netCDF4 adds EmitterDescriptions.

    (sofar 1.3 cannot write string variables with netCDF4 1.7, so the names are
    added with netCDF4 itself: a copy with the string-length dimension S = 4.)
    """
    sofa = sofar.Sofa("SingleRoomMIMOSRIR")
    for key in ("EmitterDescriptions", "ReceiverDescriptions", "ReceiverView", "ReceiverUp", "EmitterView",
                "EmitterUp", "ReceiverView_Type", "ReceiverView_Units", "EmitterView_Type", "EmitterView_Units"):
        sofa.delete(key)
    sofa.Data_IR = np.random.default_rng(0).standard_normal((1, 2, 16, 3))
    sofa.Data_Delay = np.zeros((1, 2, 3))
    sofa.Data_SamplingRate = 32000.0
    sofa.SourcePosition = np.array([[1.0, 2.0, 0.5]])
    sofa.SourceView = np.array([[0.0, 1.0, 0.0]])             # the source faces +y
    sofa.EmitterPosition = np.array([[0.0, 0.0, 1.0], [90.0, 0.0, 1.0], [0.0, 90.0, 2.0]])
    sofa.ListenerPosition = np.array([[0.0, 0.0, 1.5]])
    sofa.ReceiverPosition = np.array([[0.0, 0.0, 0.1], [180.0, 0.0, 0.1]])
    plain = tmp_path / "plain.sofa"
    sofar.write_sofa(str(plain), sofa)
    with netCDF4.Dataset(str(plain)) as src, netCDF4.Dataset(str(path), "w") as dst:
        dst.setncatts({a: src.getncattr(a) for a in src.ncattrs()})
        dst.EmitterDescription = "three loudspeakers"
        for name, dim in src.dimensions.items():
            dst.createDimension(name, 4 if name == "S" else dim.size)
        for name, var in src.variables.items():
            out = dst.createVariable(name, var.dtype, var.dimensions)
            out.setncatts({a: var.getncattr(a) for a in var.ncattrs()})
            out[:] = var[:]
        chars = np.zeros((3, 4), "S1")
        for k, name in enumerate(["Lx", "Ly", "Top"]):
            chars[k, :len(name)] = list(name)
        dst.createVariable("EmitterDescriptions", "S1", ("E", "S"))[:] = chars
    plain.unlink()
    return path


def test_mimo_file_with_descriptions_views_and_spherical_positions(tmp_path):
    path = _mimo_file(tmp_path / "mimo.sofa", tmp_path)
    assert sofar.read_sofa(str(path), verbose=False).verify(issue_handling="return", mode="read") is None
    irs = read_irset_sofa(path)
    assert irs.speaker_names == ["Lx", "Ly", "Top"] and irs.mic_names == ["M1", "M2"]
    assert irs.sample_rate_hz == 32000.0 and irs.data.shape == (16, 2, 3)
    # AES69 local frames (value from memory): emitter positions are in the source's frame,
    # x along SourceView, z along SourceUp (default +z), y = z x x; spherical (az, el, r) with
    # azimuth counter-clockwise from x.  View +y turns local x into +y and local y into -x.
    np.testing.assert_allclose(irs.speaker_positions, [[1.0, 3.0, 0.5], [0.0, 2.0, 0.5], [1.0, 2.0, 2.5]],
                               atol=1e-12)
    np.testing.assert_allclose(irs.mic_positions, [[0.1, 0.0, 1.5], [-0.1, 0.0, 1.5]], atol=1e-12)
    assert irs.extra["sofa"]["convention"] == "SingleRoomMIMOSRIR"


def test_whole_sample_delays_shift_the_responses(tmp_path):
    rng = np.random.default_rng(9)
    ir = rng.standard_normal((2, 2, 16))
    delay = np.array([[0.0, 3.0], [2.0, 0.0]])            # M x R, whole samples
    irs = read_irset_sofa(_general_fir(tmp_path / "d.sofa", ir, delay=delay))
    assert irs.n_samples == 16 + 3
    for m in range(2):
        for r in range(2):
            d = int(delay[m, r])
            np.testing.assert_array_equal(irs.data[d:d + 16, r, m], ir[m, r])
            assert not np.any(irs.data[:d, r, m]) and not np.any(irs.data[d + 16:, r, m])


def test_varying_sample_rates_refused(tmp_path):
    path = _general_fir(tmp_path / "r.sofa", np.ones((2, 1, 8)), rate=np.array([48000.0, 44100.0]))
    with pytest.raises(InputError, match="Data.SamplingRate.*varies") as exc:
        read_irset_sofa(path)
    assert str(path) in str(exc.value)


# --------------------------------------------------------------------------- the free-field rig

def test_free_field_roundtrip_singular_values(tmp_path):
    # Free-field Green's function exp(-jkr)/(4 pi r) (D. A. B. Miller, Applied Optics 39(11), 2000).
    # Same tolerances and approach as tests/test_measured_kernel.py: on the FFT grid the simulated
    # record is exact (here stored as float64, so the 2e-5 re s_max allowed for float32 WAV files
    # is generous); off the grid the finite band-limited record is a periodic (Dirichlet)
    # interpolation, measured 0.2 % re s_max on this rig, allowed 1 % re s_max below 8 kHz.
    rig = _rig()
    path = write_irset_sofa(tmp_path / "ff.sofa", free_field_irset(rig, FS, N))
    irs = read_irset(path)
    np.testing.assert_allclose(irs.speaker_positions, rig.speakers.positions, rtol=0, atol=0)
    assert_singular_values_match_free_field(irs, rig, FS, N)


def test_plan_and_verify_accept_a_sofa_file(tmp_path, capsys):
    rig = _rig()
    sofa_path = write_irset_sofa(tmp_path / "rig.sofa", free_field_irset(rig, FS, N))
    hz = np.array([100, 200]) * FS / N                  # FFT bins
    assert main(["plan", "--irset", str(sofa_path), "--freq-hz", str(hz[0]), "--freq-hz", str(hz[1]),
                 "--out", str(tmp_path / "p"), "--no-figures"]) == 0
    plan_dir = tmp_path / "plan"
    write_plan(plan_rig(rig, FrequencyAxis(hz)), plan_dir, figures=False)
    # The rig measured is the rig planned: every channel passes (exit 0).
    assert main(["verify", str(plan_dir), str(sofa_path), "--out", str(tmp_path / "v"), "--no-figures"]) == 0
    assert "FAIL" not in capsys.readouterr().out


# --------------------------------------------------------------------------- show

def test_show_reports_peak_level_and_delay(tmp_path, capsys):
    data = np.zeros((480, 1, 2))
    data[48, 0, 0] = 0.5                                  # 1.00 ms at 48 kHz
    data[96, 0, 1] = -0.1                                 # 2.00 ms
    write_irset(tmp_path / "f", IRSet(data, 48000.0, ["A", "B"], ["mic"]))
    assert main(["irset", "show", str(tmp_path / "f")]) == 0
    out = capsys.readouterr().out
    # 20 log10(0.5) = -6.02 dB, 20 log10(0.1) = -20 dB (definition of the decibel; common practice).
    assert "-6.0 / 1.00" in out and "-20.0 / 2.00" in out
    assert "480 samples (10.0 ms)" in out and "48000 Hz" in out
    assert "(table shows" not in out
    assert "zero lag" in out and "sample 0" in out


def test_show_gives_peak_delays_after_zero_lag(tmp_path, capsys):
    data = np.zeros((480, 1, 2))
    data[96 + 48, 0, 0] = 0.5                             # 1.00 ms after zero lag at sample 96
    data[96 - 48, 0, 1] = -0.1                            # 1.00 ms before it (a pre-ringing peak)
    write_irset(tmp_path / "f", IRSet(data, 48000.0, ["A", "B"], ["mic"], zero_lag_samples=96))
    assert main(["irset", "show", str(tmp_path / "f")]) == 0
    out = capsys.readouterr().out
    assert "-6.0 / 1.00" in out and "-20.0 / -1.00" in out
    assert "sample 96 (2.0 ms of pre-ringing kept before it)" in out


def test_show_truncates_big_sets(tmp_path, capsys):
    rng = np.random.default_rng(2)
    irs = IRSet(rng.standard_normal((64, 20, 9)), 8000.0, [f"L{i}" for i in range(9)], [f"M{i}" for i in range(20)])
    write_irset_sofa(tmp_path / "big.sofa", irs)
    assert main(["irset", "show", str(tmp_path / "big.sofa")]) == 0
    out = capsys.readouterr().out
    assert "(table shows 6 of 9 speakers and 16 of 20 microphones)" in out
    assert len(out.splitlines()) < 40


# --------------------------------------------------------------------------- bad input

def _tf_file(path):
    sofa = sofar.Sofa("GeneralTF")
    sofa.Data_Real = np.ones((1, 2, 5))
    sofa.Data_Imag = np.zeros((1, 2, 5))
    sofa.N = np.arange(5) * 100.0
    sofar.write_sofa(str(path), sofa)


def _fractional_delay_file(path):
    _general_fir(path, np.ones((2, 2, 8)), delay=np.array([[0.0, 1.5], [0.0, 0.0]]))


def _nan_file(path):
    ir = np.ones((1, 2, 8))
    ir[0, 1, 3] = np.nan
    _general_fir(path, ir)


def _not_sofa(path):
    path.write_text("x,y,z\n0,0,0\n")


@pytest.mark.parametrize("make, message", [
    (_not_sofa, "not an AES69 (SOFA) file"),
    (_tf_file, "GLOBAL:SOFAConventions: convention GeneralTF"),
    (_fractional_delay_file, "Data.Delay: holds a fractional delay of 1.5 samples"),
    (_nan_file, "Data.IR: contains NaN"),
])
@pytest.mark.parametrize("action", ["convert", "show"])
def test_bad_files_exit_2_with_one_line(tmp_path, capsys, make, message, action):
    src = tmp_path / "in.sofa"
    make(src)
    before = _files(tmp_path)
    argv = ["irset", action, str(src)] + ([str(tmp_path / "out")] if action == "convert" else [])
    assert main(argv) == 2
    captured = capsys.readouterr()
    err = captured.err.strip().splitlines()
    assert len(err) == 1 and message in err[0] and str(src) in err[0], captured.err
    assert "Traceback" not in captured.err and captured.out == ""
    assert _files(tmp_path) == before                    # nothing written, no temporary left


def test_existing_destination_needs_force(tmp_path, capsys):
    write_irset_sofa(tmp_path / "a.sofa", _irset(1))
    write_irset_sofa(tmp_path / "b.sofa", _irset(2))
    before = (tmp_path / "b.sofa").read_bytes()
    assert main(["irset", "convert", str(tmp_path / "a.sofa"), str(tmp_path / "b.sofa")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "already exists" in err[0] and str(tmp_path / "b.sofa") in err[0]
    assert (tmp_path / "b.sofa").read_bytes() == before and _files(tmp_path) == {"a.sofa", "b.sofa"}
    assert main(["irset", "convert", str(tmp_path / "a.sofa"), str(tmp_path / "b.sofa"), "--force"]) == 0
    assert np.array_equal(read_irset(tmp_path / "b.sofa").data, _irset(1).data)
    # An existing folder is protected the same way.
    write_irset(tmp_path / "f", _irset(1))
    assert main(["irset", "convert", str(tmp_path / "a.sofa"), str(tmp_path / "f")]) == 2
    assert "already exists" in capsys.readouterr().err


def test_upper_case_suffix_refused_with_fix(tmp_path):
    with pytest.raises(InputError, match=r"end in '\.sofa'"):
        write_irset_sofa(tmp_path / "X.SOFA", _irset())
    assert _files(tmp_path) == set()


def test_without_sofar_the_message_says_how_to_install(tmp_path):
    # A real subprocess in which importing sofar fails, as it does when the extra is not installed.
    path = write_irset_sofa(tmp_path / "s.sofa", _irset())
    code = ("import sys; sys.modules['sofar'] = None\n"
            "from arrayplan.cli import main\n"
            f"sys.exit(main(['irset', 'show', {str(path)!r}]))\n")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120,
                          env={**os.environ, "PYTHONWARNINGS": "ignore"})
    assert proc.returncode == 2, proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "pip install 'arrayplan[sofa]'" in lines[0] and str(path) in lines[0]
