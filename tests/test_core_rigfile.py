"""Rig files: positions from points, generated groups and CSV files; bad input names file and field."""
from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from arrayplan.errors import InputError
from arrayplan.rig import load_rig

MIC_POINT = """
[[microphones]]
position = [0.0, 0.0, 2.0]
"""


def _write(tmp_path: Path, text: str, name: str = "rig.toml") -> Path:
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_points_load_as_given(tmp_path):
    p = _write(tmp_path, """
[rig]
name = "two points"
[medium]
speed_of_sound = 340.0
[[speakers]]
name = "left"
position = [-0.5, 0.0, 0.0]
[[speakers]]
name = "right"
position = [0.5, 0.25, 0.0]
""" + MIC_POINT)
    rig = load_rig(p)
    assert rig.speakers.names == ("left", "right")
    np.testing.assert_allclose(rig.speakers.positions, [[-0.5, 0.0, 0.0], [0.5, 0.25, 0.0]])
    np.testing.assert_allclose(rig.mics.positions, [[0.0, 0.0, 2.0]])
    assert rig.medium.speed_of_sound == 340.0


def test_line_group_positions(tmp_path):
    # 5 points, 0.1 m apart along y, centred on (1, 0, 0): hand-computed y = -0.2 .. 0.2
    p = _write(tmp_path, """
[[speakers]]
shape = "line"
count = 5
spacing = 0.1
center = [1.0, 0.0, 0.0]
direction = [0.0, 1.0, 0.0]
""" + MIC_POINT)
    rig = load_rig(p)
    expected = np.array([[1.0, y, 0.0] for y in (-0.2, -0.1, 0.0, 0.1, 0.2)])
    np.testing.assert_allclose(rig.speakers.positions, expected, atol=1e-12)
    # the same line given by its length instead of the spacing
    p2 = _write(tmp_path, p.read_text().replace("spacing = 0.1", "length = 0.4"), "rig2.toml")
    np.testing.assert_allclose(load_rig(p2).speakers.positions, expected, atol=1e-12)


def test_grid_group_positions(tmp_path):
    # 3 x 2 grid in the plane z = 1 (normal +z), spacing 0.1 m by 0.2 m, centred on (0, 0, 1);
    # hand-computed: first index along the plane's first axis (x for normal +z), second along y.
    p = _write(tmp_path, """
[[speakers]]
position = [0.0, 0.0, -1.0]
[[microphones]]
shape = "grid"
counts = [3, 2]
spacing = [0.1, 0.2]
center = [0.0, 0.0, 1.0]
normal = [0.0, 0.0, 1.0]
""")
    rig = load_rig(p)
    expected = np.array([[x, y, 1.0] for y in (-0.1, 0.1) for x in (-0.1, 0.0, 0.1)])
    np.testing.assert_allclose(rig.mics.positions, expected, atol=1e-12)
    assert len(rig.mics) == 6


def test_csv_positions(tmp_path):
    (tmp_path / "mics.csv").write_text("name,x,y,z\nA,0.1,0.2,2.0\nB,-0.3,0.0,2.5\n", encoding="utf-8")
    p = _write(tmp_path, """
[[speakers]]
position = [0.0, 0.0, 0.0]
[[microphones]]
csv = "mics.csv"
""")
    rig = load_rig(p)
    assert rig.mics.names == ("A", "B")
    np.testing.assert_allclose(rig.mics.positions, [[0.1, 0.2, 2.0], [-0.3, 0.0, 2.5]])


def _raises(path: Path, *fragments: str) -> InputError:
    pattern = ".*".join(re.escape(f) for f in fragments)
    with pytest.raises(InputError, match=pattern) as info:
        load_rig(path)
    return info.value


def test_nan_position_names_file_and_field(tmp_path):
    p = _write(tmp_path, """
[[speakers]]
position = [nan, 0.0, 0.0]
""" + MIC_POINT)
    err = _raises(p, str(p), "speakers[0].position")
    assert err.source == str(p) and err.field == "speakers[0].position"


def test_coincident_speaker_and_mic(tmp_path):
    p = _write(tmp_path, """
[[speakers]]
name = "S1"
position = [0.0, 0.0, 2.0]
""" + MIC_POINT)
    err = _raises(p, str(p), "speakers/microphones", "same position")
    assert err.source == str(p)


def test_missing_position(tmp_path):
    p = _write(tmp_path, """
[[speakers]]
name = "S1"
""" + MIC_POINT)
    _raises(p, str(p), "speakers[0].position", "missing")


def test_unknown_key(tmp_path):
    p = _write(tmp_path, """
[[speakers]]
position = [0.0, 0.0, 0.0]
colour = "red"
""" + MIC_POINT)
    _raises(p, str(p), "speakers[0]", "colour")


def test_bad_csv_header(tmp_path):
    csv_path = tmp_path / "mics.csv"
    csv_path.write_text("name,east,north,up\nA,0.1,0.2,2.0\n", encoding="utf-8")
    p = _write(tmp_path, """
[[speakers]]
position = [0.0, 0.0, 0.0]
[[microphones]]
csv = "mics.csv"
""")
    err = _raises(p, str(csv_path), "header", "x,y,z")
    assert err.field == "header"
