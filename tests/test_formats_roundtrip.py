"""Format modules moved into arrayplan.formats: what is written reads back the same, newer versions are refused.

Round trips are invariants (common practice, no source): a writer's output, read by its reader,
gives back what was written.  The refusals follow the project's versioning rule: another format and
a newer ``format_version`` are refused naming the file and field; the previous release's files
(marked with ``kind``, or not at all) are still read, for one release.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from arrayplan.errors import InputError
from arrayplan.filters import design_filters
from arrayplan.formats._versioning import UNMARKED, check, stamp
from arrayplan.formats.calibration_record import (FORMAT_NAME, FORMAT_VERSION, CalibrationRecord,
                                                  LatencyCalibration, MicCalibration, OutputCalibration,
                                                  read_calibration, write_calibration)
from arrayplan.formats.filter_set import (FILTER_SET_FORMAT, FILTER_SET_FORMAT_VERSION, read_filter_set,
                                          read_filter_set_sidecar, write_filter_set)
from arrayplan.formats.study_sidecars import STUDY_SIDECARS, read_study_sidecar, stamp_study_sidecar
from arrayplan.formats.verification_folder import (VERIFICATION_FORMAT, VERIFICATION_FORMAT_VERSION,
                                                   read_verification, verification_record, write_verification)
from arrayplan.rig import Rig
from arrayplan.verification.channels import Verification


def _rewrite_json(path, change, drop=()):
    doc = json.loads(path.read_text())
    for key in drop:
        doc.pop(key)
    doc.update(change)
    path.write_text(json.dumps(doc))


def _refused(read, path, field):
    with pytest.raises(InputError) as err:
        read()
    assert err.value.field == field and str(path) in err.value.one_line()


# ----------------------------------------------------------------------------- the shared helper

def test_stamp_puts_the_two_keys_first_and_drops_an_old_kind():
    doc = stamp({"kind": "old", "a": 1, "format_version": 9}, "arrayplan-x", 2)
    assert list(doc) == ["format", "format_version", "a"] and doc["format_version"] == 2


@pytest.mark.parametrize("doc, legacy, version", [
    ({"format": "arrayplan-x", "format_version": 1}, None, 1),
    ({"kind": "arrayplan-x"}, "arrayplan-x", 0),
    ({"kind": "arrayplan-x", "format_version": 1}, "arrayplan-x", 1),
    ({"taps": 8}, UNMARKED, 0),
])
def test_check_reads_this_and_the_previous_releases_markings(doc, legacy, version):
    assert check(doc, "arrayplan-x", 1, "f.json", legacy=legacy) == version


@pytest.mark.parametrize("doc, legacy, field", [
    ({"format": "arrayplan-x", "format_version": 2}, None, "format_version"),
    ({"format": "arrayplan-x", "format_version": True}, None, "format_version"),
    ({"format": "arrayplan-x"}, None, "format_version"),
    ({"format": "arrayplan-y", "format_version": 1}, None, "format"),
    ({"kind": "arrayplan-y"}, "arrayplan-x", "format"),
    ({"kind": "arrayplan-x", "format_version": 3}, "arrayplan-x", "format_version"),
    ({"taps": 8}, None, "format"),
    ({"kind": "arrayplan-y"}, UNMARKED, "format"),
    ([1, 2], UNMARKED, "format"),
])
def test_check_refuses_another_format_or_a_newer_version(doc, legacy, field):
    with pytest.raises(InputError) as err:
        check(doc, "arrayplan-x", 1, "f.json", legacy=legacy)
    assert err.value.field == field and err.value.source == "f.json"


# ----------------------------------------------------------------------------- filter set

@pytest.fixture(scope="module")
def filter_folder(tmp_path_factory):
    # Invented fixture: two speakers and two microphones 1 m apart (a small, fast design).
    rig = Rig.from_positions(np.array([[-0.15, 0.0, 0.0], [0.15, 0.0, 0.0]]),
                             np.array([[-0.15, 0.0, 1.0], [0.15, 0.0, 1.0]]), speed_of_sound=343.0, name="pair")
    filters = design_filters(rig, 16000.0, 256, (500.0, 4000.0), min_level_db=-60.0)
    folder = tmp_path_factory.mktemp("filters") / "set"
    write_filter_set(rig, filters, folder)
    return folder, rig, filters


def test_filter_set_round_trip(filter_folder):
    folder, rig, filters = filter_folder
    back = read_filter_set(folder)
    assert back.sample_rate_hz == filters.sample_rate_hz and back.taps == filters.taps
    assert back.band_hz == tuple(filters.band_hz) and back.kept == tuple(filters.kept)
    assert back.speaker_names == tuple(rig.speakers.names) and back.mic_names == tuple(rig.mics.names)
    # the WAV files hold float32: the taps come back as float32 values, exactly
    np.testing.assert_array_equal(back.drive, filters.drive.astype(np.float32))
    np.testing.assert_array_equal(back.combine, filters.combine.astype(np.float32))
    band = filters.in_band()
    np.testing.assert_array_equal(back.plan_hz, filters.plan.axis.hz[band])
    np.testing.assert_array_equal(back.plan_sv, filters.plan.singular_values[band])
    assert back.min_level_db == filters.min_level_db and back.kernel == filters.kernel_name
    side = read_filter_set_sidecar(folder)
    assert side["format"] == FILTER_SET_FORMAT and side["format_version"] == FILTER_SET_FORMAT_VERSION


def test_filter_set_refuses_a_newer_version_and_reads_the_unmarked_sidecar_of_the_previous_release(filter_folder,
                                                                                                  tmp_path):
    import shutil

    folder, _, filters = filter_folder
    copy = tmp_path / "set"
    shutil.copytree(folder, copy)
    (copy / "SHA256SUMS").unlink()            # hand-edited below: no longer the folder arrayplan wrote
    side = copy / "filters.json"
    _rewrite_json(side, {"format_version": FILTER_SET_FORMAT_VERSION + 1})
    _refused(lambda: read_filter_set(copy), side, "format_version")
    _rewrite_json(side, {"format": "arrayplan-signal"})
    _refused(lambda: read_filter_set(copy), side, "format")
    _rewrite_json(side, {}, drop=("format", "format_version"))
    np.testing.assert_array_equal(read_filter_set(copy).drive, filters.drive.astype(np.float32))


# ----------------------------------------------------------------------------- verification folder

def _verification() -> Verification:
    # Invented fixture: 3 frequencies, 2 planned channels, both wanted; channel 2 lost at 2 kHz.
    hz = np.array([1000.0, 1500.0, 2000.0])
    planned = np.array([[0.5, 0.2], [0.4, 0.25], [0.3, 0.1]])
    matrix = np.zeros((3, 2, 2), complex)
    matrix[:, 0, 0], matrix[:, 1, 1] = planned[:, 0], planned[:, 1] * np.exp(0.3j)
    matrix[2, 1, 0] = 0.05
    crosstalk = np.array([[-40.0, -35.0], [-38.0, -30.0], [-25.0, -6.0]])
    return Verification(hz=hz, channels=np.array([0, 1]), channel_matrix=matrix, planned_sv=planned,
                        measured_sv=planned * 1.1, gain_db=np.array([[0.0, 0.5], [0.1, np.nan], [0.2, -1.0]]),
                        crosstalk_db=crosstalk, lost=-crosstalk < 20.0, strong_planned=np.array([2, 2, 1]),
                        strong_measured=np.array([2, 2, 2]), max_angle_deg=np.array([1.0, 2.0, 40.0]),
                        isolation_db=20.0, threshold_db=3.0, judged=np.ones((3, 2), bool), gain_reference="plan",
                        common_gain_db=0.4, wanted_rule="every planned channel")


@pytest.mark.parametrize("origin", [{"plan_dir": "plan", "rig_sha256": "ab" * 32, "verified": "weights"},
                                    {"filters_dir": "filters", "taps": 256, "verified": "taps"}])
def test_verification_round_trip(tmp_path, origin):
    res = _verification()
    record = verification_record(res, origin=origin, irset_dir="meas/irset", irset_units="full_scale",
                                 settings={"window_ms": 20.0, "latency_samples": None, "smoothing_octaves": 0.0},
                                 gain_reference_reason="given")
    write_verification(tmp_path / "v", res, record, figures=False)
    back = read_verification(tmp_path / "v")
    assert back.doc == json.loads(json.dumps(record)) and back.format_version == VERIFICATION_FORMAT_VERSION
    assert back.doc["format"] == VERIFICATION_FORMAT and back.doc["passed"] == [True, False]
    assert back.doc["provenance"].get("rig_sha256") == origin.get("rig_sha256")
    assert ("judged_bands_hz" in back.doc) == ("filters_dir" in origin)
    for key, want in (("frequency_hz", res.hz), ("channels", res.channels + 1), ("channel_matrix", res.channel_matrix),
                      ("planned_singular_value", res.planned_sv), ("measured_singular_value", res.measured_sv),
                      ("judged", res.judged)):
        np.testing.assert_array_equal(back.arrays[key], want)
    rows = back.channel_rows
    assert len(rows) == 6 and [int(r["channel"]) for r in rows[:2]] == [1, 2]
    np.testing.assert_allclose([float(r["realised_gain"]) for r in rows[1::2]], np.abs(res.channel_matrix[:, 1, 1]),
                               rtol=1e-8)
    assert rows[3]["gain_db"] == "" and [r["lost"] for r in rows[1::2]] == ["0", "0", "1"]
    assert [int(r["lost_channels"]) for r in back.summary_rows] == [0, 0, 1]


def test_verification_refuses_a_newer_version_and_reads_the_kind_of_the_previous_release(tmp_path):
    res = _verification()
    record = verification_record(res, origin={"plan_dir": "plan"}, irset_dir="i", irset_units="full_scale",
                                 settings={}, gain_reference_reason="given")
    write_verification(tmp_path / "v", res, record, figures=False)
    (tmp_path / "v" / "SHA256SUMS").unlink()
    side = tmp_path / "v" / "verify.json"
    _rewrite_json(side, {"format_version": VERIFICATION_FORMAT_VERSION + 1})
    _refused(lambda: read_verification(tmp_path / "v"), side, "format_version")
    _rewrite_json(side, {"kind": VERIFICATION_FORMAT}, drop=("format", "format_version"))
    back = read_verification(tmp_path / "v")
    assert back.format_version == 0 and back.doc["passed"] == [True, False]
    with pytest.raises(InputError):
        write_verification(tmp_path / "w", res, {**record, "format_version": 99}, figures=False)
    assert not (tmp_path / "w").exists()


# ----------------------------------------------------------------------------- calibration record

def _record() -> CalibrationRecord:
    # Invented fixture values, inside the accepted ranges.
    return CalibrationRecord(description="bench", microphones=(MicCalibration("m1", 1, 11.2, 1.55),),
                             outputs=(OutputCalibration(2, 2.1, 6.0, "loop"),),
                             latency=LatencyCalibration(512, 48000.0, 1, 1, "card"))


def test_calibration_record_round_trip(tmp_path):
    path = write_calibration(tmp_path / "cal.toml", _record())
    back = read_calibration(path)
    assert back == CalibrationRecord(**{**_record().__dict__, "source": str(path)})
    text = path.read_text()
    assert f'format = "{FORMAT_NAME}"' in text and f"format_version = {FORMAT_VERSION}" in text


def test_calibration_record_refuses_a_newer_version(tmp_path):
    path = write_calibration(tmp_path / "cal.toml", _record())
    path.write_text(path.read_text().replace(f"format_version = {FORMAT_VERSION}",
                                             f"format_version = {FORMAT_VERSION + 1}"))
    _refused(lambda: read_calibration(path), path, "format_version")


# ----------------------------------------------------------------------------- study sidecars

@pytest.mark.parametrize("study", sorted(STUDY_SIDECARS))
def test_study_sidecar_round_trip_newer_version_and_previous_kind(tmp_path, study):
    side = STUDY_SIDECARS[study]
    doc = stamp_study_sidecar({"verdict": "fine", "frequencies_hz": [500.0, 1000.0]}, study)
    path = tmp_path / side.file
    path.write_text(json.dumps(doc))
    assert read_study_sidecar(tmp_path, study) == doc
    assert doc["format"] == side.format and doc["format_version"] == side.version
    _rewrite_json(path, {"format_version": side.version + 1})
    _refused(lambda: read_study_sidecar(tmp_path, study), path, "format_version")
    _rewrite_json(path, {"kind": side.format}, drop=("format", "format_version"))
    assert read_study_sidecar(tmp_path, study)["verdict"] == "fine"
    other = next(s for s in STUDY_SIDECARS if s != study)
    (tmp_path / STUDY_SIDECARS[other].file).write_text(json.dumps(doc))
    _refused(lambda: read_study_sidecar(tmp_path, other), tmp_path / STUDY_SIDECARS[other].file, "format")
