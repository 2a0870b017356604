"""Channels ("communication modes"): the SVD of every coupling matrix.

For each frequency, G = U S V^H with singular values in descending order.
Channel j is driven by the speaker weights ``drive[:, j] = V[:, j]`` and
received by combining the microphones with ``combine[:, j] = conj(U[:, j])``
(output ``y_j = sum_m combine[m, j] p_m = u_j^H p``), so that the channel
matrix ``combine^T G drive`` is diag(s) and the power coupling of channel j
is ``s_j**2``.

Notes
-----
Phase convention.  The SVD leaves one unit phase per channel free
(u_j, v_j) -> (u_j e^{j phi}, v_j e^{j phi}).  arrayplan fixes it so that
the speaker entry of largest magnitude in each drive vector is real and
positive (ties within a relative 1e-6 go to the lowest speaker index).
Channels with equal singular values (degenerate) span a subspace whose
basis the SVD does not fix; any orthonormal basis of it is a valid plan.

Tracking.  With ``track=True``, channels are numbered by their order at the
first frequency and followed from bin to bin: at each bin the new channels
are matched to the previous ones by the largest total overlap
|u_prev^H u_new| + |v_prev^H v_new| (an assignment problem, solved exactly),
then each matched pair is rotated in phase so that v_prev^H v_new +
u_prev^H u_new is real and positive.  Where two singular values cross, the
weights stay continuous and the channel keeps its number, so a tracked
channel's singular value need not be descending across channels.
Strong/effective counts never depend on tracking.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import linear_sum_assignment

from .coupling import CouplingStack, Kernel
from .frequency import FrequencyAxis

__all__ = ["ChannelSet", "decompose", "decompose_stack", "fix_phase", "track_channels"]

_TIE_RTOL = 1e-6


@dataclass(frozen=True)
class ChannelSet:
    """The channels of a rig at every planned frequency.

    Attributes
    ----------
    axis : FrequencyAxis
    singular_values : ndarray, shape (n_freq, n_chan)
        Amplitude coupling s_j (unit of G, 1/m for the free field).
    drive : ndarray, complex, shape (n_freq, n_spk, n_chan)
        Speaker drive weights, unit-norm columns (V).
    combine : ndarray, complex, shape (n_freq, n_mic, n_chan)
        Microphone combine weights, unit-norm columns (conj U).
    sum_rule : ndarray, shape (n_freq,)
        sum |G_ms|^2, computed from G itself.
    speaker_names, mic_names : tuple of str
    tracked : bool
        True when the channels were tracked across frequency.
    """

    axis: FrequencyAxis
    singular_values: np.ndarray
    drive: np.ndarray
    combine: np.ndarray
    sum_rule: np.ndarray
    speaker_names: tuple[str, ...]
    mic_names: tuple[str, ...]
    tracked: bool = False

    @property
    def n_channels(self) -> int:
        return int(self.singular_values.shape[1])

    @property
    def power_coupling(self) -> np.ndarray:
        """s^2, shape (n_freq, n_chan)."""
        return self.singular_values ** 2

    def share_of_sum_rule(self) -> np.ndarray:
        """s_j^2 / sum |G|^2, shape (n_freq, n_chan)."""
        return self.power_coupling / self.sum_rule[:, None]

    def level_db(self) -> np.ndarray:
        """10 log10(s_j^2 / s_max^2) at each frequency, dB; -inf for a zero channel."""
        p = self.power_coupling
        with np.errstate(divide="ignore"):
            return 10.0 * np.log10(p / p.max(axis=1, keepdims=True))

    def strong_channels(self, threshold_db: float = 3.0) -> np.ndarray:
        """Number of channels within `threshold_db` of the strongest, per frequency."""
        return np.sum(self.level_db() >= -abs(threshold_db) - 1e-12, axis=1)

    def usable_channels(self, snr_db: float = 40.0) -> np.ndarray:
        """Channels above the noise floor when the strongest has an SNR of `snr_db`, per frequency."""
        return np.sum(self.level_db() > -abs(snr_db), axis=1)

    def effective_channels(self) -> np.ndarray:
        """Participation ratio (sum s^2)^2 / sum s^4, per frequency."""
        p = self.power_coupling
        return np.sum(p, axis=1) ** 2 / np.sum(p ** 2, axis=1)

    def channel_matrix(self, g: np.ndarray) -> np.ndarray:
        """``combine^T G drive`` for coupling matrices `g` of shape (n_freq, n_mic, n_spk)."""
        return np.einsum("fmi,fms,fsj->fij", self.combine, g, self.drive)


def fix_phase(u: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Apply the phase convention (see module Notes) to U and V columns.

    Parameters
    ----------
    u : ndarray, shape (..., n_mic, n_chan)
    v : ndarray, shape (..., n_spk, n_chan)

    Returns
    -------
    u, v with each column pair multiplied by the same unit phase.
    """
    mag = np.abs(v)
    near_max = mag >= mag.max(axis=-2, keepdims=True) * (1.0 - _TIE_RTOL)
    pivot = np.argmax(near_max, axis=-2)                       # first near-maximal entry
    ref = np.take_along_axis(v, pivot[..., None, :], axis=-2)  # (..., 1, n_chan)
    rot = np.conj(ref) / np.where(np.abs(ref) > 0, np.abs(ref), 1.0)
    return u * rot, v * rot


