"""The layout study: greedy and swaps against exhaustive search, the relaxation's bound, the command."""

from __future__ import annotations

import csv
import itertools
import json
from pathlib import Path

import numpy as np
import pytest

from arrayplan.cli import main
from arrayplan.frequency import FrequencyAxis
from arrayplan.rig import Rig, load_rig
from arrayplan.studies.layout import choose_layout, layout_problem
from helpers import arrayplan_main, first_order_box_coupling

C = 343.0


def _green(spk: np.ndarray, mic: np.ndarray, hz: np.ndarray, c: float = C) -> np.ndarray:
    """Free-field coupling exp(-jkr) / (4 pi r), (n_f, n_mic, n_spk): written here, independent of arrayplan."""
    r = np.linalg.norm(mic[:, None] - spk[None], axis=-1)
    k = 2 * np.pi * hz[:, None, None] / c
    return np.exp(-1j * k * r) / (4 * np.pi * r)


def _capacity(g: np.ndarray, subset, rho_db: float, n_tx: int) -> float:
    """sum_f log2 det(I + rho (4 pi)^2 G_S^H G_S / n): the log-det capacity with equal power per speaker.

    rho is the SNR 1 m from one speaker with all the power on it, where |G| = 1 / (4 pi): the
    MIMO capacity with equal power on n transmitters (I. E. Telatar, European Transactions on
    Telecommunications 10(6), 1999), written here with numpy.
    """
    gs = g[:, :, list(subset)]
    m = np.eye(len(subset)) + 10 ** (rho_db / 10) * (4 * np.pi) ** 2 / n_tx * np.conj(np.swapaxes(gs, 1, 2)) @ gs
    return float(np.sum(np.linalg.slogdet(m)[1]) / np.log(2))


def _scattered_rig(rng, n_cand: int) -> tuple[Rig, np.ndarray, np.ndarray]:
    spk = np.column_stack([rng.uniform(-1.0, 1.0, n_cand), rng.uniform(-0.2, 0.2, n_cand),
                           rng.uniform(-0.4, 0.4, n_cand)])
    mic = np.column_stack([np.linspace(-0.6, 0.6, 5), np.full(5, 2.5), np.zeros(5)])
    return Rig.from_positions(spk, mic, speed_of_sound=C), spk, mic


@pytest.mark.parametrize("n_cand, count, seed", [(10, 3, 0), (12, 4, 1), (10, 3, 2)])
def test_greedy_and_swaps_against_exhaustive_search_and_the_relaxation_bound(n_cand, count, seed):
    rng = np.random.default_rng(seed)
    rig, spk, mic = _scattered_rig(rng, n_cand)
    hz = np.array([400.0, 900.0, 1700.0])
    problem = layout_problem(rig, "speakers", count, FrequencyAxis(hz), reference_snr_db=20.0)
    choice = choose_layout(problem, "capacity")
    g = _green(spk, mic, hz)
    best = max(_capacity(g, s, 20.0, count) for s in itertools.combinations(range(n_cand), count))
    assert choice.value == pytest.approx(_capacity(g, choice.chosen, 20.0, count), rel=1e-9)
    # source: Nemhauser, Wolsey and Fisher, Math. Programming 14, 1978: greedy >= (1 - 1/e) of the optimum
    assert choice.value >= (1 - 1 / np.e) * best
    assert choice.value <= best * (1 + 1e-12)
    # source: Joshi and Boyd, IEEE Trans. Signal Processing 57(2), 2009: the relaxation bounds the optimum
    assert choice.bound >= best * (1 - 1e-12)
    # the relaxation's solution satisfies its constraints (Joshi and Boyd 2009): 0 <= z <= 1, sum z = N
    assert np.all(choice.relaxed >= -1e-8) and np.all(choice.relaxed <= 1 + 1e-8)
    assert abs(choice.relaxed.sum() - count) < 1e-8


