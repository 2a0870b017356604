"""Verification: how well planned channels hold up on the measured rig.

Given a plan's weights and a kernel of the real rig (normally a
:class:`~arrayplan.kernels.measured.MeasuredKernel`), the realised channel
matrix at each planned frequency is ``C = combine^T G_measured drive``,
shape (n_freq, n_chan, n_chan); row i is the output of channel i's combine
weights, column j the input driven with channel j's drive weights.  For a
perfect rig C = diag(planned singular values).

Levels are always taken against the strongest channel at each frequency,
never against channel 1: in a tracked plan (channels followed across
frequency) channel 1 need not be the strongest everywhere.

Wanted channels (:func:`wanted_channels`).  By default a channel is wanted
when the plan calls it strong (within the plan's ``threshold_db`` of the
strongest) at one or more planned frequencies, and it is *judged* only at
the frequencies where it is strong: elsewhere the plan itself says it is
not worth driving, so nobody would use it there.  An explicit list of
channels, or ``"all"``, judges those channels at every planned frequency.

Per wanted channel j and judged frequency (NaN where not judged):

* gain, ``20 log10(|C_jj| / s_j)`` dB re the plan's singular value, or re
  the plan times one common factor (``gain_reference="common"``): the
  least-squares fit in dB of |C_jj| to s_j over all judged channels and
  frequencies, i.e. the mean of their dB differences.  Use the common
  reference for uncalibrated (full-scale) measurements, whose gains against
  a free-field plan (1/m) carry an arbitrary common offset; the channel
  matrix and the measured singular values are then divided by that factor;
* worst crosstalk, ``20 log10(max_i |C_ij| or |C_ji|, i != j / |C_jj|)`` dB re
  the diagonal, over the channels i judged at that frequency (leakage both
  into and out of channel j among the channels in use there).  Crosstalk
  and isolation are ratios: the gain reference does not change them;
* isolation = -worst crosstalk; the channel is *lost* at that frequency
  when the isolation is below the threshold.  A channel passes when it is
  never lost where it is judged.

The measured G is also decomposed afresh (re-plan); the summary compares
its singular values with the planned ones (paired by rank at each
frequency) and gives the principal (subspace) angles between the drive
subspace of the planned strong channels, whatever their numbers, and the
re-planned drive subspace of the same dimension
(:func:`largest_subspace_angles_deg`, the rule of scipy.linalg.subspace_angles).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..channels.svd import decompose_stack
from ..kernels.coupling import Kernel
from ..errors import InputError
from ..filters.design import strong_ranges_hz
from ..formats.plan_folder import PlanWeights

__all__ = ["Verification", "verify_plan", "judge_channels", "align_kernel_names", "wanted_channels",
           "GAIN_REFERENCES", "level_re_strongest_db", "strong_mask", "replanned_in_plan_order", "lost_bands_hz"]

#: How realised gains are referred: to the plan's singular values, or to the
#: plan times one fitted common factor.
GAIN_REFERENCES = ("plan", "common")


@dataclass(frozen=True)
class Verification:
    """The verdict on a plan against a measured rig.

    Attributes
    ----------
    hz : ndarray, shape (n_freq,)
        Frequencies checked, Hz: the plan's (:func:`verify_plan`) or the filters'
        fine in-band grid (:func:`arrayplan.verification.filters.verify_filters`).
    channels : ndarray of int, shape (n_want,)
        Wanted channels, 0-based.
    channel_matrix : ndarray, complex, shape (n_freq, n_chan, n_chan)
        ``combine^T G_measured drive`` over all planned channels.
    planned_sv, measured_sv : ndarray, shape (n_freq, n_chan)
        Planned singular values, in the plan's channel order (a tracked
        plan's need not be descending), and those of the measured G put in
        the same order by rank (:func:`replanned_in_plan_order`).
    gain_db, crosstalk_db : ndarray, shape (n_freq, n_want)
        Gain against the reference (see `gain_reference`) and worst
        crosstalk re the diagonal, dB; NaN where the channel is not judged.
    lost : ndarray of bool, shape (n_freq, n_want)
        Isolation below the limit at a judged frequency.
    strong_planned, strong_measured : ndarray of int, shape (n_freq,)
        Channels within `threshold_db` of the strongest at each frequency
        (the strongest, not channel 1: a tracked plan's channel 1 need not be).
    max_angle_deg : ndarray, shape (n_freq,)
        Largest principal angle between the drive subspace of the planned
        strong channels (whatever their numbers) and the re-planned drive
        subspace of the same dimension (its strongest channels), degrees.
    isolation_db, threshold_db : float
    judged : ndarray of bool, shape (n_freq, n_want)
        Where each wanted channel is judged.
    gain_reference : {"plan", "common"}
    common_gain_db : float
        The fitted common factor, dB: mean over judged cells of
        ``20 log10(|C_jj| / s_j)``.  With the ``common`` reference the channel
        matrix and measured singular values are divided by it; with ``plan``
        it is reported only.
    wanted_rule : str
        One line saying which channels were taken as wanted and why.
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
    judged: np.ndarray | None = None
    gain_reference: str = "plan"
    common_gain_db: float = float("nan")
    wanted_rule: str = ""

    @property
    def passed(self) -> np.ndarray:
        """Per wanted channel: never lost at any planned frequency.

        Returns
        -------
        ndarray of bool, shape (n_want,)
            True where :attr:`lost` is False at every frequency.
        """
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
    """Return `kernel` with its elements in the plan's order, or raise InputError naming the mismatch.

    Parameters
    ----------
    weights : PlanWeights
        The plan's weights, with its speaker and microphone names.
    kernel : Kernel
        The measured kernel.
    plan_source, measured_source : str, optional
        The plan folder and the IR set, named in messages.

    Returns
    -------
    Kernel
        `kernel` itself when the order already matches, else a view that
        evaluates to shape (n, n_mic, n_spk) in the plan's order.

    Raises
    ------
    InputError
        The two sides do not hold the same element names.
    """
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
                                             "with the same element names ('arrayplan deconvolve' takes them "
                                             "from the rig file or plan folder given to it)")
        out_idx[kind] = [measured.index(n) for n in planned]
    if out_idx["speakers"] == list(range(len(out_idx["speakers"]))) and \
            out_idx["microphones"] == list(range(len(out_idx["microphones"]))):
        return kernel
    return _Reordered(kernel, out_idx["speakers"], out_idx["microphones"])


