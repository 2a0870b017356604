"""MeasuredKernel against the free-field kernel, first-order perturbation, and a rigid floor."""

from __future__ import annotations

import numpy as np
import pytest

from arrayplan.channels.svd import decompose_stack
from arrayplan.errors import InputError
from arrayplan.formats.irset import IRSet, read_irset, write_irset
from arrayplan.kernels.freefield import FreeFieldKernel
from arrayplan.kernels.measured import MeasuredKernel, fade_out_window
from arrayplan.rig import Rig
from arrayplan.kernels.model_irs import free_field_irset
from helpers import assert_singular_values_match_free_field

FS = 48000.0
N = 4096
C = 343.2


def _rig(mic_shift_m=None) -> Rig:
    spk = np.c_[np.linspace(-0.3, 0.3, 4), np.zeros(4), np.zeros(4)]
    mic = np.c_[np.linspace(-0.3, 0.3, 4), np.full(4, 1.0), np.zeros(4)]
    if mic_shift_m is not None:
        mic = mic + mic_shift_m
    return Rig.from_positions(spk, mic, speed_of_sound=C)


def _roundtrip(irs: IRSet, tmp_path, name="irs") -> IRSet:
    write_irset(tmp_path / name, irs)
    return read_irset(tmp_path / name)


def test_matches_rfft_on_grid():
    # The DFT at the FFT bins equals numpy.fft.rfft (reference library: numpy).
    rng = np.random.default_rng(3)
    irs = IRSet(rng.standard_normal((256, 2, 3)), 8000.0, ["a", "b", "c"], ["m1", "m2"])
    k = MeasuredKernel(irs)
    bins = np.arange(1, 128)
    ref = np.fft.rfft(irs.data, axis=0)[bins]
    np.testing.assert_allclose(k.evaluate(bins * 8000.0 / 256), ref, rtol=0, atol=1e-9)


def test_latency_removal_is_a_phase_advance():
    # A delay of L samples multiplies the DFT by exp(-j 2 pi f L / fs) (shift theorem; common practice).
    rng = np.random.default_rng(4)
    h = np.zeros((300, 1, 1))
    h[40:140, 0, 0] = rng.standard_normal(100)
    irs = IRSet(h, 8000.0, ["s"], ["m"])
    hz = np.array([123.4, 987.6, 2500.0])
    full = MeasuredKernel(irs).evaluate(hz)
    cut = MeasuredKernel(irs, latency_samples=30).evaluate(hz)
    np.testing.assert_allclose(cut * np.exp(-2j * np.pi * hz * 30 / 8000.0)[:, None, None], full, atol=1e-10)


def test_window_fades_out_late_reflection():
    # A late echo beyond the window leaves the spectrum flat (common practice, no source).
    h = np.zeros((2000, 1, 1))
    h[10, 0, 0] = 1.0
    h[1500, 0, 0] = 0.5
    irs = IRSet(h, 8000.0, ["s"], ["m"])
    hz = np.linspace(50, 3900, 200)
    mag = np.abs(MeasuredKernel(irs, window_s=0.05).evaluate(hz)[:, 0, 0])
    np.testing.assert_allclose(mag, 1.0, atol=1e-12)
    w = fade_out_window(1000, 8000.0, 0.05)
    # 400 samples: 300 flat, 100 falling, zero after
    assert w[299] == 1.0 and 0 < w[300] < 1 and 0 < w[399] < 1 and w[400:].max() == 0.0
    assert np.all(np.diff(w) <= 0)


def test_rejects_frequencies_at_or_above_nyquist():
    irs = IRSet(np.ones((16, 1, 1)), 8000.0, ["s"], ["m"])
    with pytest.raises(InputError, match="Nyquist"):
        MeasuredKernel(irs).evaluate(np.array([4000.0]))


