"""Outside checks of the channel decomposition (SVD identities, reciprocity, closed forms)."""
from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from arrayplan.channels.svd import decompose
from arrayplan.frequency import FrequencyAxis
from arrayplan.kernels.freefield import FreeFieldKernel
from arrayplan.rig import Rig
from arrayplan.kernels.model_irs import free_field_impulse_responses

C = 343.2


def _random_rig(seed: int, n_spk: int, n_mic: int, freqs=(250.0, 1000.0, 3000.0)) -> Rig:
    rng = np.random.default_rng(seed)
    spk = rng.uniform(-0.5, 0.5, (n_spk, 3))
    mic = rng.uniform(-0.5, 0.5, (n_mic, 3)) + np.array([0.0, 0.0, 2.0])
    return Rig.from_positions(spk, mic, speed_of_sound=C, frequencies=list(freqs))


def _check_svd_identities(rig: Rig) -> None:
    kernel = FreeFieldKernel(rig)
    axis = rig.frequencies
    g = kernel.evaluate(axis.hz)
    ch = decompose(kernel, axis, chunk_size=2)
    s = ch.singular_values
    # Sum rule ||G||_F^2 = sum_j s_j^2 (Golub & Van Loan, Matrix Computations, 4th ed. 2013, sec. 2.5)
    np.testing.assert_allclose(np.sum(np.abs(g) ** 2, axis=(1, 2)), np.sum(s ** 2, axis=1), rtol=1e-10)
    np.testing.assert_allclose(ch.sum_rule, np.sum(s ** 2, axis=1), rtol=1e-10)
    # U^H G V = diag(s): combine = conj(U), so combine^T G drive = diag(s) (Golub & Van Loan, sec. 2.4)
    k = s.shape[1]
    expected = np.zeros((len(axis), k, k), dtype=complex)
    expected[:, np.arange(k), np.arange(k)] = s
    scale = s[:, :1, None]
    np.testing.assert_allclose(ch.channel_matrix(g) / scale, expected / scale, atol=1e-10)
    # orthonormal columns of V and U (Golub & Van Loan, sec. 2.4)
    eye = np.eye(k)
    np.testing.assert_allclose(np.einsum("fsi,fsj->fij", ch.drive.conj(), ch.drive), np.broadcast_to(eye, (len(axis), k, k)), atol=1e-10)
    np.testing.assert_allclose(np.einsum("fmi,fmj->fij", ch.combine.conj(), ch.combine), np.broadcast_to(eye, (len(axis), k, k)), atol=1e-10)
    # singular values non-negative and in descending order (Golub & Van Loan, sec. 2.4)
    assert np.all(s >= 0)
    assert np.all(np.diff(s, axis=1) <= 1e-14 * s[:, :1])
    # and they are those of numpy's reference SVD
    np.testing.assert_allclose(s, np.linalg.svd(g, compute_uv=False), rtol=1e-10)


@pytest.mark.parametrize("seed, n_spk, n_mic", [(1, 4, 6), (2, 7, 3), (3, 5, 5), (4, 1, 4)])
def test_svd_identities_on_random_rigs(seed, n_spk, n_mic):
    _check_svd_identities(_random_rig(seed, n_spk, n_mic))


@pytest.mark.parametrize("seed, n_spk, n_mic", [(11, 4, 6), (12, 6, 3)])
def test_reciprocity_swapping_speakers_and_mics(seed, n_spk, n_mic):
    # Acoustic reciprocity (Rayleigh, The Theory of Sound, 1877; Kinsler et al., Fundamentals of
    # Acoustics): the omni free-field Green's function is symmetric in source and receiver, so
    # swapping speakers and mics transposes G, and a matrix and its transpose share singular values.
    rig = _random_rig(seed, n_spk, n_mic)
    swapped = Rig.from_positions(rig.mics.positions, rig.speakers.positions, speed_of_sound=C,
                                 frequencies=list(rig.frequencies.hz))
    g = FreeFieldKernel(rig).evaluate(rig.frequencies.hz)
    g_sw = FreeFieldKernel(swapped).evaluate(rig.frequencies.hz)
    np.testing.assert_allclose(g_sw, np.transpose(g, (0, 2, 1)), rtol=1e-12)
    s = decompose(FreeFieldKernel(rig), rig.frequencies).singular_values
    s_sw = decompose(FreeFieldKernel(swapped), swapped.frequencies).singular_values
    np.testing.assert_allclose(s_sw, s, rtol=1e-10)


