"""How to cut a plan into chunks and how many workers to use: from a memory budget and the size of the job.

The chunk size comes from a stated working-memory budget per worker, not a
count, and does not depend on the number of workers, so neither do the
results (see :func:`arrayplan.channels.svd.decompose`).
"""

from __future__ import annotations

__all__ = ["MIN_CHUNKS", "AUTO_PARALLEL_WORK", "bytes_per_frequency", "chunk_for_budget", "workers_for"]


def bytes_per_frequency(n_mic: int, n_spk: int, n_chan: int | None = None) -> int:
    """Working memory of one frequency's coupling matrix and SVD, bytes (an estimate).

    Parameters
    ----------
    n_mic, n_spk : int
    n_chan : int, optional
        Channels computed (default min(n_mic, n_spk)).

    Returns
    -------
    int
        16 bytes per complex entry of G and a copy of it (LAPACK works on
        one), U, V^H, the phase-fixed weights and the k x k workspace.
    """
    k = min(n_mic, n_spk) if n_chan is None else int(n_chan)
    return 16 * (2 * n_mic * n_spk + 2 * (n_mic + n_spk) * k + 4 * k * k)


#: The default chunk leaves at least this many chunks (to share the work among workers evenly).
MIN_CHUNKS = 8


def chunk_for_budget(n_freq: int, n_mic: int, n_spk: int, memory_mb: float, n_chan: int | None = None) -> int:
    """Frequencies per chunk so that one chunk's working memory stays within `memory_mb`.

    Parameters
    ----------
    n_freq, n_mic, n_spk : int
    memory_mb : float
        Budget per worker, MB (10^6 bytes).
    n_chan : int, optional
        Channels computed per frequency (default all).

    Returns
    -------
    int
        At least 1 (a single frequency may exceed the budget), and small
        enough to make :data:`MIN_CHUNKS` chunks.  It does not depend on
        the number of workers, so neither do the results (see
        :func:`decompose`).
    """
    by_memory = int(memory_mb * 1e6 // bytes_per_frequency(n_mic, n_spk, n_chan))
    return max(1, min(by_memory, -(-n_freq // MIN_CHUNKS)))


#: Below this many multiply-adds (n_freq * n_mic * n_spk * min(n_mic, n_spk); 1e8 is about 0.3 s of SVD on
#: one core of the test machine, a 64 x 64 rig at 400 frequencies) "auto" stays in one
#: process: starting worker processes takes longer than the work.
AUTO_PARALLEL_WORK = 1e8


def workers_for(n_freq: int, n_mic: int, n_spk: int, workers: int | None) -> int:
    """The worker count to use: `workers`, or for None all cores when the job is large enough.

    Parameters
    ----------
    n_freq, n_mic, n_spk : int
        Size of the job: frequencies, microphones, speakers.
    workers : int or None
        The count asked for; None decides from the job's size
        (:data:`AUTO_PARALLEL_WORK` multiply-adds or more: every core).

    Returns
    -------
    int
        Worker processes, at least 1.
    """
    if workers is not None:
        return int(workers)
    from ..parallel import available_cores

    work = float(n_freq) * n_mic * n_spk * min(n_mic, n_spk)
    return available_cores() if work >= AUTO_PARALLEL_WORK else 1