def test_free_field_roundtrip_singular_values(tmp_path):
    # Free-field Green's function exp(-jkr)/(4 pi r) (D. A. B. Miller, Applied Optics 39(11), 2000).
    # Tolerances: on the FFT grid the simulated record is exact, so only float32 WAV storage
    # remains (24-bit mantissa, ~6e-8 per sample; summed over 4096 samples ~ 4e-6 re s_max):
    # 2e-5 re s_max.  Off the grid the finite band-limited record is a periodic (Dirichlet)
    # interpolation whose truncated tails deviate from the continuous response; measured
    # 0.2 % re s_max on this rig, so 1 % re s_max, well below Nyquist (<= 8 kHz of 24 kHz).
    rig = _rig()
    assert_singular_values_match_free_field(_roundtrip(free_field_irset(rig, FS, N), tmp_path), rig, FS, N)


def _dg_first_order(rig: Rig, shift: np.ndarray, hz: np.ndarray) -> np.ndarray:
    """dG = dG/dr * dr with dr = unit(spk->mic) . shift; dG/dr = G (-jk - 1/r) (derivative of exp(-jkr)/(4 pi r))."""
    g = FreeFieldKernel(rig).evaluate(hz)
    diff = rig.mics.positions[:, None, :] - rig.speakers.positions[None, :, :]
    r = np.linalg.norm(diff, axis=-1)
    dr = np.einsum("msx,mx->ms", diff / r[..., None], shift)
    k = 2 * np.pi * hz / C
    return g * (-1j * k[:, None, None] - 1.0 / r[None]) * dr[None]


@pytest.mark.parametrize("scale_mm", [1.0, 2.0])
def test_crosstalk_follows_first_order_perturbation(tmp_path, scale_mm):
    # Matrix perturbation theory (G. H. Golub & C. F. Van Loan, Matrix Computations, 4th ed. 2013):
    # with G' = G + dG, U^H G' V = S + U^H dG V, so off-diagonal |C_ij| ~ |u_i^H dG v_j| to first order.
    rig = _rig()
    rng = np.random.default_rng(11)
    shift = rng.uniform(-1.0, 1.0, (4, 3)) * scale_mm * 1e-3
    moved = _rig(shift)
    hz = np.array([100, 200, 300]) * FS / N           # FFT bins: the simulated record is exact there
    s, drive, combine = decompose_stack(FreeFieldKernel(rig).evaluate(hz))
    g_meas = MeasuredKernel(_roundtrip(free_field_irset(moved, FS, N), tmp_path)).evaluate(hz)
    c = np.einsum("fmi,fms,fsj->fij", combine, g_meas, drive)
    pred = np.abs(np.einsum("fmi,fms,fsj->fij", combine, _dg_first_order(rig, shift, hz), drive))
    off = ~np.eye(4, dtype=bool)
    meas_off, pred_off = np.abs(c)[:, off], pred[:, off]
    strong = pred_off > 0.05 * pred_off.max()          # skip near-zero entries, where relative error is meaningless
    # second-order terms are O(k |shift|) ~ 4 % relative at 2 mm and 3.5 kHz; allow 10 %
    rel = np.abs(meas_off[strong] - pred_off[strong]) / pred_off[strong]
    assert rel.max() < 0.10, rel.max()
    # and the crosstalk really grows from the perfect rig's float32 floor (~1e-6 re s_max)
    assert meas_off.max() > 1e-3 * s.max()


def test_rigid_floor_comb_notches(tmp_path):
    # Rigid reflecting floor, image source (REFERENCE-VALUES.md "Rigid reflecting floor"):
    # notches at f = (2m+1) c / (2 (r2 - r1)), depth 20 log10(1 - r1/r2).
    hs, hr, dist = 1.0, 0.6, 2.0
    fs, n = 16000.0, 2048
    spk = np.array([[0.0, 0.0, hs]])
    mic = np.array([[dist, 0.0, hr]])
    direct = Rig.from_positions(spk, mic, speed_of_sound=C)
    image = Rig.from_positions(spk * [1, 1, -1], mic, speed_of_sound=C)
    ir_direct, ir_image = free_field_irset(direct, fs, n), free_field_irset(image, fs, n)
    irs = IRSet(ir_direct.data + ir_image.data, fs, ir_direct.speaker_names, ir_direct.mic_names)
    # the 30 ms window (both paths arrive within 8 ms) also cuts the wrapped sinc tails at the
    # record's end, which otherwise ripple the response by a few tenths of a dB off the FFT grid
    kernel = MeasuredKernel(_roundtrip(irs, tmp_path), window_s=0.03)
    r1 = np.hypot(dist, hs - hr)
    r2 = np.hypot(dist, hs + hr)
    expected = (2 * np.arange(6) + 1) * C / (2 * (r2 - r1))
    assert expected[-1] < 0.4 * fs
    hz = np.arange(100.0, expected[-1] + 100.0, 0.25)
    mag = np.abs(kernel.evaluate(hz)[:, 0, 0])
    level_db = 20 * np.log10(mag * 4 * np.pi * r1)     # re the direct sound alone
    interior = (mag[1:-1] < mag[:-2]) & (mag[1:-1] < mag[2:]) & (level_db[1:-1] < -6.0)
    found = hz[1:-1][interior]
    assert len(found) == len(expected), (found, expected)
    # the search grid is 0.25 Hz; measured agreement 0.12 Hz
    np.testing.assert_allclose(found, expected, atol=0.25)
    # measured within 0.05 dB of the formula; allow 0.2 dB (window and float32 storage)
    np.testing.assert_allclose(level_db[1:-1][interior], 20 * np.log10(1 - r1 / r2), atol=0.2)