def _db(x: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return 20.0 * np.log10(x)


def _ranges(numbers: list[int]) -> str:
    """1-based channel numbers as ``1-4,7``."""
    out, i = [], 0
    while i < len(numbers):
        j = i
        while j + 1 < len(numbers) and numbers[j + 1] == numbers[j] + 1:
            j += 1
        out.append(str(numbers[i]) if i == j else f"{numbers[i]}-{numbers[j]}")
        i = j + 1
    return ",".join(out)


def level_re_strongest_db(sv: np.ndarray) -> np.ndarray:
    """Each channel's level re the strongest channel at the same frequency, dB.

    Parameters
    ----------
    sv : ndarray, shape (n_freq, n_chan)
        Singular values in any channel order (a tracked plan is not
        descending), unit of G.

    Returns
    -------
    ndarray, shape (n_freq, n_chan)
        ``20 log10(s_j / max_i s_i)`` dB, 0 for the strongest, -inf for a
        zero channel.
    """
    sv = np.asarray(sv, dtype=float)
    return _db(sv / sv.max(axis=1, keepdims=True))


def strong_mask(sv: np.ndarray, threshold_db: float) -> np.ndarray:
    """Where each channel is within `threshold_db` (dB) of the strongest, shape (n_freq, n_chan).

    The same rule as the plan's strong count
    (:meth:`arrayplan.channels.svd.ChannelSet.strong_channels`), whatever the channel order.

    Parameters
    ----------
    sv : ndarray, shape (n_freq, n_chan)
        Singular values, in any channel order.
    threshold_db : float
        Margin below the strongest channel at each frequency (dB; the sign is ignored).

    Returns
    -------
    ndarray of bool, shape (n_freq, n_chan)
        True where the channel is strong.
    """
    return level_re_strongest_db(sv) >= -abs(threshold_db) - 1e-12


def replanned_in_plan_order(planned_sv: np.ndarray, measured_sv: np.ndarray) -> np.ndarray:
    """The re-planned singular values put in the plan's channel order by rank.

    Parameters
    ----------
    planned_sv : ndarray, shape (n_freq, n_chan)
        The plan's singular values, in its channel order (tracked or descending).
    measured_sv : ndarray, shape (n_freq, n_chan)
        The measured G's singular values, descending.

    Returns
    -------
    ndarray, shape (n_freq, n_chan)
        ``[f, j]`` = the measured singular value of the same rank at frequency
        f as planned channel j (ties keep the plan's channel order); equal to
        `measured_sv` for an untracked plan.
    """
    order = np.argsort(-np.asarray(planned_sv), axis=1, kind="stable")   # channel of each rank
    out = np.empty_like(np.asarray(measured_sv, dtype=float))
    np.put_along_axis(out, order, measured_sv, axis=1)
    return out


def wanted_channels(planned_sv: np.ndarray, threshold_db: float,
                    channels: list[int] | str | None = None) -> tuple[np.ndarray, np.ndarray, str]:
    """Which channels to judge, and where.

    Parameters
    ----------
    planned_sv : ndarray, shape (n_freq, n_chan)
        The plan's singular values, descending per frequency.
    threshold_db : float
        A channel is strong within this of the strongest, dB.
    channels : list of int, "all", or None
        0-based explicit list (judged everywhere), every planned channel
        (judged everywhere), or None: the channels strong at one or more
        planned frequencies, each judged only where strong.

    Returns
    -------
    want : ndarray of int, shape (n_want,)
    judged : ndarray of bool, shape (n_freq, n_want)
    rule : str
        One line for people: which channels and why.
    """
    n_freq, n_chan = planned_sv.shape
    if isinstance(channels, str):
        if channels != "all":
            raise InputError(f"expected 'all' or channel numbers, got {channels!r}", source="channels")
        want = np.arange(n_chan)
        return want, np.ones((n_freq, n_chan), bool), \
            f"all {n_chan} planned channels, each judged at every planned frequency (channels 'all')"
    if channels is not None:
        want = np.asarray(sorted(set(channels)), dtype=int)
        if want.size == 0 or want.min() < 0 or want.max() >= n_chan:
            raise InputError(f"channels must lie in 1..{n_chan}", source="channels")
        return want, np.ones((n_freq, want.size), bool), \
            f"channels {_ranges([int(j) + 1 for j in want])} as given, each judged at every planned frequency"
    strong = strong_mask(planned_sv, threshold_db)                # (n_freq, n_chan)
    want = np.flatnonzero(strong.any(axis=0))
    never = [j + 1 for j in range(n_chan) if j not in set(want.tolist())]
    rule = (f"channels {_ranges([int(j) + 1 for j in want])}: strong in the plan (within {abs(threshold_db):g} dB "
            f"of the strongest) at one or more planned frequencies, each judged only where strong")
    if never:
        rule += f"; channels {_ranges(never)} are never strong and not judged (channels 'all' judges every channel)"
    return want, strong[:, want], rule


def verify_plan(weights: PlanWeights, kernel: Kernel, *, isolation_db: float = 20.0,
                channels: list[int] | str | None = None, threshold_db: float | None = None,
                gain_reference: str = "plan", plan_source: str | None = None,
                measured_source: str | None = None) -> Verification:
    """Verify the planned channels against the rig described by `kernel`.

    Parameters
    ----------
    weights : PlanWeights
        From :func:`arrayplan.formats.plan_folder.read_weights`.
    kernel : Kernel
        The measured rig; element names must match the plan's (any order).
    isolation_db : float
        A channel is lost where its isolation is below this, dB.
    channels : list of int, "all", or None
        Wanted channels, 0-based, judged at every frequency; "all" for every
        planned channel; None (default) for the channels strong in the plan
        somewhere, each judged where strong (:func:`wanted_channels`).
    threshold_db : float, optional
        Strong-channel threshold for the wanted channels and the subspace
        comparison, dB (default: the plan's, else 3).
    gain_reference : {"plan", "common"}
        Refer gains to the plan's singular values, or to the plan times one
        fitted common factor (for uncalibrated measurements).
    plan_source, measured_source : str, optional
        Names used in error messages.

    Returns
    -------
    Verification
    """
    kernel = align_kernel_names(weights, kernel, plan_source=plan_source, measured_source=measured_source)
    if gain_reference not in GAIN_REFERENCES:
        raise InputError(f"must be one of {', '.join(GAIN_REFERENCES)}, got {gain_reference!r}",
                         source="gain_reference")
    if threshold_db is None:
        threshold_db = float(weights.sidecar.get("threshold_db", 3.0)) if isinstance(weights.sidecar, dict) else 3.0
    want, judged, rule = wanted_channels(weights.singular_values, threshold_db, channels)
    hz = weights.axis.hz
    g = kernel.evaluate(hz)                                         # (n_freq, n_mic, n_spk)
    c = np.einsum("fmi,fms,fsj->fij", weights.combine, g, weights.drive)
    return judge_channels(hz, c, g, weights.singular_values, weights.drive, want, judged, rule,
                          isolation_db=isolation_db, threshold_db=threshold_db, gain_reference=gain_reference,
                          measured_source=measured_source)


def judge_channels(hz: np.ndarray, channel_matrix: np.ndarray, g: np.ndarray, planned_sv: np.ndarray,
                   planned_drive: np.ndarray, want: np.ndarray, judged: np.ndarray, rule: str, *,
                   isolation_db: float, threshold_db: float, gain_reference: str = "plan",
                   measured_source: str | None = None) -> Verification:
    """The verdict on a realised channel matrix: gains, crosstalk, lost channels, re-plan comparison.

    Shared by the verification of a plan's weights (:func:`verify_plan`) and
    of FIR filters (:func:`verify_filters`); the rules are in the module docstring.

    Parameters
    ----------
    hz : ndarray, shape (n_freq,)
        Frequencies, Hz.
    channel_matrix : ndarray, complex, shape (n_freq, n_chan, n_chan)
        Realised ``combine^T G drive`` (output i, input j).
    g : ndarray, complex, shape (n_freq, n_mic, n_spk)
        The measured coupling, for the re-plan.
    planned_sv : ndarray, shape (n_freq, n_chan)
        Planned singular values, plan's channel order.
    planned_drive : ndarray, complex, shape (n_freq, n_spk, n_chan)
        Planned (or realised) drive weights, for the subspace angles.
    want : ndarray of int, shape (n_want,)
    judged : ndarray of bool, shape (n_freq, n_want)
    rule : str
        Which channels are wanted and why (one line).
    isolation_db, threshold_db : float
    gain_reference : {"plan", "common"}
    measured_source : str, optional
        Name for error messages.

    Returns
    -------
    Verification
    """
    c = channel_matrix
    s_meas, drive_meas, _ = decompose_stack(g)
    sub = np.abs(c[:, want][:, :, want])                            # (n_freq, n_want, n_want)
    diag = np.diagonal(sub, axis1=1, axis2=2).copy()
    # crosstalk only among the channels in use (judged) at each frequency
    off = sub * (judged[:, :, None] & judged[:, None, :])
    idx = np.arange(want.size)
    off[:, idx, idx] = 0.0
    worst = np.maximum(off.max(axis=1), off.max(axis=2))
    with np.errstate(divide="ignore", invalid="ignore"):
        crosstalk = _db(worst / diag)
        raw_gain = _db(diag / planned_sv[:, want])
    crosstalk = np.where(diag > 0, crosstalk, np.inf)
    crosstalk = np.where(judged, crosstalk, np.nan)
    raw_gain = np.where(judged, raw_gain, np.nan)
    fit = np.isfinite(raw_gain)
    common_db = float(np.mean(raw_gain[fit])) if np.any(fit) else float("nan")
    if gain_reference == "common":
        if not np.isfinite(common_db):
            raise InputError("no wanted channel reaches the microphones, so no common gain can be fitted",
                             source=measured_source, field="gain_reference",
                             fix="check the IR set, or use `gain_reference` plan")
        factor = 10.0 ** (common_db / 20.0)
        c = c / factor
        s_meas = s_meas / factor
        gain = raw_gain - common_db
    else:
        gain = raw_gain
    lost = judged & ~(-crosstalk >= isolation_db)
    strong = strong_mask(planned_sv, threshold_db)                  # (n_freq, n_chan), any channel order
    strong_p = np.sum(strong, axis=1)
    strong_m = np.sum(strong_mask(s_meas, threshold_db), axis=1)
    # the planned strong channels, whatever their numbers, against the re-planned subspace
    # of the same dimension (s_meas is descending: its first k channels are its strongest)
    angles = largest_subspace_angles_deg(planned_drive, strong, drive_meas)
    s_meas = replanned_in_plan_order(planned_sv, s_meas)
    return Verification(hz, want, c, planned_sv, s_meas, gain, crosstalk, lost, strong_p, strong_m,
                        angles, float(isolation_db), float(threshold_db), judged=judged,
                        gain_reference=gain_reference, common_gain_db=common_db, wanted_rule=rule)


def largest_subspace_angles_deg(planned: np.ndarray, chosen: np.ndarray, other: np.ndarray) -> np.ndarray:
    """The largest principal angle between two subspaces at every frequency, degrees.

    At frequency f the first subspace is spanned by the columns of
    ``planned[f]`` where ``chosen[f]`` is True (k of them), the second by the
    first k columns of ``other[f]``.  Frequencies with the same k are done
    together (batched QR and SVD) with the cosine/sine rule of
    scipy.linalg.subspace_angles (A. V. Knyazev and M. E. Argentati,
    "Principal angles between subspaces in an A-based scalar product", SIAM
    J. Sci. Comput. 23(6), 2002): the sine of the largest angle where the
    largest cosine is at least 1/sqrt(2), else the arccosine of the smallest
    cosine, so that small angles keep their precision.

    Parameters
    ----------
    planned : ndarray, complex, shape (n_freq, n, n_chan)
        Column vectors (for example planned drive weights).
    chosen : ndarray of bool, shape (n_freq, n_chan)
        The columns of `planned` that span the first subspace; at least one per frequency.
    other : ndarray, complex, shape (n_freq, n, n_other)
        Column vectors whose first k columns span the second subspace.

    Returns
    -------
    ndarray, shape (n_freq,)
        Degrees, from 0 to 90.
    """
    k_of = np.sum(chosen, axis=1)
    order = np.argsort(~chosen, axis=1, kind="stable")        # the chosen columns first, in their order
    out = np.empty(len(k_of))
    for k in np.unique(k_of):
        fs = np.flatnonzero(k_of == k)
        a = np.take_along_axis(planned[fs], order[fs, None, :k], axis=2)
        qa = np.linalg.qr(a)[0]
        qb = np.linalg.qr(other[fs][:, :, :k])[0]
        cosines = qa.conj().swapaxes(-1, -2) @ qb
        sigma = np.linalg.svd(cosines, compute_uv=False)                # descending
        sines = np.linalg.svd(qb - qa @ cosines, compute_uv=False)
        largest = np.where(sigma[:, 0] ** 2 >= 0.5, np.arcsin(np.clip(sines[:, 0], -1.0, 1.0)),
                           np.arccos(np.clip(sigma[:, -1], -1.0, 1.0)))
        out[fs] = np.degrees(largest)
    return out


def lost_bands_hz(res: Verification) -> list[list[tuple[float, float]]]:
    """Per wanted channel, the runs of consecutive frequencies where it is lost, as (low, high) Hz.

    Parameters
    ----------
    res : Verification
        A verification result.

    Returns
    -------
    list of list of (float, float)
        One list per wanted channel (in ``res.channels`` order) of
        (lowest, highest) planned frequency of each run (Hz).
    """
    return [strong_ranges_hz(res.hz, res.lost[:, k]) for k in range(len(res.channels))]