def test_count_criteria_reach_the_exhaustive_optimum_within_the_greedy_guarantee():
    rng = np.random.default_rng(7)
    rig, spk, mic = _scattered_rig(rng, 10)
    hz = np.array([600.0, 1500.0])
    problem = layout_problem(rig, "speakers", 3, FrequencyAxis(hz), reference_snr_db=30.0, threshold_db=6.0)
    choice = choose_layout(problem, "strong")
    g = _green(spk, mic, hz)

    def strong(subset):
        s = np.linalg.svd(g[:, :, list(subset)], compute_uv=False)
        return int(np.sum(20 * np.log10(s / s[:, :1]) >= -6.0))   # channels within 6 dB of the strongest

    best = max(strong(s) for s in itertools.combinations(range(10), 3))
    assert strong(choice.chosen) == choice.value
    assert choice.value >= (1 - 1 / np.e) * best and choice.bound is None


def test_chosen_layout_on_facing_lines_beats_random_choices_for_every_seed():
    cand = np.column_stack([np.linspace(-1.5, 1.5, 24), np.zeros(24), np.zeros(24)])
    mic = np.column_stack([np.linspace(-0.8, 0.8, 8), np.full(8, 3.0), np.zeros(8)])
    rig = Rig.from_positions(cand, mic, speed_of_sound=C)
    hz = np.array([500.0, 1000.0, 2000.0])
    choice = choose_layout(layout_problem(rig, "speakers", 6, FrequencyAxis(hz), reference_snr_db=30.0))
    g = _green(cand, mic, hz)
    mine = _capacity(g, choice.chosen, 30.0, 6)
    for seed in range(10):
        pick = np.random.default_rng(seed).choice(24, size=6, replace=False)
        assert mine > _capacity(g, pick, 30.0, 6)


def test_choosing_microphones_uses_the_rows(tmp_path):
    rng = np.random.default_rng(3)
    spk = np.column_stack([np.linspace(-0.5, 0.5, 4), np.zeros(4), np.zeros(4)])
    mic = np.column_stack([rng.uniform(-1, 1, 9), np.full(9, 2.0), rng.uniform(-0.3, 0.3, 9)])
    rig = Rig.from_positions(spk, mic, speed_of_sound=C)
    hz = np.array([700.0, 1400.0])
    choice = choose_layout(layout_problem(rig, "microphones", 3, FrequencyAxis(hz), reference_snr_db=20.0))
    g = np.conj(np.swapaxes(_green(spk, mic, hz), 1, 2))          # candidates are rows of G
    best = max(_capacity(g, s, 20.0, 4) for s in itertools.combinations(range(9), 3))
    assert best * (1 - 1 / np.e) <= choice.value <= best * (1 + 1e-12) <= choice.bound * (1 + 1e-12)


RIG_TEXT = """
[frequencies]
list = [500.0, 1200.0]
[[speakers]]
shape = "line"
count = 12
spacing = 0.15
[[microphones]]
shape = "line"
count = 4
spacing = 0.2
center = [0.0, 2.0, 0.0]
"""


def test_command_writes_a_rig_that_plans(tmp_path, capsys):
    rig = tmp_path / "rig.toml"
    rig.write_text(RIG_TEXT)
    out = tmp_path / "lay"
    status, text, err = arrayplan_main(capsys, "study", "layout", rig, "--choose", "4", "--out", out)
    assert status == 0, err
    assert "gap" in text and "upper bound" in text
    chosen = load_rig(out / "chosen-rig.toml")
    assert len(chosen.speakers) == 4 and len(chosen.mics) == 4
    assert {p.name for p in out.iterdir()} >= {"chosen-rig.toml", "layout-steps.csv", "layout-candidates.csv",
                                               "layout.json", "layout-rig.png", "layout-criterion.png"}
    assert main(["plan", str(out / "chosen-rig.toml"), "--out", str(tmp_path / "plan"), "--no-figures"]) == 0