# --------------------------------------------------------------------------- zero lag after a pre-roll

def _pre_rolled(n0: int, seed: int = 8, n: int = 256) -> IRSet:
    rng = np.random.default_rng(seed)
    return IRSet(rng.standard_normal((n, 2, 3)), 8000.0, ["a", "b", "c"], ["m1", "m2"], zero_lag_samples=n0)


@pytest.mark.parametrize("n0", [1, 37, 200])
def test_zero_lag_is_the_time_origin(n0):
    # G(f) = sum_n h[n] exp(-j 2 pi f (n - n0) / fs): on the FFT bins this is numpy.fft.rfft of the
    # responses rotated so that zero lag is sample 0 (reference library: numpy; shift theorem).
    irs = _pre_rolled(n0)
    bins = np.arange(1, 128)
    ref = np.fft.rfft(np.roll(irs.data, -n0, axis=0), axis=0)[bins]
    np.testing.assert_allclose(MeasuredKernel(irs).evaluate(bins * 8000.0 / 256), ref, rtol=0, atol=1e-9)


def test_free_field_set_with_pre_roll_matches_the_kernel_on_the_grid():
    # Free-field Green's function exp(-jkr)/(4 pi r) (D. A. B. Miller, Applied Optics 39(11), 2000): a
    # simulated set that keeps 300 samples before zero lag still gives G exactly on the FFT bins.
    rig = _rig()
    irs = free_field_irset(rig, FS, N, zero_lag_samples=300)
    assert irs.zero_lag_samples == 300
    hz = np.arange(1, 400, 7) * FS / N
    np.testing.assert_allclose(MeasuredKernel(irs).evaluate(hz), FreeFieldKernel(rig).evaluate(hz),
                               rtol=0, atol=1e-9 * np.abs(FreeFieldKernel(rig).evaluate(hz)).max())
    # the pre-roll holds the sinc tails that lead each arrival (no wrap to the record's end)
    plain = free_field_irset(rig, FS, N)
    np.testing.assert_allclose(irs.data[300:], np.roll(plain.data, 300, axis=0)[300:], atol=1e-12)


def test_window_and_latency_count_from_zero_lag():
    # A late echo beyond the window leaves the spectrum flat (common practice, no source): the window
    # starts at zero lag, and the pre-roll before it is kept whole.
    n0 = 100
    h = np.zeros((2000, 1, 1))
    h[n0 - 3, 0, 0] = 0.25                                  # pre-ringing, 3 samples before zero lag
    h[n0 + 10, 0, 0] = 1.0
    h[n0 + 380, 0, 0] = 0.5                                 # beyond a 50 ms window at 8 kHz (400 samples)
    irs = IRSet(h, 8000.0, ["s"], ["m"], zero_lag_samples=n0)
    hz = np.linspace(50, 3900, 200)
    g = MeasuredKernel(irs, window_s=0.05).evaluate(hz)[:, 0, 0]
    w = fade_out_window(1900, 8000.0, 0.05)
    want = (0.25 * np.exp(2j * np.pi * hz * 3 / 8000.0) + np.exp(-2j * np.pi * hz * 10 / 8000.0)
            + 0.5 * w[380] * np.exp(-2j * np.pi * hz * 380 / 8000.0))
    np.testing.assert_allclose(g, want, atol=1e-12)
    # latency: zero lag moves 30 samples later, a phase advance exp(+j 2 pi f 30 / fs) (shift theorem)
    full = MeasuredKernel(irs).evaluate(hz)
    cut = MeasuredKernel(irs, latency_samples=30).evaluate(hz)
    np.testing.assert_allclose(cut * np.exp(-2j * np.pi * hz * 30 / 8000.0)[:, None, None], full, atol=1e-10)
    with pytest.raises(InputError, match="latency"):
        MeasuredKernel(irs, latency_samples=2000 - n0)


