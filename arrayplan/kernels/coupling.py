"""The coupling stack: G(f) for every frequency, frequency first.

``CouplingStack.data[f, m, s]`` is the complex pressure at microphone ``m``
per unit drive of speaker ``s`` at frequency ``axis.hz[f]``.  Shape
(n_freq, n_mic, n_spk).  Sign convention: exp(-j k r) for a delay, the same
as numpy.fft.rfft of an impulse response.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol, Sequence

import numpy as np

from ..errors import InputError
from ..frequency import FrequencyAxis

__all__ = ["CouplingStack", "Kernel"]


class Kernel(Protocol):
    """Anything that can evaluate the coupling matrices at given frequencies.

    Free-field, room and measured kernels implement it.  ``evaluate`` must
    accept any subset of frequencies so that callers can work in chunks.
    """

    speaker_names: tuple[str, ...]
    mic_names: tuple[str, ...]

    def evaluate(self, hz: np.ndarray) -> np.ndarray:
        """Coupling matrices at `hz`.

        Parameters
        ----------
        hz : ndarray, shape (n,)
            Frequencies (Hz).

        Returns
        -------
        ndarray, complex, shape (n, n_mic, n_spk)
            G per frequency, exp(-jkr) sign.
        """
        ...


@dataclass(frozen=True)
class CouplingStack:
    """Coupling matrices with their frequency axis and element names.

    Attributes
    ----------
    data : ndarray, complex, shape (n_freq, n_mic, n_spk)
    axis : FrequencyAxis
    speaker_names, mic_names : tuple of str
    """

    data: np.ndarray
    axis: FrequencyAxis
    speaker_names: tuple[str, ...]
    mic_names: tuple[str, ...]

    def __post_init__(self) -> None:
        if self.data.ndim != 3:
            raise InputError(f"coupling data must be (n_freq, n_mic, n_spk), got shape {self.data.shape}")
        nf, nm, ns = self.data.shape
        if nf != len(self.axis) or nm != len(self.mic_names) or ns != len(self.speaker_names):
            raise InputError(f"coupling data shape {self.data.shape} does not match {len(self.axis)} "
                             f"frequencies, {len(self.mic_names)} mics, {len(self.speaker_names)} speakers")

    @classmethod
    def from_kernel(cls, kernel: Kernel, axis: FrequencyAxis, chunk_size: int = 64) -> "CouplingStack":
        """Evaluate `kernel` on `axis`, `chunk_size` frequencies at a time.

        Parameters
        ----------
        kernel : Kernel
            Free-field, room, measured or any object with ``evaluate``.
        axis : FrequencyAxis
            Frequencies (Hz).
        chunk_size : int
            Frequencies per ``evaluate`` call.

        Returns
        -------
        CouplingStack
            Data of shape (n_freq, n_mic, n_spk) with the kernel's names.
        """
        hz = axis.hz
        out = np.empty((len(hz), len(kernel.mic_names), len(kernel.speaker_names)), dtype=complex)
        for start in range(0, len(hz), chunk_size):
            out[start:start + chunk_size] = kernel.evaluate(hz[start:start + chunk_size])
        return cls(out, axis, tuple(kernel.speaker_names), tuple(kernel.mic_names))

    @property
    def shape(self) -> tuple[int, int, int]:
        """Shape of the data.

        Returns
        -------
        (int, int, int)
            (n_freq, n_mic, n_spk).
        """
        return self.data.shape  # type: ignore[return-value]

    def __getitem__(self, index: int | slice | Sequence[int]) -> "CouplingStack":
        """Select frequencies by index (never interpolates)."""
        idx = [index] if isinstance(index, (int, np.integer)) else index
        return CouplingStack(self.data[idx], self.axis[idx], self.speaker_names, self.mic_names)

    def sum_rule(self) -> np.ndarray:
        """Sum of |G_ms|^2 per frequency (equal to the sum of s_j^2 of its SVD).

        Returns
        -------
        ndarray, shape (n_freq,)
            Sum over microphones and speakers of |G|^2, in the squared unit of G.
        """
        return np.sum(np.abs(self.data) ** 2, axis=(1, 2))

    def transposed(self) -> "CouplingStack":
        """The reciprocal stack: speakers and microphones swapped, G -> G^T.

        Returns
        -------
        CouplingStack
            Data of shape (n_freq, n_spk, n_mic), names swapped.
        """
        return CouplingStack(np.swapaxes(self.data, 1, 2), self.axis, self.mic_names, self.speaker_names)

    def evaluate(self, hz: np.ndarray) -> np.ndarray:
        """Kernel interface: the stored matrices at exactly these frequencies (no interpolation).

        Parameters
        ----------
        hz : array_like, shape (n,)
            Frequencies on this stack's axis (Hz), within a relative 1e-9.

        Returns
        -------
        ndarray, complex, shape (n, n_mic, n_spk)
            The stored matrices.

        Raises
        ------
        InputError
            A frequency that is not on the axis.
        """
        idx = [self.axis.index_of(f) for f in np.atleast_1d(hz)]
        if not np.allclose(self.axis.hz[idx], hz, rtol=1e-9, atol=0):
            raise InputError("requested frequencies are not on this stack's axis",
                             fix="evaluate the kernel at the new frequencies instead")
        return self.data[idx]
