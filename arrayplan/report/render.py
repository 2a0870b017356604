"""Drawing the report's figures to PNG, one figure per job, here or in worker processes.

Drawing is most of a report's work and every figure is independent of the
others, so the figures of all sections are drawn first, as jobs of
:func:`arrayplan.parallel.map_chunks`, and the sections are written after,
around the PNGs.  By default they are drawn here, one after the other
(:data:`DEFAULT_WORKERS`): on a machine whose cores are already busy, extra
processes made the report slower, not faster.  Asked for more workers, the
worker processes are forked from this one: the results already read
(plans, IR sets, verifications) reach them without being copied or
pickled, and only each job's PNG bytes come back.  Where a fork is not
possible (another thread runs, or not on Linux) or a Dask scheduler is
configured, the figures are drawn here all the same: starting fresh
interpreters or shipping the results would cost more than it saves.
"""

from __future__ import annotations

import os
from typing import Any, Callable

from ..parallel import SCHEDULER_ENV, _start_method, available_cores, map_chunks
from .figures import (FigureMaker, ReportFigure, filter_figures, irset_figures, plan_figure_makers, png_bytes,
                      report_style, rig_figures, study_figure_makers, verification_figure_makers)

__all__ = ["RenderedFigure", "DEFAULT_WORKERS", "figure_makers", "render_figures", "report_workers"]

#: Worker processes drawing the figures when none are asked for: 1, here (see the module notes).
DEFAULT_WORKERS = 1

#: A figure drawn for the page: its caption and its PNG bytes.
RenderedFigure = tuple[str, bytes]


def figure_makers(kind: str, found: Any) -> list[FigureMaker]:
    """The figure makers of one section of the report.

    Parameters
    ----------
    kind : str
        ``"rig"`` (a :class:`~arrayplan.report.rigs.RigGroup`), ``"plan"``, ``"filters"``, ``"irset"``,
        ``"verify"`` or ``"study"``.
    found : object
        The section's result, as found by :func:`~arrayplan.report.discover.find_results`.

    Returns
    -------
    list of callables
        Each draws some of the section's figures (a list of :class:`ReportFigure`) when called.
    """
    if kind == "rig":
        return [lambda: rig_figures(found.shown)]
    if kind == "plan":
        return plan_figure_makers(found)
    if kind == "filters":
        return [lambda: filter_figures(found)]
    if kind == "irset":
        return [lambda: irset_figures(found)]
    if kind == "verify":
        return verification_figure_makers(found)
    if kind == "study" and found.kind in ("zones", "layout", "comparison"):
        from .studies import study_figures as design_study_figures
        return [lambda: [ReportFigure(caption, fig) for caption, fig in design_study_figures(found)]]
    if kind == "study":
        return study_figure_makers(found)
    raise ValueError(f"no figures for a section of kind {kind!r}")


def _render_job(steps: list[tuple[str, Any]], job: tuple[int, int]) -> list[RenderedFigure]:
    """Draw the figures of maker `job[1]` of section `job[0]` to PNG (runs in a worker or here)."""
    import matplotlib.pyplot as plt

    step, k = job
    kind, found = steps[step]
    out = []
    with report_style():
        for rf in figure_makers(kind, found)[k]():
            out.append((rf.caption, png_bytes(rf.figure)))
            plt.close(rf.figure)
    return out


def report_workers(n_jobs: int, workers: int | None = None) -> int:
    """Worker processes for `n_jobs` figure jobs.

    Parameters
    ----------
    n_jobs : int
        Figure jobs to draw.
    workers : int, optional
        Worker processes asked for (default :data:`DEFAULT_WORKERS`; 0: the
        cores this process may use).

    Returns
    -------
    int
        At most `n_jobs`; 1 (drawn here) when fewer than two are asked for or
        there are fewer than two jobs, and where workers cannot be forked or
        a Dask scheduler is configured.
    """
    wanted = DEFAULT_WORKERS if workers is None else (available_cores() if int(workers) == 0 else int(workers))
    if wanted < 2 or n_jobs < 2 or os.environ.get(SCHEDULER_ENV, "").strip() or _start_method() != "fork":
        return 1
    return min(wanted, n_jobs)


def render_figures(steps: list[tuple[str, Any]], workers: int | None = None,
                   progress: Callable[[int, int], None] | None = None) -> list[list[RenderedFigure]]:
    """Every section's figures as PNG, in the order of `steps`.

    Parameters
    ----------
    steps : list of (str, object)
        The report's sections: kind and result (see :func:`figure_makers`).
    workers : int, optional
        Worker processes (default :data:`DEFAULT_WORKERS`, 1: here; 0: the cores this process may use).
    progress : callable, optional
        ``progress(done, total)`` after each job.

    Returns
    -------
    list of list of (str, bytes)
        Per section, (caption, PNG bytes) of each figure.
    """
    jobs = [(s, k) for s, (kind, found) in enumerate(steps) for k in range(len(figure_makers(kind, found)))]
    n = report_workers(len(jobs), workers)
    if n == 1:
        results = []
        for done, job in enumerate(jobs, 1):
            results.append(_render_job(steps, job))
            if progress is not None:
                progress(done, len(jobs))
    else:
        results = map_chunks(_render_job, jobs, shared=steps, workers=n, progress=progress)
    out: list[list[RenderedFigure]] = [[] for _ in steps]
    for (s, _), figs in zip(jobs, results):
        out[s].extend(figs)
    return out
