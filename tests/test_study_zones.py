"""The zones study: acoustic contrast control, pressure matching, figures of merit, the command."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import scipy.linalg

from arrayplan.frequency import FrequencyAxis
from arrayplan.rig import load_rig
from arrayplan.studies.zones import (ZoneTarget, contrast_db, contrast_weights, effort_db, matching_weights,
                                     perturbed_contrast, study_zones)
from arrayplan.rig.zones import select_zones
from helpers import arrayplan_main, first_order_box_coupling

DEMO = Path(__file__).resolve().parents[1] / "demos" / "two-seats" / "rig.toml"


def _random_stack(rng, n_f, n_p, n_s):
    return rng.normal(size=(n_f, n_p, n_s)) + 1j * rng.normal(size=(n_f, n_p, n_s))


def _ratio(w, r_b, r_d):
    return float(np.real(np.conj(w) @ r_b @ w) / np.real(np.conj(w) @ r_d @ w))


def test_contrast_solution_is_the_largest_generalised_eigenvalue_and_no_random_drive_beats_it():
    rng = np.random.default_rng(1)
    g_b, g_d = _random_stack(rng, 3, 6, 4), _random_stack(rng, 3, 5, 4)
    delta = 0.3
    w = contrast_weights(g_b, g_d, delta)
    for f in range(3):
        r_b = np.conj(g_b[f].T) @ g_b[f] / 6
        r_d = np.conj(g_d[f].T) @ g_d[f] / 5 + delta * np.eye(4)
        # source: generalised Hermitian eigenproblem solved by scipy.linalg.eigh (LAPACK); Choi and Kim,
        # JASA 111(4), 2002: the maximum contrast is the largest generalised eigenvalue
        lam_max = scipy.linalg.eigh(r_b, r_d, eigvals_only=True)[-1]
        assert _ratio(w[f], r_b, r_d) == pytest.approx(lam_max, rel=1e-10)
        trials = rng.normal(size=(2000, 4)) + 1j * rng.normal(size=(2000, 4))
        ratios = (np.real(np.einsum("ts,su,tu->t", np.conj(trials), r_b, trials))
                  / np.real(np.einsum("ts,su,tu->t", np.conj(trials), r_d, trials)))
        assert ratios.max() <= lam_max * (1 + 1e-12)


def test_pressure_matching_is_least_squares_without_regularisation_and_the_closed_form_with_it():
    rng = np.random.default_rng(2)
    g_b, g_d = _random_stack(rng, 2, 5, 3), _random_stack(rng, 2, 4, 3)
    p_t = rng.normal(size=(2, 5)) + 1j * rng.normal(size=(2, 5))
    g = np.concatenate([g_b, g_d], axis=1)
    p = np.concatenate([p_t, np.zeros((2, 4))], axis=1)
    w0 = matching_weights(g_b, g_d, p_t, 0.0)
    w1 = matching_weights(g_b, g_d, p_t, 0.7)
    for f in range(2):
        # source: numpy.linalg.lstsq (LAPACK gelsd), the unregularised least-squares solution
        np.testing.assert_allclose(w0[f], np.linalg.lstsq(g[f], p[f], rcond=None)[0], rtol=1e-10)
        # source: Tikhonov closed form (G^H G + beta I)^-1 G^H p, S. J. Elliott et al., IEEE TASLP 20(7), 2012
        gh = np.conj(g[f].T)
        np.testing.assert_allclose(w1[f], np.linalg.inv(gh @ g[f] + 0.7 * np.eye(3)) @ gh @ p[f], rtol=1e-10)


def test_two_speakers_two_points_worked_by_hand():
    # Worked by hand (closed form): bright point coupling g_b = [1, 1], dark point g_d = [1, 0], delta = 1.
    # R_d + I = diag(2, 1); the optimum is w ~ (R_d + I)^-1 g_b = [1/2, 1] ~ [1, 2], eigenvalue
    # g_b^H (R_d + I)^-1 g_b = 3/2; its true contrast |1 + 2|^2 / |1|^2 = 9.
    g_b = np.array([[[1.0, 1.0]]], dtype=complex)
    g_d = np.array([[[1.0, 0.0]]], dtype=complex)
    w = contrast_weights(g_b, g_d, 1.0)[0]
    w = w / w[0]
    np.testing.assert_allclose(w, [1.0, 2.0], atol=1e-12)
    assert contrast_db(w[None], g_b, g_d)[0] == pytest.approx(10 * np.log10(9.0), abs=1e-12)
    # Pressure matching by hand: [[1, 1], [1, 0]] w = [1, 0] gives w = [0, 1].
    np.testing.assert_allclose(matching_weights(g_b, g_d, np.array([[1.0 + 0j]]), 0.0)[0], [0.0, 1.0], atol=1e-12)
    # Effort of the reference speaker alone is 0 dB by definition (Elliott et al., IEEE TASLP 20(7), 2012).
    assert effort_db(np.array([[1.0, 0.0]], dtype=complex), g_b, g_b[:, :, 0])[0] == pytest.approx(0.0, abs=1e-12)


def test_empty_dark_zone_is_plain_least_squares():
    rng = np.random.default_rng(3)
    g_b = _random_stack(rng, 2, 6, 3)
    p_t = rng.normal(size=(2, 6)) + 0j
    w = matching_weights(g_b, np.zeros((2, 0, 3), dtype=complex), p_t, 0.0)
    for f in range(2):
        # source: numpy.linalg.lstsq on the bright rows alone
        np.testing.assert_allclose(w[f], np.linalg.lstsq(g_b[f], p_t[f], rcond=None)[0], rtol=1e-10)


def test_swapping_bright_and_dark_gives_the_reciprocal_of_the_minimum_ratio():
    rng = np.random.default_rng(4)
    g_b, g_d = _random_stack(rng, 2, 7, 3), _random_stack(rng, 2, 6, 3)
    w = contrast_weights(g_d, g_b, 0.0)                   # swapped, unregularised
    swapped = contrast_db(w, g_d, g_b)
    for f in range(2):
        r_b = np.conj(g_b[f].T) @ g_b[f] / 7
        r_d = np.conj(g_d[f].T) @ g_d[f] / 6
        # source: scipy.linalg.eigh, smallest generalised eigenvalue = minimum of the Rayleigh quotient
        lam_min = scipy.linalg.eigh(r_b, r_d, eigvals_only=True)[0]
        assert swapped[f] == pytest.approx(-10 * np.log10(lam_min), abs=1e-8)


def test_demo_rig_zones_and_study_on_a_perturbed_rig():
    rig = load_rig(DEMO)
    assert [(z.name, z.role, len(z)) for z in rig.zones] == [("seat-A", "bright", 16), ("seat-B", "dark", 16),
                                                            ("mics-B", "dark", 2)]
    assert rig.zones[2].mic_indices == (2, 3)
    bright = select_zones(rig.zones, ["seat-A"], "bright", "t")
    dark = select_zones(rig.zones, ["seat-B"], "dark", "t")
    axis = FrequencyAxis([200.0, 800.0])
    study = study_zones(rig, bright, dark, axis, target=ZoneTarget.plane([0, 1, 0]), regularisation=[1e-3, 1e-1])
    acc = study.results["contrast"]
    # more regularisation trades contrast for effort (Elliott et al., IEEE TASLP 20(7), 2012)
    assert np.all(acc.contrast_db[0] >= acc.contrast_db[1]) and np.all(acc.effort_db[0] >= acc.effort_db[1])
    # contrast control maximises the (lightly regularised) contrast, so it beats pressure matching at equal reg.
    assert np.all(acc.contrast_db[0] > study.results["matching"].contrast_db[0])
    tiny = perturbed_contrast(rig, bright, dark, acc.weights[0], axis, sigma_m=1e-9, trials=2)
    np.testing.assert_allclose(tiny, np.broadcast_to(acc.contrast_db[0], tiny.shape), atol=1e-3)
    big = perturbed_contrast(rig, bright, dark, acc.weights[0], axis, sigma_m=0.02, trials=8, seed=5)
    assert np.median(big) < acc.contrast_db[0].mean()     # contrast control is fragile to position errors


def test_command_writes_tables_figures_and_filters_whose_contrast_matches_the_design(tmp_path, capsys):
    out = tmp_path / "z"
    r = arrayplan_main(capsys, "study", "zones", DEMO, "--bright", "seat-A", "--dark", "seat-B", "--out", out,
                       "--freq-hz", "300", "--freq-hz", "600", "--regularisation", "0.01,0.1", "--filters", "contrast",
                       "--taps", "1024", "--rate-hz", "8000", "--band-hz", "300", "600", "--tolerance-m", "0.005",
                       "--trials", "3")
    assert r.returncode == 0, r.stderr
    assert "contrast realised" in r.stdout
    names = {p.name for p in out.iterdir()}
    assert {"zones.json", "zones-metrics.csv", "zones-weights.csv", "zone-drive.wav", "zone-filter-check.csv",
            "zones-field.png", "zones-tradeoff.png", "zones-metrics.png", "zones-tolerance.png"} <= names
    doc = json.loads((out / "zones.json").read_text())
    assert doc["filters"]["taps"] == 1024
    rows = np.loadtxt(out / "zone-filter-check.csv", delimiter=",", skiprows=1)
    # common practice, no source: a FIR of 1024 taps realises a smooth response to within a dB or so
    interior = rows[(rows[:, 0] > 340) & (rows[:, 0] < 560)]
    assert np.max(np.abs(interior[:, 1] - interior[:, 2])) < 1.5


@pytest.mark.parametrize("extra, rig_text, word", [
    (["--dark", "seat-A"], None, "overlap"),
    (["--target-direction", "0,0,0"], None, "zero length"),
    (["--regularisation", "0.1,-1"], None, "--regularisation"),
    ([], 'members = []', "members"),
])
def test_bad_input_is_one_line_exit_2_and_nothing_written(tmp_path, capsys, extra, rig_text, word):
    rig = DEMO
    if rig_text is not None:
        text = DEMO.read_text().replace('members = ["B1", "B2"]', rig_text)
        rig = tmp_path / "rig.toml"
        rig.write_text(text)
    out = tmp_path / "never"
    r = arrayplan_main(capsys, "study", "zones", rig, "--out", out, "--bright", "seat-A", *extra)
    assert r.returncode == 2
    assert len(r.stderr.strip().splitlines()) == 1 and word in r.stderr
    assert not out.exists()


def test_filters_too_short_for_the_delay_spread_to_the_zone_points_are_refused(tmp_path, capsys):
    # a FIR drive filter must hold the spread of arrival times from the speakers to the points it serves,
    # (max r - min r) / c in samples, or the far arrivals wrap around (common practice, no source);
    # the spread is computed here from the rig's positions with numpy
    rig = load_rig(DEMO)
    pts = np.vstack([z.positions for z in rig.zones if z.name in ("seat-A", "seat-B")])
    r = np.linalg.norm(pts[:, None] - rig.speakers.positions[None], axis=-1)
    spread = (r.max() - r.min()) / rig.medium.speed_of_sound * 48000.0
    taps = int(np.floor(spread))                     # shorter than the spread itself
    out = tmp_path / "never"
    got = arrayplan_main(capsys, "study", "zones", DEMO, "--bright", "seat-A", "--dark", "seat-B", "--out", out,
                         "--freq-hz", "500", "--filters", "contrast", "--rate-hz", "48000", "--taps", max(taps, 16),
                         "--band-hz", "300", "900")
    assert got.returncode == 2 and "--taps" in got.stderr and "delay spread" in got.stderr
    assert len(got.stderr.strip().splitlines()) == 1 and not out.exists()


def test_measured_responses_give_the_free_field_design_when_they_are_the_free_field(tmp_path, capsys):
    from arrayplan.formats.irset import write_irset
    from arrayplan.kernels.model_irs import free_field_irset

    text = DEMO.read_text() + '\n[[zones]]\nname = "mics-A"\nrole = "bright"\nmembers = ["A1", "A2"]\n'
    rig_path = tmp_path / "rig.toml"
    rig_path.write_text(text)
    rig = load_rig(rig_path)
    write_irset(tmp_path / "irs", free_field_irset(rig, 8000.0, 4096, zero_lag_samples=256))
    runs = {}
    for name, extra in (("free", []), ("measured", ["--irset", tmp_path / "irs"])):
        r = arrayplan_main(capsys, "study", "zones", rig_path, "--bright", "mics-A", "--dark", "mics-B", "--out",
                           tmp_path / name, "--freq-hz", "300", "--freq-hz", "900", "--regularisation", "0.01",
                           "--no-figures", "--filters", "matching", "--rate-hz", "8000", "--taps", "512", "--band-hz",
                           "300", "900", *extra)
        assert r.returncode == 0, r.stderr
        runs[name] = json.loads((tmp_path / name / "zones.json").read_text())
    # the DTFT of band-limited sampled responses reproduces the free field below Nyquist
    # (Oppenheim and Schafer, Discrete-Time Signal Processing, sampling theorem)
    for method in ("contrast", "matching"):
        assert runs["measured"]["chosen"][method]["mean_contrast_db"] == pytest.approx(
            runs["free"]["chosen"][method]["mean_contrast_db"], abs=0.05)
    assert runs["measured"]["filters"]["band_contrast_realised_db"] == pytest.approx(
        runs["free"]["filters"]["band_contrast_realised_db"], abs=0.5)
    r = arrayplan_main(capsys, "study", "zones", rig_path, "--bright", "seat-A", "--dark", "mics-B", "--out",
                       tmp_path / "never", "--irset", tmp_path / "irs")
    assert r.returncode == 2 and "control points" in r.stderr and not (tmp_path / "never").exists()


ROOM_ZONES = """
[frequencies]
list = [250.0, 500.0]
[[speakers]]
shape = "line"
count = 4
spacing = 0.25
center = [2.0, 0.6, 1.2]
direction = [1.0, 0.0, 0.0]
[[microphones]]
name = "M"
position = [2.0, 2.0, 1.2]
[[zones]]
name = "left"
role = "bright"
shape = "line"
count = 3
spacing = 0.1
center = [1.4, 2.4, 1.2]
direction = [1.0, 0.0, 0.0]
[[zones]]
name = "right"
role = "dark"
shape = "line"
count = 3
spacing = 0.1
center = [2.6, 2.4, 1.2]
direction = [1.0, 0.0, 0.0]
[room]
size_m = [4.0, 3.5, 2.6]
absorption = 0.5
reflection_order = 1
"""


def test_zones_in_a_room_use_the_room(tmp_path):
    # first-order image sources written with numpy in tests/helpers.py (J. B. Allen and D. A. Berkley,
    # JASA 65(4), 1979): the direct path and the six mirror images across the walls of the box [0, L], each
    # exp(-jkr) / (4 pi r) times the reflection coefficient beta = sqrt(1 - alpha); the acoustic contrast
    # of the study's weights is then mean |p_bright|^2 / mean |p_dark|^2 (Choi and Kim, JASA 111(4), 2002)
    path = tmp_path / "rig.toml"
    path.write_text(ROOM_ZONES)
    rig = load_rig(path)
    axis = FrequencyAxis([250.0, 500.0])
    bright, dark = select_zones(rig.zones, ["left"], "bright", "t"), select_zones(rig.zones, ["right"], "dark", "t")
    study = study_zones(rig, bright, dark, axis, target=ZoneTarget.plane([0.0, 1.0, 0.0]), regularisation=[0.01])
    assert study.kernel_name == "room"
    size, beta, c = np.array([4.0, 3.5, 2.6]), np.sqrt(1 - 0.5), rig.medium.speed_of_sound
    spk = rig.speakers.positions
    g_b, g_d = (first_order_box_coupling(spk, zone[0].positions, axis.hz, size, beta, c) for zone in (bright, dark))
    for key, res in study.results.items():
        w = res.weights[0]
        e_b = np.mean(np.abs(np.einsum("fps,fs->fp", g_b, w)) ** 2, axis=1)
        e_d = np.mean(np.abs(np.einsum("fps,fs->fp", g_d, w)) ** 2, axis=1)
        np.testing.assert_allclose(res.contrast_db[0], 10 * np.log10(e_b / e_d), atol=1e-9, err_msg=key)
