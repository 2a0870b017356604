"""Choosing a layout: which N of the candidate positions to fill, the rest of the rig fixed.

The problem (candidates, their couplings to the fixed side, the criteria
``capacity``, ``strong`` and ``usable``) is
:mod:`arrayplan.studies.layout_problem`; this module searches it.

Search: a greedy selection (for ``capacity`` the criterion is monotone and
submodular in S, so greedy reaches at least (1 - 1/e) of the optimum,
G. L. Nemhauser, L. A. Wolsey and M. L. Fisher, "An analysis of
approximations for maximizing submodular set functions - I", Math.
Programming 14, 1978), then single swaps (one chosen out, one other in) while
any improves the criterion.  Count criteria break ties by capacity.  For
``capacity``, the upper bound of :mod:`arrayplan.studies.layout_bound`
says how far the chosen layout may be from the best one.

Notes
-----
Indices 0-based in the API; log2 throughout, so capacity is in bit/s/Hz per
frequency, summed.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Callable

import numpy as np

from ..errors import InputError
from ..rig import ElementSet, Rig
from .layout_bound import relaxation_bound
from .layout_problem import CRITERIA, SIDES, LayoutProblem, criterion_values, layout_problem

__all__ = ["CRITERIA", "LayoutProblem", "LayoutChoice", "layout_problem", "criterion_values", "greedy_select",
           "swap_refine", "relaxation_bound", "choose_layout", "chosen_rig", "SIDES"]


@dataclass(frozen=True)
class LayoutChoice:
    """The result of :func:`choose_layout`.

    Attributes
    ----------
    problem : LayoutProblem
        The candidates, the fixed side and the settings chosen under.
    criterion : str
        One of :data:`CRITERIA`.
    chosen : tuple of int
        0-based candidate indices, in the order they were added (swaps in place).
    value : float
        Criterion of the chosen layout.
    greedy_values : ndarray, shape (count,)
        Criterion after each greedy step (k = 1..N chosen).
    steps : list of dict
        ``{"step", "action", "added", "removed", "value"}`` per greedy step and swap.
    bound : float or None
        Upper bound from the relaxation (capacity only).
    relaxed : ndarray, shape (n_cand,) or None
        The relaxation's weights z.
    """

    problem: LayoutProblem
    criterion: str
    chosen: tuple[int, ...]
    value: float
    greedy_values: np.ndarray
    steps: list
    bound: float | None
    relaxed: np.ndarray | None

    @property
    def gap_percent(self) -> float | None:
        """How far the chosen layout may be from the best one, at most.

        Returns
        -------
        float or None
            100 (bound - value) / bound (%); None without a positive bound.
        """
        if self.bound is None or self.bound <= 0:
            return None
        return 100.0 * (self.bound - self.value) / self.bound


def _score(problem: LayoutProblem, sets: np.ndarray, criterion: str) -> np.ndarray:
    """(n_sets, 2) keys compared lexicographically: the criterion, then capacity as tie-break."""
    primary = criterion_values(problem, sets, criterion)
    tie = primary if criterion == "capacity" else criterion_values(problem, sets, "capacity")
    return np.stack([primary, tie], axis=1)


def _best(keys: np.ndarray) -> int:
    return int(np.lexsort((keys[:, 1], keys[:, 0]))[-1])


def _inverse_after(p: np.ndarray, a: np.ndarray, c: float) -> np.ndarray:
    """Sherman-Morrison: inverse of M + c a a^H from p = M^-1, per frequency; a shape (n_f, n_other)."""
    pa = np.einsum("fop,fp->fo", p, a)
    denom = 1.0 + c * np.real(np.einsum("fo,fo->f", np.conj(a), pa))
    return p - c * pa[:, :, None] * np.conj(pa)[:, None, :] / denom[:, None, None]


def _gains(p: np.ndarray, cols: np.ndarray, c: float) -> np.ndarray:
    """log2(1 + c a_j^H P a_j) summed over frequency for every column j: shape (n_cand,)."""
    quad = np.real(np.sum(np.conj(cols) * np.matmul(p, cols), axis=1))      # (n_f, n_cand)
    return np.sum(np.log1p(c * quad), axis=0) / np.log(2.0)


def _greedy_capacity(problem: LayoutProblem, progress) -> tuple[list[int], list[float]]:
    """Greedy on capacity with rank-one updates (matrix determinant lemma, Sherman-Morrison)."""
    cols, c = problem.columns, problem.scale
    n_f, n_o, n = cols.shape
    p = np.broadcast_to(np.eye(n_o, dtype=complex), (n_f, n_o, n_o)).copy()
    chosen: list[int] = []
    values: list[float] = []
    total = 0.0
    for k in range(problem.count):
        g = _gains(p, cols, c)
        g[chosen] = -np.inf
        j = int(np.argmax(g))
        total += float(g[j])
        chosen.append(j)
        values.append(total)
        p = _inverse_after(p, cols[:, :, j], c)
        if progress is not None:
            progress(k + 1, problem.count)
    return chosen, values


def _swap_capacity(problem: LayoutProblem, chosen: list[int], max_passes: int) -> tuple[list[int], list[dict]]:
    """Best single swaps on capacity with rank-one downdates and updates."""
    cols, c = problem.columns, problem.scale
    n_f, n_o, _ = cols.shape
    chosen = list(chosen)
    swaps = []
    for _ in range(max_passes):
        p = np.broadcast_to(np.eye(n_o, dtype=complex), (n_f, n_o, n_o)).copy()
        for i in chosen:
            p = _inverse_after(p, cols[:, :, i], c)
        pa = np.einsum("fop,ifp->ifo", p, np.moveaxis(cols[:, :, chosen], 2, 0))     # (N, n_f, n_o)
        quad_i = np.real(np.einsum("ifo,ifo->if", np.conj(np.moveaxis(cols[:, :, chosen], 2, 0)), pa))
        loss = np.sum(np.log1p(-c * quad_i), axis=1) / np.log(2.0)                    # (N,), <= 0
        p_out = p[None] + c * pa[..., :, None] * np.conj(pa)[..., None, :] / (1.0 - c * quad_i)[..., None, None]
        quad = np.real(np.sum(np.conj(cols)[None] * np.matmul(p_out, cols[None]), axis=2))  # (N, n_f, n_cand)
        g = np.sum(np.log1p(c * quad), axis=1) / np.log(2.0) + loss[:, None]
        g[:, chosen] = -np.inf
        pos, j = np.unravel_index(int(np.argmax(g)), g.shape)
        best = (float(g[pos, j]), int(pos), int(j))
        if best[0] <= 1e-9 * max(1.0, float(criterion_values(problem, np.array([chosen]), "capacity")[0])):
            break
        _, pos, j = best
        removed = chosen[pos]
        chosen[pos] = j
        swaps.append({"removed": removed, "added": j,
                      "value": float(criterion_values(problem, np.array([chosen]), "capacity")[0])})
    return chosen, swaps


def greedy_select(problem: LayoutProblem, criterion: str, progress: Callable[[int, int], None] | None = None
                  ) -> tuple[list[int], list[float]]:
    """Add, N times, the candidate that raises the criterion most; return the order and the values.

    Parameters
    ----------
    problem : LayoutProblem
        Candidates and N.
    criterion : str
        One of :data:`CRITERIA`; count criteria break ties by capacity.
    progress : callable, optional
        ``progress(done, total)`` after each step.

    Returns
    -------
    chosen : list of int
        0-based candidate indices in the order they were added, length N.
    values : list of float
        Criterion after each step (bit/s/Hz or a channel count, summed over
        frequencies).
    """
    if criterion == "capacity":
        return _greedy_capacity(problem, progress)
    chosen: list[int] = []
    values: list[float] = []
    n = problem.columns.shape[2]
    for k in range(problem.count):
        rest = np.array([i for i in range(n) if i not in chosen])
        sets = np.column_stack([np.tile(chosen, (len(rest), 1)), rest]) if chosen else rest[:, None]
        keys = _score(problem, sets, criterion)
        b = _best(keys)
        chosen.append(int(rest[b]))
        values.append(float(keys[b, 0]))
        if progress is not None:
            progress(k + 1, problem.count)
    return chosen, values


def swap_refine(problem: LayoutProblem, chosen: list[int], criterion: str, max_passes: int = 50
                ) -> tuple[list[int], list[dict]]:
    """Swap one chosen candidate for one other while the best such swap improves the criterion.

    Parameters
    ----------
    problem : LayoutProblem
        Candidates and N.
    chosen : list of int
        0-based candidate indices to start from.
    criterion : str
        One of :data:`CRITERIA`.
    max_passes : int
        Most swaps made.

    Returns
    -------
    chosen : list of int
        The refined indices; a swap replaces an index in place.
    swaps : list of dict
        ``{"removed", "added", "value"}`` per swap made (0-based indices,
        criterion after the swap).
    """
    if criterion == "capacity":
        return _swap_capacity(problem, chosen, max_passes)
    chosen = list(chosen)
    n = problem.columns.shape[2]
    current = _score(problem, np.array([chosen]), criterion)[0]
    swaps = []
    for _ in range(max_passes):
        rest = np.array([i for i in range(n) if i not in chosen])
        if rest.size == 0:
            break
        sets, pairs = [], []
        for pos in range(len(chosen)):
            base = np.tile(chosen, (len(rest), 1))
            base[:, pos] = rest
            sets.append(base)
            pairs += [(pos, int(j)) for j in rest]
        keys = _score(problem, np.vstack(sets), criterion)
        b = _best(keys)
        better = keys[b, 0] > current[0] + 1e-9 * max(1.0, abs(current[0])) or (
            keys[b, 0] >= current[0] and keys[b, 1] > current[1] + 1e-9 * max(1.0, abs(current[1])))
        if not better:
            break
        pos, j = pairs[b]
        swaps.append({"removed": chosen[pos], "added": j, "value": float(keys[b, 0])})
        chosen[pos] = j
        current = keys[b]
    return chosen, swaps


def choose_layout(problem: LayoutProblem, criterion: str = "capacity",
                  progress: Callable[[int, int], None] | None = None) -> LayoutChoice:
    """Greedy selection, swap refinement and (for capacity) the relaxation bound (module docstring).

    Parameters
    ----------
    problem : LayoutProblem
        From :func:`layout_problem`.
    criterion : str
        ``"capacity"``, ``"strong"`` or ``"usable"``.
    progress : callable, optional
        ``progress(done, total)`` after each greedy step.

    Returns
    -------
    LayoutChoice
        The chosen indices, criterion value, steps, and for capacity the
        upper bound and relaxed weights.

    Raises
    ------
    InputError
        An unknown criterion.
    """
    if criterion not in CRITERIA:
        raise InputError(f"unknown criterion {criterion!r}", source="criterion",
                         fix=f"use one of {', '.join(CRITERIA)}")
    order, values = greedy_select(problem, criterion, progress)
    names = problem.candidates.names
    steps = [{"step": k + 1, "action": "add", "added": names[i], "removed": "", "value": v}
             for k, (i, v) in enumerate(zip(order, values))]
    chosen, swaps = swap_refine(problem, order, criterion)
    for s in swaps:
        steps.append({"step": len(steps) + 1, "action": "swap", "added": names[s["added"]],
                      "removed": names[s["removed"]], "value": s["value"]})
    value = float(criterion_values(problem, np.array([chosen]), criterion)[0])
    bound, z = relaxation_bound(problem) if criterion == "capacity" else (None, None)
    return LayoutChoice(problem, criterion, tuple(chosen), value, np.array(values), steps, bound, z)


def chosen_rig(rig: Rig, choice: LayoutChoice) -> Rig:
    """The rig with the chosen elements on the chosen side (hardware channels 1..N in candidate order).

    The room and the zones come along.  When microphones are chosen, a zone
    made of microphones keeps those of its members that were chosen (its
    indices re-pointed at the new microphones) and is dropped when none was;
    zones of generated control points stay as they are.

    Parameters
    ----------
    rig : Rig
        The rig the problem was set up from.
    choice : LayoutChoice
        From :func:`choose_layout`.

    Returns
    -------
    Rig
        Named ``<rig name>-chosen``, on the problem's frequencies, the chosen
        elements in the candidates' order.
    """
    cand = choice.problem.candidates
    idx = sorted(choice.chosen)
    pos = cand.positions[idx].copy()
    pos.setflags(write=False)
    es = ElementSet(tuple(cand.names[i] for i in idx), pos, tuple(cand.directivities[i] for i in idx),
                    tuple(range(1, len(idx) + 1)))
    spk, mic = (es, rig.mics) if choice.problem.side == "speakers" else (rig.speakers, es)
    return Rig(spk, mic, rig.medium, choice.problem.axis, rig.hardware, rig.planning, f"{rig.name}-chosen",
               rig.description, rig.source, rig.room, _zones_for(rig.zones, mic))


def _zones_for(zones: tuple, mics: ElementSet) -> tuple:
    """`zones` re-pointed at the microphones `mics` (see :func:`chosen_rig`)."""
    index = {n: i for i, n in enumerate(mics.names)}
    out = []
    for z in zones:
        if z.mic_indices is None:
            out.append(z)
            continue
        kept = [n for n in z.point_names if n in index]
        if kept:
            pos = np.asarray(mics.positions)[[index[n] for n in kept]].copy()
            pos.setflags(write=False)
            out.append(replace(z, point_names=tuple(kept), positions=pos,
                               mic_indices=tuple(index[n] for n in kept)))
    return tuple(out)
