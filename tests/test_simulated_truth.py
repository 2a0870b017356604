"""The simulated rig as built: placement, gain and phase errors and a reflecting floor, against formulas."""

from __future__ import annotations

import numpy as np
import pytest

from arrayplan.cli import main
from arrayplan.errors import InputError
from arrayplan.rig import Rig
from arrayplan.kernels.model_irs import TruthErrors, truth_irset

FS = 16000.0
C = 343.0
N = 1024


def small_rig() -> Rig:
    spk = np.array([[-0.1, 0.0, 1.2], [0.1, 0.0, 1.2]])
    mic = np.array([[-0.2, 1.0, 1.1], [0.0, 1.0, 1.3], [0.2, 1.0, 1.1]])
    return Rig.from_positions(spk, mic, speed_of_sound=C)


def _spectrum(irs) -> tuple[np.ndarray, np.ndarray]:
    f = np.fft.rfftfreq(irs.n_samples, 1 / FS)
    return f, np.fft.rfft(irs.data, axis=0)


def _point(f, r):
    """exp(-j k r) / (4 pi r): the free-field Green's function, DSP sign (common practice, no source)."""
    k = 2 * np.pi * f[:, None, None] / C
    return np.exp(-1j * k * r[None]) / (4 * np.pi * r[None])


def _draws(seed, n_s, n_m):
    # the documented draw order of TruthErrors: speaker positions, mic positions, speaker gains,
    # mic gains, speaker phases, mic phases, each standard normal
    rng = np.random.default_rng(seed)
    return (rng.normal(size=(n_s, 3)), rng.normal(size=(n_m, 3)), rng.normal(size=n_s), rng.normal(size=n_m),
            rng.normal(size=n_s), rng.normal(size=n_m))


def test_floor_adds_the_image_source_of_the_image_method():
    # J. B. Allen and D. A. Berkley, JASA 65(4), 1979: a rigid-or-absorbing plane adds an image source
    # mirrored in it, weighted by the reflection coefficient beta = sqrt(1 - alpha) (angle-independent).
    rig = small_rig()
    alpha = 0.36
    irs = truth_irset(rig, FS, N, TruthErrors(floor_absorption=alpha))
    f, got = _spectrum(irs)
    spk, mic = rig.speakers.positions, rig.mics.positions
    r1 = np.linalg.norm(mic[:, None] - spk[None], axis=-1)
    r2 = np.linalg.norm(mic[:, None] - (spk * [1, 1, -1])[None], axis=-1)
    want = _point(f, r1) + np.sqrt(1 - alpha) * _point(f, r2)
    band = (f > 0) & (f < 0.45 * FS)
    assert np.max(np.abs(got[band] - want[band])) < 1e-9 * np.max(np.abs(want[band]))
    assert irs.extra["truth_errors"]["floor_absorption"] == alpha


def test_placement_gain_and_phase_errors_follow_the_documented_draws():
    # Independent computation of the perturbed free field with the documented draw order; the gain and
    # phase errors multiply each pair by a_m * b_s (one complex factor per element; common practice).
    rig = small_rig()
    e = TruthErrors(placement_mm=8.0, gain_db=1.5, phase_deg=10.0, seed=11)
    irs = truth_irset(rig, FS, N, e)
    f, got = _spectrum(irs)
    dsp, dmic, gs, gm, ps, pm = _draws(11, 2, 3)
    spk = rig.speakers.positions + 8e-3 * dsp
    mic = rig.mics.positions + 8e-3 * dmic
    r = np.linalg.norm(mic[:, None] - spk[None], axis=-1)
    a_s = 10 ** (1.5 * gs / 20) * np.exp(1j * np.radians(10.0 * ps))
    a_m = 10 ** (1.5 * gm / 20) * np.exp(1j * np.radians(10.0 * pm))
    want = _point(f, r) * (a_m[:, None] * a_s[None, :])[None]
    band = (f > 0) & (f < 0.45 * FS)
    assert np.max(np.abs(got[band] - want[band])) < 1e-9 * np.max(np.abs(want[band]))
    # names and positions stay the rig file's, as a real measurement records them
    np.testing.assert_array_equal(irs.speaker_positions, rig.speakers.positions)


def test_switching_one_error_on_leaves_the_others_draws_alone():
    rig = small_rig()
    a = truth_irset(rig, FS, N, TruthErrors(placement_mm=5.0, seed=4)).data
    b = truth_irset(rig, FS, N, TruthErrors(placement_mm=5.0, gain_db=1e-9, seed=4)).data
    assert np.max(np.abs(a - b)) < 1e-9 * np.max(np.abs(a))


@pytest.mark.parametrize("kwargs, field", [({"placement_mm": -1.0}, "placement_mm"),
                                           ({"gain_db": float("nan")}, "gain_db"),
                                           ({"floor_absorption": 1.5}, "floor_absorption")])
def test_bad_errors_are_refused_naming_the_field(kwargs, field):
    with pytest.raises(InputError) as exc:
        TruthErrors(**kwargs)
    assert field in str(exc.value)


def test_measure_refuses_bad_sim_options_one_line_exit_2_nothing_written(tmp_path, capsys):
    rig = tmp_path / "rig.toml"
    rig.write_text('[[speakers]]\nposition = [0, 0, 1]\n[[microphones]]\nposition = [0, 1, 1]\n')
    out = tmp_path / "meas"
    rc = main(["measure", str(rig), "--simulate", "--yes", "--out", str(out), "--sim-placement-error-mm", "-3"])
    err = capsys.readouterr().err.strip().splitlines()
    assert rc == 2 and len(err) == 1 and "--sim-placement-error-mm" in err[0]
    assert not out.exists()