@pytest.mark.parametrize("extra, csv_text, word", [
    (["--choose", "13"], None, "13 of 12"),
    (["--choose", "2", "--candidates", "cand.csv"], "x,y,z\n0.1,2.0,0.0\n0.5,0.0,0.0\n", "coincides"),
    (["--choose", "1", "--candidates", "cand.csv"], "x,y\n0.1,2.0\n", "x,y,z"),
])
def test_bad_input_is_one_line_exit_2_and_nothing_written(tmp_path, capsys, monkeypatch, extra, csv_text, word):
    monkeypatch.chdir(tmp_path)
    Path("rig.toml").write_text(RIG_TEXT)
    if csv_text is not None:
        Path("cand.csv").write_text(csv_text)
    status, _, err = arrayplan_main(capsys, "study", "layout", "rig.toml", "--out", "never", *extra)
    assert status == 2 and len(err.strip().splitlines()) == 1 and word in err
    assert not Path("never").exists()


def test_unknown_criterion_is_a_usage_error(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    Path("rig.toml").write_text(RIG_TEXT)
    status, _, err = arrayplan_main(capsys, "study", "layout", "rig.toml", "--out", "never", "--choose", "2",
                                    "--criterion", "loudest")
    assert status == 2 and "criterion" in err and len(err.strip().splitlines()) == 1
    assert not Path("never").exists()


@pytest.mark.parametrize("rho_db", [0.0, 25.0])
def test_reference_snr_is_one_speaker_at_one_metre(rho_db):
    # one microphone, candidates at 1 m and 2 m: choosing one, the link is a single channel whose
    # SNR is rho at 1 m, so the capacity is log2(1 + rho) per frequency (Telatar 1999, one channel)
    cand = np.array([[0.0, 0.0, 0.0], [0.0, -1.0, 0.0]])
    rig = Rig.from_positions(cand, np.array([[0.0, 1.0, 0.0]]), speed_of_sound=C)
    hz = np.array([300.0, 800.0, 2500.0])
    choice = choose_layout(layout_problem(rig, "speakers", 1, FrequencyAxis(hz), reference_snr_db=rho_db))
    assert choice.chosen == (0,)
    assert choice.value == pytest.approx(3 * np.log2(1 + 10 ** (rho_db / 10)), rel=1e-12)


def test_layout_value_equals_the_compare_capacity_of_the_chosen_rig(tmp_path, capsys):
    # the two studies share one reference SNR: the layout's value of the chosen rig, summed over
    # frequencies, is the capacity compare gives it, and both equal log2 det(I + rho (4 pi)^2 G^H G / n)
    # written here with numpy (Telatar 1999)
    rig = tmp_path / "rig.toml"
    rig.write_text(RIG_TEXT)
    out = tmp_path / "lay"
    status, _, err = arrayplan_main(capsys, "study", "layout", rig, "--choose", "4", "--reference-snr-db", "35",
                                    "--out", out, "--no-figures")
    assert status == 0, err
    side = json.loads((out / "layout.json").read_text())
    assert side["reference_snr_db"] == 35.0 and "1 m from one speaker" in side["reference_snr"]
    chosen = load_rig(out / "chosen-rig.toml")
    hz = np.array([500.0, 1200.0])
    direct = _capacity(_green(chosen.speakers.positions, chosen.mics.positions, hz,
                           chosen.medium.speed_of_sound), range(4), 35.0, 4)
    assert side["value"] == pytest.approx(direct, rel=1e-9)
    assert main(["compare", str(rig), str(out / "chosen-rig.toml"), "--reference-snr-db", "35",
                 "--out", str(tmp_path / "cmp"), "--no-figures"]) == 0
    rows = list(csv.DictReader(open(tmp_path / "cmp" / "compare-by-frequency.csv")))
    per_f = [float(r["capacity_bit_per_s_hz"]) for r in rows if r["layout"].endswith("-chosen")]
    assert sum(per_f) == pytest.approx(direct, rel=1e-9)


ZONED = """
[frequencies]
list = [400.0, 900.0]
[[speakers]]
shape = "line"
count = 6
spacing = 0.2
center = [2.0, 0.5, 1.2]
[[microphones]]
name = "A"
shape = "line"
count = 3
spacing = 0.15
center = [1.5, 2.5, 1.2]
[[microphones]]
name = "B"
shape = "line"
count = 3
spacing = 0.15
center = [2.5, 2.5, 1.2]
[[zones]]
name = "seat"
role = "bright"
shape = "grid"
counts = [3, 2]
size = [0.2, 0.1]
center = [1.5, 2.5, 1.2]
normal = [0.0, 0.0, 1.0]
[[zones]]
name = "quiet"
role = "dark"
members = ["B1", "B2", "B3"]
[room]
size_m = [4.0, 3.5, 2.6]
reflection_order = 2
max_delay_ms = 40
[room.absorption]
x_min = 0.3
x_max = 0.3
y_min = [0.1, 0.15, 0.2, 0.3, 0.3, 0.35, 0.4]
y_max = 0.3
floor = 0.05
ceiling = 0.6
"""


@pytest.mark.parametrize("side, count", [("speakers", 3), ("microphones", 4)])
def test_chosen_rig_keeps_the_room_and_the_zones(tmp_path, capsys, side, count):
    rig_path = tmp_path / "rig.toml"
    rig_path.write_text(ZONED)
    out = tmp_path / "lay"
    status, _, err = arrayplan_main(capsys, "study", "layout", rig_path, "--choose", count, "--side", side, "--out",
                                    out, "--no-figures")
    assert status == 0, err
    original, chosen = load_rig(rig_path), load_rig(out / "chosen-rig.toml")
    assert chosen.room.size_m == original.room.size_m
    assert chosen.room.reflection_order == 2 and chosen.room.max_delay_ms == 40.0
    np.testing.assert_array_equal(chosen.room.absorption, original.room.absorption)
    assert [(z.name, z.role) for z in chosen.zones][0] == ("seat", "bright")
    np.testing.assert_allclose(chosen.zones[0].positions, original.zones[0].positions, atol=1e-12)
    if side == "speakers":
        assert [(z.name, z.role, z.point_names) for z in chosen.zones] == \
               [(z.name, z.role, z.point_names) for z in original.zones]
    else:   # a zone of microphones keeps the chosen ones among its members
        kept = [z for z in chosen.zones if z.name == "quiet"]
        assert all(set(z.point_names) <= set(chosen.mics.names) & {"B1", "B2", "B3"} for z in kept)
    assert main(["plan", str(out / "chosen-rig.toml"), "--out", str(tmp_path / "plan"), "--no-figures"]) == 0
    assert "kernel: room" in capsys.readouterr().out


def test_a_rig_in_a_room_is_scored_in_the_room():
    # the capacity of the chosen set with G from the direct path and the six first-order images across
    # the walls of the box [0, L], each exp(-jkr) / (4 pi r) times beta = sqrt(1 - alpha), written with numpy
    # in tests/helpers.py (J. B. Allen and D. A. Berkley, JASA 65(4), 1979); log-det as in _capacity (Telatar 1999)
    from dataclasses import replace
    from arrayplan.rig.room import Room

    cand = np.array([[0.6, 0.5, 1.0], [1.2, 0.4, 1.3], [1.9, 0.6, 0.9], [2.5, 0.5, 1.1], [1.5, 0.9, 1.6]])
    mic = np.array([[1.0, 2.4, 1.2], [1.6, 2.5, 1.1], [2.2, 2.3, 1.3]])
    size, alpha = np.array([3.2, 3.0, 2.4]), 0.3
    rig = replace(Rig.from_positions(cand, mic, speed_of_sound=C), room=Room.uniform(tuple(size), alpha, 1))
    hz = np.array([350.0, 800.0])
    choice = choose_layout(layout_problem(rig, "speakers", 2, FrequencyAxis(hz), reference_snr_db=30.0))
    g = first_order_box_coupling(cand, mic, hz, size, np.sqrt(1 - alpha), C)
    assert choice.value == pytest.approx(_capacity(g, choice.chosen, 30.0, 2), rel=1e-9)
    best = max(_capacity(g, s, 30.0, 2) for s in itertools.combinations(range(5), 2))
    # Nemhauser, Wolsey and Fisher 1978: greedy within (1 - 1/e); Joshi and Boyd 2009: the bound holds
    assert (1 - 1 / np.e) * best <= choice.value <= best * (1 + 1e-12) <= choice.bound * (1 + 1e-12)
