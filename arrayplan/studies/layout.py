"""Choosing a layout: which N of the candidate positions to fill, the rest of the rig fixed.

Each candidate i (a speaker or a microphone position) contributes one column
a_i(f) of the coupling between it and the fixed side, shape (n_other,): for
speakers a column of G, for microphones the conjugate of a row (the
singular values of a chosen set are the same either way).  A set S of
candidates gives the matrix A_S(f) = [a_i(f)], i in S, and is scored by a
criterion summed over the planned frequencies:

* ``capacity``: sum_f log2 det(I + c A_S^H A_S) in bit/s/Hz summed over
  frequencies, with c = rho (4 pi)^2 / n_tx: n_tx the number of transmitting
  speakers (N when choosing speakers, the rig's speakers when choosing
  microphones), which share the drive power equally, and rho the *reference
  SNR*: the SNR at a microphone 1 m from one speaker in free field with all
  the drive power on that speaker (|G| = 1 / (4 pi) there).  The reference
  does not depend on the layout, so layouts of different coupling strength
  are scored at the same power and noise; ``arrayplan compare`` uses the same
  reference, so its capacity of the chosen rig is this value per frequency;
* ``strong``: the number of channels within ``threshold_db`` of the
  strongest, summed over frequencies;
* ``usable``: the number of channels whose own SNR c s_j^2 reaches 1 (0 dB),
  summed over frequencies.

Search: a greedy selection (for ``capacity`` the criterion is monotone and
submodular in S, so greedy reaches at least (1 - 1/e) of the optimum,
G. L. Nemhauser, L. A. Wolsey and M. L. Fisher, "An analysis of
approximations for maximizing submodular set functions - I", Math.
Programming 14, 1978), then single swaps (one chosen out, one other in) while
any improves the criterion.  Count criteria break ties by capacity.  For
``capacity``, the convex relaxation of S. Joshi and S. Boyd ("Sensor
selection via convex optimization", IEEE Trans. Signal Processing 57(2),
2009): maximise F(z) = sum_f log2 det(I + c sum_i z_i a_i a_i^H) over
0 <= z_i <= 1, sum z_i = N, solved by their barrier Newton method (scipy.linalg); since F is concave,
F(z) + max_s grad F(z) . (s - z) over the same constraints bounds every
layout from above, at any z, so the bound holds however far the solver got.

Notes
-----
Indices 0-based in the API; log2 throughout, so capacity is in bit/s/Hz per
frequency, summed.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any, Callable

import numpy as np
import scipy.linalg

from ..errors import InputError
from ..frequency import FrequencyAxis
from ..kernels.freefield import FreeFieldKernel
from ..kernels.room import RoomKernel
from ..rig import COINCIDENT_M, ElementSet, Rig
from ._common import DEFAULT_REFERENCE_SNR_DB, reference_snr_scale

__all__ = ["CRITERIA", "LayoutProblem", "LayoutChoice", "layout_problem", "criterion_values", "greedy_select",
           "swap_refine", "relaxation_bound", "choose_layout", "chosen_rig"]

#: The criteria a layout can be chosen by.
CRITERIA = ("capacity", "strong", "usable")
SIDES = ("speakers", "microphones")


@dataclass(frozen=True)
class LayoutProblem:
    """Candidates and their couplings to the fixed side.

    Attributes
    ----------
    side : str
        ``"speakers"`` or ``"microphones"``: the side being chosen.
    candidates : ElementSet
    columns : ndarray, complex, shape (n_freq, n_other, n_cand)
        a_i(f) for each candidate (unit of G).
    axis : FrequencyAxis
    count : int
        N, the number to choose.
    scale : float
        c of the module docstring (1 / unit of G squared).
    reference_snr_db : float
        The reference SNR rho in dB (module docstring: 1 m, one speaker,
        full drive, free field).
    threshold_db : float
        Strong-channel threshold, dB.
    """

    side: str
    candidates: ElementSet
    columns: np.ndarray
    axis: FrequencyAxis
    count: int
    scale: float
    reference_snr_db: float
    threshold_db: float


@dataclass(frozen=True)
class LayoutChoice:
    """The result of :func:`choose_layout`.

    Attributes
    ----------
    problem : LayoutProblem
    criterion : str
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


