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
        """Coupling matrices at `hz` (Hz, shape (n,)); returns shape (n, n_mic, n_spk), complex."""
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
        """Evaluate `kernel` on `axis`, `chunk_size` frequencies at a time."""
        hz = axis.hz
        out = np.empty((len(hz), len(kernel.mic_names), len(kernel.speaker_names)), dtype=complex)
        for start in range(0, len(hz), chunk_size):
            out[start:start + chunk_size] = kernel.evaluate(hz[start:start + chunk_size])
        return cls(out, axis, tuple(kernel.speaker_names), tuple(kernel.mic_names))

    @property
    def shape(self) -> tuple[int, int, int]:
        return self.data.shape  # type: ignore[return-value]

    def __getitem__(self, index: int | slice | Sequence[int]) -> "CouplingStack":
        """Select frequencies by index (never interpolates)."""
        idx = [index] if isinstance(index, (int, np.integer)) else index
        return CouplingStack(self.data[idx], self.axis[idx], self.speaker_names, self.mic_names)

    def sum_rule(self) -> np.ndarray:
        """Sum of |G_ms|^2 per frequency, shape (n_freq,)."""
        return np.sum(np.abs(self.data) ** 2, axis=(1, 2))

    def transposed(self) -> "CouplingStack":
        """The reciprocal stack: speakers and microphones swapped, G -> G^T."""
        return CouplingStack(np.swapaxes(self.data, 1, 2), self.axis, self.mic_names, self.speaker_names)

    def evaluate(self, hz: np.ndarray) -> np.ndarray:
        """Kernel interface: the stored matrices at exactly these frequencies (no interpolation)."""
        idx = [self.axis.index_of(f) for f in np.atleast_1d(hz)]
        if not np.allclose(self.axis.hz[idx], hz, rtol=1e-9, atol=0):
            raise InputError("requested frequencies are not on this stack's axis",
                             fix="evaluate the kernel at the new frequencies instead")
        return self.data[idx]
