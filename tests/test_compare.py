"""``arrayplan compare``: layouts side by side, checked against an independent SVD and closed forms."""

from __future__ import annotations

import json

import numpy as np
import pytest

from arrayplan.cli import main
from arrayplan.frequency import FrequencyAxis
from arrayplan.channels.planning import plan_rig
from arrayplan.rig import Rig
from arrayplan.studies.compare import capacity_per_frequency, compare_plans

C = 343.0
HZ = np.array([500.0, 1000.0, 2000.0])


def _green(spk, mic, hz):
    """exp(-jkr) / (4 pi r), (n_f, n_mic, n_spk): written here, independent of arrayplan."""
    r = np.linalg.norm(mic[:, None] - spk[None], axis=-1)
    return np.exp(-2j * np.pi * hz[:, None, None] / C * r) / (4 * np.pi * r)


def _lines(n_spk, spacing, n_mic=6, distance=2.0):
    spk = np.column_stack([(np.arange(n_spk) - (n_spk - 1) / 2) * spacing, np.zeros(n_spk), np.zeros(n_spk)])
    mic = np.column_stack([(np.arange(n_mic) - (n_mic - 1) / 2) * 0.1, np.full(n_mic, distance), np.zeros(n_mic)])
    return spk, mic


def test_capacity_is_the_log_det_of_the_coupling():
    spk, mic = _lines(5, 0.2)
    g = _green(spk, mic, HZ)
    s = np.linalg.svd(g, compute_uv=False)
    rho_db = 30.0
    c = 10 ** (rho_db / 10) * (4 * np.pi) ** 2 / 5
    # source: E. Telatar, "Capacity of multi-antenna Gaussian channels", Eur. Trans. Telecomm. 10(6), 1999:
    # C = log2 det(I + (rho / n_t) H^H H) with equal power per transmitter
    direct = np.linalg.slogdet(np.eye(5) + c * np.conj(np.swapaxes(g, 1, 2)) @ g)[1] / np.log(2)
    np.testing.assert_allclose(capacity_per_frequency(s, 5, rho_db), direct, rtol=1e-10)


@pytest.mark.parametrize("rho_db", [0.0, 30.0])
def test_reference_snr_is_one_speaker_at_one_metre(rho_db):
    # one speaker, one microphone 1 m away: a single channel whose SNR is rho, so the capacity is
    # log2(1 + rho) at every frequency (Telatar 1999, one channel); a second layout at 2 m gets
    # log2(1 + rho / 4) (inverse-square law, 1/(4 pi r) spreading)
    one = Rig.from_positions(np.zeros((1, 3)), np.array([[0.0, 1.0, 0.0]]), speed_of_sound=C, name="near")
    two = Rig.from_positions(np.zeros((1, 3)), np.array([[0.0, 2.0, 0.0]]), speed_of_sound=C, name="far")
    axis = FrequencyAxis(HZ)
    cmp = compare_plans([(r.name, r.name, plan_rig(r, axis)) for r in (one, two)], reference_snr_db=rho_db)
    rho = 10 ** (rho_db / 10)
    np.testing.assert_allclose(cmp.layouts[0].capacity, np.log2(1 + rho), rtol=1e-12)
    np.testing.assert_allclose(cmp.layouts[1].capacity, np.log2(1 + rho / 4), rtol=1e-12)


