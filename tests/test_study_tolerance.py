"""``arrayplan study tolerance``: Monte Carlo against perturbation theory and outside bounds, files, bad input."""

from __future__ import annotations

import json

import numpy as np
import pytest

from arrayplan.cli import main
from arrayplan.frequency import FrequencyAxis
from arrayplan.formats.plan_folder import write_plan
from arrayplan.channels.planning import plan_rig
from arrayplan.rig import Rig
from arrayplan.studies.tolerance import tolerance_problem, tolerance_study, white_noise_gain_db
from arrayplan.studies.trials import perturbed_couplings
from helpers import arrayplan_main, first_order_box_coupling

HZ = [700.0, 1300.0]


def _facing_squares():
    """Invented fixture: a 4 x 4 square grid of speakers facing one of microphones 1 m away (degenerate channels)."""
    g = np.array([[x, y] for x in (-0.15, -0.05, 0.05, 0.15) for y in (-0.15, -0.05, 0.05, 0.15)])
    return Rig.from_positions(np.c_[g, np.zeros(16)], np.c_[g, np.ones(16)])


def _scattered():
    """Invented fixture: 5 speakers and 6 microphones at irregular places (no degeneracy)."""
    rng = np.random.default_rng(7)
    return Rig.from_positions(np.c_[rng.uniform(-0.4, 0.4, (5, 2)), np.zeros(5)],
                              np.c_[rng.uniform(-0.5, 0.5, (6, 2)), np.full(6, 1.2)])


def test_weyl_bound_holds_in_every_trial():
    plan = plan_rig(_scattered(), FrequencyAxis(HZ))
    problem = tolerance_problem(plan, position_sd_m=2e-3, gain_sd_db=1.0, phase_sd_deg=5.0, seed=3)
    study = tolerance_study(plan, position_sd_m=2e-3, gain_sd_db=1.0, phase_sd_deg=5.0, n_trials=30, seed=3)
    g0 = problem.couplings_at(np.zeros((5, 3)), np.zeros((6, 3)))
    sv = plan.channels.singular_values
    for t in range(30):
        e = perturbed_couplings(problem, t) - g0
        norm = np.linalg.norm(e, ord=2, axis=(1, 2))                  # spectral norm per frequency
        # Weyl's inequality for singular values: |s_i(G + E) - s_i(G)| <= ||E||_2 (H. Weyl, 1912;
        # G. W. Stewart and J.-G. Sun, Matrix Perturbation Theory, 1990, ch. IV)
        moved = np.abs(study.trials.strength[t] - sv)
        assert np.all(moved <= norm[:, None] * (1 + 1e-10))
        # the realised gain with fixed unit-norm weights moves by |u^H E v| <= ||E||_2 (same source)
        realised = sv * 10 ** (study.trials.gain_db[t] / 20)
        assert np.all(np.abs(realised - sv) <= norm[:, None] * (1 + 1e-10))


@pytest.mark.parametrize("make_rig", [_scattered, _facing_squares])
def test_first_order_gain_spread_agrees_with_monte_carlo_at_small_errors(make_rig):
    plan = plan_rig(make_rig(), FrequencyAxis(HZ))
    # channels within 20 dB are judged: on the facing squares that takes in the degenerate pair 2-3
    study = tolerance_study(plan, position_sd_m=1e-4, gain_sd_db=0.02, phase_sd_deg=0.1, n_trials=400, seed=11,
                            threshold_db=20.0)
    use = study.judged
    assert use[:, :3].all() and not np.any(study.beyond_first_order)
    # first-order perturbation of the channel gain with fixed weights (Stewart and Sun, Matrix Perturbation
    # Theory, 1990): Monte Carlo standard deviation within 10 %
    ratio = study.gain_sd_db[use] / study.predicted_gain_sd_db[use]
    assert np.all(np.abs(ratio - 1) < 0.10), ratio
    # re-planned strengths: first order with degenerate clusters as blocks, within 10 %
    ratio = study.strength_sd_db[use] / study.predicted_strength_sd_db[use]
    assert np.all(np.abs(ratio - 1) < 0.10), ratio


