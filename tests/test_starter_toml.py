"""Starter rig files written through tomlkit: values read back as given, comments kept through an edit."""

from __future__ import annotations

import tomllib

import pytest
import tomlkit

from arrayplan.rig.starter import LAYOUTS, starter_rig_text


@pytest.mark.parametrize("layout", sorted(LAYOUTS))
def test_a_starter_file_reads_back_the_options_it_was_written_with(layout):
    text = starter_rig_text(layout, name="bench-7", temperature_c=12.5, fmin=200.0, fmax=1600.0, freq_count=9)
    doc = tomllib.loads(text)
    assert doc["rig"]["name"] == "bench-7"
    assert doc["medium"]["temperature_c"] == 12.5
    assert (doc["frequencies"]["start"], doc["frequencies"]["stop"], doc["frequencies"]["count"]) == (200.0, 1600.0, 9)


def test_facing_lines_counts_and_spacing_read_back():
    doc = tomllib.loads(starter_rig_text("facing-lines", speakers=6, mics=5, spacing=0.07, distance=2.0))
    spk, mic = doc["speakers"][0], doc["microphones"][0]
    assert (spk["count"], spk["spacing"], mic["count"]) == (6, 0.07, 5)
    assert mic["center"] == [0.0, 2.0, 1.2]


@pytest.mark.parametrize("layout", sorted(LAYOUTS))
def test_comments_survive_an_edit_of_a_starter_file(layout):
    # common practice, no source: a file meant for people to edit keeps its comments when a tool edits one value
    text = starter_rig_text(layout, room="20x16x5")
    comments = [ln for ln in text.splitlines() if "#" in ln]
    assert len(comments) > 10
    doc = tomlkit.parse(text)
    assert tomlkit.dumps(doc) == text
    doc["rig"]["name"] = "renamed"
    edited = tomlkit.dumps(doc)
    assert tomllib.loads(edited)["rig"]["name"] == "renamed"
    assert "# short name, used in output files" in edited
    kept = set(edited.splitlines())
    assert [c for c in comments if c not in kept] == [ln for ln in comments if ln.startswith("name = ")
                                                      and "short name" in ln]