def layout_problem(rig: Rig, side: str, count: int, axis: FrequencyAxis, *, candidates: ElementSet | None = None,
                   reference_snr_db: float = DEFAULT_REFERENCE_SNR_DB, threshold_db: float | None = None,
                   kernel_for: Callable[[ElementSet, ElementSet], Any] | None = None,
                   source: str = "candidates") -> LayoutProblem:
    """Set up the choice of `count` elements of `side` from `candidates`.

    Parameters
    ----------
    rig : Rig
        The fixed side is the other one; the rig's own elements on `side`
        are the candidates when `candidates` is None (they are replaced).
    side : str
        ``"speakers"`` or ``"microphones"``.
    count : int
        N, 1 <= N <= number of candidates.
    axis : FrequencyAxis
    candidates : ElementSet, optional
    reference_snr_db : float
        rho in dB, the reference SNR of the module docstring (1 m, one
        speaker, full drive, free field); not the plan's SNR of the strongest
        channel.
    threshold_db : float, optional
        Strong-channel threshold, dB (default: the rig's ``[planning]`` value).
    kernel_for : callable, optional
        ``kernel_for(speakers, microphones)`` returns a kernel (``evaluate(hz)
        -> (n, n_mic, n_spk)``); default the rig's room when it has one, else
        the free field, in the rig's medium.
    source : str
        Names the candidates in error messages.

    Returns
    -------
    LayoutProblem
        The candidates' coupling columns of shape (n_freq, n_other, n_cand)
        and the capacity scale c.

    Raises
    ------
    InputError
        Unknown side, a count outside 1..n_cand, a candidate on a fixed
        element or on another candidate, or a candidate outside the room.
    """
    if side not in SIDES:
        raise InputError(f"side must be speakers or microphones, got {side!r}", source=source)
    cand = candidates if candidates is not None else (rig.speakers if side == "speakers" else rig.mics)
    fixed = rig.mics if side == "speakers" else rig.speakers
    n = len(cand)
    if int(count) != count or not 1 <= count <= n:
        raise InputError(f"cannot choose {count} of {n} candidates", source=source,
                         fix=f"choose between 1 and {n}")
    d = np.linalg.norm(cand.positions[:, None] - fixed.positions[None], axis=-1)
    i, j = np.unravel_index(np.argmin(d), d.shape)
    if d[i, j] < COINCIDENT_M:
        raise InputError(f"candidate {cand.names[i]!r} coincides with fixed element {fixed.names[j]!r}",
                         source=source, fix="move or drop that candidate")
    dd = np.linalg.norm(cand.positions[:, None] - cand.positions[None], axis=-1) + np.diag(np.full(n, np.inf))
    i, j = np.unravel_index(np.argmin(dd), dd.shape)
    if dd[i, j] < COINCIDENT_M:
        raise InputError(f"candidates {cand.names[i]!r} and {cand.names[j]!r} are at the same position",
                         source=source, fix="list each position once")
    if rig.room is not None:
        outside = rig.room.element_problems(cand, "candidates", source)
        if outside:
            raise outside[0]
    spk, mic = (cand, fixed) if side == "speakers" else (fixed, cand)
    if kernel_for is not None:
        kern = kernel_for(spk, mic)
    elif rig.room is not None:
        kern = RoomKernel.between(spk, mic, rig.medium, rig.room, 0.0)
    else:
        kern = FreeFieldKernel.between(spk, mic, rig.medium, 0.0)
    g = kern.evaluate(axis.hz)                                            # (n_f, n_mic, n_spk)
    cols = g if side == "speakers" else np.conj(np.swapaxes(g, 1, 2))     # (n_f, n_other, n_cand)
    rho = float(reference_snr_db)
    if not np.isfinite(rho):
        raise InputError(f"must be a finite number of dB, got {reference_snr_db}", source="reference_snr_db")
    thr = rig.planning.threshold_db if threshold_db is None else float(threshold_db)
    n_tx = int(count) if side == "speakers" else len(rig.speakers)
    return LayoutProblem(side, cand, cols, axis, int(count), reference_snr_scale(rho, n_tx), rho, thr)


