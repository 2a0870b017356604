"""Monte Carlo trials of a rig built a little off: perturbed coupling matrices and what the planned weights do on them.

One trial draws, for every speaker and microphone, a position error
(Gaussian, standard deviation ``position_sd_m`` per coordinate), a gain
error (Gaussian in dB, ``gain_sd_db``) and a phase error (Gaussian,
``phase_sd_deg``), builds the coupling matrices of the perturbed rig and
applies the *planned* weights to them.  Trials are independent: trial ``t``
draws its numbers from ``numpy.random.default_rng([seed, t])``, so any split
of the trials into chunks, run in any order or on any worker, gives the same
results.

Notes
-----
Perturbed couplings, shape (n_freq, n_mic, n_spk)::

    G_t[f, m, s] = a_m a_s * K(positions + errors)[f, m, s]          (model "direct")
    G_t[f, m, s] = a_m a_s * G_0[f, m, s] * K(p + e) / K(p)          (model "ratio")

with ``a = 10**(gain_db / 20) * exp(1j * phase)`` and K the kernel built by
the kernel builder (default: the rig's room when it has one, else the free field).  "direct" is used when K at
the nominal positions reproduces the plan's own couplings
``G_0 = conj(combine) diag(s) drive^H``; otherwise (a measured plan, or a
plan whose directivities were not stored) each path's coupling is scaled by
the change the kernel predicts for that path ("ratio").  Directivity axes do
not turn with the position errors.  The realised channel matrix is
``C = combine^T G_t drive``, shape (n_freq, n_chan, n_chan).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np

from ..kernels.coupling import Kernel
from ..kernels.freefield import FreeFieldKernel
from ..kernels.room import RoomKernel
from ..rig.medium import Medium
from ..rig import ElementSet, Rig
from ..rig.room import Room

__all__ = ["KernelBuilder", "free_field_builder", "room_builder", "TrialProblem", "TrialChunk", "trial_errors",
           "perturbed_couplings", "run_trial_chunk", "trial_chunks", "DEGENERATE_RTOL", "clusters",
           "degenerate_blocks", "block_prediction"]

#: Builds the kernel of a (perturbed) rig: ``builder(speakers, mics, medium) -> Kernel``.
KernelBuilder = Callable[[ElementSet, ElementSet, Medium], Kernel]

#: Planned singular values closer than this (relative to the larger) form one degenerate cluster.
DEGENERATE_RTOL = 1e-6


def free_field_builder(speakers: ElementSet, mics: ElementSet, medium: Medium) -> Kernel:
    """The free-field kernel between `speakers` and `mics` (the default kernel builder).

    Parameters
    ----------
    speakers, mics : ElementSet
        Element positions (m) and directivities.
    medium : Medium
        Speed of sound and air absorption.

    Returns
    -------
    Kernel
        A :class:`FreeFieldKernel`, distances clamped at 1 µm.
    """
    return FreeFieldKernel.between(speakers, mics, medium, min_distance_m=1e-6)


def room_builder(room: Room, speakers: ElementSet, mics: ElementSet, medium: Medium) -> Kernel:
    """The image-source kernel of `room` between `speakers` and `mics`; bind `room` with functools.partial.

    Parameters
    ----------
    room : Room
        The rectangular room.
    speakers, mics : ElementSet
        Element positions (m) and directivities.
    medium : Medium
        Speed of sound and air absorption.

    Returns
    -------
    Kernel
        A :class:`RoomKernel`, distances clamped at 1 µm.
    """
    return RoomKernel.between(speakers, mics, medium, room, min_distance_m=1e-6)


@dataclass(frozen=True)
class TrialProblem:
    """Everything a chunk of trials needs (picklable when the kernel builder is).

    Attributes
    ----------
    rig : Rig
        Nominal positions and medium.
    hz : ndarray, shape (n_freq,)
        Planned frequencies, Hz.
    singular_values : ndarray, shape (n_freq, n_chan)
    drive : ndarray, complex, shape (n_freq, n_spk, n_chan)
    combine : ndarray, complex, shape (n_freq, n_mic, n_chan)
    judged : ndarray of bool, shape (n_freq, n_chan)
        Channels in use at each frequency (crosstalk is counted among them).
    position_sd_m, gain_sd_db, phase_sd_deg : float
        Standard deviations: per coordinate (m), per element (dB, degrees).
    isolation_db : float
        A channel keeps its isolation when its worst crosstalk is at or
        below minus this, dB.
    seed : int
    kernel_builder : callable
    ratio_base : ndarray or None, complex, shape (n_freq, n_mic, n_spk)
        ``G_0 / K(p)`` for the "ratio" model; None for "direct".
    """

    rig: Rig
    hz: np.ndarray
    singular_values: np.ndarray
    drive: np.ndarray
    combine: np.ndarray
    judged: np.ndarray
    position_sd_m: float
    gain_sd_db: float
    phase_sd_deg: float
    isolation_db: float
    seed: int
    kernel_builder: KernelBuilder = free_field_builder
    ratio_base: np.ndarray | None = None

    @property
    def model(self) -> str:
        """Which perturbation model the trials use (module Notes).

        Returns
        -------
        str
            ``"direct"`` without a ratio base, else ``"ratio"``.
        """
        return "direct" if self.ratio_base is None else "ratio"

    def couplings_at(self, speaker_offsets_m: np.ndarray, mic_offsets_m: np.ndarray) -> np.ndarray:
        """Couplings with the elements moved by the offsets (m, shapes (n_spk, 3), (n_mic, 3)), no gain errors.

        Parameters
        ----------
        speaker_offsets_m : ndarray, shape (n_spk, 3)
            Speaker position offsets (m).
        mic_offsets_m : ndarray, shape (n_mic, 3)
            Microphone position offsets (m).

        Returns
        -------
        ndarray, complex, shape (n_freq, n_mic, n_spk)
        """
        spk = dataclasses.replace(self.rig.speakers, positions=self.rig.speakers.positions + speaker_offsets_m)
        mic = dataclasses.replace(self.rig.mics, positions=self.rig.mics.positions + mic_offsets_m)
        g = self.kernel_builder(spk, mic, self.rig.medium).evaluate(self.hz)
        return g if self.ratio_base is None else g * self.ratio_base


@dataclass(frozen=True)
class TrialErrors:
    """The errors drawn for one trial: offsets (m), gains (dB), phases (rad), per speaker and microphone.

    Attributes
    ----------
    speaker_offsets_m, mic_offsets_m : ndarray, shape (n_spk, 3), (n_mic, 3)
        Position errors (m).
    speaker_gain_db, mic_gain_db : ndarray, shape (n_spk,), (n_mic,)
        Gain errors (dB).
    speaker_phase_rad, mic_phase_rad : ndarray, shape (n_spk,), (n_mic,)
        Phase errors (rad).
    """

    speaker_offsets_m: np.ndarray
    mic_offsets_m: np.ndarray
    speaker_gain_db: np.ndarray
    mic_gain_db: np.ndarray
    speaker_phase_rad: np.ndarray
    mic_phase_rad: np.ndarray


def trial_errors(problem: TrialProblem, trial: int) -> TrialErrors:
    """The errors of trial `trial` (0-based), from ``default_rng([seed, trial])``; independent of chunking.

    Parameters
    ----------
    problem : TrialProblem
        Standard deviations, seed and element counts.
    trial : int
        0-based trial index.

    Returns
    -------
    TrialErrors
        Position, gain and phase errors scaled by the problem's standard
        deviations, all drawn in one fixed order.
    """
    rng = np.random.default_rng([int(problem.seed), int(trial)])
    n_s, n_m = len(problem.rig.speakers), len(problem.rig.mics)
    z = rng.standard_normal(4 * n_s + 4 * n_m + n_s + n_m)       # one draw, fixed order
    pos = z[:3 * (n_s + n_m)] * problem.position_sd_m
    gains = z[3 * (n_s + n_m):4 * (n_s + n_m)] * problem.gain_sd_db
    phases = z[4 * (n_s + n_m):] * np.radians(problem.phase_sd_deg)
    return TrialErrors(pos[:3 * n_s].reshape(n_s, 3), pos[3 * n_s:].reshape(n_m, 3), gains[:n_s], gains[n_s:],
                       phases[:n_s], phases[n_s:])


def perturbed_couplings(problem: TrialProblem, trial: int) -> np.ndarray:
    """Coupling matrices of trial `trial` (see module Notes).

    Parameters
    ----------
    problem : TrialProblem
        The nominal rig, kernel builder and standard deviations.
    trial : int
        0-based trial index.

    Returns
    -------
    ndarray, complex, shape (n_freq, n_mic, n_spk)
        G_t with the trial's position, gain and phase errors.
    """
    e = trial_errors(problem, trial)
    g = problem.couplings_at(e.speaker_offsets_m, e.mic_offsets_m)
    a_s = 10.0 ** (e.speaker_gain_db / 20.0) * np.exp(1j * e.speaker_phase_rad)
    a_m = 10.0 ** (e.mic_gain_db / 20.0) * np.exp(1j * e.mic_phase_rad)
    return g * a_m[None, :, None] * a_s[None, None, :]


def clusters(values: np.ndarray, rtol: float = DEGENERATE_RTOL) -> list[np.ndarray]:
    """Indices of `values` (shape (n,)) grouped into clusters of equal values (relative `rtol`), largest first.

    Parameters
    ----------
    values : ndarray, shape (n,)
        Values to group, e.g. one frequency's singular values.
    rtol : float
        A value joins the current cluster when within `rtol` of its first
        (largest) value, relatively.

    Returns
    -------
    list of ndarray of int
        0-based indices per cluster, clusters in descending order of value.
    """
    order = np.argsort(-values, kind="stable")
    groups: list[list[int]] = []
    for i in order:
        if groups and abs(values[groups[-1][0]] - values[i]) <= rtol * max(abs(values[groups[-1][0]]), 1e-300):
            groups[-1].append(int(i))
        else:
            groups.append([int(i)])
    return [np.asarray(g) for g in groups]


def degenerate_blocks(sv: np.ndarray) -> dict[int, tuple[np.ndarray, np.ndarray]]:
    """Degenerate clusters of the planned singular values, grouped by size.

    Parameters
    ----------
    sv : ndarray, shape (n_freq, n_chan)

    Returns
    -------
    dict
        ``size -> (freq_index (n_blk,), channel_index (n_blk, size))`` for
        every cluster of two or more equal, non-zero singular values.
    """
    found: dict[int, tuple[list[int], list[np.ndarray]]] = {}
    for f in range(sv.shape[0]):
        top = sv[f].max()
        for j in clusters(sv[f]):
            if j.size > 1 and sv[f, j[0]] > 1e-12 * top:
                fs, js = found.setdefault(j.size, ([], []))
                fs.append(f)
                js.append(j)
    return {n: (np.asarray(fs), np.asarray(js)) for n, (fs, js) in found.items()}


def block_prediction(sv: np.ndarray, proj: np.ndarray,
                     blocks: dict[int, tuple[np.ndarray, np.ndarray]] | None = None) -> np.ndarray:
    """First-order perturbed singular values, degenerate clusters as blocks.

    Parameters
    ----------
    sv : ndarray, shape (n_freq, n_chan)
        Planned singular values.
    proj : ndarray, complex, shape (n_freq, n_chan, n_chan)
        The perturbation in the planned bases, ``U^H E V = combine^T E drive``.
    blocks : dict, optional
        From :func:`degenerate_blocks` (computed when not given).

    Returns
    -------
    ndarray, shape (n_freq, n_chan)
        Predicted singular values of G + E, descending per frequency; NaN
        for channels with s = 0.

    Notes
    -----
    A single channel moves by ``Re(E_jj)``; a cluster J of equal values s > 0
    moves to ``s + eigvalsh((E_JJ + E_JJ^H) / 2)`` (G. W. Stewart and J.-G.
    Sun, Matrix Perturbation Theory, 1990).  The per-channel formula alone
    is wrong for a cluster: its basis is arbitrary, the block's eigenvalues
    are not.
    """
    blocks = degenerate_blocks(sv) if blocks is None else blocks
    top = sv.max(axis=1, keepdims=True)
    out = np.where(sv > 1e-12 * top, sv + np.real(np.diagonal(proj, axis1=1, axis2=2)), np.nan)
    for size, (fs, js) in blocks.items():
        blk = proj[fs[:, None, None], js[:, :, None], js[:, None, :]]          # (n_blk, size, size)
        eig = np.linalg.eigvalsh(0.5 * (blk + np.conj(np.swapaxes(blk, 1, 2))))
        out[fs[:, None], js] = sv[fs[:, None], js] + eig
    return -np.sort(-out, axis=1)


@dataclass(frozen=True)
class TrialChunk:
    """Results of a chunk of trials; every array has the chunk's trials first.

    Attributes
    ----------
    trials : ndarray of int, shape (n_t,)
    gain_db : ndarray, shape (n_t, n_freq, n_chan)
        ``20 log10(|C_jj| / s_j)``: realised gain of each planned channel, dB.
    crosstalk_db : ndarray, shape (n_t, n_freq, n_chan)
        Worst crosstalk into or out of channel j among the channels judged
        there, dB re ``|C_jj|``; NaN where j is not judged, -inf when no
        other channel is.
    strength : ndarray, shape (n_t, n_freq, n_chan)
        Singular values of the perturbed G (re-planned channel strengths), descending.
    predicted_strength : ndarray, shape (n_t, n_freq, n_chan)
        Their first-order prediction with degenerate clusters as blocks.
    """

    trials: np.ndarray
    gain_db: np.ndarray
    crosstalk_db: np.ndarray
    strength: np.ndarray
    predicted_strength: np.ndarray


def run_trial_chunk(problem: TrialProblem, trials: Sequence[int]) -> TrialChunk:
    """Run the trials `trials` (0-based indices) of `problem`; see :class:`TrialChunk`.

    Parameters
    ----------
    problem : TrialProblem
        The plan's weights and the error model.
    trials : sequence of int
        0-based trial indices.

    Returns
    -------
    TrialChunk
        Gains and crosstalk (dB) and re-planned and predicted strengths,
        shape (n_t, n_freq, n_chan) each.
    """
    trials = np.asarray(trials, dtype=int)
    sv, judged = problem.singular_values, problem.judged
    n_f, n_c = sv.shape
    comb_t = np.swapaxes(problem.combine, 1, 2)                     # (n_freq, n_chan, n_mic)
    pair = judged[:, :, None] & judged[:, None, :]
    eye = np.eye(n_c, dtype=bool)[None]
    shape = (trials.size, n_f, n_c)
    gain, xt, strength, pred = (np.empty(shape) for _ in range(4))
    blocks = degenerate_blocks(sv)
    for k, t in enumerate(trials):
        g = perturbed_couplings(problem, int(t))
        c = comb_t @ g @ problem.drive                              # (n_freq, n_chan, n_chan)
        mag = np.abs(c)
        diag = np.diagonal(mag, axis1=1, axis2=2)
        off = np.where(pair & ~eye, mag, 0.0)
        worst = np.maximum(off.max(axis=1), off.max(axis=2))
        with np.errstate(divide="ignore", invalid="ignore"):
            gain[k] = 20.0 * np.log10(diag / sv)
            xt[k] = np.where(judged, 20.0 * np.log10(worst / diag), np.nan)
        strength[k] = np.linalg.svd(g, compute_uv=False)
        c[:, np.arange(n_c), np.arange(n_c)] -= sv                  # U^H (G_t - G_0) V
        pred[k] = block_prediction(sv, c, blocks)
    return TrialChunk(trials, gain, xt, strength, pred)


def trial_chunks(n_trials: int, chunk_size: int) -> list[np.ndarray]:
    """Trial indices 0..n_trials-1 split into chunks of at most `chunk_size`.

    Parameters
    ----------
    n_trials : int
        Number of trials.
    chunk_size : int
        Most trials per chunk (values below 1 count as 1).

    Returns
    -------
    list of ndarray of int
        Consecutive index ranges, in order.
    """
    return [np.arange(i, min(i + chunk_size, n_trials)) for i in range(0, n_trials, max(1, chunk_size))]