def test_degenerate_clusters_need_the_block_prediction():
    plan = plan_rig(_facing_squares(), FrequencyAxis([1000.0]))
    sv = plan.channels.singular_values[0]
    assert np.isclose(sv[1], sv[2], rtol=1e-9)                          # the fixture is degenerate
    study = tolerance_study(plan, position_sd_m=1e-4, n_trials=50, seed=5)
    problem = tolerance_problem(plan, position_sd_m=1e-4, seed=5)
    g0 = problem.couplings_at(np.zeros((16, 3)), np.zeros((16, 3)))
    top = np.arange(6)
    block_res, plain_res = [], []
    for t in range(50):
        e = perturbed_couplings(problem, t)[0] - g0[0]
        proj = plan.channels.combine[0].T @ e @ plan.channels.drive[0]
        # plain per-channel first-order formula s_j + Re(u_j^H E v_j), written here independently
        plain = -np.sort(-(sv + np.real(np.diag(proj))))
        exact = np.linalg.svd(g0[0] + e, compute_uv=False)             # numpy's SVD as the reference
        block_res.append(np.max(np.abs(study.trials.predicted_strength[t, 0, top] - exact[top]) / sv[0]))
        plain_res.append(np.max(np.abs(plain[top] - exact[top]) / sv[0]))
    # with blocks the residual is second order; the plain formula misses the cluster's splitting
    # (Stewart and Sun 1990, degenerate singular values)
    assert max(block_res) < 0.1 * max(plain_res)


def test_same_seed_same_results_whatever_the_chunking_and_other_seeds_agree_statistically():
    plan = plan_rig(_scattered(), FrequencyAxis(HZ))
    kw = dict(position_sd_m=3e-3, gain_sd_db=0.5, phase_sd_deg=3.0, n_trials=120)
    a = tolerance_study(plan, seed=1, chunk_size=7, **kw)
    b = tolerance_study(plan, seed=1, chunk_size=50, **kw)
    for name in ("gain_db", "crosstalk_db", "strength", "predicted_strength"):
        assert np.array_equal(getattr(a.trials, name), getattr(b.trials, name), equal_nan=True)
    c = tolerance_study(plan, seed=2, **kw)
    assert not np.array_equal(a.trials.gain_db, c.trials.gain_db)
    # two independent samples of the same distribution: means differ by less than 4 standard errors
    # (common practice, no source)
    n = kw["n_trials"]
    use = a.judged
    se = np.sqrt(a.gain_sd_db ** 2 / n + c.gain_sd_db ** 2 / n)
    diff = np.abs(a.trials.gain_db.mean(axis=0) - c.trials.gain_db.mean(axis=0))
    assert np.all(diff[use] < 4 * se[use])
    p = 0.5 * (a.survival + c.survival)
    se_p = np.sqrt(np.maximum(p * (1 - p), 1 / n) * 2 / n)
    assert np.all(np.abs(a.survival - c.survival)[use] < 4 * se_p[use] + 1e-12)


def test_white_noise_gain_of_an_in_phase_beam_is_the_element_count():
    # a short line of speakers far from a short line of microphones: the strongest channel adds the
    # speakers in phase, and a beam that does has a white-noise gain equal to the number of elements
    # (H. Cox, R. Zeskind and M. Kooij, IEEE Trans. ASSP 35(10), 1987)
    n_s = 6
    spk = np.array([[0.01 * i, 0.0, 0.0] for i in range(n_s)])
    mic = np.array([[0.01 * i, 200.0, 0.0] for i in range(3)])
    plan = plan_rig(Rig.from_positions(spk, mic), FrequencyAxis([100.0]))
    problem = tolerance_problem(plan)
    g = problem.couplings_at(np.zeros((n_s, 3)), np.zeros((3, 3)))
    ch = plan.channels
    wng_s, _ = white_noise_gain_db(ch.singular_values, ch.drive, ch.combine, g)
    assert 10 ** (wng_s[0, 0] / 10) == pytest.approx(n_s, rel=1e-3)


