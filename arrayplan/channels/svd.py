"""Channels ("communication modes"): the SVD of every coupling matrix.

For each frequency, G = U S V^H with singular values in descending order.
Channel j is driven by the speaker weights ``drive[:, j] = V[:, j]`` and
received by combining the microphones with ``combine[:, j] = conj(U[:, j])``
(output ``y_j = sum_m combine[m, j] p_m = u_j^H p``), so that the channel
matrix ``combine^T G drive`` is diag(s) and the power coupling of channel j
is ``s_j**2``.

Notes
-----
Phase convention.  The SVD leaves one unit phase per channel free
(u_j, v_j) -> (u_j e^{j phi}, v_j e^{j phi}).  arrayplan fixes it so that
the speaker entry of largest magnitude in each drive vector is real and
positive (ties within a relative 1e-6 go to the lowest speaker index).
Channels with equal singular values (degenerate) span a subspace whose
basis the SVD does not fix; any orthonormal basis of it is a valid plan.

Tracking.  With ``track=True``, channels are numbered by their order at the
first frequency and followed from bin to bin: at each bin the new channels
are matched to the previous ones by the largest total overlap
|u_prev^H u_new| + |v_prev^H v_new| (an assignment problem, solved exactly),
then each matched pair is rotated in phase so that v_prev^H v_new +
u_prev^H u_new is real and positive.  Where two singular values cross, the
weights stay continuous and the channel keeps its number, so a tracked
channel's singular value need not be descending across channels.
Strong/effective counts never depend on tracking.

Truncation.  With ``max_channels`` only the strongest channels are computed
(:mod:`arrayplan.channels.topk`); ``ChannelSet.computed`` then gives their number per
frequency, the columns beyond it hold zeros, the sum rule is still
sum |G|^2 from G itself, and :meth:`ChannelSet.share_not_computed` is the
part of it in the channels not computed.  The effective count of a
truncated plan is that of the computed channels.

Where the work runs.  :func:`decompose` evaluates the kernel and decomposes
chunk by chunk, here or on worker processes or a Dask cluster
(:mod:`arrayplan.parallel`); each worker builds its own coupling matrices,
and the result does not depend on where it was computed.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass, replace

import numpy as np

from ..kernels.coupling import CouplingStack, Kernel
from ..errors import InputError
from ..frequency import FrequencyAxis
from .tracking import _overlap_costs, _track_in_place, track_channels
from .work_size import (AUTO_PARALLEL_WORK, MIN_CHUNKS, bytes_per_frequency, chunk_for_budget,
                        workers_for)

__all__ = ["ChannelSet", "decompose", "decompose_stack", "fix_phase", "track_channels", "chunk_for_budget",
           "bytes_per_frequency", "workers_for"]

_TIE_RTOL = 1e-6


@dataclass(frozen=True)
class ChannelSet:
    """The channels of a rig at every planned frequency.

    Each frequency's SVD G = U S V^H, with the weights of each channel as columns.

    Attributes
    ----------
    axis : FrequencyAxis
        The planned frequencies (Hz).
    singular_values : ndarray, shape (n_freq, n_chan)
        Amplitude coupling s_j (unit of G, 1/m for the free field).
    drive : ndarray, complex, shape (n_freq, n_spk, n_chan)
        Speaker drive weights, unit-norm columns (V).
    combine : ndarray, complex, shape (n_freq, n_mic, n_chan)
        Microphone combine weights, unit-norm columns (conj U).
    sum_rule : ndarray, shape (n_freq,)
        sum |G_ms|^2, computed from G itself.
    speaker_names, mic_names : tuple of str
    tracked : bool
        True when the channels were tracked across frequency.
    computed : ndarray of int, shape (n_freq,), optional
        With a truncated plan (only the strongest channels computed), the
        number of channels computed at each frequency; the columns beyond
        it hold zeros.  None when every channel was computed.
    """

    axis: FrequencyAxis
    singular_values: np.ndarray
    drive: np.ndarray
    combine: np.ndarray
    sum_rule: np.ndarray
    speaker_names: tuple[str, ...]
    mic_names: tuple[str, ...]
    tracked: bool = False
    computed: np.ndarray | None = None

    @property
    def n_channels(self) -> int:
        """Columns of the weight arrays.

        Returns
        -------
        int
            n_chan: min(n_mic, n_spk), or the largest count computed in a truncated plan.
        """
        return int(self.singular_values.shape[1])

    @property
    def truncated(self) -> bool:
        """Whether only the strongest channels were computed (see ``computed``).

        Returns
        -------
        bool
        """
        return self.computed is not None

    def channels_computed(self) -> np.ndarray:
        """Channels computed at each frequency (all of them unless truncated).

        Returns
        -------
        ndarray of int, shape (n_freq,)
        """
        if self.computed is None:
            return np.full(len(self.axis), self.n_channels)
        return np.asarray(self.computed)

    def share_not_computed(self) -> np.ndarray:
        """Share of the sum rule in the channels not computed, 1 - sum s^2 / sum |G|^2.

        Returns
        -------
        ndarray, shape (n_freq,)
            Between 0 and 1; zero up to rounding (about 1e-15) for a complete plan.
        """
        return np.clip(1.0 - np.sum(self.power_coupling, axis=1) / self.sum_rule, 0.0, 1.0)

    @property
    def power_coupling(self) -> np.ndarray:
        """Power coupling of each channel.

        Returns
        -------
        ndarray, shape (n_freq, n_chan)
            s_j^2, in the unit of |G|^2 (1/m^2 for the free field).
        """
        return self.singular_values ** 2

    def share_of_sum_rule(self) -> np.ndarray:
        """Each channel's share of the sum rule.

        Returns
        -------
        ndarray, shape (n_freq, n_chan)
            s_j^2 / sum |G|^2 (a fraction, not percent).
        """
        return self.power_coupling / self.sum_rule[:, None]

    def level_db(self) -> np.ndarray:
        """Each channel's level against the strongest at its frequency.

        Returns
        -------
        ndarray, shape (n_freq, n_chan)
            10 log10(s_j^2 / s_max^2), dB (0 for the strongest); -inf for a zero channel.
        """
        p = self.power_coupling
        with np.errstate(divide="ignore"):
            return 10.0 * np.log10(p / p.max(axis=1, keepdims=True))

    def strong_channels(self, threshold_db: float = 3.0) -> np.ndarray:
        """Number of channels within `threshold_db` of the strongest, per frequency.

        Parameters
        ----------
        threshold_db : float
            Level below the strongest channel, dB (the sign is ignored).

        Returns
        -------
        ndarray of int, shape (n_freq,)
        """
        return np.sum(self.level_db() >= -abs(threshold_db) - 1e-12, axis=1)

    def usable_channels(self, snr_db: float = 40.0) -> np.ndarray:
        """Channels above the noise floor when the strongest has an SNR of `snr_db`, per frequency.

        Parameters
        ----------
        snr_db : float
            Signal-to-noise ratio of the strongest channel, dB (the sign is ignored).

        Returns
        -------
        ndarray of int, shape (n_freq,)
            Channels whose level is above -`snr_db`.
        """
        return np.sum(self.level_db() > -abs(snr_db), axis=1)

    def effective_channels(self) -> np.ndarray:
        """Participation ratio (sum s^2)^2 / sum s^4, per frequency.

        Returns
        -------
        ndarray, shape (n_freq,)
            Between 1 (one channel holds everything) and n_chan (all equal).
        """
        p = self.power_coupling
        return np.sum(p, axis=1) ** 2 / np.sum(p ** 2, axis=1)

    def channel_matrix(self, g: np.ndarray) -> np.ndarray:
        """The channel matrix ``combine^T G drive``: how the planned channels couple through `g`.

        Parameters
        ----------
        g : ndarray, complex, shape (n_freq, n_mic, n_spk)
            Coupling matrices at this set's frequencies (the planned kernel
            gives diag(s); measured or perturbed ones show crosstalk).

        Returns
        -------
        ndarray, complex, shape (n_freq, n_chan, n_chan)
            Entry [f, i, j]: output of channel i when channel j is driven.
        """
        return np.einsum("fmi,fms,fsj->fij", self.combine, g, self.drive)


def fix_phase(u: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Apply the phase convention (see module Notes) to U and V columns.

    Parameters
    ----------
    u : ndarray, shape (..., n_mic, n_chan)
    v : ndarray, shape (..., n_spk, n_chan)

    Returns
    -------
    u, v with each column pair multiplied by the same unit phase.
    """
    mag = np.abs(v)
    near_max = mag >= mag.max(axis=-2, keepdims=True) * (1.0 - _TIE_RTOL)
    pivot = np.argmax(near_max, axis=-2)                       # first near-maximal entry
    ref = np.take_along_axis(v, pivot[..., None, :], axis=-2)  # (..., 1, n_chan)
    rot = np.conj(ref) / np.where(np.abs(ref) > 0, np.abs(ref), 1.0)
    return u * rot, v * rot