def decompose_stack(g: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Batched SVD with the phase convention.

    Parameters
    ----------
    g : ndarray, complex, shape (n_freq, n_mic, n_spk)

    Returns
    -------
    s : ndarray, shape (n_freq, n_chan), descending
    drive : ndarray, shape (n_freq, n_spk, n_chan)  (V)
    combine : ndarray, shape (n_freq, n_mic, n_chan)  (conj U)
    """
    u, s, vh = np.linalg.svd(g, full_matrices=False)
    v = np.conj(np.swapaxes(vh, -1, -2))
    u, v = fix_phase(u, v)
    return s, v, np.conj(u)


def track_channels(channels: ChannelSet) -> ChannelSet:
    """Order and phase-align channels from bin to bin (see module Notes)."""
    s = channels.singular_values.copy()
    drive = channels.drive.copy()
    combine = channels.combine.copy()
    for f in range(1, s.shape[0]):
        ov_v = np.abs(np.einsum("si,sj->ij", np.conj(drive[f - 1]), drive[f]))
        ov_u = np.abs(np.einsum("mi,mj->ij", combine[f - 1], np.conj(combine[f])))
        rows, cols = linear_sum_assignment(-(ov_u + ov_v))
        order = cols[np.argsort(rows)]
        s[f] = s[f, order]
        drive[f] = drive[f][:, order]
        combine[f] = combine[f][:, order]
        # inner products of previous and new weights, per channel
        c = (np.sum(np.conj(drive[f - 1]) * drive[f], axis=0)
             + np.sum(combine[f - 1] * np.conj(combine[f]), axis=0))
        rot = np.conj(c) / np.where(np.abs(c) > 0, np.abs(c), 1.0)
        drive[f] *= rot
        combine[f] *= np.conj(rot)  # combine = conj(u): u gets rot, so conj(u) gets conj(rot)
    return ChannelSet(channels.axis, s, drive, combine, channels.sum_rule, channels.speaker_names,
                      channels.mic_names, tracked=True)


def decompose(source: Kernel | CouplingStack, axis: FrequencyAxis | None = None, *, chunk_size: int = 64,
              track: bool = False, progress=None) -> ChannelSet:
    """The channels of a kernel (evaluated chunk by chunk) or of a coupling stack.

    Parameters
    ----------
    source : Kernel or CouplingStack
        With a kernel, `axis` is required and at most `chunk_size`
        coupling matrices are held at a time.
    axis : FrequencyAxis, optional
        Frequencies to plan at (default: the stack's own axis).
    chunk_size : int
        Frequencies per batch.
    track : bool
        Track channels across frequency (:func:`track_channels`).
    progress : callable, optional
        Called as ``progress(done, total)`` after each chunk.

    Returns
    -------
    ChannelSet
    """
    if isinstance(source, CouplingStack):
        axis = source.axis if axis is None else axis
    if axis is None:
        raise ValueError("decompose(kernel) needs the frequency axis")
    hz = axis.hz
    n_mic, n_spk = len(source.mic_names), len(source.speaker_names)
    k = min(n_mic, n_spk)
    s = np.empty((len(hz), k))
    drive = np.empty((len(hz), n_spk, k), dtype=complex)
    combine = np.empty((len(hz), n_mic, k), dtype=complex)
    sum_rule = np.empty(len(hz))
    chunk_size = max(1, int(chunk_size))
    for start in range(0, len(hz), chunk_size):
        sl = slice(start, start + chunk_size)
        g = source.evaluate(hz[sl])
        sum_rule[sl] = np.einsum("fms,fms->f", g.real, g.real) + np.einsum("fms,fms->f", g.imag, g.imag)
        s[sl], drive[sl], combine[sl] = decompose_stack(g)
        if progress is not None:
            progress(min(start + chunk_size, len(hz)), len(hz))
    out = ChannelSet(axis, s, drive, combine, sum_rule, tuple(source.speaker_names), tuple(source.mic_names))
    return track_channels(out) if track else out
