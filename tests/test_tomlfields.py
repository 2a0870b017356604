"""The one TOML field reader: fail-fast for loading, collecting for checking."""

from __future__ import annotations

import pytest

from arrayplan.errors import InputError
from arrayplan.rigcheck import check_rig_file
from arrayplan.formats.tomlfields import FieldReader

TABLE = {"gain_db": "loud", "count": 2.5, "label": "", "flag": 1, "size": [1.0, 2.0, 3.0]}


def test_fail_fast_raises_the_first_problem_with_file_and_field():
    r = FieldReader("box.toml")
    with pytest.raises(InputError) as info:
        r.number(TABLE, "gain_db", "amp", default=0.0)
    assert info.value.source == "box.toml" and info.value.field == "amp.gain_db"
    assert "finite number" in info.value.problem


def test_collecting_records_every_optional_problem_and_uses_the_defaults():
    # common practice, no source: a checker reports all problems of a file in one pass
    r = FieldReader("box.toml", collect=True)
    assert r.number(TABLE, "gain_db", "amp", default=0.0) == 0.0
    assert r.integer(TABLE, "count", "amp", default=1) == 1
    assert r.string(TABLE, "label", "amp", default="none") == "none"
    assert r.boolean(TABLE, "flag", "amp", default=False) is False
    r.keys(TABLE, {"gain_db"}, "amp")
    fields = [p.field for p in r.take()]
    assert fields == ["amp.gain_db", "amp.count", "amp.label", "amp.flag", "amp"]
    assert r.take() == []


def test_collecting_still_stops_at_a_required_field():
    r = FieldReader("box.toml", collect=True)
    with pytest.raises(InputError) as info:
        r.integer(TABLE, "count", "amp")
    assert info.value.field == "amp.count"
    with pytest.raises(InputError, match="missing"):
        r.vector(TABLE, "centre", "amp")


def test_ranges_per_key_and_vector_bound():
    r = FieldReader("box.toml", number_range=(-10.0, 10.0), ranges={"gain_db": (-3.0, 3.0)})
    assert r.vector(TABLE, "size", "amp") == (1.0, 2.0, 3.0)
    with pytest.raises(InputError, match="between -3 and 3"):
        r.number({"gain_db": 4}, "gain_db", "amp")
    with pytest.raises(InputError, match="at most 10"):
        r.vector({"v": [11, 0, 0]}, "v", "amp")


def test_recover_and_reject_only_record_when_collecting():
    def bad() -> int:
        raise InputError("broken", source="box.toml", field="amp.x")

    assert FieldReader("box.toml", collect=True).recover(bad, 7) == 7
    with pytest.raises(InputError, match="broken"):
        FieldReader("box.toml").recover(bad, 7)
    with pytest.raises(InputError, match="has zero length"):
        FieldReader("box.toml").reject("amp.axis", "has zero length", (0, 0, 1))


def test_check_rig_lists_problems_of_one_entry_and_of_several_tables_at_once(tmp_path):
    path = tmp_path / "two-problems.toml"
    path.write_text(
        "[medium]\ntemperature_c = 500\nair_absorption = 'yes'\n"
        "[planning]\ntrack = 3\nsnr_db = -1\n"
        "[[speakers]]\nshape = 'line'\ncount = 3\nspacing = 0.1\ndirection = [0, 0, 0]\nname = 4\n"
        "[[microphones]]\nposition = [0, 1, 0]\n", encoding="utf-8")
    fields = [f.field for f in check_rig_file(path) if f.severity == "error"]
    for expected in ("medium.temperature_c", "medium.air_absorption", "planning.track", "planning.snr_db",
                     "speakers[0].direction", "speakers[0].name"):
        assert expected in fields, fields


def test_check_rig_goes_on_past_a_bad_room_setting_to_the_elements_outside_the_room(tmp_path):
    path = tmp_path / "room.toml"
    path.write_text(
        "[room]\nsize_m = [5.0, 4.0, 3.0]\nabsorption = 0.2\nreflection_order = -1\n"
        "[[speakers]]\nname = 'S1'\nposition = [1.0, 1.0, 1.0]\n"
        "[[microphones]]\nname = 'far-mic'\nposition = [40.0, 1.0, 1.0]\n", encoding="utf-8")
    errors = [f for f in check_rig_file(path) if f.severity == "error"]
    assert any(f.field == "room.reflection_order" for f in errors), errors
    assert any("far-mic" in f.explanation or "far-mic" in f.field for f in errors), errors
