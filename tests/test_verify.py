"""Verification of planned channels against (simulated) measured impulse responses, API and CLI."""

from __future__ import annotations

import csv
import json

import matplotlib
import numpy as np
import pytest
import soundfile as sf

from arrayplan.frequency import FrequencyAxis
from arrayplan.formats.irset import IRSet, read_irset, write_irset
from arrayplan.kernels.measured import MeasuredKernel
from arrayplan.formats.plan_folder import read_weights, write_plan
from arrayplan.plots.verify import plot_singular_values
from arrayplan.channels.planning import plan_rig
from arrayplan.rig import Rig
from arrayplan.kernels.model_irs import free_field_irset
from arrayplan.verification.channels import verify_plan
from helpers import arrayplan_main

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

FS = 48000.0
N = 4096
C = 343.2
HZ = np.array([100, 200, 300]) * FS / N      # FFT bins, where the simulated record is exact


def _rig(shift=None) -> Rig:
    spk = np.c_[np.linspace(-0.3, 0.3, 4), np.zeros(4), np.zeros(4)]
    mic = np.c_[np.linspace(-0.3, 0.3, 4), np.full(4, 1.0), np.zeros(4)]
    return Rig.from_positions(spk, mic if shift is None else mic + shift, speed_of_sound=C)


@pytest.fixture()
def plan_dir(tmp_path):
    folder = tmp_path / "plan"
    write_plan(plan_rig(_rig(), FrequencyAxis(HZ)), folder, figures=False)
    return folder


def _irset_dir(tmp_path, rig, name="irs", irs=None):
    folder = tmp_path / name
    write_irset(folder, irs if irs is not None else free_field_irset(rig, FS, N))
    return folder


def test_perfect_rig_reproduces_plan(plan_dir, tmp_path):
    # Channels of the SVD: combine^T G drive = diag(s) (Miller, Applied Optics 39(11), 2000).
    weights = read_weights(plan_dir)
    irs = read_irset(_irset_dir(tmp_path, _rig()))
    res = verify_plan(weights, MeasuredKernel(irs), channels="all")
    np.testing.assert_allclose(res.gain_db, 0.0, atol=1e-3)           # float32 storage
    assert res.crosstalk_db.max() < -60.0
    assert res.judged.all() and res.common_gain_db == pytest.approx(0.0, abs=1e-3)
    np.testing.assert_allclose(res.measured_sv, res.planned_sv, rtol=0, atol=2e-5 * res.planned_sv.max())
    assert res.max_angle_deg.max() < 0.1
    assert np.all(res.passed)


def test_names_in_another_order_are_matched(plan_dir, tmp_path):
    irs = free_field_irset(_rig(), FS, N)
    perm_s, perm_m = [2, 0, 3, 1], [1, 3, 0, 2]
    shuffled = IRSet(irs.data[:, perm_m][:, :, perm_s], FS, [irs.speaker_names[i] for i in perm_s],
                     [irs.mic_names[i] for i in perm_m])
    res = verify_plan(read_weights(plan_dir), MeasuredKernel(shuffled), channels="all")
    np.testing.assert_allclose(res.gain_db, 0.0, atol=1e-6)


def test_moved_mics_raise_crosstalk_and_subspace_angle(plan_dir, tmp_path):
    # First-order perturbation (Golub & Van Loan, Matrix Computations, 2013): crosstalk and the
    # subspace angle both grow linearly with a small displacement.
    rng = np.random.default_rng(5)
    direction = rng.uniform(-1, 1, (4, 3))
    weights = read_weights(plan_dir)
    xt, ang = [], []
    for mm in (0.5, 1.0):
        res = verify_plan(weights, MeasuredKernel(free_field_irset(_rig(direction * mm * 1e-3), FS, N)),
                          channels="all")
        xt.append(10 ** (res.crosstalk_db.max() / 20))
        ang.append(res.max_angle_deg.max())
    assert xt[1] / xt[0] == pytest.approx(2.0, rel=0.1)
    assert ang[1] / ang[0] == pytest.approx(2.0, rel=0.1)


def _level_db(weights):
    return 20 * np.log10(weights.singular_values / weights.singular_values[:, :1])