def criterion_values(problem: LayoutProblem, sets: np.ndarray, criterion: str) -> np.ndarray:
    """The criterion of each candidate set.

    Parameters
    ----------
    problem : LayoutProblem
    sets : ndarray of int, shape (n_sets, k)
        0-based candidate indices, k >= 1.
    criterion : str
        One of :data:`CRITERIA`.

    Returns
    -------
    ndarray, shape (n_sets,)
        Capacity in bit/s/Hz summed over frequencies, or a channel count
        summed over frequencies.
    """
    sets = np.atleast_2d(np.asarray(sets, dtype=int))
    a = problem.columns[:, :, sets]                             # (n_f, n_other, n_sets, k)
    a = np.moveaxis(a, 2, 0)                                     # (n_sets, n_f, n_other, k)
    gram = np.matmul(np.conj(np.swapaxes(a, -1, -2)), a)          # (n_sets, n_f, k, k)
    if criterion == "capacity":
        m = np.eye(a.shape[-1]) + problem.scale * gram
        return np.linalg.slogdet(m)[1].sum(axis=1) / np.log(2.0)
    s = np.sqrt(np.maximum(np.linalg.eigvalsh(gram)[..., ::-1], 0.0))   # singular values, descending
    if criterion == "strong":
        with np.errstate(divide="ignore"):
            level = 20 * np.log10(s / s[..., :1])
        return np.sum(level >= -abs(problem.threshold_db) - 1e-12, axis=(1, 2)).astype(float)
    if criterion == "usable":
        return np.sum(problem.scale * s ** 2 >= 1.0, axis=(1, 2)).astype(float)
    raise InputError(f"unknown criterion {criterion!r}", source="criterion", fix=f"use one of {', '.join(CRITERIA)}")


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


def _capacity_and_gradient(problem: LayoutProblem, z: np.ndarray) -> tuple[float, np.ndarray]:
    a = problem.columns                                          # (n_f, n_other, n_cand)
    m = np.eye(a.shape[1]) + problem.scale * np.matmul(a * z, np.conj(np.swapaxes(a, 1, 2)))
    value = float(np.linalg.slogdet(m)[1].sum() / np.log(2.0))
    minv_a = np.linalg.solve(m, a)                               # (n_f, n_other, n_cand)
    grad = problem.scale * np.real(np.einsum("foi,foi->i", np.conj(a), minv_a)) / np.log(2.0)
    return value, grad