def test_folder_round_trip_keeps_zero_lag_and_old_manifests_read_as_zero(tmp_path):
    import json

    irs = _pre_rolled(37)
    back = _roundtrip(irs, tmp_path)
    assert back.zero_lag_samples == 37
    manifest = json.loads((tmp_path / "irs" / "irset.json").read_text())
    assert manifest["zero_lag_samples"] == 37 and manifest["format_version"] == 2
    # a set with zero lag at sample 0 stays version 1, readable by readers that know only version 1
    write_irset(tmp_path / "plain", _pre_rolled(0))
    assert json.loads((tmp_path / "plain" / "irset.json").read_text())["format_version"] == 1
    # a manifest written before the field existed: zero lag is sample 0
    del manifest["zero_lag_samples"]
    manifest["format_version"] = 1
    (tmp_path / "irs" / "irset.json").write_text(json.dumps(manifest))
    (tmp_path / "irs" / "SHA256SUMS").unlink()   # written before folders carried SHA256SUMS
    old = read_irset(tmp_path / "irs")
    assert old.zero_lag_samples == 0
    np.testing.assert_allclose(old.data, irs.data, rtol=2.0 ** -24)   # float32 WAV storage


@pytest.mark.parametrize("value, words", [
    (-1, "must lie in 0..255"),
    (256, "must lie in 0..255"),
    (3.5, "whole number"),
    ("12", "whole number"),
    (True, "whole number"),
])
def test_bad_zero_lag_is_one_line_naming_file_and_field(tmp_path, capsys, value, words):
    import json

    from arrayplan.cli import main

    write_irset(tmp_path / "s", _pre_rolled(5))
    path = tmp_path / "s" / "irset.json"
    manifest = json.loads(path.read_text())
    manifest["zero_lag_samples"] = value
    path.write_text(json.dumps(manifest))
    with pytest.raises(InputError) as err:
        read_irset(tmp_path / "s")
    assert err.value.field == "zero_lag_samples" and err.value.source == str(path)
    assert main(["irset", "show", str(tmp_path / "s")]) == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 1 and str(path) in lines[0] and "zero_lag_samples" in lines[0] and words in lines[0]
    with pytest.raises(InputError, match=words):
        IRSet(np.ones((256, 1, 1)), 8000.0, ["s"], ["m"], zero_lag_samples=value)


def test_newer_format_version_is_refused(tmp_path):
    import json

    write_irset(tmp_path / "s", _pre_rolled(5))
    path = tmp_path / "s" / "irset.json"
    manifest = json.loads(path.read_text())
    manifest["format_version"] = 3
    path.write_text(json.dumps(manifest))
    with pytest.raises(InputError, match="newer than this arrayplan reads"):
        read_irset(tmp_path / "s")


# ----------------------------------------------------------------------------- smoothing

def _floor_set(fs: float, n: int, height_m: float, distance_m: float):
    """One speaker and one microphone at `height_m` over a rigid floor (image source), `distance_m` apart."""
    spk = np.array([[0.0, 0.0, height_m]])
    mic = np.array([[0.0, distance_m, height_m]])
    direct = free_field_irset(Rig.from_positions(spk, mic, speed_of_sound=C), fs, n)
    image = free_field_irset(Rig.from_positions(spk * [1, 1, -1], mic, speed_of_sound=C), fs, n)
    irs = IRSet(direct.data + image.data, fs, direct.speaker_names, direct.mic_names)
    r1, r2 = distance_m, float(np.hypot(distance_m, 2 * height_m))
    return irs, r1, r2


