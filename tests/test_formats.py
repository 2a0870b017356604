"""Format modules: what is written reads back the same (round trips), and readers refuse other formats and versions.

Round trips are invariants (common practice, no source): what a writer puts on disk, its reader
gives back, for any content the schema allows (generated with hypothesis).
"""

import csv
import json
import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import arrayplan.cli as cli
from arrayplan.errors import InputError
from arrayplan.formats.deconvolution_summary import (SUMMARY_FILE, SUMMARY_FORMAT, DeconvolutionSummary,
                                                      read_deconvolution_summary, summary_record,
                                                      write_deconvolution_summary)
from arrayplan.formats.signal_sidecar import (SIGNAL_FORMAT, inverse_filter_sidecar, read_signal_sidecar,
                                              signal_sidecar, write_signal_sidecar)
from arrayplan.formats.irset import IRSet, write_irset

SETTINGS = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
#: Names: any printable text (CSV quoting must carry commas and quotes); no carriage returns or controls.
NAME = st.text(st.characters(blacklist_categories=("Cs", "Cc")), min_size=1, max_size=8)
NUMBER = st.floats(allow_nan=False, allow_infinity=False, width=64)
MAYBE = st.one_of(NUMBER, st.just(math.nan))


# ----------------------------------------------------------------------------- signal sidecar

@st.composite
def sidecars(draw):
    n_ch = draw(st.integers(1, 4))
    names = draw(st.lists(NAME, min_size=n_ch, max_size=n_ch, unique=True))
    level = draw(st.dictionaries(st.sampled_from(["peak_dbfs", "rms_dbfs", "basis"]),
                                 st.one_of(NUMBER, NAME, st.none())))
    sweep = draw(st.one_of(st.none(), st.fixed_dictionaries({"kind": st.sampled_from(["exponential", "linear"]),
                                                             "f1_hz": NUMBER})))
    return signal_sidecar(signal=draw(NAME), file=draw(NAME) + ".wav",
                          sample_rate_hz=draw(st.floats(1.0, 1e6)), n_samples=draw(st.integers(1, 10 ** 9)),
                          n_channels=n_ch, channel_names=names, sample_format=draw(st.sampled_from(["float32",
                                                                                                    "pcm24"])),
                          level=level, conditioning=None, parameters={"seed": draw(st.integers())}, sweep=sweep,
                          warnings=draw(st.lists(NAME, max_size=3)), caution=draw(NAME))


@SETTINGS
@given(side=sidecars())
def test_signal_sidecar_round_trip(tmp_path, side):
    path = tmp_path / "s.json"
    write_signal_sidecar(path, side)
    assert read_signal_sidecar(path) == side
    assert side["format"] == SIGNAL_FORMAT and side["format_version"] == 1


def test_sidecars_the_signal_command_writes_read_back(tmp_path, capsys):
    assert cli.main(["signal", "sweep", "--out", str(tmp_path / "s.wav"), "--f1-hz", "50", "--f2-hz", "3000",
                     "--duration-s", "0.5", "--rate-hz", "16000"]) == 0
    capsys.readouterr()
    for name in ("s.json", "s.inverse.json"):
        raw = json.loads((tmp_path / name).read_text())
        assert read_signal_sidecar(tmp_path / name) == raw
    inv = read_signal_sidecar(tmp_path / "s.inverse.json")
    assert inv["signal"] == "inverse_filter" and inv["inverse_of"] == "s.wav" and inv["parameters_in"] == "s.json"
    assert inv == inverse_filter_sidecar(file="s.inverse.wav", signal_file="s.wav", sample_rate_hz=16000,
                                         n_samples=inv["n_samples"], sweep=inv["sweep"], caution=inv["caution"],
                                         provenance=inv["provenance"])


