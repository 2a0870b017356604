"""Tracking channels across frequency: the same channel keeps its number and a continuous phase.

The rule is described in :mod:`arrayplan.channels.svd` (module Notes,
"Tracking"): at each bin the new channels are matched to the previous ones
by the largest total overlap |u_prev^H u_new| + |v_prev^H v_new| (an
assignment problem, solved exactly with scipy.optimize.linear_sum_assignment),
then each matched pair is rotated in phase so that the overlap is real and
positive.
"""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from .svd import ChannelSet

__all__ = ["track_channels"]


def _overlap_costs(drive: np.ndarray, combine: np.ndarray, block: int = 64) -> np.ndarray:
    """|v_{f-1}^H v_f| + |u_{f-1}^H u_f| between consecutive bins as found, shape (n_freq - 1, K, K)."""
    n_freq, _, k = drive.shape
    out = np.empty((max(0, n_freq - 1), k, k))
    for a in range(1, n_freq, block):
        b = min(a + block, n_freq)
        # contiguous operands, so that matmul hands each product to BLAS
        ov_v = np.abs(np.matmul(np.ascontiguousarray(np.conj(np.swapaxes(drive[a - 1:b - 1], -1, -2))), drive[a:b]))
        ov_u = np.abs(np.matmul(np.ascontiguousarray(np.swapaxes(combine[a - 1:b - 1], -1, -2)), np.conj(combine[a:b])))
        np.add(ov_u, ov_v, out=out[a - 1:b - 1])
    return out


def _track_in_place(s: np.ndarray, drive: np.ndarray, combine: np.ndarray, costs: np.ndarray | None = None) -> None:
    """Tracking (module Notes) applied to the arrays themselves.

    `costs` are the overlaps of :func:`_overlap_costs` of the arrays as
    found, when already computed (on the workers, chunk by chunk).
    """
    from scipy.optimize import linear_sum_assignment   # imported here: scipy.optimize is slow to import

    from ..parallel import one_blas_thread

    if costs is None:
        with one_blas_thread():   # small products: threaded BLAS only loses time here, badly on a busy machine
            costs = _overlap_costs(drive, combine)    # rows: channels of bin f-1 as found
    same = np.arange(s.shape[1])
    found = same                                  # found[i]: bin f-1's index of tracked channel i
    for f in range(1, s.shape[0]):
        rows, cols = linear_sum_assignment(-costs[f - 1][found])
        order = cols[np.argsort(rows)]
        if not np.array_equal(order, same):       # most bins keep their order: no copies then
            s[f] = s[f, order]
            drive[f] = drive[f][:, order]
            combine[f] = combine[f][:, order]
        # inner products of previous and new weights, per channel
        c = (np.sum(np.conj(drive[f - 1]) * drive[f], axis=0)
             + np.sum(combine[f - 1] * np.conj(combine[f]), axis=0))
        rot = np.conj(c) / np.where(np.abs(c) > 0, np.abs(c), 1.0)
        drive[f] *= rot
        combine[f] *= np.conj(rot)  # combine = conj(u): u gets rot, so conj(u) gets conj(rot)
        found = order


def track_channels(channels: ChannelSet) -> ChannelSet:
    """Order and phase-align channels from bin to bin (see module Notes).

    Parameters
    ----------
    channels : ChannelSet
        Channels as the SVD found them (not changed).

    Returns
    -------
    ChannelSet
        A copy with columns reordered and rotated in phase per frequency,
        ``tracked=True``.

    Notes
    -----
    The overlaps of every pair of consecutive bins are computed at once, on
    the channels as the SVD found them (a batched matrix product), and each
    bin's assignment reads them in the order the tracking has reached; only
    the assignment and the phase rotation run bin by bin.  The magnitudes
    of the overlaps do not depend on the phases applied to earlier bins,
    so the assignment is the one made against the rotated weights up to
    rounding in the last bits (which could only matter for an exact tie).
    """
    s = channels.singular_values.copy()
    drive = channels.drive.copy()
    combine = channels.combine.copy()
    _track_in_place(s, drive, combine)
    return replace(channels, singular_values=s, drive=drive, combine=combine, tracked=True)
