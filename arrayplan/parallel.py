"""Spreading independent chunks of work over processes or a Dask cluster.

>>> from arrayplan.parallel import map_chunks
>>> squares = map_chunks(pow, [1, 2, 3], shared=2, workers=1)   # pow(2, 1), pow(2, 2), pow(2, 3)
>>> squares
[2, 4, 8]

One function, ``func(shared, item)``, is applied to every item.  ``shared``
(a rig's kernel, a design, a study's settings) travels once to each worker
and ``item`` (a slice of frequencies, a trial's seed) once per call; each
call should build its large arrays itself from those, so that only small
descriptions go out and only results come back.

Where the work runs:

* ``workers=1``: here, in this process, in order.
* ``workers=N`` (N >= 2): a pool of N worker processes, forked from this
  one when it runs no other thread (Linux), else started afresh.
* ``scheduler="local:N"``: a Dask LocalCluster of N worker processes
  started for this call.
* ``scheduler="tcp://host:8786"`` (any dask.distributed address): the
  workers of that running cluster.  With neither argument, the
  environment variable ``ARRAYPLAN_SCHEDULER`` (:data:`SCHEDULER_ENV`) may
  name one.

Every call runs with one BLAS/LAPACK thread (threadpoolctl), here as well as
on the workers, so the numbers do not depend on where they were computed:
LAPACK's result for one matrix depends on its thread count, never on which
process ran it.

Notes
-----
``func``, ``shared``, the items and the results must pickle (plain
functions at module level, numpy arrays, dataclasses).  At most
``2 * workers`` calls are in flight at a time, so results that come back
faster than the caller consumes them do not pile up in memory.
"""

from __future__ import annotations

import multiprocessing
import os
import socket
import threading
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from contextlib import contextmanager
from typing import Any, Callable, Iterable, Iterator, Sequence

from .errors import InputError

__all__ = ["map_chunks", "iter_chunks", "available_cores", "resolve_scheduler", "check_scheduler", "one_blas_thread",
           "alongside", "SCHEDULER_ENV"]

#: Environment variable naming a Dask scheduler address (or ``local:N``) for every parallel call.
SCHEDULER_ENV = "ARRAYPLAN_SCHEDULER"

_CONNECT_TIMEOUT_S = 3.0
_worker_shared: Any = None


def available_cores() -> int:
    """Cores this process may run on (its CPU affinity).

    Returns
    -------
    int
        At least 1.
    """
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


def resolve_scheduler(scheduler: str | None) -> str | None:
    """The scheduler to use: `scheduler`, else ``$ARRAYPLAN_SCHEDULER``, else None (local processes).

    Parameters
    ----------
    scheduler : str or None
        ``"local:N"``, a dask.distributed address, or None.

    Returns
    -------
    str or None
        None means worker processes of this machine.
    """
    if scheduler is None:
        scheduler = os.environ.get(SCHEDULER_ENV, "").strip() or None
    return scheduler


def one_blas_thread():
    """Context manager (also effective when only called): BLAS/LAPACK limited to one thread here.

    Small matrix products and SVDs gain nothing from BLAS threads, and on a
    busy machine threaded BLAS runs them several times slower.

    Returns
    -------
    threadpoolctl.threadpool_limits
        The limit, already in force; as a context manager it restores the
        previous limits at the end of the block.
    """
    from threadpoolctl import threadpool_limits
    return threadpool_limits(limits=1)


def _init_worker(shared: Any) -> None:
    global _worker_shared
    _worker_shared = shared
    one_blas_thread()          # stays in force for the life of the worker process


def _call_in_worker(func: Callable[[Any, Any], Any], item: Any) -> Any:
    return func(_worker_shared, item)


def _call_limited(func: Callable[[Any, Any], Any], shared: Any, item: Any) -> Any:
    with one_blas_thread():
        return func(shared, item)