@pytest.mark.parametrize("change, field", [
    ({"format": "something-else"}, "format"),
    ({"format_version": 2}, "format_version"),
    ({"format_version": "1"}, "format_version"),
    ({"n_samples": 0}, "n_samples"),
    ({"sample_rate_hz": float("nan")}, "sample_rate_hz"),
    ({"channel_names": ["a", "b"]}, "channel_names"),
    ({"sweep": [1, 2]}, "sweep"),
])
def test_signal_sidecar_reader_refuses_naming_the_field(tmp_path, change, field):
    side = signal_sidecar(signal="silence", file="a.wav", sample_rate_hz=48000, n_samples=10, n_channels=1,
                          channel_names=["S1"], sample_format="float32", level=None, conditioning=None, parameters={})
    (tmp_path / "a.json").write_text(json.dumps({**side, **change}))
    with pytest.raises(InputError) as err:
        read_signal_sidecar(tmp_path / "a.json")
    assert err.value.field == field and str(tmp_path / "a.json") in err.value.one_line()
    with pytest.raises(InputError):
        write_signal_sidecar(tmp_path / "b.json", {**side, **change})
    assert not (tmp_path / "b.json").exists()


# ----------------------------------------------------------------------------- deconvolution summary

@st.composite
def summaries(draw):
    n_mic, n_spk = draw(st.integers(1, 3)), draw(st.integers(1, 3))
    shape = (n_mic, n_spk)
    arr = lambda elements: np.array(draw(st.lists(elements, min_size=n_mic * n_spk, max_size=n_mic * n_spk)),
                                     dtype=float).reshape(shape)
    orders = sorted(draw(st.sets(st.integers(2, 6), max_size=3)))
    status = st.sampled_from(["measured", "below the method's floor", "below the noise floor"])
    return DeconvolutionSummary(
        tuple(draw(st.lists(NAME, min_size=n_spk, max_size=n_spk, unique=True))),
        tuple(draw(st.lists(NAME, min_size=n_mic, max_size=n_mic, unique=True))),
        arr(MAYBE), arr(NUMBER), arr(MAYBE), arr(st.integers(0, 10 ** 6)).astype(int),
        {n: arr(MAYBE) for n in orders}, {n: arr(MAYBE) for n in orders},
        {n: np.array(draw(st.lists(status, min_size=n_mic * n_spk, max_size=n_mic * n_spk))).reshape(shape)
         for n in orders},
        arr(MAYBE) if orders else None,
        {n: round(draw(NUMBER), 3) for n in orders} if orders and draw(st.booleans()) else None,
        6.0)


def _write(folder, summary):
    n_mic, n_spk = len(summary.mic_names), len(summary.speaker_names)
    write_irset(folder, IRSet(data=np.eye(4)[:, :1, None].repeat(n_mic, 1).repeat(n_spk, 2), sample_rate_hz=16000.0,
                              speaker_names=list(summary.speaker_names), mic_names=list(summary.mic_names),
                              extra=summary_record(summary)))
    write_deconvolution_summary(folder, summary)


def _assert_same(a, b):
    assert a.speaker_names == b.speaker_names and a.mic_names == b.mic_names and a.orders == b.orders
    for name in ("peak_db", "peak_delay_ms", "peak_to_noise_db", "clipped_samples"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name))
    for n in a.orders:
        np.testing.assert_array_equal(a.harmonic_db[n], b.harmonic_db[n])
        np.testing.assert_array_equal(a.harmonic_floor_db[n], b.harmonic_floor_db[n])
        np.testing.assert_array_equal(a.harmonic_status[n], b.harmonic_status[n])
    if a.thd_db is None:
        assert b.thd_db is None
    else:
        np.testing.assert_array_equal(a.thd_db, b.thd_db)
    assert a.method_floor_db == b.method_floor_db and a.margin_db == b.margin_db


@SETTINGS
@given(summary=summaries())
def test_deconvolution_summary_round_trip(tmp_path_factory, summary):
    folder = tmp_path_factory.mktemp("irs")
    _write(folder, summary)
    _assert_same(summary, read_deconvolution_summary(folder))


