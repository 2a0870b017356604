"""FIR channel filters: design against scipy.signal, time-domain isolation, files and CLI."""

from __future__ import annotations

import json

import numpy as np
import pytest
import soundfile as sf
from scipy.signal import fftconvolve, freqz

from arrayplan.cli import main
from arrayplan.filters import check_filters, design_filters, end_to_end_responses, write_filters
from arrayplan.filters.check import channel_transfer
from arrayplan.rig import Rig

FS = 16000.0
TAPS = 512
BAND = (500.0, 4000.0)
C = 343.0


def symmetric_rig(d: float = 0.15, length: float = 1.0) -> Rig:
    """Speakers at (+-d, 0, 0), microphones at (+-d, 0, L)."""
    spk = np.array([[-d, 0.0, 0.0], [d, 0.0, 0.0]])
    mic = np.array([[-d, 0.0, length], [d, 0.0, length]])
    return Rig.from_positions(spk, mic, speed_of_sound=C, name="sym2")


def test_filter_responses_match_planned_weights_times_bulk_delay():
    # Reference: scipy.signal.freqz (general-purpose reference library) evaluated at the
    # design bin centres; expected H = weight * exp(-j 2 pi f delay / fs) for a pure
    # delay (DFT shift theorem, common practice, no source).  Tolerance 2e-2 absolute on
    # unit-norm weights: the Tukey time window smooths the spectrum slightly.
    rig = symmetric_rig()
    f = design_filters(rig, FS, TAPS, BAND, min_level_db=-60.0)
    mask = f.in_band()
    hz = f.plan.axis.hz[mask]
    assert f.bulk_delay_samples == TAPS // 2
    for side, taps, weights, delay in (("drive", f.drive, f.plan.drive, f.drive_delay_samples),
                                       ("combine", f.combine, f.plan.combine, f.combine_delay_samples)):
        for k, j in enumerate(f.kept):
            for e in range(taps.shape[1]):
                _, h = freqz(taps[:, e, k], worN=hz, fs=FS)
                want = weights[mask, e, j] * np.exp(-2j * np.pi * hz * delay / FS)
                assert np.max(np.abs(h - want)) < 2e-2, (side, j, e)


def test_end_to_end_matches_direct_convolution():
    # Reference: numpy.convolve (direct sum) for the chain drive -> rig -> combine,
    # against the implementation's scipy.signal.fftconvolve; common practice, no source.
    rng = np.random.default_rng(7)
    ir = rng.standard_normal((40, 3, 2))
    drive = rng.standard_normal((16, 2, 2))
    combine = rng.standard_normal((16, 3, 2))
    got = end_to_end_responses(ir, drive, combine)
    for i in range(2):
        for j in range(2):
            want = sum(np.convolve(np.convolve(drive[:, s, j], ir[:, m, s]), combine[:, m, i])
                       for m in range(3) for s in range(2))
            np.testing.assert_allclose(got[:, i, j], want, atol=1e-10)
    np.testing.assert_allclose(got[:, 0, 0], sum(fftconvolve(fftconvolve(drive[:, s, 0], ir[:, m, s]),
                                                             combine[:, m, 0]) for m in range(3) for s in range(2)),
                               atol=1e-10)


def test_symmetric_pair_channels_and_isolation():
    # Analytic 2x2 layout: G = [[a, b], [b, a]] with a = exp(-jkL)/(4 pi L), b the same at
    # r = sqrt(L^2 + 4 d^2) (free-field Green's function); eigenvectors (1, +-1)/sqrt2 and
    # singular values |a +- b| (symmetric matrix algebra, common practice, no source).
    d, length = 0.15, 1.0
    rig = symmetric_rig(d, length)
    f = design_filters(rig, FS, TAPS, BAND, min_level_db=-60.0)
    hz = f.plan.axis.hz
    k = 2 * np.pi * hz / C
    r2 = np.hypot(length, 2 * d)
    a = np.exp(-1j * k * length) / (4 * np.pi * length)
    b = np.exp(-1j * k * r2) / (4 * np.pi * r2)
    want = np.sort(np.stack([np.abs(a + b), np.abs(a - b)], axis=1), axis=1)
    np.testing.assert_allclose(np.sort(f.plan.singular_values, axis=1), want, rtol=1e-9)
    v = np.abs(f.plan.drive)
    np.testing.assert_allclose(v, 1 / np.sqrt(2), rtol=1e-9)
    assert f.kept == (0, 1)
    chk = check_filters(rig, f, limit_db=-40.0)
    assert np.all(chk.passed()), chk.crosstalk_db
    assert np.all(chk.worst_crosstalk_db() < -40.0)
    assert np.all(chk.gain_error_db < 0.5)


