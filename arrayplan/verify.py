"""Verification: how well planned channels hold up on the measured rig.

Given a plan's weights and a kernel of the real rig (normally a
:class:`~arrayplan.kernels.measured.MeasuredKernel`), the realised channel
matrix at each planned frequency is ``C = combine^T G_measured drive``,
shape (n_freq, n_chan, n_chan); row i is the output of channel i's combine
weights, column j the input driven with channel j's drive weights.  For a
perfect rig C = diag(planned singular values).

Per wanted channel j and frequency:

* gain against plan, ``20 log10(|C_jj| / s_j)`` dB (meaningful in absolute
  terms only when the IR set is calibrated in the plan's units; otherwise
  compare channels with each other);
* worst crosstalk, ``20 log10(max_i |C_ij| or |C_ji|, i != j, i wanted / |C_jj|)``
  dB re the diagonal (leakage both into and out of channel j, among the
  wanted channels only, since only those are driven);
* isolation = -worst crosstalk; the channel is *lost* at that frequency
  when the isolation is below the threshold.  A channel passes when it is
  never lost.

The measured G is also decomposed afresh (re-plan); the summary compares
its singular values with the planned ones and gives the principal
(subspace) angles between the planned and re-planned drive subspaces of
the strong channels (scipy.linalg.subspace_angles).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import subspace_angles

from .channels import decompose_stack
from .coupling import Kernel
from .errors import InputError
from .plan_files import PlanWeights

__all__ = ["Verification", "verify_plan", "align_kernel_names"]


@dataclass(frozen=True)
class Verification:
    """The verdict on a plan against a measured rig.

    Attributes
    ----------
    hz : ndarray, shape (n_freq,)
        Planned frequencies, Hz.
    channels : ndarray of int, shape (n_want,)
        Wanted channels, 0-based.
    channel_matrix : ndarray, complex, shape (n_freq, n_chan, n_chan)
        ``combine^T G_measured drive`` over all planned channels.
    planned_sv, measured_sv : ndarray, shape (n_freq, n_chan)
        Planned singular values and those of the measured G.
    gain_db, crosstalk_db : ndarray, shape (n_freq, n_want)
        Gain against plan and worst crosstalk re the diagonal, dB.
    lost : ndarray of bool, shape (n_freq, n_want)
    strong_planned, strong_measured : ndarray of int, shape (n_freq,)
        Channels within `threshold_db` of the strongest.
    max_angle_deg : ndarray, shape (n_freq,)
        Largest principal angle between planned and re-planned drive
        subspaces of the strong planned channels, degrees.
    isolation_db, threshold_db : float
    """

    hz: np.ndarray
    channels: np.ndarray
    channel_matrix: np.ndarray
    planned_sv: np.ndarray
    measured_sv: np.ndarray
    gain_db: np.ndarray
    crosstalk_db: np.ndarray
    lost: np.ndarray
    strong_planned: np.ndarray
    strong_measured: np.ndarray
    max_angle_deg: np.ndarray
    isolation_db: float
    threshold_db: float

    @property
    def passed(self) -> np.ndarray:
        """Per wanted channel: never lost at any planned frequency, shape (n_want,)."""
        return ~np.any(self.lost, axis=0)


class _Reordered:
    """A kernel whose speakers and mics are put in another order."""

    def __init__(self, kernel: Kernel, spk_idx: list[int], mic_idx: list[int]) -> None:
        self._k, self._s, self._m = kernel, spk_idx, mic_idx
        self.speaker_names = tuple(kernel.speaker_names[i] for i in spk_idx)
        self.mic_names = tuple(kernel.mic_names[i] for i in mic_idx)

    def evaluate(self, hz: np.ndarray) -> np.ndarray:
        return self._k.evaluate(hz)[:, self._m][:, :, self._s]


def align_kernel_names(weights: PlanWeights, kernel: Kernel, *, plan_source: str | None = None,
                       measured_source: str | None = None) -> Kernel:
    """Return `kernel` with its elements in the plan's order, or raise InputError naming the mismatch."""
    out_idx = {}
    for kind, planned, measured in (("speakers", weights.speaker_names, kernel.speaker_names),
                                    ("microphones", weights.mic_names, kernel.mic_names)):
        planned, measured = list(planned), list(measured)
        missing = [n for n in planned if n not in measured]
        extra = [n for n in measured if n not in planned]
        if missing or extra or len(planned) != len(measured):
            what = []
            if missing:
                what.append(f"planned but not measured: {', '.join(missing)}")
            if extra:
                what.append(f"measured but not planned: {', '.join(extra)}")
            raise InputError(f"{kind} differ: plan has {len(planned)}, IR set has {len(measured)}"
                             + (f" ({'; '.join(what)})" if what else ""), source=measured_source,
                             field=kind, fix=f"measure the rig planned in {plan_source or 'the plan'}, "
                                             "with the same element names")
        out_idx[kind] = [measured.index(n) for n in planned]
    if out_idx["speakers"] == list(range(len(out_idx["speakers"]))) and \
            out_idx["microphones"] == list(range(len(out_idx["microphones"]))):
        return kernel
    return _Reordered(kernel, out_idx["speakers"], out_idx["microphones"])