def test_default_wanted_channels_are_the_strong_ones_judged_where_strong(plan_dir, tmp_path):
    # The plan's own definition of strong: within threshold_db (3 dB here) of the strongest.
    weights = read_weights(plan_dir)
    res = verify_plan(weights, MeasuredKernel(free_field_irset(_rig(), FS, N)))
    strong = _level_db(weights) >= -3.0 - 1e-9
    np.testing.assert_array_equal(res.channels, np.flatnonzero(strong.any(axis=0)))
    np.testing.assert_array_equal(res.judged, strong[:, res.channels])
    assert not res.judged.all()                                       # some channel is weak somewhere
    assert np.all(np.isnan(res.gain_db[~res.judged])) and np.all(np.isfinite(res.gain_db[res.judged]))
    np.testing.assert_allclose(res.gain_db[res.judged], 0.0, atol=1e-3)
    assert not res.lost[~res.judged].any()
    assert "judged only where strong" in res.wanted_rule


def test_weak_channels_fail_first_and_are_left_out_by_default(tmp_path):
    # First-order perturbation (Golub & Van Loan, Matrix Computations, 2013): a small error E leaks
    # about |E| s_strong into a channel of gain s_weak, so the weakest channel loses isolation first.
    # At 1172 and 3516 Hz channel 4 is 22 and 10 dB below the strongest: never strong.
    plan = tmp_path / "plan"
    write_plan(plan_rig(_rig(), FrequencyAxis(HZ[[0, 2]])), plan, figures=False)
    weights = read_weights(plan)
    assert np.all(_level_db(weights)[:, 3] < -3.0)
    rng = np.random.default_rng(5)
    moved = MeasuredKernel(free_field_irset(_rig(rng.uniform(-1, 1, (4, 3)) * 1e-3), FS, N))  # 1 mm
    every = verify_plan(weights, moved, channels="all")
    default = verify_plan(weights, moved)
    assert list(every.passed) == [True, True, True, False]
    assert list(default.channels) == [0, 1, 2] and default.passed.all()
    assert "channels 4 are never strong" in default.wanted_rule


@pytest.mark.parametrize("scale", [0.0123, 3.7])
def test_common_reference_recovers_a_known_scale(plan_dir, tmp_path, scale):
    # A full-scale measurement is the true G times one unknown factor; the fitted common factor must
    # come back as 20 log10(scale) within 0.01 dB (exact arithmetic, common practice, no source), the
    # gains re that factor are the plan's, and crosstalk (a ratio) does not change.
    weights = read_weights(plan_dir)
    want_db = 20 * np.log10(scale)
    irs = free_field_irset(_rig(), FS, N)
    irs.data = irs.data * scale
    common = verify_plan(weights, MeasuredKernel(irs), gain_reference="common")
    plan = verify_plan(weights, MeasuredKernel(irs), gain_reference="plan")
    assert common.common_gain_db == pytest.approx(want_db, abs=0.01)
    assert plan.common_gain_db == pytest.approx(want_db, abs=0.01)
    np.testing.assert_allclose(common.gain_db[common.judged], 0.0, atol=1e-3)
    np.testing.assert_allclose(plan.gain_db[plan.judged], want_db, atol=1e-3)
    np.testing.assert_allclose(common.measured_sv, common.planned_sv, rtol=1e-6)
    # On a rig with real crosstalk (mics moved by up to 1 mm) the ratios are untouched by the scale.
    rng = np.random.default_rng(3)
    moved = free_field_irset(_rig(rng.uniform(-1e-3, 1e-3, (4, 3))), FS, N)
    true = verify_plan(weights, MeasuredKernel(moved))
    moved.data = moved.data * scale
    scaled = verify_plan(weights, MeasuredKernel(moved), gain_reference="common")
    assert np.nanmax(true.crosstalk_db) > -60
    np.testing.assert_allclose(scaled.crosstalk_db, true.crosstalk_db, atol=1e-6)
    assert scaled.common_gain_db - true.common_gain_db == pytest.approx(want_db, abs=1e-6)
    np.testing.assert_allclose(scaled.gain_db, true.gain_db - true.common_gain_db, atol=1e-6)
    np.testing.assert_array_equal(scaled.passed, true.passed)