@settings(max_examples=15, deadline=None)
@given(seed=st.integers(0, 2 ** 31 - 1), n_spk=st.integers(1, 5), n_mic=st.integers(1, 5))
def test_svd_identities_property(seed, n_spk, n_mic):
    # Same Golub & Van Loan identities as above, over hypothesis-drawn small rigs.
    _check_svd_identities(_random_rig(seed, n_spk, n_mic, freqs=(500.0, 2000.0)))


@settings(max_examples=10, deadline=None)
@given(seed=st.integers(0, 2 ** 31 - 1), n_spk=st.integers(1, 4), n_mic=st.integers(1, 4))
def test_reciprocity_property(seed, n_spk, n_mic):
    # Reciprocity (Rayleigh, The Theory of Sound, 1877): singular values unchanged by the swap.
    rig = _random_rig(seed, n_spk, n_mic, freqs=(700.0,))
    swapped = Rig.from_positions(rig.mics.positions, rig.speakers.positions, speed_of_sound=C,
                                 frequencies=[700.0])
    s = decompose(FreeFieldKernel(rig), rig.frequencies).singular_values
    s_sw = decompose(FreeFieldKernel(swapped), swapped.frequencies).singular_values
    np.testing.assert_allclose(s_sw, s, rtol=1e-10)


def test_symmetric_two_by_two_closed_form():
    # Speakers at (+-d, 0, 0), mics at (+-d, 0, L). Each mic sees its facing speaker at distance L
    # and the other at r2 = sqrt(4 d^2 + L^2), so G = [[a, b], [b, a]] with
    # a = exp(-jkL)/(4 pi L), b = exp(-jk r2)/(4 pi r2) (free-field Green's function, Kinsler et al.).
    # G is complex symmetric and commutes with the swap [[0,1],[1,0]], so its eigenvectors are
    # (1, +-1)/sqrt(2) with eigenvalues a +- b. G is normal (G G^H = G^H G, since both are
    # polynomials in the swap matrix), so its singular values are the moduli |a + b| and |a - b|
    # (common linear algebra, Golub & Van Loan, Matrix Computations, 2013).
    d, L = 0.3, 2.0
    spk = np.array([[d, 0, 0], [-d, 0, 0]], dtype=float)
    mic = np.array([[d, 0, L], [-d, 0, L]], dtype=float)
    freqs = [200.0, 850.0, 1700.0, 4100.0]
    rig = Rig.from_positions(spk, mic, speed_of_sound=C, frequencies=freqs)
    ch = decompose(FreeFieldKernel(rig), rig.frequencies)
    k = 2 * np.pi * np.array(freqs) / C
    r2 = np.sqrt(4 * d ** 2 + L ** 2)
    a = np.exp(-1j * k * L) / (4 * np.pi * L)
    b = np.exp(-1j * k * r2) / (4 * np.pi * r2)
    expected = np.sort(np.stack([np.abs(a + b), np.abs(a - b)], axis=1), axis=1)[:, ::-1]
    np.testing.assert_allclose(ch.singular_values, expected, rtol=1e-10)
    # drive vectors are (1, +-1)/sqrt(2) up to a phase
    for f in range(len(freqs)):
        v = ch.drive[f]
        overlaps = np.abs(np.array([[1, 1], [1, -1]]) / np.sqrt(2) @ v)
        np.testing.assert_allclose(np.sort(overlaps.max(axis=0)), [1.0, 1.0], atol=1e-10)


