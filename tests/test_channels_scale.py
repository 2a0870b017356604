"""Large-rig planning: results identical on worker processes, top-k channels, chunk memory budget.

The references here are independent computations written in this file (numpy.linalg.svd with the
phase rule and the tracking assignment spelled out loop by loop, scipy.optimize.linear_sum_assignment),
never arrayplan's functions on both sides.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import linear_sum_assignment

from arrayplan.channels.svd import bytes_per_frequency, chunk_for_budget, decompose, decompose_stack
from arrayplan.errors import InputError
from arrayplan.frequency import FrequencyAxis
from arrayplan.kernels.freefield import FreeFieldKernel
from arrayplan.parallel import map_chunks
from arrayplan.rig import Rig

C = 343.2


def _panel_rig(n_side: int, seed: int = 5) -> Rig:
    """Two facing square grids with a little placement scatter (an invented bench panel)."""
    rng = np.random.default_rng(seed)
    x, y = np.meshgrid(np.linspace(-0.3, 0.3, n_side), np.linspace(-0.3, 0.3, n_side))
    spk = np.column_stack([x.ravel(), y.ravel(), np.zeros(x.size)]) + rng.normal(0, 2e-3, (x.size, 3))
    mic = np.column_stack([1.2 * x.ravel(), 1.2 * y.ravel(), np.full(x.size, 2.0)]) + rng.normal(0, 2e-3, (x.size, 3))
    return Rig.from_positions(spk, mic, speed_of_sound=C)


def _reference_channels(g: np.ndarray):
    """numpy.linalg.svd, then the documented phase rule written out: the largest-magnitude speaker
    entry of each V column (first within a relative 1e-6) real and positive (common practice, no source)."""
    u, s, vh = np.linalg.svd(g, full_matrices=False)
    v = np.conj(np.swapaxes(vh, -1, -2))
    mag = np.abs(v)
    pivot = np.argmax(mag >= mag.max(axis=-2, keepdims=True) * (1.0 - 1e-6), axis=-2)
    ref = np.take_along_axis(v, pivot[..., None, :], axis=-2)
    rot = np.conj(ref) / np.where(np.abs(ref) > 0, np.abs(ref), 1.0)
    return s, v * rot, np.conj(u * rot)


def _reference_tracking(s, drive, combine):
    """Bin-to-bin tracking as documented, one bin at a time against the already tracked bin: the
    assignment maximising |u_prev^H u| + |v_prev^H v| (linear_sum_assignment, Crouse 2016), then the
    phase rotation making v_prev^H v + u_prev^H u real and positive."""
    s, drive, combine = s.copy(), drive.copy(), combine.copy()
    for f in range(1, s.shape[0]):
        ov = (np.abs(np.einsum("si,sj->ij", np.conj(drive[f - 1]), drive[f]))
              + np.abs(np.einsum("mi,mj->ij", combine[f - 1], np.conj(combine[f]))))
        rows, cols = linear_sum_assignment(-ov)
        order = cols[np.argsort(rows)]
        s[f], drive[f], combine[f] = s[f, order], drive[f][:, order], combine[f][:, order]
        c = np.sum(np.conj(drive[f - 1]) * drive[f], axis=0) + np.sum(combine[f - 1] * np.conj(combine[f]), axis=0)
        rot = np.conj(c) / np.where(np.abs(c) > 0, np.abs(c), 1.0)
        drive[f] *= rot
        combine[f] *= np.conj(rot)
    return s, drive, combine


def test_in_place_phase_rule_is_bit_identical_to_the_written_out_rule():
    rig = _panel_rig(4)
    g = FreeFieldKernel(rig).evaluate(np.array([300.0, 1000.0, 2500.0, 6000.0]))
    ref = _reference_channels(g)
    got = decompose_stack(g)
    for a, b in zip(ref, got):
        assert np.array_equal(a, b)          # bit for bit: the same arithmetic, without copies


def test_vectorised_tracking_matches_bin_by_bin_tracking():
    rig = _panel_rig(3)
    axis = FrequencyAxis(np.linspace(300.0, 3000.0, 120))
    g = FreeFieldKernel(rig).evaluate(axis.hz)
    ref = _reference_tracking(*_reference_channels(g))
    tracked = decompose(FreeFieldKernel(rig), axis, track=True, chunk_size=17)
    # the same assignment and the same rotation arithmetic: identical bit for bit on this rig
    for a, b in zip(ref, (tracked.singular_values, tracked.drive, tracked.combine)):
        assert np.array_equal(a, b)


def test_two_worker_processes_give_the_serial_result_bit_for_bit():
    rig = _panel_rig(4)
    axis = FrequencyAxis.spaced(200.0, 5000.0, 24, "log")
    serial = decompose(FreeFieldKernel(rig), axis, workers=1, chunk_size=24)
    pooled = decompose(FreeFieldKernel(rig), axis, workers=2, chunk_size=5)
    # each matrix is decomposed alone with one LAPACK thread, whichever process or chunk holds it
    for name in ("singular_values", "drive", "combine", "sum_rule"):
        assert np.array_equal(getattr(serial, name), getattr(pooled, name)), name
    # and the values are numpy's SVD of the same matrices (Golub & Van Loan, Matrix Computations, 2013)
    g = FreeFieldKernel(rig).evaluate(axis.hz)
    np.testing.assert_allclose(pooled.singular_values, np.linalg.svd(g, compute_uv=False), rtol=1e-12)


def test_map_chunks_keeps_the_order_of_the_items():
    # results come back in the order of the items, whichever worker finished first (common practice)
    items = list(range(7))
    got = map_chunks(pow, items, shared=3, workers=2)
    assert got == [3 ** i for i in items]
    with pytest.raises(InputError, match="at least 1"):
        map_chunks(pow, items, shared=3, workers=0)


@pytest.mark.parametrize("k", [5, 12])
def test_top_k_singular_values_against_the_full_svd(k):
    rig = _panel_rig(8)           # 64 x 64, so the Lanczos solver (not the full SVD) is used for k <= 10
    axis = FrequencyAxis([400.0, 1500.0, 4000.0])
    g = FreeFieldKernel(rig).evaluate(axis.hz)
    full = np.linalg.svd(g, compute_uv=False)
    top = decompose(FreeFieldKernel(rig), axis, max_channels=k)
    assert top.truncated and top.n_channels == k
    # within 1e-9 of the largest singular value of numpy.linalg.svd (LAPACK gesdd; issue 16's accuracy target)
    assert np.max(np.abs(top.singular_values - full[:, :k])) <= 1e-9 * full[:, 0].max()
    # computed triplets are singular triplets of G: combine^T G drive = diag(s) (Golub & Van Loan)
    m = np.einsum("fmi,fms,fsj->fij", top.combine, g, top.drive)
    np.testing.assert_allclose(m, np.stack([np.diag(s) for s in top.singular_values]), atol=1e-9 * full.max())
    # the sum rule still comes from G, and the share left over is that of the channels not computed
    np.testing.assert_allclose(top.sum_rule, np.sum(np.abs(g) ** 2, axis=(1, 2)), rtol=1e-12)
    np.testing.assert_allclose(top.share_not_computed(), np.sum(full[:, k:] ** 2, axis=1) / np.sum(full ** 2, axis=1),
                               atol=1e-12)


def test_auto_top_k_reaches_below_the_floor_and_keeps_the_usable_count():
    rig = _panel_rig(8)
    axis = FrequencyAxis([300.0, 900.0, 2500.0, 7000.0])
    g = FreeFieldKernel(rig).evaluate(axis.hz)
    full = np.linalg.svd(g, compute_uv=False)
    snr_db = 40.0
    top = decompose(FreeFieldKernel(rig), axis, max_channels="auto", floor_db=snr_db, first_guess=np.full(4, 1.0))
    n = top.channels_computed()
    floor = full[:, 0] * 10 ** (-snr_db / 20)
    for f in range(len(axis)):
        # the weakest computed channel is at or below the floor, or every channel was computed
        assert n[f] == 64 or top.singular_values[f, n[f] - 1] <= floor[f] * (1 + 1e-12)
        assert np.max(np.abs(top.singular_values[f, :n[f]] - full[f, :n[f]])) <= 1e-9 * full[f, 0]
    # usable = above the floor: counted on numpy's full spectrum in the test
    np.testing.assert_array_equal(top.usable_channels(snr_db), np.sum(full > floor[:, None], axis=1))


def test_max_channels_beyond_the_rig_is_refused():
    rig = _panel_rig(2)
    with pytest.raises(InputError, match="at most 4"):
        decompose(FreeFieldKernel(rig), FrequencyAxis([1000.0]), max_channels=5)


def test_chunk_from_memory_budget():
    # one chunk's estimated working memory stays within the budget, and the estimate counts at least
    # the complex128 coupling matrices themselves (16 bytes per entry; numpy dtype size)
    assert bytes_per_frequency(64, 64) >= 16 * 64 * 64
    chunk = chunk_for_budget(4096, 64, 64, memory_mb=64.0)
    assert chunk * bytes_per_frequency(64, 64) <= 64e6 < (chunk + 1) * bytes_per_frequency(64, 64)
    assert chunk_for_budget(16, 1024, 1024, memory_mb=64.0) == 1          # one matrix exceeds it alone
    assert chunk_for_budget(1024, 8, 8, memory_mb=64.0) == 128             # eight chunks at least


def test_kernels_pickle_and_plan_alike_on_workers():
    import pickle

    from arrayplan.rig.directivity import Directivity  # noqa: F401  (a directional rig exercises its pickling)
    from arrayplan.formats.irset import IRSet
    from arrayplan.kernels.measured import MeasuredKernel

    rig = _panel_rig(3)
    rng = np.random.default_rng(8)
    irs = IRSet(rng.standard_normal((512, 9, 9)), 16000.0, list(rig.speakers.names), list(rig.mics.names))
    hz = np.array([250.0, 1000.0, 3000.0])
    for kernel in (FreeFieldKernel(rig), MeasuredKernel(irs, window_s=0.02), MeasuredKernel(irs, smoothing_octaves=1 / 3)):
        again = pickle.loads(pickle.dumps(kernel))
        assert np.array_equal(again.evaluate(hz), kernel.evaluate(hz))
    # a measured kernel planned on two workers equals the serial plan, bit for bit; its matrices are the
    # DFT of the responses at the planned frequencies, written out here (Oppenheim & Schafer, 2010)
    kernel = MeasuredKernel(irs)
    axis = FrequencyAxis([250.0, 700.0, 1000.0, 3000.0, 5000.0])
    serial = decompose(kernel, axis, workers=1)
    pooled = decompose(kernel, axis, workers=2)
    assert np.array_equal(serial.drive, pooled.drive) and np.array_equal(serial.singular_values, pooled.singular_values)
    n = np.arange(512)
    g = np.einsum("fn,nms->fms", np.exp(-2j * np.pi * np.outer(axis.hz / 16000.0, n)), irs.data)
    np.testing.assert_allclose(pooled.singular_values, np.linalg.svd(g, compute_uv=False), rtol=1e-10)


def test_single_precision_against_the_double_svd():
    rig = _panel_rig(5)
    axis = FrequencyAxis([500.0, 2000.0, 6000.0])
    g = FreeFieldKernel(rig).evaluate(axis.hz)
    full = np.linalg.svd(g, compute_uv=False)
    single = decompose(FreeFieldKernel(rig), axis, precision="single")
    assert single.drive.dtype == np.complex64 and single.singular_values.dtype == np.float32
    # a backward-stable SVD in IEEE single (unit roundoff 6e-8) errs by a small multiple of 6e-8 x s_max
    # (Golub & Van Loan, Matrix Computations, 2013, sec. 8.6)
    assert np.max(np.abs(single.singular_values - full)) <= 1e-5 * full[:, 0].max()
    np.testing.assert_allclose(single.sum_rule, np.sum(np.abs(g) ** 2, axis=(1, 2)), rtol=1e-12)  # from G, in double