def test_weak_channel_is_listed_as_skipped_and_files_are_complete(tmp_path):
    rig = symmetric_rig(0.02, 1.0)      # close pair: the difference channel is weak at low frequency
    f = design_filters(rig, FS, TAPS, BAND, min_level_db=-3.0)
    assert f.kept == (0,)
    assert [j for j, _ in f.skipped] == [1] and "dB" in f.skipped[0][1]
    chk = check_filters(rig, f)
    files = write_filters(rig, f, tmp_path / "out", chk)
    names = sorted(p.name for p in files)
    assert names == sorted(["channel-01-drive.wav", "channel-01-combine.wav", "filters.json", "weights.csv",
                            "check.csv", "crosstalk.png", "filters-matrix.txt", "channel-01-response.png"])
    data, rate = sf.read(tmp_path / "out" / "channel-01-drive.wav", dtype="float32")
    assert rate == 16000 and data.shape == (TAPS, 2)
    np.testing.assert_allclose(data, f.drive[:, :, 0], atol=1e-6)
    doc = json.loads((tmp_path / "out" / "filters.json").read_text())
    assert doc["skipped"][0]["channel"] == 2 and doc["bulk_delay_samples"] == TAPS // 2
    assert doc["speakers"] == list(rig.speakers.names) and doc["provenance"]["rig_sha256"] == rig.sha256
    assert doc["caution"]


RIG_TOML = """
[rig]
name = "pair"
[[speakers]]
position = [-0.15, 0, 0]
[[speakers]]
position = [0.15, 0, 0]
[[microphones]]
position = [-0.15, 0, 1]
[[microphones]]
position = [0.15, 0, 1]
"""


@pytest.mark.parametrize("extra, flag", [
    (["--rate-hz", "6000", "--band-hz", "500", "4000"], "--rate-hz"),
    (["--rate-hz", "16000", "--band-hz", "500", "9000"], "--rate-hz"),
    (["--rate-hz", "16000", "--band-hz", "4000", "500"], "--band-hz"),
    (["--rate-hz", "16000", "--band-hz", "500", "4000", "--taps", "20"], "--taps"),
])
def test_cli_bad_input_exits_2_one_line_nothing_written(tmp_path, capsys, extra, flag):
    rig = tmp_path / "rig.toml"
    rig.write_text(RIG_TOML)
    out = tmp_path / "out"
    assert main(["filters", str(rig), "--out", str(out)] + extra) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and flag in err[0] and "fix" in err[0]
    assert not out.exists() and sorted(p.name for p in tmp_path.iterdir()) == ["rig.toml"]


def test_cli_writes_filters_and_check(tmp_path, capsys):
    rig = tmp_path / "rig.toml"
    rig.write_text(RIG_TOML)
    out = tmp_path / "out"
    assert main(["filters", str(rig), "--rate-hz", "16000", "--taps", "512", "--band-hz", "500", "4000",
                 "--out", str(out), "--min-level-db", "-60"]) == 0
    text = capsys.readouterr().out
    assert "PASS" in text and "verdict: PASS, 2 of 2" in text and "bulk delay 256 samples" in text
    assert (out / "check.csv").read_text().count(",pass\n") == 2


def test_irregular_rig_strong_channels_stay_isolated_in_time_domain():
    # The channel matrix combine^T G drive is diag(s) at every planned bin (SVD channels,
    # D. A. B. Miller, Applied Optics 39(11), 2000), so the realised filters must keep the
    # two strong channels of an irregular 3 x 4 rig apart to better than -40 dB in band.
    spk = np.array([[-0.2, 0, 0], [0.05, 0, 0.02], [0.25, 0.03, 0]])
    mic = np.array([[-0.3, 0, 1.2], [-0.1, 0.02, 1.2], [0.12, 0, 1.25], [0.3, 0, 1.2]])
    rig = Rig.from_positions(spk, mic, speed_of_sound=C)
    f = design_filters(rig, FS, TAPS, BAND, min_level_db=-60.0)
    strong = [k for k, j in enumerate(f.kept) if f.level_db[j] >= -3.0]
    assert len(strong) == 2
    chk = check_filters(rig, f)
    x = chk.crosstalk_db[np.ix_(strong, strong)]
    assert np.nanmax(x) < -40.0
    assert np.all(chk.gain_error_db < 0.5)


