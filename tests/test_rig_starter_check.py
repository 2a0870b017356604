"""Starter rig files (`new-rig`) and the rig checker (`check-rig`) on real files and real subprocess-free CLI runs."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy.spatial import cKDTree

from arrayplan.cli import main
from arrayplan.commands.new_rig import NEXT_STEPS
from arrayplan.errors import InputError
from arrayplan.channels.planning import plan_rig
from arrayplan.rig import load_rig
from arrayplan.rigcheck import check_rig_file, count_by_severity
from arrayplan.rig.starter import LAYOUTS, write_starter_rig

DEMO = Path(__file__).resolve().parents[1] / "demos" / "workshop-link" / "rig.toml"


def _write(tmp_path: Path, text: str, name: str = "rig.toml") -> Path:
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def _fields(findings, severity=None):
    return {f.field for f in findings if severity is None or f.severity == severity}


# ------------------------------------------------------------ starter files

@pytest.mark.parametrize("layout", sorted(LAYOUTS))
def test_every_layout_loads_plans_and_comments_every_key(tmp_path, layout):
    path = write_starter_rig(tmp_path / "rig.toml", layout, next_steps=NEXT_STEPS)   # as new-rig writes it
    rig = load_rig(path)
    plan = plan_rig(rig)
    assert plan.channels.singular_values.shape[0] == len(rig.frequencies.hz)
    assert plan.strong_channels.max() >= 1
    lines = path.read_text(encoding="utf-8").splitlines()
    settings = [ln for ln in lines if ln.strip() and not ln.lstrip().startswith("#")]
    assert len(settings) > 15
    for ln in settings:   # every table header and every key = value carries a comment with words in it
        assert " # " in ln and ln.split(" # ", 1)[1].strip(), ln
    text = path.read_text(encoding="utf-8")
    assert "arrayplan check-rig rig.toml" in text and "arrayplan plan rig.toml" in text
    assert "Caution" in text
    # a starter file has nothing the checker calls an error or a warning
    found = check_rig_file(path)
    assert count_by_severity(found)["error"] == 0 and count_by_severity(found)["warning"] == 0, found


def test_line_layout_gives_the_spacing_and_counts_asked_for(tmp_path):
    path = write_starter_rig(tmp_path / "rig.toml", "facing-lines", speakers=10, mics=7, spacing=0.03,
                             mic_spacing=0.05, distance=2.5, fmax=3000.0)
    rig = load_rig(path)
    # numpy arithmetic: n points centred on the line's centre, d apart along x
    spk = np.column_stack([(np.arange(10) - 4.5) * 0.03, np.zeros(10), np.full(10, 1.2)])
    mic = np.column_stack([(np.arange(7) - 3.0) * 0.05, np.full(7, 2.5), np.full(7, 1.2)])
    np.testing.assert_allclose(rig.speakers.positions, spk, atol=1e-12)
    np.testing.assert_allclose(rig.mics.positions, mic, atol=1e-12)
    assert rig.frequencies.hz[-1] == pytest.approx(3000.0, rel=1e-12)


def test_grid_layout_gives_the_spacing_and_counts_asked_for(tmp_path):
    path = write_starter_rig(tmp_path / "rig.toml", "facing-grids", speakers="3x5", mics="4x4", spacing=0.05,
                             mic_spacing=0.02, distance=1.0)
    rig = load_rig(path)
    assert len(rig.speakers) == 15 and len(rig.mics) == 16
    # the speaker panel faces +y: its points lie in the plane y = 0 on a 0.05 m lattice centred on (0, 0, 1.2)
    xs = (np.arange(3) - 1.0) * 0.05
    zs = 1.2 + (np.arange(5) - 2.0) * 0.05
    expected = np.array([[x, 0.0, z] for x in xs for z in zs])
    got = rig.speakers.positions
    order_e = np.lexsort(expected.T[::-1])
    order_g = np.lexsort(np.round(got, 9).T[::-1])
    np.testing.assert_allclose(got[order_g], expected[order_e], atol=1e-12)
    nearest = cKDTree(rig.mics.positions).query(rig.mics.positions, k=2)[0][:, 1]
    np.testing.assert_allclose(nearest, 0.02, rtol=1e-9)
    np.testing.assert_allclose(rig.mics.positions[:, 1], 1.0, atol=1e-12)


def test_ring_layout_radius_and_count(tmp_path):
    rig = load_rig(write_starter_rig(tmp_path / "rig.toml", "ring-zone", speakers=12, radius=2.0))
    assert len(rig.speakers) == 12
    r = np.linalg.norm(rig.speakers.positions[:, :2], axis=1)
    np.testing.assert_allclose(r, 2.0, rtol=1e-12)
    # 12 equal steps around the circle: neighbours 2 R sin(pi / 12) apart (plane geometry)
    chord = np.linalg.norm(np.diff(rig.speakers.positions, axis=0), axis=1)
    np.testing.assert_allclose(chord, 2 * 2.0 * np.sin(np.pi / 12), rtol=1e-12)


def test_starter_refuses_to_overwrite_and_bad_options_write_nothing(tmp_path):
    path = tmp_path / "rig.toml"
    path.write_text("# mine\n", encoding="utf-8")
    with pytest.raises(InputError, match="already exists"):
        write_starter_rig(path, "bench")
    assert path.read_text(encoding="utf-8") == "# mine\n"
    write_starter_rig(path, "bench", force=True)
    assert load_rig(path).name == "bench"
    other = tmp_path / "other.toml"
    with pytest.raises(InputError, match="fmin"):
        write_starter_rig(other, "bench", fmin=5000.0, fmax=1000.0)
    with pytest.raises(InputError, match="radius"):
        write_starter_rig(other, "facing-lines", radius=1.0)
    with pytest.raises(InputError, match="speakers"):
        write_starter_rig(other, "facing-grids", speakers="4by4")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["rig.toml"]


# ------------------------------------------------------------ structural problems, all at once

BROKEN = """
[rig]
name = "broken"
colour = "red"