def test_white_noise_gain_is_the_inverse_sensitivity_to_uncorrelated_errors():
    plan = plan_rig(_scattered(), FrequencyAxis([900.0]))
    ch = plan.channels
    g = tolerance_problem(plan).couplings_at(np.zeros((5, 3)), np.zeros((6, 3)))
    wng_s, wng_m = white_noise_gain_db(ch.singular_values, ch.drive, ch.combine, g)
    rng = np.random.default_rng(0)
    sigma, n = 0.01, 4000
    eps = sigma * (rng.standard_normal((n, 5)) + 1j * rng.standard_normal((n, 5))) / np.sqrt(2)
    # error power radiated by uncorrelated speaker errors, per unit wanted power: sigma^2 / WNG
    # (E. N. Gilbert and S. P. Morgan, Bell System Technical Journal 34, 1955: sensitivity = 1 / WNG)
    for j in range(3):
        err = g[0] @ (eps * ch.drive[0, :, j]).T                        # (n_mic, n)
        ratio = np.mean(np.sum(np.abs(err) ** 2, axis=0)) / ch.singular_values[0, j] ** 2
        assert ratio == pytest.approx(sigma ** 2 / 10 ** (wng_s[0, j] / 10), rel=0.06)
    assert np.all(np.isfinite(wng_m))


def test_kernel_builder_is_used_for_the_perturbed_rig():
    plan = plan_rig(_scattered(), FrequencyAxis(HZ))
    calls = []

    def builder(speakers, mics, medium):
        from arrayplan.kernels.freefield import FreeFieldKernel
        calls.append(speakers.positions.copy())
        return FreeFieldKernel.between(speakers, mics, medium)

    tolerance_study(plan, position_sd_m=1e-3, n_trials=3, seed=0, kernel_builder=builder)
    moved = [c for c in calls if np.max(np.abs(c - plan.rig.speakers.positions)) > 1e-4]
    assert len(moved) >= 3                                              # one perturbed rig per trial


def _plan_dir(tmp_path, rig=None):
    out = tmp_path / "plan"
    write_plan(plan_rig(rig or _scattered(), FrequencyAxis(HZ)), out, figures=False)
    return out


def test_cli_writes_tables_sidecar_and_figures(tmp_path, capsys):
    plan = _plan_dir(tmp_path)
    out = tmp_path / "tol"
    assert main(["study", "tolerance", str(plan), "--out", str(out), "--position-mm", "1", "--gain-db", "0.5",
                 "--trials", "20", "--seed", "4"]) == 0
    stdout = capsys.readouterr().out
    assert "isolation" in stdout
    names = {p.name for p in out.iterdir()}
    assert {"tolerance.csv", "tolerance.json", "tolerance.npz", "tolerance-trials.npz", "gain-spread.png",
            "survival.png"} <= names
    side = json.loads((out / "tolerance.json").read_text())
    assert side["format"] == "arrayplan-tolerance-study" and side["settings"]["n_trials"] == 20
    assert side["settings"]["coupling_model"] == "direct"
    rows = (out / "tolerance.csv").read_text().splitlines()
    assert len(rows) == 1 + len(HZ) * 5


@pytest.mark.parametrize("threshold", [None, 3.0, 25.0])
def test_cli_threshold_decides_the_channels_in_use(tmp_path, capsys, threshold):
    # channels in use: singular values within the threshold of the strongest, from numpy's SVD of
    # G = exp(-jkr) / (4 pi r) written here (D. A. B. Miller, Applied Optics 39(11), 2000: the
    # channels are the SVD of G); without the option the plan's own threshold applies
    rig = _scattered()
    plan = tmp_path / "plan"
    write_plan(plan_rig(rig, FrequencyAxis(HZ), threshold_db=6.0), plan, figures=False)
    out = tmp_path / "tol"
    extra = [] if threshold is None else ["--threshold-db", str(threshold)]
    assert main(["study", "tolerance", str(plan), "--out", str(out), "--gain-db", "0.5", "--trials", "4",
                 "--no-figures", *extra]) == 0
    spk, mic = rig.speakers.positions, rig.mics.positions
    r = np.linalg.norm(mic[:, None] - spk[None], axis=-1)
    hz = np.array(HZ)
    g = np.exp(-2j * np.pi * hz[:, None, None] / rig.medium.speed_of_sound * r) / (4 * np.pi * r)
    s = np.linalg.svd(g, compute_uv=False)
    strong = 20 * np.log10(s / s[:, :1]) >= -(6.0 if threshold is None else threshold)
    rows = [line.split(",") for line in (out / "tolerance.csv").read_text().splitlines()[1:]]
    in_use = np.array([int(row[2]) for row in rows]).reshape(len(HZ), -1).astype(bool)
    np.testing.assert_array_equal(in_use, strong)
    side = json.loads((out / "tolerance.json").read_text())
    assert side["settings"]["threshold_db"] == (6.0 if threshold is None else threshold)