def test_the_deconvolve_commands_summary_reads_back_as_its_table_and_manifest_say(tmp_path, capsys):
    import soundfile as sf

    assert cli.main(["signal", "sweep", "--out", str(tmp_path / "s.wav"), "--f1-hz", "50", "--f2-hz", "3000",
                     "--duration-s", "0.8", "--pad-after-s", "0.25", "--rate-hz", "16000"]) == 0
    x, fs = sf.read(tmp_path / "s.wav")
    rec = np.zeros((x.size, 2))
    rec[12:, 0] = 0.5 * x[:-12] + 0.05 * x[:-12] ** 2
    rec[40:, 1] = 0.25 * x[:-40]
    sf.write(tmp_path / "rec.wav", rec, fs, subtype="FLOAT")
    assert cli.main(["deconvolve", str(tmp_path / "rec.wav"), "--sweep", str(tmp_path / "s.json"),
                     "--out", str(tmp_path / "irs")]) == 0
    capsys.readouterr()
    summary = read_deconvolution_summary(tmp_path / "irs")
    manifest = json.loads((tmp_path / "irs" / "irset.json").read_text())["extra"]
    assert manifest["summary"] == {"format": SUMMARY_FORMAT, "format_version": 1, "file": SUMMARY_FILE}
    assert manifest["per_pair"] == summary.per_pair()
    rows = list(csv.DictReader((tmp_path / "irs" / SUMMARY_FILE).open()))
    assert [(r["speaker"], r["mic"]) for r in rows] == [("S1", "M1"), ("S1", "M2")]
    # delays of 12 and 40 samples at 16 kHz, exact to the sample (the deconvolve CLI tests' wire)
    np.testing.assert_allclose(summary.peak_delay_ms[:, 0], [1e3 * 12 / 16000, 1e3 * 40 / 16000], atol=1e-4)
    assert summary.harmonic_status[2][0, 0] == "measured" and math.isfinite(summary.harmonic_db[2][0, 0])


def test_summary_reader_refuses_another_format_or_a_newer_version(tmp_path):
    summary = DeconvolutionSummary(("A",), ("m",), np.zeros((1, 1)), np.zeros((1, 1)), np.zeros((1, 1)),
                                   np.zeros((1, 1), int), {}, {}, {}, None)
    _write(tmp_path, summary)
    manifest = json.loads((tmp_path / "irset.json").read_text())
    for change, field in (({"format_version": 2}, "extra.summary.format_version"),
                          ({"format": "other"}, "extra.summary.format")):
        manifest["extra"]["summary"].update(change)
        (tmp_path / "irset.json").write_text(json.dumps(manifest))
        with pytest.raises(InputError) as err:
            read_deconvolution_summary(tmp_path)
        assert err.value.field == field
        manifest["extra"]["summary"].update({"format": SUMMARY_FORMAT, "format_version": 1})
    (tmp_path / "irset.json").write_text(json.dumps(manifest))
    (tmp_path / SUMMARY_FILE).write_text("speaker,mic,peak_db,peak_delay_ms,peak_to_noise_db,clipped_samples\n"
                                         "A,m,loud,0,0,0\n")
    with pytest.raises(InputError) as err:
        read_deconvolution_summary(tmp_path)
    assert err.value.field == "peak_db (line 2)"


# --- NPZ archives written without numpy.savez -----------------------------------------------------