def iter_chunks(func: Callable[[Any, Any], Any], items: Sequence[Any], *, shared: Any = None,
                workers: int = 1, scheduler: str | None = None) -> Iterator[tuple[int, Any]]:
    """Apply ``func(shared, item)`` to every item; yield ``(index, result)`` as each finishes.

    Parameters
    ----------
    func : callable
        A module-level function of (shared, item).
    items : sequence
        The pieces of work; ``index`` in the output is the position here.
    shared : object, optional
        Sent once to each worker and passed to every call.
    workers : int
        Worker processes (>= 1); 1 runs everything here, in order.  Ignored
        with a scheduler (the cluster has its own workers).
    scheduler : str, optional
        ``"local:N"`` or a dask.distributed scheduler address (module
        Notes); default ``$ARRAYPLAN_SCHEDULER`` or none.

    Yields
    ------
    (int, object)
        Index of the item and func's result, in order of completion.

    Raises
    ------
    InputError
        `workers` below 1, a malformed ``local:N``, an unreachable
        scheduler, or Dask not installed.
    """
    workers = int(workers)
    if workers < 1:
        raise InputError(f"worker count must be at least 1, got {workers}", field="workers")
    scheduler = resolve_scheduler(scheduler)
    if scheduler is not None:
        yield from _iter_dask(func, items, shared, scheduler)
    elif workers == 1 or len(items) <= 1:
        with one_blas_thread():
            for i, item in enumerate(items):
                yield i, func(shared, item)
    else:
        yield from _iter_pool(func, items, shared, min(workers, len(items)))


def map_chunks(func: Callable[[Any, Any], Any], items: Iterable[Any], *, shared: Any = None, workers: int = 1,
               scheduler: str | None = None, progress: Callable[[int, int], None] | None = None) -> list[Any]:
    """``[func(shared, item) for item in items]``, spread over workers (see :func:`iter_chunks`).

    Parameters
    ----------
    func, items, shared, workers, scheduler
        As for :func:`iter_chunks`.
    progress : callable, optional
        ``progress(done, total)`` after each finished item.

    Returns
    -------
    list
        The results in the order of `items`.
    """
    items = list(items)
    out: list[Any] = [None] * len(items)
    for done, (i, result) in enumerate(iter_chunks(func, items, shared=shared, workers=workers,
                                                   scheduler=scheduler), start=1):
        out[i] = result
        if progress is not None:
            progress(done, len(items))
    return out


def _start_method() -> str:
    """``fork`` when this process runs no other Python thread (Linux), else ``forkserver`` or ``spawn``.

    A forked worker starts in milliseconds with every module of its parent
    already imported; a spawned one imports numpy, scipy and arrayplan
    afresh (seconds on a busy machine).  Forking is safe only while no
    other thread could hold a lock at that moment, hence the check.
    """
    methods = multiprocessing.get_all_start_methods()
    if "fork" in methods and threading.active_count() == 1:
        return "fork"
    return "forkserver" if "forkserver" in methods else "spawn"


def _iter_pool(func, items, shared, workers: int) -> Iterator[tuple[int, Any]]:
    ctx = multiprocessing.get_context(_start_method())
    with ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=_init_worker,
                             initargs=(shared,)) as pool:
        pending: dict[Any, int] = {}
        todo = iter(enumerate(items))
        try:
            for i, item in todo:
                pending[pool.submit(_call_in_worker, func, item)] = i
                if len(pending) >= 2 * workers:
                    break
            while pending:
                finished, _ = wait(pending, return_when=FIRST_COMPLETED)
                for fut in finished:
                    i = pending.pop(fut)
                    yield i, fut.result()
                    nxt = next(todo, None)
                    if nxt is not None:
                        pending[pool.submit(_call_in_worker, func, nxt[1])] = nxt[0]
        finally:
            for fut in pending:
                fut.cancel()


def _run_and_report(send, func: Callable[..., Any], args: tuple) -> None:
    """In the forked child of :func:`alongside`: run, then send None or the exception."""
    try:
        func(*args)
        send.send(None)
    except BaseException as exc:  # every failure goes back to the parent, which raises it
        try:
            send.send(exc)
        except Exception:          # an exception that does not pickle: its text
            send.send(RuntimeError(f"{type(exc).__name__}: {exc}"))
    finally:
        send.close()