@pytest.mark.parametrize("octaves", [1 / 6, 1 / 3, 1.0])
def test_smoothing_scales_a_reflection_by_the_band_mean_of_its_phase(octaves):
    # Complex fractional-octave smoothing (P. D. Hatziantoniou & J. N. Mourjopoulos, JAES 48(4), 2000),
    # taken about the direct arrival: the direct sound g1 passes unchanged and the floor reflection g2,
    # dt later, is multiplied by the mean of exp(-j 2 pi f dt) over the band [fa, fb], which is
    # exp(-j 2 pi fc dt) sin(pi B dt) / (pi B dt) with B = fb - fa, fc = (fa + fb) / 2 (exact integral;
    # common practice, no source).  The mean over FFT bins approximates the integral: allowed 1 % of g1.
    fs, n = 48000.0, 8192
    irs, r1, r2 = _floor_set(fs, n, height_m=1.5, distance_m=2.0)
    dt = (r2 - r1) / C
    g1, g2 = 1 / (4 * np.pi * r1), 1 / (4 * np.pi * r2)
    hz = np.geomspace(300.0, 6000.0, 31)
    got = MeasuredKernel(irs, smoothing_octaves=octaves).evaluate(hz)[:, 0, 0]
    fa, fb = hz * 2 ** (-octaves / 2), hz * 2 ** (octaves / 2)
    expected = (g1 + g2 * np.exp(-2j * np.pi * (fa + fb) / 2 * dt) * np.sinc((fb - fa) * dt)) \
        * np.exp(-2j * np.pi * hz * r1 / C)
    assert np.max(np.abs(got - expected)) / g1 < 0.01


def test_smoothing_keeps_the_free_field_channels():
    # With the direct sound only, smoothing about each arrival changes nothing but the interpolation
    # error: the singular values stay within 1 % of s_max of the analytic kernel's (the off-grid
    # tolerance of the unsmoothed check above).  Reference: exp(-jkr)/(4 pi r) and numpy.linalg.svd.
    rig = _rig()
    irs = free_field_irset(rig, FS, N)
    hz = np.linspace(310.0, 8000.0, 37)
    s_model = np.linalg.svd(FreeFieldKernel(rig).evaluate(hz), compute_uv=False)
    for octaves in (1 / 6, 1 / 3):
        s_meas = np.linalg.svd(MeasuredKernel(irs, smoothing_octaves=octaves).evaluate(hz), compute_uv=False)
        assert np.max(np.abs(s_meas - s_model) / s_model[:, :1]) < 0.01


def test_smoothing_flattens_the_floor_comb():
    # A 1/3-octave band at 1 kHz is 231 Hz wide; against a 4.7 ms reflection delay B dt > 1 from 1 kHz up,
    # where |sin(pi x)/(pi x)| stays below its first side lobe, 0.217 (a property of the sinc function;
    # common practice, no source).  So the comb's ripple, 2 g2 peak to peak, shrinks to at most 0.44 g2.
    fs, n = 48000.0, 8192
    irs, r1, r2 = _floor_set(fs, n, height_m=1.5, distance_m=2.0)
    g1, g2 = 1 / (4 * np.pi * r1), 1 / (4 * np.pi * r2)
    hz = np.geomspace(1000.0, 6000.0, 60)
    raw = np.abs(MeasuredKernel(irs).evaluate(hz)[:, 0, 0])
    smooth = np.abs(MeasuredKernel(irs, smoothing_octaves=1 / 3).evaluate(hz)[:, 0, 0])
    assert np.ptp(raw) > 1.5 * g2
    assert np.ptp(smooth) < 2 * 0.22 * g2 and np.max(np.abs(smooth - g1)) < 0.22 * g2


@pytest.mark.parametrize("octaves", [0.0, -1.0, 3.0, float("nan")])
def test_bad_smoothing_width_is_refused(octaves):
    with pytest.raises(InputError, match="smoothing"):
        MeasuredKernel(free_field_irset(_rig(), FS, 512), smoothing_octaves=octaves)