def test_free_field_phase_matches_fft_of_delayed_impulse():
    # A delay of tau seconds has spectrum exp(-j 2 pi f tau) under the FFT sign convention
    # (numpy.fft.rfft; shift theorem, Oppenheim & Schafer, Discrete-Time Signal Processing, 2010).
    # An independently built band-limited (sinc-interpolated) impulse, delayed by r/c and scaled by
    # 1/(4 pi r), must then match the kernel exp(-jkr)/(4 pi r) at every bin. Truncating the sinc
    # to the record leaves errors of about 1e-3 here (measured 0.9e-3 .. 1.3e-3 up to fs/4), so the
    # tolerance is 5e-3 relative below fs/4.
    fs, n, r = 48000.0, 4096, 1.234
    rig = Rig.from_positions(np.zeros((1, 3)), np.array([[0.0, 0.0, r]]), speed_of_sound=C,
                             frequencies=[1000.0])
    tau = r / C * fs
    h_ref = np.sinc(np.arange(n) - tau) / (4 * np.pi * r)
    h_ref_spec = np.fft.rfft(h_ref)
    hz = np.fft.rfftfreq(n, 1.0 / fs)
    bins = np.arange(1, n // 4)
    g = FreeFieldKernel(rig).evaluate(hz[bins])[:, 0, 0]
    np.testing.assert_allclose(h_ref_spec[bins], g, rtol=5e-3)
    phase_err = np.angle(g * np.exp(1j * 2 * np.pi * hz[bins] * r / C))
    assert np.max(np.abs(phase_err)) < 1e-9
    # the simulated impulse response is that same delayed impulse (peak-relative error 1 %)
    ir = free_field_impulse_responses(rig, fs, n)[:, 0, 0]
    assert np.max(np.abs(ir - h_ref)) < 0.01 * np.max(np.abs(h_ref))
    assert int(np.argmax(ir)) == int(round(tau))
    ir_spec = np.fft.rfft(ir)
    np.testing.assert_allclose(ir_spec[bins], g, rtol=5e-3)


def test_tracking_keeps_values_and_follows_smooth_rig():
    # Tracking only reorders channels and rotates phases, so the set of singular values at each
    # frequency is unchanged (common practice, no source); on a finely sampled smooth rig the
    # drive vectors of consecutive bins of the same channel overlap strongly.
    spk = np.stack([np.linspace(-0.4, 0.4, 6), np.zeros(6), np.zeros(6)], axis=1)
    mic = np.stack([np.linspace(-0.5, 0.5, 7), np.zeros(7), np.full(7, 2.5)], axis=1)
    axis = FrequencyAxis(np.linspace(400.0, 1200.0, 161))
    rig = Rig.from_positions(spk, mic, speed_of_sound=C, frequencies=list(axis.hz))
    plain = decompose(FreeFieldKernel(rig), axis)
    tracked = decompose(FreeFieldKernel(rig), axis, track=True)
    assert tracked.tracked
    np.testing.assert_allclose(np.sort(tracked.singular_values, axis=1), np.sort(plain.singular_values, axis=1), rtol=1e-12)
    k = tracked.n_channels
    # the strongest few channels are well separated; their overlaps from bin to bin stay near 1
    ov = np.abs(np.einsum("fsj,fsj->fj", tracked.drive[:-1].conj(), tracked.drive[1:]))
    strong = tracked.singular_values[:-1] > 1e-2 * tracked.singular_values[:-1, :1]
    assert np.min(ov[strong]) > 0.9
    # tracked columns are still singular vectors: channel_matrix is diagonal with the tracked order
    g = FreeFieldKernel(rig).evaluate(axis.hz)
    m = tracked.channel_matrix(g)
    np.testing.assert_allclose(np.abs(m[:, np.arange(k), np.arange(k)]), tracked.singular_values, rtol=1e-8, atol=1e-14)