[medium]
speed_of_sound = -5.0

[frequencies]
list = [1000.0, 0.0, 500.0]

[[speakers]]
name = "A"
position = [0.0, nan, 0.0]
[[speakers]]
name = "B"
position = [1.0, 0.0, 0.0]
directivity = { type = "pistn", radius = 0.05, axis = [0, 1, 0] }
[[speakers]]
shape = "line"
count = 4
spacing = "wide"

[[microphones]]
csv = "mics.csv"
[[microphones]]
shape = "grid"
counts = [2, 2]
spacing = 0.1
normal = [0, 0, 0]
"""


def test_check_reports_many_problems_in_one_pass(tmp_path):
    (tmp_path / "mics.csv").write_text("name,x,y\nA,1,2\n", encoding="utf-8")
    path = _write(tmp_path, BROKEN)
    with pytest.raises(InputError):   # load_rig stops at the first
        load_rig(path)
    found = check_rig_file(path)
    assert all(f.severity == "error" for f in found)
    fields = _fields(found)
    for expected in ("rig.colour", "speakers[0].position", "speakers[1].directivity.type", "speakers[2].spacing",
                     "microphones[1].normal", "medium.speed_of_sound", "frequencies.list"):
        assert expected in fields, (expected, fields)
    assert any(f.field.startswith("microphones[0].csv") and "x,y,z" in f.explanation for f in found)
    freq = [f.explanation for f in found if f.field == "frequencies.list"]
    assert any("above 0 Hz" in e for e in freq) and any("rise strictly" in e for e in freq)
    assert all(f.one_line().startswith("error: ") and "\n" not in f.one_line() for f in found)


def test_check_reports_every_clash_between_elements(tmp_path):
    path = _write(tmp_path, """
[[speakers]]
name = "a"
position = [0.0, 0.0, 0.0]
channel = 1
[[speakers]]
name = "a"
position = [0.5, 0.0, 0.0]
channel = 1
[[microphones]]
position = [0.5, 0.0, 0.0]
""")
    problems = [f.explanation for f in check_rig_file(path)]
    assert any("names must be unique" in p for p in problems)
    assert any("channels must be unique" in p for p in problems)
    assert any("same position [0.5, 0.0, 0.0]" in p for p in problems)


def test_toml_syntax_error_names_the_line(tmp_path):
    path = _write(tmp_path, "[rig]\nname = \"x\"\n[[speakers]\nposition = [0, 0, 0]\n")
    (finding,) = check_rig_file(path)
    assert finding.severity == "error" and finding.field == "line 3"


def test_demo_rig_has_no_errors():
    assert count_by_severity(check_rig_file(DEMO))["error"] == 0


# ------------------------------------------------------------ physical warnings

def _line_rig(spk_spacing: float, distance: float, freqs: list[float], spk_count: int = 5,
              mic_count: int = 5, mic_spacing: float = 0.01, extra: str = "") -> str:
    return f"""
