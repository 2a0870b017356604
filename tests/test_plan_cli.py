"""End-to-end tests of `arrayplan plan` and `arrayplan field` on real files."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest

from arrayplan.cli import main

DEMO = Path(__file__).resolve().parents[1] / "demos" / "workshop-link" / "rig.toml"

SMALL_RIG = """
[rig]
name = "bench"
[medium]
speed_of_sound = 343.0
[frequencies]
list = [1000.0, 2000.0]
[[speakers]]
shape = "line"
count = 4
spacing = 0.1
center = [0.0, 0.0, 0.0]
[[microphones]]
shape = "line"
count = 5
spacing = 0.1
center = [0.0, 0.0, 2.0]
"""


def _rows(path: Path) -> list[dict[str, str]]:
    with path.open() as fh:
        return list(csv.DictReader(fh))


def test_plan_writes_tables_weights_and_figures(tmp_path, capsys):
    rig = tmp_path / "rig.toml"
    rig.write_text(SMALL_RIG)
    out = tmp_path / "plan"
    assert main(["plan", str(rig), "--out", str(out)]) == 0
    for name in ("channels.csv", "summary.csv", "weights.npz", "weights.csv", "weights.json",
                 "rig.png", "couplings.png", "channel-counts.png"):
        assert (out / name).stat().st_size > 0, name
    rows = _rows(out / "channels.csv")
    assert len(rows) == 2 * 4 and rows[0]["channel"] == "1"
    # Sum rule: sum of shares is 1 at every frequency (Golub & Van Loan, Matrix Computations: ||G||_F^2 = sum s^2)
    for f in ("1000", "2000"):
        assert sum(float(r["share_of_sum_rule"]) for r in rows if r["frequency_hz"] == f) == pytest.approx(1, 1e-9)
    summary = _rows(out / "summary.csv")
    assert [r["frequency_hz"] for r in summary] == ["1000", "2000"]
    # The weights read back reproduce diag(s) through the free-field G (SVD definition, Golub & Van Loan).
    from arrayplan import FreeFieldKernel, load_rig, read_weights
    w = read_weights(out)
    g = FreeFieldKernel(load_rig(rig)).evaluate(w.axis.hz)
    c = np.einsum("fmi,fms,fsj->fij", w.combine, g, w.drive)
    np.testing.assert_allclose(c, np.stack([np.diag(s) for s in w.singular_values]), atol=1e-12)
    side = json.loads((out / "weights.json").read_text())
    assert side["speaker_names"] == ["S1", "S2", "S3", "S4"] and "exp(-j*k*r)" in side["provenance"]["sign_convention"]
    # weights.csv long table holds every weight once
    assert len(_rows(out / "weights.csv")) == 2 * 4 * (4 + 5)
    assert "strong" in capsys.readouterr().out


def test_quick_form_matches_rig_file(tmp_path):
    spk, mic = tmp_path / "s.csv", tmp_path / "m.csv"
    spk.write_text("name,x,y,z\n" + "".join(f"S{i+1},{-0.15 + 0.1*i},0,0\n" for i in range(4)))
    mic.write_text("x,y,z\n" + "".join(f"{-0.2 + 0.1*i},0,2\n" for i in range(5)))
    rig = tmp_path / "rig.toml"
    rig.write_text(SMALL_RIG)
    assert main(["plan", "--speakers", str(spk), "--mics", str(mic), "--freq-hz", "1000", "--freq-hz", "2000",
                 "--speed-of-sound-m-s", "343", "--out", str(tmp_path / "a"), "--no-figures"]) == 0
    assert main(["plan", str(rig), "--out", str(tmp_path / "b"), "--no-figures"]) == 0
    a = np.load(tmp_path / "a" / "weights.npz")["singular_value"]
    b = np.load(tmp_path / "b" / "weights.npz")["singular_value"]
    np.testing.assert_allclose(a, b, rtol=1e-12)


@pytest.mark.parametrize("body, needle", [
    ("[[speakers]]\nposition = [0, 0, nan]\n[[microphones]]\nposition = [0, 0, 1]\n", "speakers[0].position"),
    ("[[speakers]]\nposition = [0, 0, 1]\n[[microphones]]\nposition = [0, 0, 1]\n", "same position"),
    ("[[speakers]]\nposition = [0, 0]\n[[microphones]]\nposition = [0, 0, 1]\n", "speakers[0].position"),
    ("[[speakers]]\nposition = [0, 0, 0]\ncolour = 1\n[[microphones]]\nposition = [0, 0, 1]\n", "colour"),
    ("[[speakers]]\nposition = [0, 0, 0]\n", "microphones"),
    ("this is not toml", "not valid TOML"),
])
def test_bad_rig_is_one_line_exit_2_nothing_written(tmp_path, capsys, body, needle):
    rig = tmp_path / "bad.toml"
    rig.write_text("[frequencies]\nlist = [1000]\n" + body if "toml" not in body else body)
    out = tmp_path / "out"
    assert main(["plan", str(rig), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err
    assert str(rig) in err and needle in err
    assert not out.exists()
    assert not list(tmp_path.glob(".out.staging*"))


def test_bad_flags(tmp_path, capsys):
    rig = tmp_path / "rig.toml"
    rig.write_text(SMALL_RIG)
    assert main(["plan", str(rig), "--out", str(tmp_path / "o"), "--freq-hz", "-5"]) == 2
    assert "--freq-hz" in capsys.readouterr().err
    assert main(["plan", "--speakers", str(tmp_path / "nope.csv"), "--mics", str(tmp_path / "m.csv"),
                 "--freq-hz", "100", "--out", str(tmp_path / "o")]) == 2
    assert "nope.csv" in capsys.readouterr().err


def test_demo_rig_plans(tmp_path):
    out = tmp_path / "demo"
    assert main(["plan", str(DEMO), "--out", str(out), "--no-figures"]) == 0
    summary = _rows(out / "summary.csv")
    assert len(summary) == 48


def test_field_map(tmp_path):
    rig = tmp_path / "rig.toml"
    rig.write_text(SMALL_RIG)
    out = tmp_path / "field"
    assert main(["field", str(rig), "--freq-hz", "2000", "--channel", "2", "--plane", "xz", "--at-m", "0",
                 "--resolution", "40", "--out", str(out)]) == 0
    mag = np.load(out / "field-ch2-2000Hz-xz.npy")
    assert mag.shape[1] == 40 and np.all(np.isfinite(mag)) and mag.max() > 0
    assert (out / "field-ch2-2000Hz-xz.png").stat().st_size > 0
    assert main(["field", str(rig), "--freq-hz", "2000", "--channel", "9", "--out", str(out)]) == 2


def test_plan_from_measured_irset_matches_free_field(tmp_path, capsys):
    """Planning from a simulated measurement reproduces the free-field plan.

    Outside reference: numpy.fft.rfft (the measured kernel at FFT bins is the DFT of the
    responses); float32 WAV storage limits the agreement to about 1e-5 of the largest value.
    """
    from arrayplan import free_field_irset, load_rig, write_irset
    rig_path = tmp_path / "rig.toml"
    rig_path.write_text(SMALL_RIG)
    rig = load_rig(rig_path)
    fs, n = 16000.0, 2048
    write_irset(tmp_path / "irs", free_field_irset(rig, fs, n))
    bins = [str(fs / n * k) for k in (128, 256)]   # 1000 Hz and 2000 Hz are FFT bins
    assert main(["plan", str(rig_path), "--irset", str(tmp_path / "irs"), "--freq-hz", bins[0], "--freq-hz", bins[1],
                 "--out", str(tmp_path / "m"), "--no-figures"]) == 0
    assert main(["plan", str(rig_path), "--out", str(tmp_path / "f"), "--no-figures"]) == 0
    m = np.load(tmp_path / "m" / "weights.npz")["singular_value"]
    f = np.load(tmp_path / "f" / "weights.npz")["singular_value"]
    np.testing.assert_allclose(m, f, atol=1e-5 * f.max())
    # Positions stored in the IR set are enough on their own.
    assert main(["plan", "--irset", str(tmp_path / "irs"), "--freq-hz", bins[0], "--out", str(tmp_path / "p"),
                 "--no-figures"]) == 0
    # Plan frequencies must lie below the IR set's Nyquist frequency.
    assert main(["plan", str(rig_path), "--irset", str(tmp_path / "irs"), "--freq-hz", "9000",
                 "--out", str(tmp_path / "x")]) == 2
    assert "Nyquist" in capsys.readouterr().err and not (tmp_path / "x").exists()


def test_field_says_when_the_channel_is_silent_in_the_plane(tmp_path, capsys):
    # Two speakers mirrored about z = 0: the antisymmetric channel has z = 0 as a nodal plane
    # (superposition of equal and opposite sources; common practice, no source).
    rig = tmp_path / "pair.toml"
    rig.write_text('[medium]\nspeed_of_sound = 343.0\n'
                   '[[speakers]]\nname = "A"\nposition = [0.0, 0.0, 0.1]\n'
                   '[[speakers]]\nname = "B"\nposition = [0.0, 0.0, -0.1]\n'
                   '[[microphones]]\nname = "M1"\nposition = [0.0, 1.0, 0.1]\n'
                   '[[microphones]]\nname = "M2"\nposition = [0.0, 1.0, -0.1]\n')
    from arrayplan.cli import main
    import json
    for at, silent in (("0", True), ("0.05", False)):
        out = tmp_path / f"f{at}"
        assert main(["field", str(rig), "--freq-hz", "1000", "--channel", "2", "--plane", "xy", "--at-m", at,
                     "--resolution", "40", "--out", str(out)]) == 0
        err = capsys.readouterr().err
        assert ("silent in the xy plane" in err) is silent
        doc = json.loads(next(out.glob("*.json")).read_text())
        assert doc["silent_in_plane"] is silent


def test_smoothing_options_of_plan_and_verify(tmp_path, capsys):
    """--smooth-octaves reaches the measured kernel in plan and verify, and is checked.

    On a free-field set the direct sound passes the smoothing unchanged, so the plan keeps the
    free-field singular values within 1 % of the largest (the off-grid tolerance of the measured
    kernel; reference: exp(-jkr)/(4 pi r) via the free-field plan, numpy.linalg.svd).
    """
    import json

    from arrayplan import free_field_irset, load_rig, write_irset
    rig_path = tmp_path / "rig.toml"
    rig_path.write_text(SMALL_RIG)
    write_irset(tmp_path / "irs", free_field_irset(load_rig(rig_path), 16000.0, 2048))
    assert main(["plan", str(rig_path), "--out", str(tmp_path / "f"), "--no-figures"]) == 0
    assert main(["plan", str(rig_path), "--irset", str(tmp_path / "irs"), "--smooth-octaves", "1/3",
                 "--out", str(tmp_path / "m"), "--no-figures"]) == 0
    m = np.load(tmp_path / "m" / "weights.npz")["singular_value"]
    f = np.load(tmp_path / "f" / "weights.npz")["singular_value"]
    assert np.max(np.abs(m - f)) < 0.01 * f.max()
    assert "complex-smoothed over 0.333 octave" in json.loads((tmp_path / "m" / "weights.json").read_text())["kernel"]
    assert main(["verify", str(tmp_path / "f"), str(tmp_path / "irs"), "--smooth-octaves", "0.5",
                 "--out", str(tmp_path / "v")]) == 0
    assert json.loads((tmp_path / "v" / "verify.json").read_text())["smoothing_octaves"] == 0.5
    capsys.readouterr()
    def status(argv):
        try:
            return main(argv)
        except SystemExit as exc:                       # argparse's own usage errors
            return exc.code

    for bad, where in (("3", "--smooth-octaves"), ("1/0", "--smooth-octaves"), ("-0.2", "--smooth-octaves")):
        assert status(["verify", str(tmp_path / "f"), str(tmp_path / "irs"), "--smooth-octaves", bad,
                       "--out", str(tmp_path / "bad")]) == 2
        err = capsys.readouterr().err
        assert where in err and len(err.strip().splitlines()) == 1 and not (tmp_path / "bad").exists()
    assert main(["plan", str(rig_path), "--smooth-octaves", "1/3", "--out", str(tmp_path / "n")]) == 2
    assert "only with --irset" in capsys.readouterr().err


PANEL_RIG = """
[rig]
name = "panel"
[medium]
speed_of_sound = 343.0
[frequencies]
start = 500.0
stop = 4000.0
count = 6
[[speakers]]
shape = "grid"
counts = [6, 6]
spacing = 0.05
center = [0.0, 0.0, 0.0]
[[microphones]]
shape = "grid"
counts = [6, 6]
spacing = 0.06
center = [0.0, 0.0, 2.0]
"""


@pytest.mark.parametrize("flags, needle", [
    (["--workers", "0"], "--workers"),
    (["--max-channels", "37"], "--max-channels"),
    (["--max-channels", "many"], "--max-channels"),
    (["--scheduler", "tcp://127.0.0.1:1"], "--scheduler"),     # port 1: nothing listens there
    (["--scheduler", "local:0"], "--scheduler"),
    (["--memory-mb", "0"], "--memory-mb"),
])
def test_bad_scale_options_one_line_exit_2_nothing_written(tmp_path, capsys, flags, needle):
    rig = tmp_path / "rig.toml"
    rig.write_text(PANEL_RIG)
    out = tmp_path / "out"
    assert main(["plan", str(rig), "--out", str(out), "--no-figures"] + flags) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err and needle in err
    assert not out.exists() and not list(tmp_path.glob(".out.staging*"))


def test_workers_give_byte_identical_files(tmp_path):
    rig = tmp_path / "rig.toml"
    rig.write_text(PANEL_RIG)
    for n in ("1", "2"):
        assert main(["plan", str(rig), "--out", str(tmp_path / n), "--no-figures", "--workers", n,
                     "--chunk-size", "2"]) == 0
    for name in ("channels.csv", "summary.csv", "weights.npz", "weights.csv"):
        assert (tmp_path / "1" / name).read_bytes() == (tmp_path / "2" / name).read_bytes(), name


def test_truncated_plan_says_so_everywhere(tmp_path, capsys):
    rig = tmp_path / "rig.toml"
    rig.write_text(PANEL_RIG)
    out = tmp_path / "top"
    assert main(["plan", str(rig), "--out", str(out), "--no-figures", "--max-channels", "4"]) == 0
    assert "truncated plan" in capsys.readouterr().out
    summary = _rows(out / "summary.csv")
    assert {r["channels_computed"] for r in summary} == {"4"}
    assert len(_rows(out / "channels.csv")) == 6 * 4
    side = json.loads((out / "weights.json").read_text())
    assert side["truncated"]["channels_computed_max"] == 4
    # share of the sum rule not computed = 1 - sum of the 4 largest s^2 / ||G||_F^2, from numpy's SVD of G
    from arrayplan import FreeFieldKernel, load_rig
    g = FreeFieldKernel(load_rig(rig)).evaluate(np.array([float(r["frequency_hz"]) for r in summary]))
    s2 = np.linalg.svd(g, compute_uv=False) ** 2
    expected = 1 - s2[:, :4].sum(axis=1) / s2.sum(axis=1)     # Golub & Van Loan: ||G||_F^2 = sum s^2
    np.testing.assert_allclose([float(r["share_not_computed"]) for r in summary], expected, rtol=1e-8, atol=1e-15)


def test_long_weight_table_above_the_limit_only_on_request(tmp_path, capsys, monkeypatch):
    import arrayplan.commands.plan as plan_command
    import arrayplan.formats.plan_folder as plan_files
    rig = tmp_path / "rig.toml"
    rig.write_text(SMALL_RIG)
    monkeypatch.setattr(plan_files, "LONG_TABLE_MAX_ROWS", 10)      # the small rig's 72 rows exceed it
    monkeypatch.setattr(plan_command, "LONG_TABLE_MAX_ROWS", 10)
    assert main(["plan", str(rig), "--out", str(tmp_path / "a"), "--no-figures"]) == 0
    assert not (tmp_path / "a" / "weights.csv").exists()
    assert "--long-weights" in capsys.readouterr().out
    assert "not written" in json.loads((tmp_path / "a" / "weights.json").read_text())["files"]["weights.csv"]
    assert main(["plan", str(rig), "--out", str(tmp_path / "b"), "--no-figures", "--long-weights"]) == 0
    # the streamed table, rebuilt here from the NPZ with Python's own %g formatting (common practice)
    z = np.load(tmp_path / "b" / "weights.npz")
    lines = ["frequency_hz,channel,side,element,re,im"]
    for f, hz in enumerate(z["frequency_hz"]):
        for j in range(z["singular_value"].shape[1]):
            for side, names, w in (("drive", z["speaker_names"], z["drive"]), ("combine", z["mic_names"], z["combine"])):
                lines += [f"{hz:.10g},{j + 1},{side},{name},{w[f, e, j].real:.12g},{w[f, e, j].imag:.12g}"
                          for e, name in enumerate(names)]
    assert (tmp_path / "b" / "weights.csv").read_text() == "\n".join(lines) + "\n"


def test_planning_keys_in_the_rig_file(tmp_path, capsys):
    rig = tmp_path / "rig.toml"
    rig.write_text(PANEL_RIG + "[planning]\nmax_channels = 3\nworkers = 1\nmemory_mb = 8\n")
    assert main(["plan", str(rig), "--out", str(tmp_path / "a"), "--no-figures"]) == 0
    assert {r["channels_computed"] for r in _rows(tmp_path / "a" / "summary.csv")} == {"3"}
    capsys.readouterr()
    rig.write_text(PANEL_RIG + "[planning]\nmax_channels = 99\n")
    assert main(["plan", str(rig), "--out", str(tmp_path / "b"), "--no-figures"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and str(rig) in err and "planning.max_channels" in err
    assert not (tmp_path / "b").exists()