def _phase_fixed_into(u: np.ndarray, vh: np.ndarray, drive: np.ndarray, combine: np.ndarray) -> None:
    """The phase convention applied to an SVD's ``u`` and ``vh``, written into `drive` and `combine`.

    Parameters
    ----------
    u : ndarray, complex, shape (n_freq, n_mic, n_chan)
        Overwritten (rotated in place).
    vh : ndarray, complex, shape (n_freq, n_chan, n_spk)
    drive : ndarray, complex, shape (n_freq, n_spk, n_chan)
        Receives V with the convention applied.
    combine : ndarray, complex, shape (n_freq, n_mic, n_chan)
        Receives conj(U) with the convention applied.

    Notes
    -----
    The same arithmetic as :func:`fix_phase` on ``v = conj(vh^T)`` (|conj z|
    = |z| and conj(a b) = conj(a) conj(b) hold exactly in IEEE arithmetic),
    so the result is bit-identical, without the copies of a transposed view.
    """
    mag = np.abs(vh)                                            # (F, K, n_spk)
    near_max = mag >= mag.max(axis=-1, keepdims=True) * (1.0 - _TIE_RTOL)
    pivot = np.argmax(near_max, axis=-1)                        # (F, K)
    ref_conj = np.take_along_axis(vh, pivot[..., None], axis=-1)[..., 0]   # conj of v's pivot entry
    size = np.abs(ref_conj)
    rot = ref_conj / np.where(size > 0, size, 1.0)             # (F, K)
    np.conjugate(np.swapaxes(vh, -1, -2), out=drive)
    drive *= rot[..., None, :]
    u *= rot[..., None, :]
    np.conjugate(u, out=combine)


