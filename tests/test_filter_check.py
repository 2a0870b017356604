"""The filters' time-domain check against a plain computation written here (numpy FFTs, one bin at a time)."""

from __future__ import annotations

import time

import numpy as np
import pytest

from arrayplan.filters import check_filters, design_filters
from arrayplan.filters import transfer
from arrayplan.rig import Rig

FS = 16000.0
TAPS = 512
BAND = (500.0, 4000.0)
C = 343.0
#: Agreement asked of every dB figure: far below anything the check reports to a user (0.01 dB), far
#: above the rounding of two FFT implementations (numpy's and scipy's) and of the matrix products.
TOL_DB = 1e-9


def irregular_rig() -> Rig:
    """3 speakers and 4 microphones, irregular, facing 1.2 m apart (an invented test layout)."""
    spk = np.array([[-0.2, 0, 0], [0.05, 0, 0.02], [0.25, 0.03, 0]])
    mic = np.array([[-0.3, 0, 1.2], [-0.1, 0.02, 1.2], [0.12, 0, 1.25], [0.3, 0, 1.2]])
    return Rig.from_positions(spk, mic, speed_of_sound=C)


def plain_check(spk: np.ndarray, mic: np.ndarray, f, n_fft: int, n_out: int) -> dict:
    """The check's figures computed the plain way, on the grid of `n_fft` bins.

    Filter spectra: numpy.fft.rfft of the taps zero-padded to n_fft (the DFT samples the
    taps' Fourier transform exactly; common practice, no source).  Rig: the free-field
    Green's function exp(-j k r) / (4 pi r) between the positions (the DSP sign convention).
    T = Cb^T G D, one bin at a time with plain matrix products.  Figures as the check's
    documentation defines them (module docstring of arrayplan.filters.check).
    """
    fs, taps = f.sample_rate_hz, f.taps
    kept = list(f.kept)
    hz_all = np.arange(n_fft // 2 + 1) * fs / n_fft
    plan_hz = f.plan.axis.hz
    bin_hz = fs / taps
    fine = np.nonzero((hz_all >= f.band_hz[0]) & (hz_all <= f.band_hz[1]))[0]
    edges = np.nonzero(~((hz_all >= f.band_hz[0]) & (hz_all <= f.band_hz[1]))
                       & (hz_all > plan_hz[0] - bin_hz) & (hz_all < plan_hz[-1] + bin_hz))[0]
    d_all = np.fft.rfft(f.drive, n=n_fft, axis=0)                  # (n_bins, n_spk, n_kept)
    c_all = np.fft.rfft(f.combine, n=n_fft, axis=0)                # (n_bins, n_mic, n_kept)
    r = np.linalg.norm(mic[:, None, :] - spk[None, :, :], axis=-1)   # (n_mic, n_spk)

    def g_at(hz: float) -> np.ndarray:
        return np.exp(-2j * np.pi * hz / C * r) / (4 * np.pi * r)

    n_k = len(kept)
    gain = np.zeros(n_k)
    e_drive, e_combine = np.zeros(n_k), np.zeros(n_k)
    worst_ratio = np.zeros((n_k, n_k))
    diag = {}
    power = f.plan.singular_values ** 2
    for k in fine:
        hz = hz_all[k]
        near = int(np.clip(np.round((hz - plan_hz[0]) / bin_hz), 0, len(plan_hz) - 1))  # ties to even, as numpy.round
        g = g_at(hz)
        t = c_all[k].T @ g @ d_all[k]                              # (out i, in j)
        diag[k] = np.diag(t).copy()
        for jj, j in enumerate(kept):
            planned = abs(f.plan.combine[near, :, j] @ g @ f.plan.drive[near, :, j])
            gain[jj] = max(gain[jj], abs(20 * np.log10(abs(t[jj, jj]) / planned)))
            e_drive[jj] = max(e_drive[jj], abs(10 * np.log10(np.sum(np.abs(d_all[k, :, jj]) ** 2))))
            e_combine[jj] = max(e_combine[jj], abs(10 * np.log10(np.sum(np.abs(c_all[k, :, jj]) ** 2))))
        level = 10 * np.log10(power[near] / power[near].max())
        in_use = level[kept] >= f.min_level_db
        for i in range(n_k):
            for j in range(n_k):
                if in_use[i] and in_use[j]:
                    worst_ratio[i, j] = max(worst_ratio[i, j], abs(t[i, j]) / abs(t[i, i]))
    with np.errstate(divide="ignore"):
        crosstalk = 20 * np.log10(worst_ratio)
    np.fill_diagonal(crosstalk, np.nan)
    in_band = (plan_hz >= f.band_hz[0]) & (plan_hz <= f.band_hz[1])
    bin_gain = np.zeros(n_k)
    for b in np.nonzero(in_band)[0]:
        k = int(round(plan_hz[b] * n_fft / fs))
        for jj, j in enumerate(kept):
            bin_gain[jj] = max(bin_gain[jj], abs(20 * np.log10(abs(diag[k][jj]) / f.plan.singular_values[b, j])))
    spectrum = np.zeros((n_fft // 2 + 1, n_k), dtype=complex)
    for k in fine:
        spectrum[k] = diag[k]
    for k in edges:
        spectrum[k] = np.diag(c_all[k].T @ g_at(hz_all[k]) @ d_all[k])
    latency = np.argmax(np.abs(np.fft.irfft(spectrum, n=n_fft, axis=0)[:n_out]), axis=0)
    return dict(gain_error_db=gain, bin_gain_error_db=bin_gain, drive_energy_error_db=e_drive,
                combine_energy_error_db=e_combine, crosstalk_db=crosstalk, latency_samples=latency)


@pytest.mark.parametrize("workers", [1, 3])
def test_check_equals_plain_per_bin_computation(monkeypatch, workers):
    # Independent computation in this test (plain_check: numpy.fft.rfft of the taps, the free-field
    # Green's function, plain matrix products bin by bin).  Small batches of the kernel, chunks and FFT
    # batches force many boundaries, on one thread and on several: the figures must not depend on them.
    monkeypatch.setattr(transfer, "RIG_BATCH_BYTES", 20_000)      # about 100 bins per call of the kernel
    monkeypatch.setattr(transfer, "CHUNK_BYTES", 40_000)          # about 30 bins per chunk
    monkeypatch.setattr(transfer, "FFT_BATCH_BYTES", 200_000)     # a few columns per FFT batch
    rig = irregular_rig()
    f = design_filters(rig, FS, TAPS, BAND, min_level_db=-60.0)
    chk = check_filters(rig, f, workers=workers)
    n_fft = int(round(chk.grid_factor * TAPS))
    assert n_fft >= 8 * TAPS
    n_out = chk.ir_samples + 2 * TAPS - 2
    want = plain_check(rig.speakers.positions, rig.mics.positions, f, n_fft, n_out)
    assert len(f.kept) == 3
    for name in ("gain_error_db", "bin_gain_error_db", "drive_energy_error_db", "combine_energy_error_db"):
        np.testing.assert_allclose(getattr(chk, name), want[name], rtol=0, atol=TOL_DB, err_msg=name)
    got_x, want_x = chk.crosstalk_db, want["crosstalk_db"]
    assert np.array_equal(np.isnan(got_x), np.isnan(want_x)) and np.array_equal(np.isinf(got_x), np.isinf(want_x))
    finite = np.isfinite(want_x)
    assert finite.sum() == 6                                      # every off-diagonal pair is judged somewhere
    np.testing.assert_allclose(got_x[finite], want_x[finite], rtol=0, atol=TOL_DB)
    np.testing.assert_array_equal(chk.latency_samples, want["latency_samples"])


def test_check_does_not_depend_on_threads_or_chunks(monkeypatch):
    # Common practice, no source: the same arithmetic cut into other pieces gives the same figures.
    rig = irregular_rig()
    f = design_filters(rig, FS, TAPS, BAND, min_level_db=-60.0)
    one = check_filters(rig, f, workers=1)
    monkeypatch.setattr(transfer, "RIG_BATCH_BYTES", 5_000)
    monkeypatch.setattr(transfer, "CHUNK_BYTES", 10_000)
    monkeypatch.setattr(transfer, "FFT_BATCH_BYTES", 100_000)
    many = check_filters(rig, f, workers=4)
    for name in ("gain_error_db", "bin_gain_error_db", "drive_energy_error_db", "combine_energy_error_db",
                 "crosstalk_db"):
        np.testing.assert_allclose(getattr(many, name), getattr(one, name), rtol=0, atol=1e-12, err_msg=name)
    np.testing.assert_array_equal(many.latency_samples, one.latency_samples)


def test_an_error_in_one_chunk_reaches_the_caller_and_stops_the_rest():
    # Common practice, no source: a failing piece of work is reported as itself, and the pieces not yet
    # started are dropped instead of run to the end.
    started = []

    def work(sl):
        started.append(sl.start)
        time.sleep(0.005)                                         # 400 chunks take 1 s on two threads
        if sl.start == 3:
            raise ValueError("chunk 3 failed")
        return sl.start

    with pytest.raises(ValueError, match="chunk 3 failed"):
        transfer.map_chunks(work, 400, 1, workers=2)
    assert len(started) < 400
    assert transfer.map_chunks(lambda sl: (sl.start, sl.stop), 10, 4, workers=3) == [(0, 4), (4, 8), (8, 10)]
