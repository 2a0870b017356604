"""Tolerance of a plan to placement, gain and phase errors: Monte Carlo with a first-order prediction beside it.

The planned weights are kept and applied to the coupling matrices of rigs
built a little off (see :mod:`arrayplan.studies.trials`), which answers
"what do my filters do when the hardware is slightly wrong".  Per channel
and frequency the study gives the spread of the realised gain, the worst
crosstalk, the fraction of trials in which the channel keeps the isolation
limit, the re-planned channel strengths, a first-order prediction of the
gain spread, and each channel's white-noise gain.

Notes
-----
First-order gain spread.  With the planned weights fixed, the realised gain
of channel j is ``c_jj = s_j + u_j^H E v_j`` with E the perturbation of G,
linear in the errors theta_p to first order: ``u_j^H E v_j = sum_p theta_p
J_pj``.  Hence ``gain_db ~ (20 / ln 10) Re(sum_p theta_p J_pj) / s_j`` is
Gaussian with standard deviation
``(20 / ln 10) sqrt(sum_p sigma_p^2 Re(J_pj)^2) / s_j``.  This holds for
degenerate channels too (the weights are fixed); the re-planned strengths
of a degenerate cluster need the block treatment of
:func:`~arrayplan.studies.trials.block_prediction`.  The position
derivatives of the kernel are central differences (step 1e-5 m) of the
kernel builder, which assumes that column s of G depends only on speaker s
and row m only on microphone m.  The expansion holds while k times the
position error stays small; where ``k * position_sd_m > 0.05`` only the
Monte Carlo holds (:attr:`ToleranceStudy.beyond_first_order`).

White-noise gain.  For channel j the ratio of the wanted power to the power
put into the microphones by uncorrelated unit errors on the speakers,
``s_j^2 / sum_s |v_sj|^2 ||G[:, s]||^2``, and likewise on the microphones,
``s_j^2 / sum_m |u_mj|^2 ||G[m, :]||^2``.  With paths of unit magnitude
it is the white-noise gain ``|w^H d|^2 / (w^H w)`` of H. Cox, R. Zeskind
and M. Kooij (IEEE Trans. ASSP 35(10), 1987), the inverse of the
sensitivity function of E. N. Gilbert and S. P. Morgan (Bell System
Technical Journal 34, 1955): it is the number of elements for a beam
that adds them in phase, and falls below 1 (0 dB) for channels that work
by near-cancellation, which small errors destroy.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import partial
from typing import Callable, Iterable

import numpy as np

from ..errors import InputError
from ..channels.planning import Plan
from ..verification.channels import wanted_channels
from ._common import is_measured_plan
from .trials import (KernelBuilder, TrialChunk, TrialProblem, free_field_builder, room_builder, run_trial_chunk,
                     trial_chunks)

__all__ = ["ToleranceStudy", "tolerance_study", "tolerance_problem", "first_order_gain_sd_db", "white_noise_gain_db",
           "KR_LIMIT", "PERCENTILES"]

#: Above this value of k times the position standard deviation the first-order prediction is not trusted.
KR_LIMIT = 0.05
#: Percentiles given for each distribution.
PERCENTILES = (5.0, 50.0, 95.0)
_Z95 = 1.6448536269514722          # standard normal 95th percentile (scipy.stats.norm.ppf(0.95))
_STEP_M = 1e-5


def _check(value: float, name: str, *, integer: bool = False) -> None:
    if not np.isfinite(value) or value < 0:
        raise InputError(f"must be a finite number >= 0, got {value!r}", source=name)
    if integer and value != int(value):
        raise InputError(f"must be a whole number, got {value!r}", source=name)


def tolerance_problem(plan: Plan, *, position_sd_m: float = 0.0, gain_sd_db: float = 0.0, phase_sd_deg: float = 0.0,
                      isolation_db: float = 20.0, seed: int = 0, kernel_builder: KernelBuilder | None = None,
                      threshold_db: float | None = None) -> TrialProblem:
    """The trial problem of `plan` (see :func:`tolerance_study` for the parameters).

    Parameters
    ----------
    plan : Plan
        With element positions.
    position_sd_m : float
        Standard deviation of each position coordinate (m).
    gain_sd_db : float
        Standard deviation of each element's gain (dB).
    phase_sd_deg : float
        Standard deviation of each element's phase (degrees).
    isolation_db : float
        Crosstalk margin a channel must keep (dB), finite.
    seed : int
        Base seed of the trials.
    kernel_builder : callable, optional
        ``builder(speakers, mics, medium) -> Kernel``; default the rig's room
        when the plan was made in it, else the free field.
    threshold_db : float, optional
        Strong-channel threshold (dB); default the plan's.

    Returns
    -------
    TrialProblem
        The plan's singular values, weights and judged cells, with a scale
        (the plan's couplings over the builder's) when the builder does not
        reproduce the plan's couplings.

    Raises
    ------
    InputError
        A negative or non-finite standard deviation, a non-finite
        isolation, or a kernel with a zero path where the plan needs scaling.
    """
    for value, name in ((position_sd_m, "position_sd_m"), (gain_sd_db, "gain_sd_db"), (phase_sd_deg, "phase_sd_deg")):
        _check(value, name)
    if not np.isfinite(isolation_db):
        raise InputError(f"must be finite, got {isolation_db!r}", source="isolation_db")
    ch = plan.channels
    thr = plan.threshold_db if threshold_db is None else float(threshold_db)
    want, judged_w, _ = wanted_channels(ch.singular_values, thr)
    judged = np.zeros(ch.singular_values.shape, bool)
    judged[:, want] = judged_w
    if kernel_builder is not None:
        builder = kernel_builder
    else:
        in_room = plan.rig.room is not None and plan.kernel_name == "room"
        builder = partial(room_builder, plan.rig.room) if in_room else free_field_builder
    nominal = builder(plan.rig.speakers, plan.rig.mics, plan.rig.medium).evaluate(ch.axis.hz)
    planned = np.conj(ch.combine) @ (ch.singular_values[:, :, None] * np.conj(np.swapaxes(ch.drive, 1, 2)))
    scale = np.linalg.norm(planned)
    base = None
    if np.linalg.norm(nominal - planned) > 1e-6 * scale:
        if np.any(nominal == 0):
            raise InputError("the kernel gives zero coupling on a path, so the plan's couplings cannot be scaled",
                             source=plan.rig.source, field="kernel", fix="give the rig file the plan was made for")
        base = planned / nominal
    return TrialProblem(plan.rig, ch.axis.hz.copy(), ch.singular_values, ch.drive, ch.combine, judged,
                        float(position_sd_m), float(gain_sd_db), float(phase_sd_deg), float(isolation_db), int(seed),
                        builder, base)


def first_order_gain_sd_db(problem: TrialProblem) -> np.ndarray:
    """First-order standard deviation of each channel's realised gain, dB; shape (n_freq, n_chan).

    See the module Notes.  Position derivatives are central differences of
    the problem's kernel over all speakers (or microphones) moved at once.

    Parameters
    ----------
    problem : TrialProblem
        From :func:`tolerance_problem`.

    Returns
    -------
    ndarray, shape (n_freq, n_chan)
        Standard deviation of 20 log10 of each channel's realised coupling
        (dB), in the plan's channel order; inf or NaN where s_j = 0.
    """
    n_s, n_m = len(problem.rig.speakers), len(problem.rig.mics)
    comb_t = np.swapaxes(problem.combine, 1, 2)                     # (f, c, m)
    drive = problem.drive                                           # (f, s, c)
    g0 = problem.couplings_at(np.zeros((n_s, 3)), np.zeros((n_m, 3)))
    var = np.zeros(problem.singular_values.shape)
    if problem.position_sd_m > 0:
        for axis in range(3):
            step = np.zeros(3)
            step[axis] = _STEP_M
            d_spk = (problem.couplings_at(np.tile(step, (n_s, 1)), np.zeros((n_m, 3)))
                     - problem.couplings_at(np.tile(-step, (n_s, 1)), np.zeros((n_m, 3)))) / (2 * _STEP_M)
            d_mic = (problem.couplings_at(np.zeros((n_s, 3)), np.tile(step, (n_m, 1)))
                     - problem.couplings_at(np.zeros((n_s, 3)), np.tile(-step, (n_m, 1)))) / (2 * _STEP_M)
            j_spk = np.swapaxes(comb_t @ d_spk, 1, 2) * drive                        # (f, s, c)
            j_mic = np.swapaxes(comb_t, 1, 2) * (d_mic @ drive)                      # (f, m, c)
            var += problem.position_sd_m ** 2 * (np.sum(j_spk.real ** 2, axis=1) + np.sum(j_mic.real ** 2, axis=1))
    j_spk = np.swapaxes(comb_t @ g0, 1, 2) * drive                  # d/d(log-amplitude of speaker s)
    j_mic = np.swapaxes(comb_t, 1, 2) * (g0 @ drive)
    sd_a = problem.gain_sd_db * np.log(10.0) / 20.0
    sd_phi = np.radians(problem.phase_sd_deg)
    for j in (j_spk, j_mic):
        # gain: theta = log-amplitude, derivative J; phase: derivative 1j * J, whose real part is -Im(J)
        var += sd_a ** 2 * np.sum(j.real ** 2, axis=1) + sd_phi ** 2 * np.sum(j.imag ** 2, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return 20.0 / np.log(10.0) * np.sqrt(var) / problem.singular_values


def white_noise_gain_db(singular_values: np.ndarray, drive: np.ndarray, combine: np.ndarray,
                        couplings: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """White-noise gain of each channel against uncorrelated speaker and microphone errors (module Notes).

    Parameters
    ----------
    singular_values : ndarray, shape (n_freq, n_chan)
    drive : ndarray, complex, shape (n_freq, n_spk, n_chan)
    combine : ndarray, complex, shape (n_freq, n_mic, n_chan)
    couplings : ndarray, complex, shape (n_freq, n_mic, n_spk)

    Returns
    -------
    speaker_side, mic_side : ndarray, shape (n_freq, n_chan)
        10 log10 of the white-noise gain, dB (-inf for a zero channel).
    """
    col = np.sum(np.abs(couplings) ** 2, axis=1)                    # (f, s)
    row = np.sum(np.abs(couplings) ** 2, axis=2)                    # (f, m)
    p = singular_values ** 2
    with np.errstate(divide="ignore"):
        spk = 10.0 * np.log10(p / np.einsum("fsc,fs->fc", np.abs(drive) ** 2, col))
        mic = 10.0 * np.log10(p / np.einsum("fmc,fm->fc", np.abs(combine) ** 2, row))
    return spk, mic


@dataclass(frozen=True)
class ToleranceStudy:
    """The result of :func:`tolerance_study`.

    Attributes
    ----------
    hz : ndarray, shape (n_freq,)
        Planned frequencies, Hz.
    judged : ndarray of bool, shape (n_freq, n_chan)
        Channels in use (strong in the plan) at each frequency.
    trials : TrialChunk
        Every trial's results, trials first (see :class:`~arrayplan.studies.trials.TrialChunk`).
    gain_pct_db : ndarray, shape (3, n_freq, n_chan)
        5th, 50th, 95th percentile of the realised gain over the trials, dB.
    crosstalk_pct_db : ndarray, shape (3, n_freq, n_chan)
        The same for the worst crosstalk, dB (NaN where not judged).
    strength_pct_db : ndarray, shape (3, n_freq, n_chan)
        The same for the re-planned strengths re the planned ones (k-th strongest), dB.
    survival : ndarray, shape (n_freq, n_chan)
        Fraction of trials in which the channel keeps the isolation limit (NaN where not judged).
    gain_sd_db, predicted_gain_sd_db : ndarray, shape (n_freq, n_chan)
        Standard deviation of the realised gain: Monte Carlo, first order (dB).
    strength_sd_db, predicted_strength_sd_db : ndarray, shape (n_freq, n_chan)
        Standard deviation of the re-planned strengths: Monte Carlo, first order with blocks (dB).
    wng_speaker_db, wng_mic_db : ndarray, shape (n_freq, n_chan)
        White-noise gains, dB.
    beyond_first_order : ndarray of bool, shape (n_freq,)
        ``k * position_sd_m > KR_LIMIT``: only the Monte Carlo holds there.
    settings : dict
        Standard deviations, isolation limit, trial count, seed, coupling model.
    """

    hz: np.ndarray
    judged: np.ndarray
    trials: TrialChunk
    gain_pct_db: np.ndarray
    crosstalk_pct_db: np.ndarray
    strength_pct_db: np.ndarray
    survival: np.ndarray
    gain_sd_db: np.ndarray
    predicted_gain_sd_db: np.ndarray
    strength_sd_db: np.ndarray
    predicted_strength_sd_db: np.ndarray
    wng_speaker_db: np.ndarray
    wng_mic_db: np.ndarray
    beyond_first_order: np.ndarray
    settings: dict


def _concat(chunks: Iterable[TrialChunk]) -> TrialChunk:
    parts = sorted(chunks, key=lambda c: int(c.trials[0]))
    return TrialChunk(*(np.concatenate([getattr(c, k) for c in parts]) for k in
                        ("trials", "gain_db", "crosstalk_db", "strength", "predicted_strength")))


def tolerance_study(plan: Plan, *, position_sd_m: float = 0.0, gain_sd_db: float = 0.0, phase_sd_deg: float = 0.0,
                    n_trials: int = 200, seed: int = 0, isolation_db: float = 20.0,
                    kernel_builder: KernelBuilder | None = None, threshold_db: float | None = None,
                    chunk_size: int = 25, map_chunks: Callable = map,
                    progress: Callable[[int, int], None] | None = None) -> ToleranceStudy:
    """Monte Carlo tolerance study of `plan`'s weights, with the first-order prediction beside it.

    Parameters
    ----------
    plan : Plan
        With element positions (from :func:`arrayplan.channels.planning.plan_rig` or
        :func:`arrayplan.formats.plan_folder.read_plan`).
    position_sd_m : float
        Standard deviation of each position coordinate of each element, m.
    gain_sd_db : float
        Standard deviation of each element's gain, dB.
    phase_sd_deg : float
        Standard deviation of each element's phase, degrees.
    n_trials : int
        Number of Monte Carlo trials (>= 1).
    seed : int
        Trial t draws from ``default_rng([seed, t])``.
    isolation_db : float
        A channel keeps its isolation when its worst crosstalk is at or
        below minus this, dB.
    kernel_builder : callable, optional
        ``builder(speakers, mics, medium) -> Kernel`` for the perturbed rig
        (default: the rig's room when the plan was made in it, else the free field).
    threshold_db : float, optional
        Channels in use are within this of the strongest, dB (default: the plan's).
    chunk_size : int
        Trials per chunk.
    map_chunks : callable
        ``map_chunks(function, chunks)`` runs the chunks (default: the
        built-in ``map``; an executor's ``map`` spreads them over workers).
    progress : callable, optional
        ``progress(done, total)`` in trials, after each chunk.

    Returns
    -------
    ToleranceStudy
    """
    _check(n_trials, "n_trials", integer=True)
    if n_trials < 1:
        raise InputError("needs at least 1 trial", source="n_trials")
    problem = tolerance_problem(plan, position_sd_m=position_sd_m, gain_sd_db=gain_sd_db, phase_sd_deg=phase_sd_deg,
                                isolation_db=isolation_db, seed=seed, kernel_builder=kernel_builder,
                                threshold_db=threshold_db)
    done, parts = 0, []
    for part in map_chunks(partial(run_trial_chunk, problem), trial_chunks(int(n_trials), int(chunk_size))):
        parts.append(part)
        done += part.trials.size
        if progress is not None:
            progress(done, int(n_trials))
    res = _concat(parts)
    sv = problem.singular_values
    judged = problem.judged
    sv_sorted = -np.sort(-sv, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        strength_db = 20.0 * np.log10(res.strength / sv_sorted)
        pred_db = 20.0 * np.log10(res.predicted_strength / sv_sorted)
        keep = np.where(judged, np.mean(res.crosstalk_db <= -problem.isolation_db, axis=0), np.nan)
    q = np.asarray(PERCENTILES)
    xt = np.where(np.isfinite(res.crosstalk_db) | np.isnan(res.crosstalk_db), res.crosstalk_db, -400.0)
    xt_pct = np.percentile(xt, q, axis=0)
    xt_pct = np.where(xt_pct <= -400.0, -np.inf, xt_pct)
    g0 = problem.couplings_at(np.zeros((len(plan.rig.speakers), 3)), np.zeros((len(plan.rig.mics), 3)))
    wng_s, wng_m = white_noise_gain_db(sv, problem.drive, problem.combine, g0)
    k = 2 * np.pi * problem.hz / plan.rig.medium.speed_of_sound
    settings = {"position_sd_m": problem.position_sd_m, "gain_sd_db": problem.gain_sd_db,
                "phase_sd_deg": problem.phase_sd_deg, "isolation_db": problem.isolation_db,
                "n_trials": int(n_trials), "seed": int(seed), "coupling_model": problem.model,
                "threshold_db": plan.threshold_db if threshold_db is None else float(threshold_db),
                "measured_plan": is_measured_plan(plan), "kr_limit": KR_LIMIT}
    return ToleranceStudy(problem.hz, judged, res, np.percentile(res.gain_db, q, axis=0), xt_pct,
                          np.percentile(strength_db, q, axis=0), keep, np.std(res.gain_db, axis=0, ddof=min(1, int(n_trials) - 1)),
                          first_order_gain_sd_db(problem), np.std(strength_db, axis=0, ddof=min(1, int(n_trials) - 1)),
                          np.std(pred_db, axis=0, ddof=min(1, int(n_trials) - 1)), wng_s, wng_m, k * problem.position_sd_m > KR_LIMIT,
                          settings)