def test_common_reference_on_a_moved_rig_is_the_mean_db_offset(plan_dir, tmp_path):
    # The least-squares fit in dB of |C_jj| to s_j is the mean of the dB differences (normal
    # equations of a one-parameter fit, common practice, no source): the residual gains average 0.
    rng = np.random.default_rng(9)
    irs = free_field_irset(_rig(rng.uniform(-0.02, 0.02, (4, 3))), FS, N)
    irs.data = irs.data * 0.05
    res = verify_plan(read_weights(plan_dir), MeasuredKernel(irs), gain_reference="common")
    assert np.nanmean(res.gain_db) == pytest.approx(0.0, abs=1e-9)
    assert np.nanstd(res.gain_db) > 0.01


def test_cli_pass_and_fail(plan_dir, tmp_path, capsys):
    good = _irset_dir(tmp_path, _rig(), "good")
    out = tmp_path / "v-good"
    code, stdout, _ = arrayplan_main(capsys, "verify", plan_dir, good, "--out", out, "--channels", "1,2,3")
    assert code == 0
    lines = [ln for ln in stdout.splitlines() if ln.startswith("channel ")]
    assert len(lines) == 3 and all(": PASS" in ln for ln in lines)
    for name in ("verify-channels.csv", "verify-summary.csv", "verify-crosstalk.png", "verify-singular-values.png",
                 "verify.json"):
        assert (out / name).exists(), name
    rows = list(csv.DictReader((out / "verify-channels.csv").open()))
    assert len(rows) == 3 * len(HZ) and {r["channel"] for r in rows} == {"1", "2", "3"}
    assert all(float(r["isolation_db"]) > 60 for r in rows)
    # 5 cm of microphone displacement (~0.5 wavelength at 3.5 kHz) ruins isolation
    rng = np.random.default_rng(9)
    bad = _irset_dir(tmp_path, _rig(rng.uniform(-0.05, 0.05, (4, 3))), "bad")
    code, stdout, _ = arrayplan_main(capsys, "verify", plan_dir, bad, "--out", tmp_path / "v-bad", "--window-ms", "20")
    assert code == 1
    assert "FAIL" in stdout
    summary = list(csv.DictReader((tmp_path / "v-bad" / "verify-summary.csv").open()))
    assert sum(int(r["lost_channels"]) for r in summary) > 0
    assert json.loads((tmp_path / "v-bad" / "verify.json").read_text())["passed"].count(False) > 0


def test_cli_gain_reference_defaults_follow_the_units(plan_dir, tmp_path, capsys):
    irs = free_field_irset(_rig(), FS, N)
    irs.data = irs.data * 0.02
    full_scale = _irset_dir(tmp_path, None, "fs", irs=irs)
    code, stdout, _ = arrayplan_main(capsys, "verify", plan_dir, full_scale, "--out", tmp_path / "v1", "--no-figures")
    assert code == 0
    doc = json.loads((tmp_path / "v1" / "verify.json").read_text())
    assert doc["gain_reference"] == "common" and "full_scale" in doc["gain_reference_reason"]
    assert doc["common_gain_db"] == pytest.approx(20 * np.log10(0.02), abs=0.01)  # exact arithmetic
    assert "gain reference: common factor -33.98 dB re plan" in stdout
    assert "wanted channels: channels 1-4: strong in the plan" in stdout
    assert all("median gain +0.00 dB re common" in ln for ln in stdout.splitlines() if ln.startswith("channel "))
    rows = list(csv.DictReader((tmp_path / "v1" / "verify-channels.csv").open()))
    judged = [r for r in rows if r["judged"] == "1"]
    assert all(abs(float(r["gain_db"])) < 1e-3 for r in judged)
    assert all(r["gain_db"] == "" and r["lost"] == "0" for r in rows if r["judged"] == "0")
    assert doc["judged_frequencies_hz"]["4"] == [pytest.approx(HZ[1])]
    calibrated = IRSet(irs.data, FS, irs.speaker_names, irs.mic_names, units="pascal_per_volt")
    code, stdout, _ = arrayplan_main(capsys, "verify", plan_dir, _irset_dir(tmp_path, None, "pv", irs=calibrated),
                                     "--out", tmp_path / "v2", "--no-figures", "--channels", "all")
    assert code == 0
    doc = json.loads((tmp_path / "v2" / "verify.json").read_text())
    assert doc["gain_reference"] == "plan" and doc["channels"] == [1, 2, 3, 4]
    assert "gain reference: plan (the IR set is calibrated" in stdout
    assert "all 4 planned channels, each judged at every planned frequency" in stdout
    code, stdout, _ = arrayplan_main(capsys, "verify", plan_dir, full_scale, "--out", tmp_path / "v3", "--no-figures",
                                     "--gain-reference", "plan")
    assert "median gain -33.98 dB re plan" in stdout