def _db(x: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return 20.0 * np.log10(x)


def verify_plan(weights: PlanWeights, kernel: Kernel, *, isolation_db: float = 20.0,
                channels: list[int] | None = None, threshold_db: float | None = None,
                plan_source: str | None = None, measured_source: str | None = None) -> Verification:
    """Verify the planned channels against the rig described by `kernel`.

    Parameters
    ----------
    weights : PlanWeights
        From :func:`arrayplan.plan_files.read_weights`.
    kernel : Kernel
        The measured rig; element names must match the plan's (any order).
    isolation_db : float
        A channel is lost where its isolation is below this, dB.
    channels : list of int, optional
        Wanted channels, 0-based (default all planned channels).
    threshold_db : float, optional
        Strong-channel threshold for the subspace comparison, dB (default:
        the plan's, else 3).
    plan_source, measured_source : str, optional
        Names used in error messages.

    Returns
    -------
    Verification
    """
    kernel = align_kernel_names(weights, kernel, plan_source=plan_source, measured_source=measured_source)
    n_chan = weights.drive.shape[2]
    want = np.arange(n_chan) if channels is None else np.asarray(sorted(set(channels)), dtype=int)
    if want.size == 0 or want.min() < 0 or want.max() >= n_chan:
        raise InputError(f"channels must lie in 1..{n_chan}", source="--channels")
    if threshold_db is None:
        threshold_db = float(weights.sidecar.get("threshold_db", 3.0)) if isinstance(weights.sidecar, dict) else 3.0
    hz = weights.axis.hz
    g = kernel.evaluate(hz)                                         # (n_freq, n_mic, n_spk)
    c = np.einsum("fmi,fms,fsj->fij", weights.combine, g, weights.drive)
    s_meas, drive_meas, _ = decompose_stack(g)
    sub = np.abs(c[:, want][:, :, want])                            # (n_freq, n_want, n_want)
    diag = np.diagonal(sub, axis1=1, axis2=2)
    off = sub.copy()
    idx = np.arange(want.size)
    off[:, idx, idx] = 0.0
    worst = np.maximum(off.max(axis=1), off.max(axis=2)) if want.size > 1 else np.zeros_like(diag)
    with np.errstate(divide="ignore", invalid="ignore"):
        crosstalk = _db(worst / diag)
        gain = _db(diag / weights.singular_values[:, want])
    crosstalk = np.where(diag > 0, crosstalk, np.inf)
    lost = ~(-crosstalk >= isolation_db)
    level = _db(weights.singular_values / weights.singular_values[:, :1])
    strong_p = np.sum(level >= -abs(threshold_db) - 1e-12, axis=1)
    strong_m = np.sum(_db(s_meas / s_meas[:, :1]) >= -abs(threshold_db) - 1e-12, axis=1)
    angles = np.empty(len(hz))
    for f in range(len(hz)):
        k = int(strong_p[f])
        # the re-planned subspace of the same dimension, strongest first
        angles[f] = np.degrees(np.max(subspace_angles(weights.drive[f][:, :k], drive_meas[f][:, :k])))
    return Verification(hz, want, c, weights.singular_values, s_meas, gain, crosstalk, lost, strong_p, strong_m,
                        angles, float(isolation_db), float(threshold_db))