def test_write_npz_reads_back_with_numpy_load(tmp_path):
    """Reference: numpy.load (numpy's own NPZ reader) and numpy.savez of the same arrays."""
    import numpy as np

    from arrayplan.formats.npz import write_npz

    rng = np.random.default_rng(5)
    arrays = {
        "complex": rng.normal(size=(3, 4, 5)) + 1j * rng.normal(size=(3, 4, 5)),
        "fortran": np.asfortranarray(rng.normal(size=(4, 6))),
        "strided": rng.normal(size=(6, 8))[::2, 1::3],
        "single": rng.normal(size=7).astype(np.complex64),
        "names": np.array(["spk 1", "mic é"]),
        "scalar": np.float64(2.5),
        "empty": np.zeros((0, 3)),
        "ints": np.arange(10, dtype=np.int32),
    }
    write_npz(tmp_path / "ours.npz", arrays)
    np.savez(tmp_path / "numpy.npz", **arrays)
    with np.load(tmp_path / "ours.npz") as ours, np.load(tmp_path / "numpy.npz") as ref:
        assert sorted(ours.files) == sorted(ref.files)
        for name in ref.files:
            assert ours[name].dtype == ref[name].dtype and ours[name].shape == ref[name].shape
            np.testing.assert_array_equal(ours[name], ref[name])


def test_write_npz_refuses_object_arrays(tmp_path):
    import numpy as np
    import pytest

    from arrayplan.formats.npz import write_npz

    with pytest.raises(ValueError, match="objects"):
        write_npz(tmp_path / "x.npz", {"a": np.array([{"x": 1}], dtype=object)})


# --- the plan folder: round trip, version, the previous release's marker ---------------------------

def _small_plan():
    import numpy as np

    from arrayplan import FrequencyAxis, Rig, plan_rig

    rng = np.random.default_rng(8)
    rig = Rig.from_positions(rng.uniform(size=(4, 3)), rng.uniform(size=(3, 3)) + [0, 0, 1.5])
    return plan_rig(rig, FrequencyAxis(np.linspace(300, 3000, 7)))


def test_plan_folder_round_trip(tmp_path):
    """write_plan -> read_weights gives back every weight exactly (common practice, no source)."""
    import json

    import numpy as np

    from arrayplan.formats.plan_folder import PLAN_FORMAT, read_weights, write_plan

    plan = _small_plan()
    write_plan(plan, tmp_path / "plan", figures=False)
    side = json.loads((tmp_path / "plan" / "weights.json").read_text())
    assert side["format"] == PLAN_FORMAT and side["format_version"] == 1 and "kind" not in side
    back = read_weights(tmp_path / "plan")
    ch = plan.channels
    np.testing.assert_array_equal(back.axis.hz, ch.axis.hz)
    np.testing.assert_array_equal(back.singular_values, ch.singular_values)
    np.testing.assert_array_equal(back.drive, ch.drive)
    np.testing.assert_array_equal(back.combine, ch.combine)
    np.testing.assert_array_equal(back.sum_rule, ch.sum_rule)
    assert back.speaker_names == ch.speaker_names and back.mic_names == ch.mic_names


def _rewrite_sidecar(folder, change):
    import json

    from arrayplan.formats.fileio import write_checksums

    side = json.loads((folder / "weights.json").read_text())
    change(side)
    (folder / "weights.json").write_text(json.dumps(side))
    write_checksums(folder)


def test_plan_folder_refuses_a_newer_version_and_reads_the_old_marker(tmp_path):
    import pytest

    from arrayplan.errors import InputError
    from arrayplan.formats.plan_folder import read_weights, write_plan

    write_plan(_small_plan(), tmp_path / "plan", figures=False)
    _rewrite_sidecar(tmp_path / "plan", lambda s: s.update(format_version=99))
    with pytest.raises(InputError, match="format_version 99 is newer"):
        read_weights(tmp_path / "plan")

    def previous_release(s):
        del s["format"]
        s["format_version"] = 1
        s["kind"] = "arrayplan-plan"
    _rewrite_sidecar(tmp_path / "plan", previous_release)
    assert read_weights(tmp_path / "plan").drive.shape == (7, 4, 3)
    _rewrite_sidecar(tmp_path / "plan", lambda s: s.update(kind="arrayplan-filter-set"))
    with pytest.raises(InputError, match="expected format 'arrayplan-plan'"):
        read_weights(tmp_path / "plan")