@pytest.mark.parametrize("args, flag", [(["--trials", "-5", "--position-mm", "1"], "--trials"),
                                        (["--threshold-db", "-3", "--gain-db", "1"], "--threshold-db"),
                                        (["--position-mm", "-1"], "--position-mm"),
                                        (["--gain-db", "nan"], "--gain-db"),
                                        (["--phase-deg", "x"], "--phase-deg")])
def test_cli_rejects_bad_numbers(tmp_path, capsys, args, flag):
    plan = _plan_dir(tmp_path)
    out = tmp_path / "new" / "tol"
    status, _, err = arrayplan_main(capsys, "study", "tolerance", plan, "--out", out, *args)
    assert status == 2
    err = err.strip()
    assert len(err.splitlines()) == 1 and flag in err
    assert not (tmp_path / "new").exists()


def test_cli_measured_plan_without_positions_says_what_it_needs(tmp_path, capsys):
    plan = _plan_dir(tmp_path)
    side = json.loads((plan / "weights.json").read_text())
    side["kernel"] = "measured impulse responses"
    del side["speaker_positions_m"], side["mic_positions_m"]
    (plan / "weights.json").write_text(json.dumps(side))
    (plan / "SHA256SUMS").unlink()          # a folder edited by hand carries no checksums
    out = tmp_path / "tol"
    assert main(["study", "tolerance", str(plan), "--out", str(out), "--position-mm", "1"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "positions" in err and "weights.json" in err
    assert not out.exists()
    # the capacity study needs no positions
    assert main(["study", "capacity", str(plan), "--out", str(tmp_path / "cap"), "--snr-db", "20"]) == 0
    assert "your assumption" in capsys.readouterr().out


def test_cli_rejects_a_folder_without_weights(tmp_path, capsys):
    plan = _plan_dir(tmp_path)
    (plan / "weights.json").unlink()
    assert main(["study", "tolerance", str(plan), "--out", str(tmp_path / "tol"), "--gain-db", "1"]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and "weights.json" in err
    assert not (tmp_path / "tol").exists()


def test_trial_chunks_can_run_in_worker_processes():
    from concurrent.futures import ProcessPoolExecutor

    plan = plan_rig(_scattered(), FrequencyAxis(HZ))
    kw = dict(position_sd_m=1e-3, gain_sd_db=0.3, n_trials=12, seed=9, chunk_size=4)
    here = tolerance_study(plan, **kw)
    with ProcessPoolExecutor(max_workers=1) as pool:
        spread = tolerance_study(plan, map_chunks=pool.map, **kw)
    assert np.array_equal(here.trials.gain_db, spread.trials.gain_db)


def test_a_room_plan_perturbs_the_room():
    # with no error the trial's coupling is the room's: the direct path and the six first-order images
    # across the walls of the box [0, L], each exp(-jkr) / (4 pi r) times beta = sqrt(1 - alpha), written
    # with numpy in tests/helpers.py (J. B. Allen and D. A. Berkley, JASA 65(4), 1979); the planned weights see it
    from dataclasses import replace
    from arrayplan.rig.room import Room

    spk = np.array([[1.0, 0.8, 1.1], [1.6, 0.8, 1.2], [2.2, 0.9, 1.0]])
    mic = np.array([[1.2, 2.5, 1.3], [1.9, 2.6, 1.2], [2.4, 2.4, 1.4], [1.5, 2.2, 1.0]])
    rig = replace(Rig.from_positions(spk, mic, speed_of_sound=343.0),
                  room=Room.uniform((3.5, 3.2, 2.5), 0.4, reflection_order=1))
    plan = plan_rig(rig, FrequencyAxis(HZ))
    assert plan.kernel_name == "room"
    problem = tolerance_problem(plan, gain_sd_db=0.0)
    assert problem.model == "direct"
    size, beta, hz = np.array([3.5, 3.2, 2.5]), np.sqrt(1 - 0.4), np.array(HZ)
    g = first_order_box_coupling(spk, mic, hz, size, beta, 343.0)
    np.testing.assert_allclose(perturbed_couplings(problem, 0), g, rtol=1e-9)