def test_channel_transfer_matches_direct_convolution():
    # Reference: numpy.convolve (direct sum) for drive -> rig -> combine, then numpy.fft.rfft of the
    # end-to-end responses zero-padded to the fine grid (DFT of a linear convolution = product of the
    # zero-padded DFTs, common practice, no source).
    rng = np.random.default_rng(11)
    ir = rng.standard_normal((40, 3, 2))
    drive = rng.standard_normal((16, 2, 2))
    combine = rng.standard_normal((16, 3, 2))
    n_out = 40 + 16 + 16 - 2
    t = np.zeros((n_out, 2, 2))
    for i in range(2):
        for j in range(2):
            t[:, i, j] = sum(np.convolve(np.convolve(drive[:, s, j], ir[:, m, s]), combine[:, m, i])
                             for m in range(3) for s in range(2))
    n_fft = 640
    fine, edges = np.arange(5, 200, 3), np.array([1, 2, 250, 300])
    spec = np.fft.rfft(ir, n=n_fft, axis=0)
    got_fine, got_diag, _, _, _ = channel_transfer(lambda bins: spec[bins], drive, combine, n_fft, fine, edges)
    want = np.fft.rfft(t, n=n_fft, axis=0)
    np.testing.assert_allclose(got_fine, want[fine], atol=1e-10)
    np.testing.assert_allclose(got_diag, np.einsum("fjj->fj", want[edges]), atol=1e-10)


def _fine_in_band(taps_arr, fs, band, factor=16):
    """numpy.fft.rfft of taps zero-padded `factor` times: spectra (n_fine, n_elem) and frequencies in band."""
    n = factor * taps_arr.shape[0]
    hz = np.fft.rfftfreq(n, 1.0 / fs)
    keep = (hz >= band[0]) & (hz <= band[1])
    return np.fft.rfft(taps_arr, n=n, axis=0)[keep], hz[keep]


def test_check_reports_the_worst_case_between_the_design_bins(tmp_path):
    # Independent computation in this test: the written WAV taps through numpy.fft.rfft zero-padded
    # 16x (a grid 16 times finer than the design bins), the pair's free-field coupling
    # G = [[a, b], [b, a]], a = exp(-jkL)/(4 pi L), b at r = sqrt(L^2 + 4 d^2) (Green's function),
    # and its channels' exact gains |a + b| and |a - b| (symmetric matrix algebra, common practice, no
    # source) at every fine frequency.  The check must report the worst case of that grid, not of the
    # design bins: its figures agree with the 16x computation to 0.02 dB (its own grid is >= 8x).
    d, length, fs, taps, band = 0.15, 1.0, 48000.0, 1024, (100.0, 4000.0)
    rig = symmetric_rig(d, length)
    f = design_filters(rig, fs, taps, band, min_level_db=-60.0)
    chk = check_filters(rig, f)
    write_filters(rig, f, tmp_path / "out", chk)
    assert chk.grid_factor >= 8
    energy = {}
    for k, j in enumerate(f.kept):
        drive, _ = sf.read(tmp_path / "out" / f"channel-{j + 1:02d}-drive.wav", dtype="float64")
        combine, _ = sf.read(tmp_path / "out" / f"channel-{j + 1:02d}-combine.wav", dtype="float64")
        dh, hz = _fine_in_band(drive, fs, band)
        ch, _ = _fine_in_band(combine, fs, band)
        e_drive = np.max(np.abs(10 * np.log10(np.sum(np.abs(dh) ** 2, axis=1))))
        e_combine = np.max(np.abs(10 * np.log10(np.sum(np.abs(ch) ** 2, axis=1))))
        kw = 2 * np.pi * hz / C
        a = np.exp(-1j * kw * length) / (4 * np.pi * length)
        r2 = np.hypot(length, 2 * d)
        b = np.exp(-1j * kw * r2) / (4 * np.pi * r2)
        g = np.array([[a, b], [b, a]]).transpose(2, 0, 1)            # (n_fine, mic, spk)
        t_jj = np.einsum("fm,fms,fs->f", ch, g, dh)
        in_phase = np.real(f.plan.drive[f.in_band(), 0, j] * np.conj(f.plan.drive[f.in_band(), 1, j]))[0] > 0
        s = np.abs(a + b) if in_phase else np.abs(a - b)
        gain = np.max(np.abs(20 * np.log10(np.abs(t_jj) / s)))
        assert chk.drive_energy_error_db[k] == pytest.approx(e_drive, abs=0.02)
        assert chk.combine_energy_error_db[k] == pytest.approx(e_combine, abs=0.02)
        assert chk.gain_error_db[k] == pytest.approx(gain, abs=0.02)
        energy[k] = (e_drive, e_combine, gain)
    # between the bins is where the error is largest: the design bins alone would understate it
    assert np.all(chk.gain_error_db > chk.bin_gain_error_db)
    doc = json.loads((tmp_path / "out" / "filters.json").read_text())
    np.testing.assert_allclose(doc["check"]["drive_energy_error_db"], [e[0] for e in energy.values()], atol=0.02)
    assert doc["check"]["grid_factor"] >= 8