def decompose_stack(g: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Batched SVD with the phase convention.

    Parameters
    ----------
    g : ndarray, complex, shape (n_freq, n_mic, n_spk)

    Returns
    -------
    s : ndarray, shape (n_freq, n_chan), descending
    drive : ndarray, shape (n_freq, n_spk, n_chan)  (V)
    combine : ndarray, shape (n_freq, n_mic, n_chan)  (conj U)
    """
    u, s, vh = np.linalg.svd(g, full_matrices=False)
    drive = np.empty(g.shape[:-2] + (g.shape[-1], s.shape[-1]), dtype=vh.dtype)
    combine = np.empty_like(u)
    _phase_fixed_into(u, vh, drive, combine)
    return s, drive, combine


# --- decomposing chunk by chunk, here or on workers -----------------------------------------------

@dataclass(frozen=True)
class _ChunkJob:
    """What every chunk needs: the kernel and the truncation settings (sent once per worker)."""

    kernel: Kernel
    max_channels: int | None       # fixed K, or None (all, or auto with first guesses)
    auto: bool
    floor_ratio: float
    single: bool = False           # decompose in complex64 (the full SVD only)
    track: bool = False            # also return the overlaps of consecutive bins (for tracking)
    out: str | None = None         # key of SharedArrays to write the full SVD's results into, or None


def _channels_of_chunk(job: _ChunkJob, item: tuple[np.ndarray, np.ndarray | None]):
    """Coupling matrices of one chunk of frequencies, built here, and their channels.

    Returns (s, drive, combine, sum_rule, computed, costs) for the chunk;
    with truncation, unused columns are zero and ``computed`` counts the
    rest; ``costs`` are the tracking overlaps within the chunk (or None).
    With ``job.out`` the full SVD's s, drive, combine and costs are written
    into those shared arrays at the chunk's rows instead (and None returned
    in their place).
    """
    start, hz, k_first = item
    g = job.kernel.evaluate(hz)
    sum_rule = np.einsum("fms,fms->f", g.real, g.real) + np.einsum("fms,fms->f", g.imag, g.imag)
    if job.max_channels is None and not job.auto:
        if job.single:
            g = g.astype(np.complex64)
        if job.out is None:
            s, drive, combine = decompose_stack(g)
            del g
            return s, drive, combine, sum_rule, None, _overlap_costs(drive, combine) if job.track else None
        from ..shared_arrays import arrays_for

        out, rows = arrays_for(job.out), slice(start, start + len(hz))
        u, out["s"][rows], vh = np.linalg.svd(g, full_matrices=False)
        del g
        _phase_fixed_into(u, vh, out["drive"][rows], out["combine"][rows])
        if job.track and len(hz) > 1:
            out["costs"][start:start + len(hz) - 1] = _overlap_costs(out["drive"][rows], out["combine"][rows])
        return None, None, None, sum_rule, None, None
    from .topk import leading_triplets, triplets_above_floor

    parts = [triplets_above_floor(g[f], int(k_first[f]), job.floor_ratio) if job.auto
             else leading_triplets(g[f], job.max_channels) for f in range(len(hz))]
    del g
    computed = np.array([p[1].size for p in parts])
    k = int(computed.max())
    u = np.zeros((len(hz), parts[0][0].shape[0], k), dtype=complex)
    vh = np.zeros((len(hz), k, parts[0][2].shape[1]), dtype=complex)
    s = np.zeros((len(hz), k))
    for f, (uf, sf, vhf) in enumerate(parts):
        u[f, :, :sf.size], s[f, :sf.size], vh[f, :sf.size] = uf, sf, vhf
    drive = np.empty((len(hz), vh.shape[2], k), dtype=complex)
    combine = np.empty_like(u)
    _phase_fixed_into(u, vh, drive, combine)
    return s, drive, combine, sum_rule, computed, None


def decompose(source: Kernel | CouplingStack, axis: FrequencyAxis | None = None, *, chunk_size: int | None = None,
              track: bool = False, progress=None, workers: int | None = 1, scheduler: str | None = None,
              max_channels: int | str | None = None, floor_db: float = 40.0,
              first_guess: np.ndarray | None = None, memory_mb: float = 64.0,
              precision: str = "double") -> ChannelSet:
    """The channels of a kernel (evaluated chunk by chunk) or of a coupling stack.

    Parameters
    ----------
    source : Kernel or CouplingStack
        With a kernel, `axis` is required and at most `chunk_size`
        coupling matrices are held at a time per worker.  The kernel must
        pickle when it runs on workers.
    axis : FrequencyAxis, optional
        Frequencies to plan at (default: the stack's own axis).
    chunk_size : int, optional
        Frequencies per batch (default: from `memory_mb`).
    track : bool
        Track channels across frequency (:func:`track_channels`).
    progress : callable, optional
        Called as ``progress(done, total)`` after each chunk.
    workers : int or None
        Worker processes (see :mod:`arrayplan.parallel`); 1 is serial; None
        uses every core when the job is large (:func:`workers_for`).
    scheduler : str, optional
        ``"local:N"`` or a dask.distributed address (:mod:`arrayplan.parallel`).
    max_channels : int, "auto" or None
        Compute only the K strongest channels per frequency
        (:mod:`arrayplan.channels.topk`); "auto" starts from `first_guess` and grows
        until the weakest computed channel is `floor_db` below the
        strongest; None computes all.
    floor_db : float
        The floor for "auto", dB below the strongest channel (the SNR).
    first_guess : ndarray, shape (n_freq,), optional
        Channels to try first per frequency with "auto" (NaN: 16).
    memory_mb : float
        Working-memory budget per worker for the default chunk size, MB.
    precision : {"double", "single"}
        "single" decomposes complex64 matrices (LAPACK cgesdd): faster, with
        relative errors near 1e-7 on the strong channels; singular values
        and weights are then float32/complex64.  The sum rule is always
        computed in double from G.  Top-k channels are always computed in
        double.

    Returns
    -------
    ChannelSet
        Identical, bit for bit, for every `workers` and `scheduler`: each
        matrix is decomposed alone, with one LAPACK thread, and the default
        chunk size does not depend on the workers.  Between different chunk
        sizes the free-field plan is identical too; a kernel that builds its
        matrices by a matrix product (the measured kernel's DFT) may differ
        in the last bits, as BLAS blocks a product by its size.
    """
    if isinstance(source, CouplingStack):
        axis = source.axis if axis is None else axis
    if axis is None:
        raise ValueError("decompose(kernel) needs the frequency axis")
    hz = axis.hz
    n_mic, n_spk = len(source.mic_names), len(source.speaker_names)
    n_all = min(n_mic, n_spk)
    auto = isinstance(max_channels, str)
    if auto and max_channels != "auto":
        raise InputError(f"expected a whole number or 'auto', got {max_channels!r}", field="max_channels")
    fixed = None if (auto or max_channels is None) else int(max_channels)
    if fixed is not None and not 1 <= fixed <= n_all:
        raise InputError(f"{fixed} channels asked for, but the rig has at most {n_all} "
                         f"({n_spk} speakers, {n_mic} microphones)", field="max_channels",
                         fix=f"give at most {n_all}, or 'auto'")
    if fixed == n_all:
        fixed = None
    n_workers = workers_for(len(hz), n_mic, n_spk, workers)
    if chunk_size is None:
        chunk_size = chunk_for_budget(len(hz), n_mic, n_spk, memory_mb, fixed)
    chunk_size = max(1, int(chunk_size))
    guess = None
    if auto:
        first = np.full(len(hz), np.nan) if first_guess is None else np.asarray(first_guess, dtype=float)
        guess = np.where(np.isfinite(first), np.ceil(1.5 * np.nan_to_num(first) + 8), 16).astype(int)
    starts = range(0, len(hz), chunk_size)
    items = [(a, hz[a:a + chunk_size], None if guess is None else guess[a:a + chunk_size]) for a in starts]
    if precision not in ("double", "single"):
        raise InputError(f"expected 'double' or 'single', got {precision!r}", field="precision")
    single = precision == "single" and fixed is None and not auto
    job = _ChunkJob(source, fixed, auto, 10.0 ** (-abs(floor_db) / 20.0), single, track and not auto)
    results = _gather(job, items, len(hz), n_mic, n_spk, n_all if fixed is None else fixed, auto,
                      n_workers, scheduler, progress)
    s, drive, combine, sum_rule, computed, costs = results
    if track:
        _track_in_place(s, drive, combine, costs)
    return ChannelSet(axis, s, drive, combine, sum_rule, tuple(source.speaker_names), tuple(source.mic_names),
                      tracked=track, computed=computed)


def _import_assignment() -> None:
    """Import scipy.optimize (for tracking's assignment) in a helper thread."""
    import scipy.optimize  # noqa: F401


def _gather(job, items, n_freq, n_mic, n_spk, k, auto, workers, scheduler, progress):
    """Run the chunks and put their results in frequency order (see :func:`decompose`)."""
    from ..parallel import iter_chunks, one_blas_thread, resolve_scheduler
    from ..shared_arrays import SharedArrays

    starts = np.cumsum([0] + [len(it[1]) for it in items])
    sum_rule = np.empty(n_freq)
    costs, shared = None, None
    if auto:  # the channel count is known only at the end: keep the chunks, then pad
        parts: list = [None] * len(items)
    else:
        real, cplx = (np.float32, np.complex64) if job.single else (float, complex)
        specs = {"s": ((n_freq, k), real), "drive": ((n_freq, n_spk, k), cplx), "combine": ((n_freq, n_mic, k), cplx)}
        if job.track:
            specs["costs"] = ((max(0, n_freq - 1), k, k), float)
        # the full SVD's results are written in place by the chunks: shared with local workers
        # (no transfer through pipes), plain memory here; a Dask cluster sends them back
        if job.max_channels is None and resolve_scheduler(scheduler) is None:
            try:
                shared = SharedArrays(specs, in_memory=workers == 1 or len(items) <= 1)
            except OSError:            # no room for the shared file: results come back through pipes
                shared = None
        if shared is not None:
            job = replace(job, out=shared.key)
            out = shared.arrays
        else:
            out = {name: np.empty(shape, dtype=dtype) for name, (shape, dtype) in specs.items()}
        s, drive, combine, costs = out["s"], out["drive"], out["combine"], out.get("costs")
        computed = None if job.max_channels is None else np.full(n_freq, k)
    freq_done = 0
    preload = None
    try:
        for i, (s_c, d_c, c_c, sr_c, comp_c, cost_c) in iter_chunks(_channels_of_chunk, items, shared=job,
                                                                    workers=workers, scheduler=scheduler):
            if job.track and preload is None:
                # the workers are running by now (a thread started before the pool would rule out fork):
                # load the assignment solver while they work, not after (scipy.optimize takes ~0.5 s)
                preload = threading.Thread(target=_import_assignment, name="arrayplan-preload", daemon=True)
                preload.start()
            a, b = starts[i], starts[i + 1]
            sum_rule[a:b] = sr_c
            freq_done += len(sr_c)
            if auto:
                parts[i] = (s_c, d_c, c_c, comp_c)
            elif s_c is not None:
                s[a:b], drive[a:b], combine[a:b] = s_c, d_c, c_c
                if costs is not None:
                    costs[a:b - 1] = cost_c
            if progress is not None:
                progress(freq_done, n_freq)
    finally:
        if shared is not None:
            shared.close()
        if preload is not None:
            preload.join()
    if not auto:
        if costs is not None:   # the seams between chunks
            with one_blas_thread():
                for a in starts[1:-1]:
                    costs[a - 1] = _overlap_costs(drive[a - 1:a + 1], combine[a - 1:a + 1])[0]
        return s, drive, combine, sum_rule, computed, costs
    k = max(p[0].shape[1] for p in parts)
    s = np.zeros((n_freq, k))
    drive = np.zeros((n_freq, n_spk, k), dtype=complex)
    combine = np.zeros((n_freq, n_mic, k), dtype=complex)
    computed = np.empty(n_freq, dtype=int)
    for i, (s_c, d_c, c_c, comp_c) in enumerate(parts):
        sl, kc = slice(starts[i], starts[i + 1]), s_c.shape[1]
        s[sl, :kc], drive[sl, :, :kc], combine[sl, :, :kc], computed[sl] = s_c, d_c, c_c, comp_c
        parts[i] = None
    return s, drive, combine, sum_rule, computed, None
