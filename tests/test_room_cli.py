"""Rooms through the command line: the [room] table, bad input, and a plan verified on a simulated room."""

from __future__ import annotations

import json

import numpy as np
import pytest

from arrayplan.cli import main
from arrayplan.errors import InputError
from arrayplan.rig import load_rig
from arrayplan.rig.room import image_count


RIG = """\
[rig]
name = "two seats"
[frequencies]
list = [400, 600, 800, 1000]
[[speakers]]
shape = "line"
count = 4
spacing = 0.3
center = [1.7, 0.6, 1.1]
[[microphones]]
name = "seat"
shape = "line"
count = 2
spacing = 1.0
center = [2.1, 2.5, 1.25]
"""

ROOM = """
[room]
size_m = [4.0, 3.4, 2.5]
absorption = 0.25
reflection_order = 5
"""


def _write(tmp_path, text, name="rig.toml"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_room_table_per_surface_and_bands(tmp_path):
    # Reflection coefficient beta = sqrt(1 - alpha) from the energy absorption alpha
    # (H. Kuttruff, Room Acoustics: |R|^2 = 1 - alpha).
    path = _write(tmp_path, RIG + """
[room]
size_m = [4.0, 3.4, 2.5]
reflection_order = 3
[room.absorption]
x_min = 0.1
x_max = 0.2
y_min = [0.1, 0.15, 0.2, 0.3, 0.4, 0.5, 0.6]
y_max = 0.3
floor = 0.05
ceiling = 1
""")
    room = load_rig(path).room
    beta = room.reflection_coefficients(np.array([1000.0]))[0]
    np.testing.assert_allclose(beta, np.sqrt(1 - np.array([0.1, 0.2, 0.3, 0.3, 0.05, 1.0])), atol=1e-12)


@pytest.mark.parametrize("room, field", [
    ("size_m = [4.0, 0.0, 2.5]\nabsorption = 0.2", "room.size_m"),
    ("size_m = [4.0, 3.4, 2.5]\nabsorption = 1.2", "room.absorption"),
    ("size_m = [4.0, 3.4, 2.5]\nabsorption = -0.1", "room.absorption"),
    ("size_m = [4.0, 3.4, 2.5]\nabsorption = [0.1, 0.2, 0.3]", "room.absorption"),
    ("size_m = [4.0, 3.4, 2.5]\nabsorption = 0.2\nreflection_order = -1", "room.reflection_order"),
    ("size_m = [4.0, 3.4, 2.5]\nabsorption = 0.2\nreflection_order = 2.5", "room.reflection_order"),
    ("size_m = [4.0, 3.4, 2.5]\nabsorption = 0.2\nreflection_order = 80", "room.reflection_order"),
    ("size_m = [4.0, 3.4, 2.5]\nabsorption = 0.2\nsize = 3", "room"),
    ("size_m = [3.0, 3.4, 2.5]\nabsorption = 0.2", "speakers[S1].position"),      # 1.25 m + 0.45 m: fine
    ("size_m = [2.2, 3.4, 2.5]\nabsorption = 0.2", "microphones[seat2].position"),
    ("size_m = [4.0, 2.5, 2.5]\nabsorption = 0.2", "microphones[seat1].position"),
])
def test_bad_room_exit_2_one_line_nothing_written(tmp_path, capsys, room, field):
    if field == "speakers[S1].position":
        room = "size_m = [4.0, 3.4, 1.1]\nabsorption = 0.2"           # speakers sit on the ceiling
    path = _write(tmp_path, RIG + "[room]\n" + room + "\n")
    out = tmp_path / "plan"
    code = main(["plan", str(path), "--out", str(out), "--no-figures"])
    stdout, err = capsys.readouterr()
    assert code == 2
    assert len(err.strip().splitlines()) == 1 and str(path) in err and field in err, err
    assert "Traceback" not in err
    assert not out.exists()


def test_order_limit_lifted_by_the_room_table(tmp_path):
    # (2N+1)(2N^2+2N+3)/3 images (J. B. Allen and D. A. Berkley, 1979): order 80 is far above the limit
    text = RIG + "[room]\nsize_m = [4.0, 3.4, 2.5]\nabsorption = 0.2\nreflection_order = 80\n"
    with pytest.raises(InputError, match="reflection_order"):
        load_rig(_write(tmp_path, text))
    room = load_rig(_write(tmp_path, text + "allow_large_order = true\n", "big.toml")).room
    assert room.n_images == 161 * (2 * 80 ** 2 + 2 * 80 + 3) // 3 == image_count(80)


def test_free_field_plan_loses_isolation_in_the_room_a_room_plan_keeps_it(tmp_path, run_arrayplan):
    # A plan's channels are decoupled only for the coupling it diagonalised (G = U S V^H per frequency:
    # D. A. B. Miller, Applied Optics 39(11), 2000); the room adds image paths (J. B. Allen and
    # D. A. Berkley, JASA 65(4), 1979) that a free-field plan does not know.  Verified on the room's
    # simulated responses through the command line, the free-field plan fails the 20 dB isolation
    # requirement and the room plan passes it.
    rig = _write(tmp_path, RIG + ROOM)
    run_arrayplan("measure", rig, "--simulate", "--out", tmp_path / "m", "--rate-hz", "16000", "--f1-hz", "100",
                  "--duration-s", "0.5", "--ir-length-s", "0.12", "--max-latency-s", "0.1", "--lead-in-s", "0.1",
                  check_exit=(0, 1))
    irset = tmp_path / "m" / "irset"
    run_arrayplan("plan", rig, "--out", tmp_path / "room-plan", "--no-figures", check_exit=(0, 1))
    run_arrayplan("plan", rig, "--free-field", "--out", tmp_path / "free-plan", "--no-figures", check_exit=(0, 1))
    sidecar = json.loads((tmp_path / "room-plan" / "weights.json").read_text())
    assert sidecar["kernel"] == "room" and sidecar["kernel_settings"]["room"]["reflection_order"] == 5
    room_v = run_arrayplan("verify", tmp_path / "room-plan", irset, "--out", tmp_path / "v-room", "--no-figures",
                           "--channels", "1,2", check_exit=(0, 1))
    free_v = run_arrayplan("verify", tmp_path / "free-plan", irset, "--out", tmp_path / "v-free", "--no-figures",
                           "--channels", "1,2", check_exit=(0, 1))
    assert room_v.returncode == 0 and free_v.returncode == 1
    room_doc = json.loads((tmp_path / "v-room" / "verify.json").read_text())
    free_doc = json.loads((tmp_path / "v-free" / "verify.json").read_text())
    assert all(room_doc["passed"]) and not any(free_doc["passed"])