def relaxation_bound(problem: LayoutProblem, rounds: int = 3, newton_steps: int = 15, tolerance: float = 1e-6
                     ) -> tuple[float, np.ndarray]:
    """Upper bound on the capacity of any N-element layout, and the relaxation's weights z.

    The relaxed problem is solved as S. Joshi and S. Boyd (2009) do: Newton's
    method on F(z) + kappa sum(log z_i + log(1 - z_i)) with the equality
    sum z_i = N kept exactly by each step (the KKT system solved with
    scipy.linalg.solve), kappa shrinking tenfold per round, `rounds` rounds
    of at most `newton_steps` steps each (a round ends when the Newton
    decrement falls below `tolerance` times |F|).  The bound is valid at any
    z, so fewer steps only loosen it.

    Parameters
    ----------
    problem : LayoutProblem
        Candidates and N.
    rounds : int
        Barrier rounds.
    newton_steps : int
        Most Newton steps per round.
    tolerance : float
        Stopping threshold on the Newton decrement, relative to |F|.

    Returns
    -------
    bound : float
        bit/s/Hz summed over frequencies; F(z) + max_s grad F(z) . (s - z).
    z : ndarray, shape (n_cand,)
        Weights in (0, 1) summing to N.
    """
    n, count = problem.columns.shape[2], problem.count
    z = np.full(n, count / n)
    if count == n:
        value, _ = _capacity_and_gradient(problem, np.ones(n))
        return value, np.ones(n)
    value0, _ = _capacity_and_gradient(problem, z)
    kappa = 1e-2 * max(abs(value0), 1.0) / n

    a, c = problem.columns, problem.scale
    a_h = np.conj(np.swapaxes(a, 1, 2))

    def barrier(zz: np.ndarray, kap: float) -> float:
        m = np.eye(a.shape[1]) + c * np.matmul(a * zz, a_h)
        return float(np.linalg.slogdet(m)[1].sum() / np.log(2.0)) + kap * float(np.sum(np.log(zz) + np.log1p(-zz)))

    kkt = np.zeros((n + 1, n + 1))
    kkt[:n, n] = kkt[n, :n] = 1.0
    for _ in range(rounds):
        for _ in range(newton_steps):
            _, grad, hess = _capacity_derivatives(problem, z)
            g = grad + kappa * (1.0 / z - 1.0 / (1.0 - z))
            kkt[:n, :n] = hess - np.diag(kappa * (1.0 / z ** 2 + 1.0 / (1.0 - z) ** 2))
            step = scipy.linalg.solve(kkt, np.concatenate([-g, [0.0]]))[:n]
            decrement = float(step @ (-kkt[:n, :n]) @ step)
            if decrement < tolerance * max(1.0, abs(value0)):
                break
            t = 1.0
            neg, pos = step < 0, step > 0
            if np.any(neg):
                t = min(t, 0.99 * float(np.min(-z[neg] / step[neg])))
            if np.any(pos):
                t = min(t, 0.99 * float(np.min((1.0 - z[pos]) / step[pos])))
            f0 = barrier(z, kappa)
            f1 = barrier(z + t * step, kappa)
            while t > 1e-12 and f1 < f0 + 0.25 * t * float(g @ step):
                t *= 0.5
                f1 = barrier(z + t * step, kappa)
            z = z + t * step
        kappa /= 10.0
    z = _fix_sum(np.clip(z, 0.0, 1.0), count)
    value, grad = _capacity_and_gradient(problem, z)
    top = np.sort(grad)[::-1][:count].sum()                      # max of grad . s over the constraints
    return value + top - float(grad @ z), z


def _capacity_derivatives(problem: LayoutProblem, z: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
    """Relaxed capacity F(z), its gradient (n_cand,) and Hessian (n_cand, n_cand), in bits."""
    a, c = problem.columns, problem.scale
    m = np.eye(a.shape[1]) + c * np.matmul(a * z, np.conj(np.swapaxes(a, 1, 2)))
    value = float(np.linalg.slogdet(m)[1].sum() / np.log(2.0))
    b = np.matmul(np.conj(np.swapaxes(a, 1, 2)), np.linalg.solve(m, a))      # (n_f, n_cand, n_cand)
    grad = c * np.real(np.einsum("fii->i", b)) / np.log(2.0)
    hess = -c * c * np.sum(np.abs(b) ** 2, axis=0) / np.log(2.0)
    return value, grad, hess


def _fix_sum(z: np.ndarray, count: int) -> np.ndarray:
    """Move z (in [0, 1]) to sum exactly to `count` along the free entries."""
    for _ in range(10):
        excess = z.sum() - count
        if abs(excess) < 1e-12:
            break
        free = (z > 0) if excess > 0 else (z < 1)
        z = np.clip(z - excess / max(1, int(free.sum())) * free, 0.0, 1.0)
    return z


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