def _rewrite_wav(folder, fname, transform):
    data, rate = sf.read(folder / fname, dtype="float32", always_2d=True)
    data, rate = transform(data, rate)
    sf.write(folder / fname, data, rate, subtype="FLOAT", format="WAV")


@pytest.mark.parametrize("damage, message", [
    ("names", "differ"),
    ("rate", "sample rate"),
    ("truncated", "truncated"),
    ("silent", "silent"),
    ("count", "differ"),
])
def test_cli_bad_input_exit_2_nothing_written(plan_dir, tmp_path, capsys, damage, message):
    rig = _rig()
    if damage == "names":
        rig = Rig.from_positions(rig.speakers.positions, rig.mics.positions, speed_of_sound=C,
                                 mic_names=["M1", "M2", "M3", "X9"])
    if damage == "count":
        rig = Rig.from_positions(rig.speakers.positions[:3], rig.mics.positions, speed_of_sound=C)
    folder = _irset_dir(tmp_path, rig)
    if damage == "rate":
        _rewrite_wav(folder, "spk-002.wav", lambda d, r: (d, 44100))
    if damage == "truncated":
        _rewrite_wav(folder, "spk-003.wav", lambda d, r: (d[:1000], r))
    if damage == "silent":
        _rewrite_wav(folder, "spk-001.wav", lambda d, r: (np.zeros_like(d), r))
    out = tmp_path / "v"
    code, stdout, err = arrayplan_main(capsys, "verify", plan_dir, folder, "--out", out)
    assert code == 2
    assert len(err.strip().splitlines()) == 1 and message in err, err
    assert "Traceback" not in err and stdout == ""
    assert not out.exists()


def test_cli_rejects_plan_above_nyquist(tmp_path, capsys):
    plan = tmp_path / "plan"
    write_plan(plan_rig(_rig(), FrequencyAxis([1000.0, 9000.0])), plan, figures=False)
    irs = free_field_irset(_rig(), 16000.0, 1024)
    code, _, err = arrayplan_main(capsys, "verify", plan, _irset_dir(tmp_path, None, irs=irs), "--out", tmp_path / "v")
    assert code == 2 and "Nyquist" in err
    assert not (tmp_path / "v").exists()


@pytest.mark.parametrize("flags, message", [
    (["--channels", "9"], "--channels"),
    (["--window-ms", "0.01"], "window"),
    (["--isolation-db", "-3"], "--isolation-db"),
    (["--channels", "some"], "--channels"),
    (["--gain-reference", "loud"], "--gain-reference"),
])
def test_cli_bad_options_exit_2(plan_dir, tmp_path, capsys, flags, message):
    folder = _irset_dir(tmp_path, _rig())
    try:
        code, _, err = arrayplan_main(capsys, "verify", plan_dir, folder, "--out", tmp_path / "v", *flags)
    except SystemExit as stop:  # argparse refuses the option before the command runs
        code, err = stop.code, capsys.readouterr().err
    assert code == 2 and message in err and len(err.strip().splitlines()) == 1, err
    assert not (tmp_path / "v").exists()


class _ExactFreeField:
    """The free-field coupling exp(-jkr) / (4 pi r), written here independently of arrayplan's kernels."""

    def __init__(self, spk: np.ndarray, mic: np.ndarray, names_spk, names_mic, c: float) -> None:
        self.speaker_names, self.mic_names = tuple(names_spk), tuple(names_mic)
        self._r = np.linalg.norm(mic[:, None, :] - spk[None, :, :], axis=-1)     # (n_mic, n_spk), m
        self._c = c

    def evaluate(self, hz: np.ndarray) -> np.ndarray:
        k = 2 * np.pi * np.asarray(hz, dtype=float)[:, None, None] / self._c
        return np.exp(-1j * k * self._r) / (4 * np.pi * self._r)


