"""An upper bound on the capacity of any N-element layout: the convex relaxation of the layout choice.

For ``capacity`` (:mod:`arrayplan.studies.layout_problem`), the convex
relaxation of S. Joshi and S. Boyd ("Sensor selection via convex
optimization", IEEE Trans. Signal Processing 57(2), 2009): maximise
F(z) = sum_f log2 det(I + c sum_i z_i a_i a_i^H) over 0 <= z_i <= 1,
sum z_i = N, solved by their barrier Newton method (scipy.linalg); since F
is concave, F(z) + max_s grad F(z) . (s - z) over the same constraints
bounds every layout from above, at any z, so the bound holds however far
the solver got.

Notes
-----
Indices 0-based in the API; log2 throughout, so capacity is in bit/s/Hz per
frequency, summed.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg

from .layout_problem import LayoutProblem

__all__ = ["relaxation_bound"]


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
