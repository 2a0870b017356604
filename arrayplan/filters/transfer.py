"""End-to-end transfer of drive filters -> rig -> combine filters, from the filters' spectra.

The transfer at bin k of an ``n_fft`` grid is ``T(f) = Cb(f)^T R(f) D(f)``
(output i, input j), with R the rig's coupling and D, Cb the discrete-time
Fourier transforms of the filter taps, sampled exactly by zero-padded real
FFTs (:func:`filter_spectra`).  With R the FFT of impulse responses, T is
the FFT of the linear convolution of drive taps, responses and combine
taps (:func:`arrayplan.filters.check.end_to_end_responses` computes that in
the time domain).

Speed: the spectra are computed once, over the span of the wanted bins;
the bins are then taken in chunks small enough to stay in cache
(:data:`CHUNK_BYTES`), several chunks at once on threads
(:func:`map_chunks`; numpy releases the GIL in the array work).  Every
chunk does the same arithmetic on the same numbers whatever its size and
thread, so the results do not depend on either.

Notes
-----
Bin k is ``k fs / n_fft`` Hz.  Sign convention exp(-j k r), the same as
numpy.fft.rfft of an impulse response.  Arrays are frequency first.
"""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor
from typing import Callable

import numpy as np
import scipy.fft as sp_fft

from ..kernels.coupling import Kernel
from ..kernels.freefield import FreeFieldKernel
from ..rig import Rig

__all__ = ["CHUNK_BYTES", "FFT_BATCH_BYTES", "WORKERS", "channel_transfer", "chunk_bins", "filter_spectra", "free_field_at",
           "kernel_at", "map_chunks", "over_bins", "spectra_over", "take_bins", "transfer_matrices"]

#: Bytes of the temporaries of one chunk of bins in :func:`over_bins` (small enough to stay in cache).
CHUNK_BYTES = 2 * 2 ** 20
#: Bytes of the coupling matrices of one call of ``rig_at`` in :func:`over_bins` (few calls: some kernels
#: have a cost per call, e.g. smoothed measured responses transform all their responses each time).
RIG_BATCH_BYTES = 16 * 2 ** 20
#: Bytes of one batch of zero-padded rows in :func:`filter_spectra`.
FFT_BATCH_BYTES = 8 * 2 ** 20
#: Default number of threads: every core this process may use.
WORKERS = max(1, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1))


def _threads(workers: int | None) -> int:
    """`workers`, or :data:`WORKERS` for None; at least 1."""
    return WORKERS if workers is None else max(1, int(workers))