def test_tracked_plan_on_a_perfect_rig_passes_with_levels_re_the_strongest(tmp_path):
    # Free-field Green's function exp(-jkr)/(4 pi r) and SVD channels (D. A. B. Miller, Applied Optics
    # 39(11), 2000); singular values by numpy.linalg.svd (general-purpose reference library). A tracked
    # plan keeps channel numbers across frequency, so channel 1 is not always the strongest: levels
    # must be re the strongest at each frequency, and the re-planned strong subspace must match the
    # planned strong channels whatever their numbers (principal angles ~0 on a perfect rig).
    rng = np.random.default_rng(0)
    spk = rng.uniform(-0.5, 0.5, (5, 3))
    mic = rng.uniform(-0.5, 0.5, (6, 3)) + [0.0, 0.0, 1.0]
    rig = Rig.from_positions(spk, mic, speed_of_sound=C)
    hz = np.geomspace(100.0, 4000.0, 60)
    plan = tmp_path / "plan"
    write_plan(plan_rig(rig, FrequencyAxis(hz), track=True), plan, figures=False)
    weights = read_weights(plan)
    assert np.any(np.argmax(weights.singular_values, axis=1) != 0)    # channel 1 is not always the strongest
    exact = _ExactFreeField(spk, mic, rig.speakers.names, rig.mics.names, C)
    res = verify_plan(weights, exact)
    # the independent count: numpy's singular values of the exact G within 3 dB of the largest
    s_ref = np.linalg.svd(exact.evaluate(hz), compute_uv=False)
    want_strong = np.sum(20 * np.log10(s_ref / s_ref[:, :1]) >= -3.0 - 1e-9, axis=1)
    summary = [int(r["strong_channels"]) for r in csv.DictReader((plan / "summary.csv").open())]
    np.testing.assert_array_equal(res.strong_planned, want_strong)
    np.testing.assert_array_equal(res.strong_planned, summary)
    np.testing.assert_array_equal(res.strong_measured, summary)
    assert res.max_angle_deg.max() < 1e-4
    np.testing.assert_allclose(np.sort(res.measured_sv, axis=1), np.sort(s_ref, axis=1), rtol=1e-9)
    np.testing.assert_allclose(res.measured_sv, res.planned_sv, rtol=1e-9)   # paired with the same channel
    # every judged channel is within 3 dB of numpy's largest singular value at that frequency
    level = 20 * np.log10(weights.singular_values[:, res.channels] / s_ref[:, :1])
    assert np.all(level[res.judged] >= -3.0 - 1e-9)
    assert np.all(level[~res.judged] < -3.0)
    np.testing.assert_allclose(res.gain_db[res.judged], 0.0, atol=1e-9)
    assert np.all(res.passed)
    # the singular-value plot: the strongest planned curve sits at 0 dB at every frequency
    fig = plot_singular_values(res)
    planned = np.array([ln.get_ydata() for ln in fig.axes[0].get_lines() if ln.get_linestyle() == "-"])
    np.testing.assert_allclose(planned.max(axis=0), 0.0, atol=1e-9)
    plt.close(fig)


@pytest.mark.parametrize("scale", [1e-7, 1e-2, 0.5, 3.0])
def test_largest_subspace_angles_match_scipy(scale):
    """Reference: scipy.linalg.subspace_angles (Knyazev and Argentati, SIAM J. Sci. Comput. 23(6), 2002)."""
    from scipy.linalg import subspace_angles

    from arrayplan.verification.channels import largest_subspace_angles_deg

    rng = np.random.default_rng(12)
    n_freq, n, n_chan = 9, 7, 5
    planned = np.linalg.qr(rng.normal(size=(n_freq, n, n_chan)) + 1j * rng.normal(size=(n_freq, n, n_chan)))[0]
    chosen = rng.uniform(size=(n_freq, n_chan)) < 0.6
    chosen[:, 0] = True
    # the other basis starts with the chosen columns, perturbed by `scale` (angles from 1e-5 deg to large)
    first = np.stack([np.concatenate([planned[f][:, chosen[f]], planned[f][:, ~chosen[f]]], axis=1)
                      for f in range(n_freq)])
    noise = rng.normal(size=planned.shape) + 1j * rng.normal(size=planned.shape)
    other = np.linalg.qr(first + scale * noise)[0]
    ours = largest_subspace_angles_deg(planned, chosen, other)
    for f in range(n_freq):
        k = int(chosen[f].sum())
        ref = np.degrees(np.max(subspace_angles(planned[f][:, chosen[f]], other[f][:, :k])))
        assert ours[f] == pytest.approx(ref, rel=1e-9, abs=1e-9)
