"""check-rig and new-rig with a room: walls, cost estimate, reverberation guides, a starter layout in a room."""

from __future__ import annotations

import math
import re

import numpy as np
import pytest

from arrayplan.cli import main
from arrayplan.rig import load_rig
from arrayplan.rigcheck import check_rig_file
from arrayplan.rig.room import Room, eyring_t60_s, sabine_t60_s, schroeder_frequency_hz

RIG = """\
[rig]
name = "corner"
[frequencies]
start = 200
stop = 2000
count = {count}
[[speakers]]
name = "S1"
position = [{sx}, 1.0, 1.2]
[[speakers]]
name = "S2"
position = [1.4, 1.0, 1.2]
[[microphones]]
name = "M1"
position = [2.0, 2.5, 1.3]
[room]
size_m = [4.0, 3.0, 2.5]
absorption = 0.3
reflection_order = {order}
"""


def _check(tmp_path, sx=1.0, order=6, count=8):
    path = tmp_path / "rig.toml"
    path.write_text(RIG.format(sx=sx, order=order, count=count))
    return check_rig_file(path)


@pytest.mark.parametrize("sx, words", [(0.002, "2.0 mm from a wall"), (-0.3, "outside the room")])
def test_elements_at_or_beyond_a_wall_are_errors(tmp_path, sx, words):
    found = _check(tmp_path, sx=sx)
    errors = [f for f in found if f.severity == "error"]
    assert len(errors) == 1 and words in errors[0].explanation and errors[0].field == "speakers[S1].position"


def test_every_element_outside_or_near_a_wall_is_listed_in_one_pass(tmp_path):
    # room 4 x 3 x 2.5 m with a corner at the origin: a point is inside when 0 <= x <= Lx etc., and its
    # distance to the nearest wall is min(x, Lx - x, y, Ly - y, z, Lz - z) (geometry, no source)
    text = RIG.format(sx=-0.3, order=2, count=4).replace("[1.4, 1.0, 1.2]", "[1.4, 3.2, 1.2]")
    text = text.replace("[2.0, 2.5, 1.3]", "[2.0, 2.5, 2.497]")
    text += "\n[[microphones]]\nname = \"M2\"\nposition = [1.0, 1.5, 1.0]\n"
    path = tmp_path / "rig.toml"
    path.write_text(text)
    errors = [f for f in check_rig_file(path) if f.severity == "error"]
    by_field = {f.field: f.explanation for f in errors}
    assert set(by_field) == {"speakers[S1].position", "speakers[S2].position", "microphones[M1].position"}
    assert "'S1'" in by_field["speakers[S1].position"] and "outside the room" in by_field["speakers[S1].position"]
    assert "'S2'" in by_field["speakers[S2].position"] and "outside the room" in by_field["speakers[S2].position"]
    assert "3.0 mm from a wall" in by_field["microphones[M1].position"]


def test_reverberation_guides_follow_the_diffuse_field_formulas(tmp_path):
    # Sabine T60 = 0.161 V / (S alpha), Eyring T60 = 0.161 V / (-S ln(1 - alpha)) (H. Kuttruff, Room
    # Acoustics; 0.161 s/m for c = 343 m/s) and the Schroeder frequency 2000 sqrt(T60 / V)
    # (M. R. Schroeder, 1962; value as usually quoted, from memory).
    v, s, a = 4.0 * 3.0 * 2.5, 2 * (4.0 * 3.0 + 4.0 * 2.5 + 3.0 * 2.5), 0.3
    sabine, eyring = 0.161 * v / (s * a), 0.161 * v / (-s * math.log(1 - a))
    room = Room.uniform((4.0, 3.0, 2.5), a)
    assert sabine_t60_s(room, speed_of_sound=343.0) == pytest.approx(sabine, rel=2e-3)
    assert eyring_t60_s(room, speed_of_sound=343.0) == pytest.approx(eyring, rel=2e-3)
    assert schroeder_frequency_hz(sabine, v) == pytest.approx(2000 * math.sqrt(sabine / v), rel=1e-12)
    note = next(f for f in _check(tmp_path) if f.field == "room.absorption")
    assert note.severity == "note" and "guides" in note.explanation
    got = [float(x) for x in re.findall(r"([\d.]+) s", note.explanation)]
    assert got[0] == pytest.approx(sabine, abs=0.006) and got[1] == pytest.approx(eyring, abs=0.006)
    f_s = float(re.search(r"is (\d+) Hz", note.explanation).group(1))
    assert f_s == pytest.approx(2000 * math.sqrt(sabine / v), abs=3)


def test_a_costly_order_is_warned_with_its_estimate(tmp_path):
    # (2N+1)(2N^2+2N+3)/3 images for order N (J. B. Allen and D. A. Berkley, JASA 65(4), 1979)
    cheap = next(f for f in _check(tmp_path, order=4) if f.field == "room.reflection_order")
    assert cheap.severity == "note" and "129 image sources" in cheap.explanation
    n = 40
    costly = [f for f in _check(tmp_path, order=n, count=5000) if f.field == "room.reflection_order"]
    assert costly[0].severity == "warning" and "more than 60 s" in costly[0].explanation
    assert f"{(2 * n + 1) * (2 * n * n + 2 * n + 3) // 3:,} image sources" in costly[0].explanation
    beyond = [f for f in _check(tmp_path, order=60) if f.severity == "error"]
    assert len(beyond) == 1 and "295,361 image sources" in beyond[0].explanation


def test_new_rig_puts_a_starter_layout_in_a_room(tmp_path, capsys):
    out = tmp_path / "rig.toml"
    assert main(["new-rig", "two-zones", "--room", "5x4x2.7", "--out", str(out)]) == 0
    rig = load_rig(out)
    assert rig.room is not None and rig.room.size_m == (5.0, 4.0, 2.7)
    pts = np.vstack([rig.speakers.positions, rig.mics.positions])
    assert np.all(pts > 0.05) and np.all(pts < np.array([5.0, 4.0, 2.7]) - 0.05)
    # centred on the floor plan (common practice, no source)
    centre = (pts.min(axis=0) + pts.max(axis=0)) / 2
    assert centre[:2] == pytest.approx([2.5, 2.0], abs=1e-9)
    capsys.readouterr()
    small = tmp_path / "small.toml"
    assert main(["new-rig", "two-zones", "--room", "1x1x2.7", "--out", str(small)]) == 2
    err = capsys.readouterr().err
    assert "--room" in err and len(err.strip().splitlines()) == 1 and not small.exists()
    assert main(["new-rig", "bench", "--room", "3x2", "--out", str(small)]) == 2
    assert "LxWxH" in capsys.readouterr().err and not small.exists()
