"""``arrayplan study capacity``: water-filling against outside references, files, bad input."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy.optimize import minimize

from arrayplan.cli import main
from arrayplan.frequency import FrequencyAxis
from arrayplan.formats.plan_folder import PlanWeights, write_plan
from arrayplan.channels.planning import plan_rig
from arrayplan.rig import Rig
from arrayplan.studies.capacity import band_widths_hz, capacity_study, water_fill
from arrayplan.studies.files import read_capacity_study


def _weights(sv: np.ndarray, hz: list[float]) -> PlanWeights:
    """Plan weights with the given singular values (invented fixture; only the values matter here)."""
    n_f, n_c = sv.shape
    eye = np.broadcast_to(np.eye(n_c, dtype=complex), (n_f, n_c, n_c)).copy()
    names = tuple(f"E{i}" for i in range(n_c))
    return PlanWeights(FrequencyAxis(hz), sv, eye, eye, names, names, {"threshold_db": 3.0, "kernel": "free field"})


@pytest.mark.parametrize("gamma", [[100.0, 10.0, 1.0, 0.01], [3.0, 2.9, 0.5], [1e4, 1e4, 30.0, 2.0, 0.3]])
def test_water_filling_matches_a_numerical_optimiser(gamma):
    gamma = np.asarray(gamma)
    power, level = water_fill(gamma)
    cap = np.sum(np.log2(1 + power * gamma))
    # independent optimum: scipy.optimize (SLSQP) on sum log2(1 + p gamma), p >= 0, sum p = 1
    # (Telatar, Capacity of multi-antenna Gaussian channels, 1999: water-filling is this optimum)
    res = minimize(lambda p: -np.sum(np.log2(1 + np.maximum(p, 0) * gamma)), np.full(gamma.size, 1 / gamma.size),
                   jac=lambda p: -gamma / ((1 + np.maximum(p, 0) * gamma) * np.log(2)),
                   bounds=[(0, 1)] * gamma.size, constraints=[{"type": "eq", "fun": lambda p: np.sum(p) - 1}],
                   method="SLSQP", options={"ftol": 1e-14, "maxiter": 500})
    assert res.success
    assert cap == pytest.approx(-res.fun, abs=1e-6)
    # KKT conditions (Boyd and Vandenberghe, Convex Optimization, 2004, sec. 5.5.3): the active channels share
    # one water level p + 1/gamma = mu, the inactive ones have 1/gamma >= mu, no power is negative, the budget
    # is used exactly
    active = power > 0
    assert np.allclose(power[active] + 1 / gamma[active], level, rtol=1e-12)
    assert np.all(1 / gamma[~active] >= level - 1e-12)
    assert np.all(power >= 0)
    assert np.sum(power) == pytest.approx(1.0, abs=1e-12)


@pytest.mark.parametrize("snr_db", [0.0, 17.0, 40.0])
def test_one_channel_gives_log2_one_plus_snr(snr_db):
    rig = Rig.from_positions(np.array([[0.0, 0.0, 0.0]]), np.array([[0.0, 2.0, 0.0]]))
    study = capacity_study(plan_rig(rig, FrequencyAxis([500.0, 1000.0])), snr_db)
    # Shannon capacity of one Gaussian channel, C = log2(1 + SNR) (Telatar 1999; Shannon 1948)
    assert np.allclose(study.capacity, np.log2(1 + 10 ** (snr_db / 10)), rtol=1e-12)
    assert np.all(study.active == 1)


@pytest.mark.parametrize("snr_db", [5.0, 30.0])
def test_snr_is_that_of_the_strongest_channel_with_all_power_on_it(snr_db):
    # a 4 x 5 free-field rig; G = exp(-jkr) / (4 pi r) and its eigenvalues written here with numpy. The
    # plan's SNR convention: P s_1^2 / N0 = SNR, so the noise is N0 = P s_1^2 / SNR. Water-filling over
    # the eigenvalues of G^H G by bisection on the water level (Telatar 1999), independent of arrayplan.
    spk = np.column_stack([np.linspace(-0.6, 0.6, 4), np.zeros(4), np.zeros(4)])
    mic = np.column_stack([np.linspace(-0.5, 0.5, 5), np.full(5, 1.5), np.full(5, 0.2)])
    hz = np.array([400.0, 1500.0])
    rig = Rig.from_positions(spk, mic, speed_of_sound=343.0)
    r = np.linalg.norm(mic[:, None] - spk[None], axis=-1)
    g = np.exp(-2j * np.pi * hz[:, None, None] / 343.0 * r) / (4 * np.pi * r)
    study = capacity_study(plan_rig(rig, FrequencyAxis(hz)), snr_db)
    for f in range(hz.size):
        lam = np.sort(np.linalg.eigvalsh(np.conj(g[f].T) @ g[f]))[::-1]
        n0 = lam[0] / 10 ** (snr_db / 10)                         # total power P = 1
        lo, hi = 0.0, 1.0 + n0 / lam[-1]
        for _ in range(200):
            mu = (lo + hi) / 2
            lo, hi = (mu, hi) if np.sum(np.maximum(mu - n0 / lam, 0.0)) < 1.0 else (lo, mu)
        p = np.maximum(mu - n0 / lam, 0.0)
        assert study.capacity[0, f] == pytest.approx(np.sum(np.log2(1 + p * lam / n0)), rel=1e-9)


@pytest.mark.parametrize("n", [2, 4, 7])
def test_n_equal_channels_split_the_power(n):
    snr_db = 20.0
    study = capacity_study(_weights(np.full((1, n), 0.3), [1000.0]), snr_db)
    snr = 10 ** (snr_db / 10)
    # n equal parallel channels sharing the power: C = n log2(1 + SNR / n) (Telatar 1999)
    assert study.capacity[0, 0] == pytest.approx(n * np.log2(1 + snr / n), rel=1e-12)
    assert study.equal_capacity[0, 0] == pytest.approx(n * np.log2(1 + snr / n), rel=1e-12)
    assert study.active[0, 0] == n


def test_band_capacity_integrates_over_the_bands_each_frequency_stands_for():
    sv = np.array([[1.0, 0.5], [1.0, 0.2], [1.0, 0.05]])
    hz = [1000.0, 1200.0, 1600.0]
    study = capacity_study(_weights(sv, hz), [10.0, 30.0])
    # bands from midpoint to midpoint, outer bins half their inner spacing (common practice, no source)
    widths = np.array([100 + 100, 100 + 200, 200 + 200])
    assert np.allclose(band_widths_hz(np.array(hz)), widths)
    assert np.allclose(study.band_capacity, study.capacity @ widths)
    # water-filling never carries less than equal power on the strong channels (it is the optimum, Telatar 1999)
    assert np.all(study.capacity >= study.equal_capacity - 1e-12)


def _plan_dir(tmp_path):
    line = np.array([[x, 0.0, 0.0] for x in (-0.3, -0.1, 0.1, 0.3)])
    rig = Rig.from_positions(line, line + [0.0, 1.5, 0.0], frequencies=[600.0, 900.0, 1400.0, 2000.0])
    out = tmp_path / "plan"
    write_plan(plan_rig(rig), out, figures=False)
    return out


def test_cli_writes_tables_sidecar_and_figures(tmp_path, capsys):
    plan = _plan_dir(tmp_path)
    out = tmp_path / "cap"
    assert main(["study", "capacity", str(plan), "--out", str(out), "--snr-db", "10", "30"]) == 0
    stdout = capsys.readouterr().out
    assert "bit/s" in stdout
    names = {p.name for p in out.iterdir()}
    assert {"capacity.csv", "capacity-channels.csv", "capacity-band.csv", "capacity.json", "capacity.npz",
            "capacity.png", "active-channels.png", "water-levels.png"} <= names
    side = json.loads((out / "capacity.json").read_text())
    assert side["format"] == "arrayplan-capacity-study" and side["snr_db"] == [10.0, 30.0]
    study, _ = read_capacity_study(out)
    rows = (out / "capacity.csv").read_text().splitlines()
    assert len(rows) == 1 + 2 * 4
    first = rows[1].split(",")
    assert float(first[2]) == pytest.approx(study.capacity[0, 0], rel=1e-7)


@pytest.mark.parametrize("snr", [["nan"], ["10", "abc"], ["inf"]])
def test_cli_rejects_bad_snr_lists(tmp_path, capsys, snr):
    plan = _plan_dir(tmp_path)
    out = tmp_path / "new" / "cap"
    assert main(["study", "capacity", str(plan), "--out", str(out), "--snr-db", *snr]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "--snr-db" in err
    assert not (tmp_path / "new").exists()


def test_cli_rejects_a_folder_without_weights(tmp_path, capsys):
    plan = _plan_dir(tmp_path)
    (plan / "weights.npz").unlink()
    out = tmp_path / "cap"
    assert main(["study", "capacity", str(plan), "--out", str(out), "--snr-db", "20"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "weights.npz" in err
    assert not out.exists()


def test_report_finds_study_folders_and_gives_a_verdict(tmp_path):
    from arrayplan.report import build_report

    plan = _plan_dir(tmp_path)
    assert main(["study", "capacity", str(plan), "--out", str(tmp_path / "cap"), "--snr-db", "20", "--no-figures"]) == 0
    html = build_report(tmp_path)
    assert "Capacity study: cap" in html
    verdict = json.loads((tmp_path / "cap" / "capacity.json").read_text())["verdict"]
    assert verdict.startswith("Water-filling carries") and verdict.replace("'", "&#x27;") in html