@contextmanager
def alongside(func: Callable[..., Any], *args: Any) -> Iterator[None]:
    """Run ``func(*args)`` in a forked process while the block runs here; wait for it when the block ends.

    For two independent pieces of one job that would otherwise run one
    after the other on one core (two files written from the same arrays):
    the child sees this process's memory as it was at the fork, without
    copying or pickling it.

    Parameters
    ----------
    func : callable
        Runs in the child; its return value is dropped.  It must not need
        anything the block changes.
    *args
        Passed to `func`.

    Yields
    ------
    None
        While the block runs, `func` runs in the child.

    Raises
    ------
    BaseException
        What `func` raised (re-raised here after the block), or what the
        block raised (the child is then stopped).

    Notes
    -----
    Without ``fork`` (other threads running, or not Linux) `func` simply
    runs here before the block.
    """
    if _start_method() != "fork":
        func(*args)
        yield
        return
    import sys

    for stream in (sys.stdout, sys.stderr):   # else the child would flush the same buffered text again
        stream.flush()
    ctx = multiprocessing.get_context("fork")
    receive, send = ctx.Pipe(duplex=False)
    child = ctx.Process(target=_run_and_report, args=(send, func, args), daemon=True)
    child.start()
    send.close()
    try:
        yield
    except BaseException:
        child.terminate()
        child.join()
        raise
    try:
        failure = receive.recv()
    except EOFError:                          # the child died without a word (killed)
        failure = RuntimeError(f"the process writing beside this one ended with status {child.exitcode}")
    finally:
        receive.close()
        child.join()
    if failure is not None:
        raise failure


def _unreachable(scheduler: str, reason: str) -> InputError:
    return InputError(f"cannot reach the Dask scheduler at {scheduler!r} ({reason})", field="scheduler",
                      fix="start the scheduler or check the address (tcp://HOST:PORT)")


def _probe(scheduler: str) -> None:
    """Fail fast when nothing listens at a tcp:// address (before Dask's own, slower, retries)."""
    host_port = scheduler.split("://", 1)[1] if "://" in scheduler else scheduler
    if not scheduler.startswith("tcp://") and "://" in scheduler:
        return                          # another protocol (tls, ucx, inproc): left to Dask
    host, _, port = host_port.rpartition(":")
    if not port.isdigit() or not host:
        raise InputError(f"expected tcp://HOST:PORT or local:N, got {scheduler!r}", field="scheduler")
    try:
        with socket.create_connection((host.strip("[]"), int(port)), timeout=_CONNECT_TIMEOUT_S):
            pass
    except OSError as exc:
        raise _unreachable(scheduler, exc.strerror or type(exc).__name__) from None


def check_scheduler(scheduler: str) -> None:
    """Check a scheduler argument before any work: ``local:N`` well formed, a tcp:// address listening.

    Parameters
    ----------
    scheduler : str
        ``"local:N"`` or a dask.distributed address (``tcp://HOST:PORT``).

    Raises
    ------
    InputError
        (field ``scheduler``) within a few seconds when it is not.
    """
    if scheduler.startswith("local:"):
        count = scheduler.partition(":")[2]
        if not count.isdigit() or int(count) < 1:
            raise InputError(f"expected local:N with N >= 1 worker processes, got {scheduler!r}",
                             field="scheduler")
    else:
        _probe(scheduler)


def _dask_client(scheduler: str):
    """A connected dask.distributed Client (and the LocalCluster it owns, or None)."""
    check_scheduler(scheduler)
    local = scheduler.startswith("local:")
    try:
        from distributed import Client, LocalCluster
    except ImportError:
        raise InputError("Dask is not installed", field="scheduler",
                         fix="pip install 'arrayplan[dask]', or run without a scheduler") from None
    if local:
        cluster = LocalCluster(n_workers=int(scheduler.partition(":")[2]), threads_per_worker=1, processes=True,
                               dashboard_address=None)
        return Client(cluster), cluster
    try:
        return Client(scheduler, timeout=_CONNECT_TIMEOUT_S), None
    except Exception as exc:  # refused, timed out, or something else answered (not a Dask scheduler)
        raise _unreachable(scheduler, f"no Dask scheduler answered within {_CONNECT_TIMEOUT_S:g} s: "
                                      f"{type(exc).__name__}") from None


def _iter_dask(func, items, shared, scheduler: str) -> Iterator[tuple[int, Any]]:
    from distributed import as_completed

    client, cluster = _dask_client(scheduler)
    try:
        n_workers = max(1, len(client.scheduler_info().get("workers", {})))
        shared_future = client.scatter(shared, broadcast=True)
        todo = iter(enumerate(items))
        index: dict[Any, int] = {}
        batch = as_completed()
        for i, item in todo:
            fut = client.submit(_call_limited, func, shared_future, item, pure=False)
            index[fut] = i
            batch.add(fut)
            if len(index) >= 2 * n_workers:
                break
        for fut in batch:
            yield index.pop(fut), fut.result()
            fut.release()
            nxt = next(todo, None)
            if nxt is not None:
                new = client.submit(_call_limited, func, shared_future, nxt[1], pure=False)
                index[new] = nxt[0]
                batch.add(new)
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