[medium]
speed_of_sound = 343.0
[frequencies]
list = [{', '.join(repr(f) for f in freqs)}]
[[speakers]]
shape = "line"
count = {spk_count}
spacing = {spk_spacing!r}
center = [0.0, 0.0, 0.0]
{extra}
[[microphones]]
shape = "line"
count = {mic_count}
spacing = {mic_spacing!r}
center = [0.0, {distance!r}, 0.0]
"""


def test_aliasing_warning_fires_exactly_above_half_a_wavelength(tmp_path):
    # Spatial sampling theorem for arrays: a uniform line forms no grating lobes at any steering angle
    # when d <= lambda / 2 (H. L. Van Trees, Optimum Array Processing, 2002, section 2.4).
    c, d = 343.0, 0.1
    f_edge = c / (2 * d)     # 1715 Hz
    at_edge = check_rig_file(_write(tmp_path, _line_rig(d, 20.0, [500.0, f_edge]), "edge.toml"))
    assert "speakers[0]" not in _fields(at_edge)
    above = check_rig_file(_write(tmp_path, _line_rig(d, 20.0, [500.0, f_edge * (1 + 1e-6)]), "above.toml"))
    (w,) = [f for f in above if f.field == "speakers[0]"]
    assert w.severity == "warning" and "above 1715 Hz" in w.explanation and "0.1 m apart" in w.explanation
    below = check_rig_file(_write(tmp_path, _line_rig(d, 20.0, [500.0, f_edge * (1 - 1e-6)]), "below.toml"))
    assert "speakers[0]" not in _fields(below)


def test_paraxial_warning_uses_the_aperture_to_distance_criterion(tmp_path):
    # Paraxial (small-angle) regime of the line-to-line estimate Ls Lr / (lambda L)
    # (D. A. B. Miller, Communicating with waves between volumes, Applied Optics 39(11), 2000);
    # the threshold, half the aperture sum <= half the distance, is the one heuristics.py uses
    # (common practice, no source).  Two 1.0 m lines (11 elements, 0.1 m): boundary at L = 2.0 m.
    args = dict(spk_count=11, mic_count=11, mic_spacing=0.1)
    far = check_rig_file(_write(tmp_path, _line_rig(0.1, 2.02, [100.0], **args), "far.toml"))
    assert "speakers/microphones" not in _fields(far, "warning")
    near = check_rig_file(_write(tmp_path, _line_rig(0.1, 1.98, [100.0], **args), "near.toml"))
    (w,) = [f for f in near if f.field == "speakers/microphones" and f.severity == "warning"]
    assert "1.98 m apart" in w.explanation and "2 m" in w.explanation


def test_pistons_facing_away_carry_no_channel(tmp_path):
    # A baffled piston radiates nothing behind its baffle (Kinsler et al., Fundamentals of Acoustics, 2000:
    # infinite-baffle model); microphones behind every speaker hear nothing.
    extra = 'directivity = { type = "piston", radius = 0.01, axis = [0.0, -1.0, 0.0] }'
    found = check_rig_file(_write(tmp_path, _line_rig(0.02, 1.0, [1000.0], extra=extra)))
    assert any(f.severity == "error" and "no microphone hears any speaker" in f.explanation for f in found)


def test_hardware_warnings(tmp_path):
    # Sampling theorem: a sampled system carries frequencies below half its sample rate (C. E. Shannon,
    # Communication in the presence of noise, 1949).
    text = _line_rig(0.005, 1.0, [1000.0, 24000.0]) + """
[hardware]
sample_rate_hz = 48000.0
calibration = "cal.toml"
reference = { output_channel = 2, input_channel = 9 }
"""
    found = check_rig_file(_write(tmp_path, text))
    warned = _fields(found, "warning")
    assert {"hardware.sample_rate_hz", "hardware.calibration", "hardware.reference.output_channel"} <= warned
    assert "hardware.reference.input_channel" not in warned
    ok = check_rig_file(_write(tmp_path, text.replace("24000.0]", "23999.0]"), "ok.toml"))
    assert "hardware.sample_rate_hz" not in _fields(ok)


# ------------------------------------------------------------ command line

def test_check_rig_exit_statuses(tmp_path, capsys):
    clean = write_starter_rig(tmp_path / "clean.toml", "two-zones")
    assert main(["check-rig", str(clean), "--strict"]) == 0
    assert "ready" in capsys.readouterr().out.splitlines()[-1]
    assert main(["check-rig", str(DEMO)]) == 0
    assert main(["check-rig", str(DEMO), "--strict"]) == 1
    out = capsys.readouterr().out.splitlines()
    assert out[-1].startswith(str(DEMO)) and "warning" in out[-1]
    (tmp_path / "mics.csv").write_text("x,y,z\n0,1,0\n", encoding="utf-8")
    broken = _write(tmp_path, BROKEN)
    assert main(["check-rig", str(broken)]) == 2
    out = capsys.readouterr().out.splitlines()
    assert len([ln for ln in out if ln.startswith("error: ")]) >= 6 and "error" in out[-1]
    assert main(["check-rig", str(tmp_path / "nowhere.toml")]) == 2
    assert "not found" in capsys.readouterr().out


def test_new_rig_cli(tmp_path, capsys):
    assert main(["new-rig", "--list"]) == 0
    listed = capsys.readouterr().out.splitlines()
    assert [ln.split()[0] for ln in listed] == list(LAYOUTS)
    out = tmp_path / "link.toml"
    assert main(["new-rig", "facing-lines", "--out", str(out), "--speakers", "12", "--spacing-m", "0.03"]) == 0
    assert len(load_rig(out).speakers) == 12
    before = out.read_bytes()
    assert main(["new-rig", "bench", "--out", str(out)]) == 2
    assert "already exists" in capsys.readouterr().err
    assert out.read_bytes() == before
    assert main(["new-rig", "bench", "--out", str(out), "--force"]) == 0
    assert load_rig(out).name == "bench"
    missing = tmp_path / "never.toml"
    assert main(["new-rig", "ring-zone", "--out", str(missing), "--spacing-m", "0.1"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--spacing-m" in err and "Traceback" not in err
    assert not missing.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["link.toml"]