def filter_spectra(x: np.ndarray, n_fft: int, lo: int, hi: int, workers: int | None = None) -> np.ndarray:
    """Zero-padded real FFTs of filter taps along axis 0, at the bins ``lo .. hi - 1``.

    Parameters
    ----------
    x : ndarray, shape (taps, a, b)
        Taps (dimensionless), e.g. (taps, n_spk, n_chan).
    n_fft : int
        FFT length, at least ``taps``; bin k is k fs / n_fft.
    lo, hi : int
        First bin and one past the last, ``0 <= lo < hi <= n_fft // 2 + 1``.
    workers : int, optional
        Threads; default :data:`WORKERS`.

    Returns
    -------
    ndarray, complex, shape (hi - lo, a, b)
        The spectra, frequency first.

    Notes
    -----
    The columns are transformed a few at a time along contiguous rows of a
    zero-padded buffer (its zero tail written once), so each batch stays
    small (:data:`FFT_BATCH_BYTES`) and no transform runs along a strided
    axis; each thread takes its own share of the columns with its own
    buffer.  Each row's FFT is the same whatever the batch and thread.
    """
    n, a, b = x.shape
    cols = x.reshape(n, a * b)
    out = np.empty((hi - lo, a * b), dtype=complex)
    step = int(max(1, min(a * b, FFT_BATCH_BYTES // (8 * n_fft))))

    def transform(share: slice) -> None:
        padded = np.zeros((min(step, share.stop - share.start), n_fft))
        for c0 in range(share.start, share.stop, step):
            c1 = min(c0 + step, share.stop)
            padded[:c1 - c0, :n] = cols[:, c0:c1].T
            out[:, c0:c1] = sp_fft.rfft(padded[:c1 - c0], axis=-1)[:, lo:hi].T

    threads = _threads(workers)
    map_chunks(transform, a * b, -(-a * b // threads), workers=threads)
    return out.reshape(hi - lo, a, b)


def spectra_over(drive: np.ndarray, combine: np.ndarray, n_fft: int, *bins: np.ndarray, workers: int | None = None
                 ) -> tuple[np.ndarray, np.ndarray, list[range | np.ndarray]]:
    """Drive and combine spectra over the span of all `bins`, and each set's index into them.

    Parameters
    ----------
    drive : ndarray, shape (taps, n_spk, n_chan)
    combine : ndarray, shape (taps_c, n_mic, n_chan)
    n_fft : int
    *bins : ndarray of int
        Sets of bins of the `n_fft` grid.
    workers : int, optional
        Threads; default :data:`WORKERS`.

    Returns
    -------
    d_spec, c_spec : ndarray, complex, shapes (n_span, n_spk, n_chan) and (n_span, n_mic, n_chan)
        The spectra on the bins from the least to the greatest of `bins`.
    index : list of (range or ndarray of int)
        Per set, its rows of the spectra: a range where the set is evenly
        spaced and ascending (read as views by :func:`take_bins`).
    """
    every = np.concatenate([np.asarray(b, dtype=int) for b in bins])
    lo, hi = (int(every.min()), int(every.max()) + 1) if len(every) else (0, 1)
    d_spec = filter_spectra(drive, n_fft, lo, hi, workers)
    c_spec = filter_spectra(combine, n_fft, lo, hi, workers)
    return d_spec, c_spec, [_as_index(np.asarray(b, dtype=int) - lo) for b in bins]


def _as_index(i: np.ndarray) -> range | np.ndarray:
    """`i` as a range where evenly spaced and ascending, else as it is."""
    if len(i) == 1 or (len(i) > 1 and i[1] > i[0] and np.all(np.diff(i) == i[1] - i[0])):
        return range(int(i[0]), int(i[-1]) + 1, int(i[1] - i[0]) if len(i) > 1 else 1)
    return i


def take_bins(spec: np.ndarray, index: range | np.ndarray, sl: slice) -> np.ndarray:
    """``spec[index[sl]]``: a view where `index` is a range, else a copy.

    Parameters
    ----------
    spec : ndarray, shape (n_span, ...)
        Spectra, frequency first (:func:`spectra_over`).
    index : range or ndarray of int
        One set's rows of `spec` (an entry of the index :func:`spectra_over` returns).
    sl : slice
        Which entries of `index` to take (a chunk of that set's bins).

    Returns
    -------
    ndarray, shape (len(index[sl]), ...)
        The rows; writing to a view writes to `spec`.
    """
    part = index[sl]
    return spec[slice(part.start, part.stop, part.step)] if isinstance(part, range) else spec[part]


def transfer_matrices(r: np.ndarray, d: np.ndarray, c: np.ndarray) -> np.ndarray:
    """``T = c^T r d`` at each bin.

    Parameters
    ----------
    r : ndarray, complex, shape (n, n_mic, n_spk)
    d : ndarray, complex, shape (n, n_spk, n_chan)
    c : ndarray, complex, shape (n, n_mic, n_chan)

    Returns
    -------
    ndarray, complex, shape (n, n_chan, n_chan)
        [f, i, j]: output i for input j.
    """
    return np.matmul(np.swapaxes(c, 1, 2), np.matmul(r, d))


def chunk_bins(d_spec: np.ndarray, c_spec: np.ndarray) -> int:
    """Bins per chunk: :data:`CHUNK_BYTES` over one bin's temporaries (rig, spectra, r d, T), at least 1.

    Parameters
    ----------
    d_spec, c_spec : ndarray, complex, shapes (n, n_spk, n_chan) and (n, n_mic, n_chan)
        Drive and combine spectra (:func:`spectra_over`); only their sizes are used.

    Returns
    -------
    int
        Bins per chunk.
    """
    n_spk, n_mic, n_chan = d_spec.shape[1], c_spec.shape[1], d_spec.shape[2]
    per_bin = 16 * (n_mic * n_spk + 2 * (n_spk + n_mic) * n_chan + 3 * n_chan * n_chan)
    return int(max(1, CHUNK_BYTES // per_bin))


def map_chunks(work: Callable[[slice], object], n: int, step: int, progress=None, done: int = 0,
               total: int | None = None, workers: int | None = None) -> list:
    """``work(sl)`` over consecutive slices of ``range(n)``, several at once on threads; results in order.

    Parameters
    ----------
    work : callable
        ``work(slice)`` -> anything.  Runs on several threads at once, each
        on its own slice: it must write only its own slice of shared arrays.
    n : int
        Number of bins.
    step : int
        Bins per slice (:func:`chunk_bins`).
    progress : callable, optional
        ``progress(done + bins finished, total)``, called on this thread.
    done, total : int
        Offset and total for `progress` (total defaults to ``done + n``).
    workers : int, optional
        Threads; default :data:`WORKERS`.  1 runs on this thread.

    Returns
    -------
    list
        ``work``'s results, one per slice, in order.
    """
    slices = [slice(b, min(b + step, n)) for b in range(0, n, max(1, int(step)))]
    total = done + n if total is None else total
    threads = _threads(workers)
    out = []
    if threads > 1 and len(slices) > 1:
        pool = ThreadPoolExecutor(max_workers=threads)
        try:
            for sl, res in zip(slices, pool.map(work, slices)):
                out.append(res)
                if progress is not None:
                    progress(done + sl.stop, total)
        finally:                                  # on an error or Ctrl-C, start no further slice
            pool.shutdown(wait=True, cancel_futures=True)
    else:
        for sl in slices:
            out.append(work(sl))
            if progress is not None:
                progress(done + sl.stop, total)
    return out


def over_bins(rig_at: Callable[[np.ndarray], np.ndarray], bins: np.ndarray,
              work: Callable[[slice, np.ndarray], object], d_spec: np.ndarray, c_spec: np.ndarray, progress=None,
              done: int = 0, total: int | None = None, workers: int | None = None) -> list:
    """``work(sl, r)`` over `bins`: the rig evaluated in batches, the work done in cache-sized chunks.

    The rig is evaluated :data:`RIG_BATCH_BYTES` of coupling matrices at a
    time (one ``rig_at`` call each; as many batches as the threads share
    evenly), several batches at once on threads (:func:`map_chunks`); within
    a batch, `work` runs on chunks of :func:`chunk_bins` bins.

    Parameters
    ----------
    rig_at : callable
        ``rig_at(bins)`` -> complex (len(bins), n_mic, n_spk).
    bins : ndarray of int, shape (n,)
    work : callable
        ``work(sl, r)``: `sl` a slice of ``range(n)``, `r` the rig at
        ``bins[sl]`` (a view).  Must write only its own slice of shared arrays.
    d_spec, c_spec : ndarray
        The drive and combine spectra (:func:`spectra_over`), for their sizes.
    progress, done, total, workers
        As in :func:`map_chunks`.

    Returns
    -------
    list
        ``work``'s results, one per chunk, in order.
    """
    n, threads = len(bins), _threads(workers)
    largest = max(1, RIG_BATCH_BYTES // (16 * c_spec.shape[1] * d_spec.shape[1]))
    n_batches = -(-n // largest)
    n_batches = -(-n_batches // threads) * threads if n_batches > 1 or threads > 1 else n_batches
    batch, step = max(1, -(-n // max(1, n_batches))), chunk_bins(d_spec, c_spec)

    def run(sl: slice) -> list:
        r = rig_at(bins[sl])
        return [work(slice(b, min(b + step, sl.stop)), r[b - sl.start:min(b + step, sl.stop) - sl.start])
                for b in range(sl.start, sl.stop, step)]

    return [res for part in map_chunks(run, n, batch, progress, done, total, workers) for res in part]


def channel_transfer(rig_at: Callable[[np.ndarray], np.ndarray], drive: np.ndarray, combine: np.ndarray,
                     n_fft: int, fine: np.ndarray, diag_bins: np.ndarray, drive_ref: np.ndarray | None = None,
                     combine_ref: np.ndarray | None = None, progress=None, workers: int | None = None
                     ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray | None]:
    """End-to-end transfer of drive filters -> rig -> combine filters, straight from the spectra.

    See the module docstring: ``T(f) = Cb(f)^T R(f) D(f)`` at every bin,
    the FFT (length `n_fft`) of the end-to-end impulse responses.

    Parameters
    ----------
    rig_at : callable
        ``rig_at(bins)`` -> ndarray, complex, shape (len(bins), n_mic, n_spk): the
        rig's coupling at those bins of the `n_fft` grid (bin k is k fs / n_fft).
        Called from several threads at once, on different bins.
    drive : ndarray, shape (taps, n_spk, n_chan)
    combine : ndarray, shape (taps_c, n_mic, n_chan)
        The same channels as `drive`, in the same order.
    n_fft : int
        FFT length, at least `taps` and `taps_c`.
    fine : ndarray of int, shape (n_fine,)
        Bins where the whole matrix T is wanted.
    diag_bins : ndarray of int, shape (n_diag,)
        Bins where only the diagonal T_jj is wanted.
    drive_ref, combine_ref : ndarray, complex, shapes (n_fine, n_spk, n_chan) and (n_fine, n_mic, n_chan), optional
        Reference weights at the `fine` bins; when given, the reference gains
        ``|combine_ref_j^T R drive_ref_j|`` are returned too.
    progress : callable, optional
        ``progress(done, total)`` in bins.
    workers : int, optional
        Threads; default :data:`WORKERS`.

    Returns
    -------
    t_fine : ndarray, complex, shape (n_fine, n_chan, n_chan)
        T at the `fine` bins.
    t_diag : ndarray, complex, shape (n_diag, n_chan)
        T_jj at the `diag_bins`.
    drive_energy, combine_energy : ndarray, shape (n_fine, n_chan)
        ``sum_s |D_sj|^2`` and ``sum_m |Cb_mj|^2`` at the `fine` bins.
    ref_gain : ndarray, shape (n_fine, n_chan), or None
        The reference gains, when reference weights are given.
    """
    fine, diag_bins = np.asarray(fine, dtype=int), np.asarray(diag_bins, dtype=int)
    d_spec, c_spec, (i_fine, i_diag) = spectra_over(drive, combine, int(n_fft), fine, diag_bins, workers=workers)
    n_chan = drive.shape[2]
    t_fine = np.empty((len(fine), n_chan, n_chan), dtype=complex)
    t_diag = np.empty((len(diag_bins), n_chan), dtype=complex)
    ref = None if drive_ref is None else np.empty((len(fine), n_chan))

    def whole(sl: slice, r: np.ndarray) -> None:
        t_fine[sl] = transfer_matrices(r, take_bins(d_spec, i_fine, sl), take_bins(c_spec, i_fine, sl))
        if ref is not None:
            ref[sl] = np.abs(np.einsum("fmj,fmj->fj", combine_ref[sl], np.matmul(r, drive_ref[sl])))

    def diagonal(sl: slice, r: np.ndarray) -> None:
        t_diag[sl] = np.einsum("fmj,fmj->fj", take_bins(c_spec, i_diag, sl),
                               np.matmul(r, take_bins(d_spec, i_diag, sl)))

    total = len(fine) + len(diag_bins)
    over_bins(rig_at, fine, whole, d_spec, c_spec, progress, 0, total, workers)
    over_bins(rig_at, diag_bins, diagonal, d_spec, c_spec, progress, len(fine), total, workers)
    drive_energy = np.sum(np.abs(take_bins(d_spec, i_fine, slice(None))) ** 2, axis=1)
    combine_energy = np.sum(np.abs(take_bins(c_spec, i_fine, slice(None))) ** 2, axis=1)
    return t_fine, t_diag, drive_energy, combine_energy, ref


def free_field_at(rig: Rig, n_fft: int, sample_rate_hz: float) -> Callable[[np.ndarray], np.ndarray]:
    """``rig_at(bins)`` for :func:`channel_transfer`: the free-field coupling at bins of an `n_fft` grid.

    The same spectrum as :func:`arrayplan.kernels.model_irs.free_field_impulse_responses`
    of `n_fft` samples: the kernel at every bin, its real limit at DC, zero
    at the Nyquist bin of an even grid.

    Parameters
    ----------
    rig : Rig
        Speakers, microphones and medium (its room, if any, is not used).
    n_fft, sample_rate_hz
        As for :func:`kernel_at`.

    Returns
    -------
    callable
        :func:`kernel_at` of the rig's :class:`arrayplan.kernels.freefield.FreeFieldKernel`.
    """
    return kernel_at(FreeFieldKernel(rig), n_fft, sample_rate_hz)


def kernel_at(kernel: Kernel, n_fft: int, sample_rate_hz: float) -> Callable[[np.ndarray], np.ndarray]:
    """``rig_at(bins)`` for :func:`channel_transfer`: any kernel's coupling at bins of an `n_fft` grid.

    Parameters
    ----------
    kernel : Kernel
        Anything with ``evaluate(hz)`` giving (n, n_mic, n_spk).
    n_fft : int
        FFT length; bin k is k fs / n_fft.
    sample_rate_hz : float
        fs, Hz.

    Returns
    -------
    callable
        ``rig_at(bins)`` -> complex (len(bins), n_mic, n_spk): the kernel at
        each bin, its real limit at DC, zero at the Nyquist bin of an even grid.
    """

    def rig_at(bins: np.ndarray) -> np.ndarray:
        hz = np.asarray(bins, dtype=float) * sample_rate_hz / n_fft
        g = kernel.evaluate(np.where(hz > 0, hz, 1e-6))
        g[hz == 0] = g[hz == 0].real
        if n_fft % 2 == 0:
            g[np.asarray(bins) == n_fft // 2] = 0.0
        return g

    return rig_at