def test_compare_counts_match_an_independent_svd_and_the_paraxial_formula():
    axis = FrequencyAxis(HZ)
    rigs = [Rig.from_positions(*_lines(n, d), speed_of_sound=C, name=f"r{n}") for n, d in ((4, 0.1), (8, 0.15))]
    cmp = compare_plans([(r.name, r.name, plan_rig(r, axis, threshold_db=3.0, snr_db=40.0)) for r in rigs],
                        reference_snr_db=20.0)
    for rig, (n, d), row in zip(rigs, ((4, 0.1), (8, 0.15)), cmp.layouts):
        s = np.linalg.svd(_green(*_lines(n, d), HZ), compute_uv=False)
        level = 20 * np.log10(s / s[:, :1])
        # common practice, no source: strong = within 3 dB of the strongest, usable = above -40 dB
        np.testing.assert_array_equal(row.strong, np.sum(level >= -3.0, axis=1))
        np.testing.assert_array_equal(row.usable, np.sum(level > -40.0, axis=1))
        # D. A. B. Miller, Applied Optics 39(11), 2000: Ls Lr / (lambda L), with each line's length taken as
        # its extent plus one spacing (the aperture each element samples)
        ls, lr = n * d, 6 * 0.1
        np.testing.assert_allclose(row.paraxial, ls * lr / (C / HZ * 2.0), rtol=1e-9)
        assert row.n_speakers == n and row.speaker_aperture.startswith("line")
    assert cmp.layouts[1].capacity.mean() > cmp.layouts[0].capacity.mean()


RIG = """
[rig]
name = "{name}"
[frequencies]
list = [500.0, 1000.0]
[[speakers]]
shape = "line"
count = {n}
spacing = 0.12
[[microphones]]
shape = "line"
count = 4
spacing = 0.1
center = [0.0, 2.0, 0.0]
"""


def test_command_compares_a_rig_and_a_plan_folder_on_one_table(tmp_path, capsys):
    (tmp_path / "a.toml").write_text(RIG.format(name="small", n=4))
    (tmp_path / "b.toml").write_text(RIG.format(name="large", n=10))
    assert main(["plan", str(tmp_path / "b.toml"), "--out", str(tmp_path / "planb"), "--no-figures",
                 "--freq-hz", "700"]) == 0
    capsys.readouterr()
    out = tmp_path / "cmp"
    status = main(["compare", str(tmp_path / "a.toml"), str(tmp_path / "planb"), "--out", str(out),
                   "--reference-snr-db", "30"])
    text = capsys.readouterr().out
    assert status == 0
    assert "small" in text and "planb" in text and "capacity at reference SNR 30 dB" in text
    doc = json.loads((out / "compare.json").read_text())
    assert doc["reference_snr_db"] == 30.0 and "1 m from one speaker" in doc["reference_snr"]
    assert "strongest channel" in doc["usable_snr"]
    assert doc["format"] == "arrayplan-comparison" and doc["frequencies_hz"] == [500.0, 1000.0]
    assert {p.name for p in out.iterdir()} == {"compare.csv", "compare-by-frequency.csv", "compare.json",
                                               "compare.png", "SHA256SUMS"}


@pytest.mark.parametrize("layouts, word", [(["a.toml"], "at least two"), (["a.toml", "missing.toml"], "not found")])
def test_bad_input_is_one_line_exit_2_and_nothing_written(tmp_path, capsys, monkeypatch, layouts, word):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "a.toml").write_text(RIG.format(name="small", n=4))
    status = main(["compare", *layouts, "--out", "never"])
    err = capsys.readouterr().err
    assert status == 2 and word in err and len(err.strip().splitlines()) == 1
    assert not (tmp_path / "never").exists()


def test_report_shows_a_comparison_section_when_the_project_holds_one(tmp_path, capsys):
    from arrayplan.report.build import build_report

    (tmp_path / "a.toml").write_text(RIG.format(name="small", n=4))
    (tmp_path / "b.toml").write_text(RIG.format(name="large", n=10))
    assert main(["compare", str(tmp_path / "a.toml"), str(tmp_path / "b.toml"), "--out", str(tmp_path / "cmp"),
                 "--no-figures"]) == 0
    capsys.readouterr()
    html = build_report(tmp_path)
    assert "Layout comparison: cmp" in html and "2 layouts compared on 2 frequencies" in html
    assert html.count("<tr>") >= 3 and "large" in html and "small" in html
