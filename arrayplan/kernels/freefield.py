"""Free-field kernel: G[f, m, s] = D_m D_s exp(-j k r) / (4 pi r), optionally with air absorption.

Notes
-----
Sign convention: time dependence exp(+j omega t), so a delay of r / c is the
factor exp(-j k r): the same as numpy.fft.rfft of a measured impulse
response.  The unit of G is 1/m: pressure in Pa per unit source strength
(a point source of strength q gives p = q exp(-j k r) / (4 pi r)).  Air
absorption multiplies by 10**(-alpha(f) r / 20) with alpha from
ISO 9613-1.  Directivities: D_s towards the microphone from the speaker's
axis, D_m towards the speaker from the microphone's axis.
"""

from __future__ import annotations

import numpy as np

from ..rig.directivity import Directivity
from ..rig.medium import Medium
from ..rig import ElementSet, Rig
from ._trig import _PIECE, _CosSin

__all__ = ["FreeFieldKernel"]


def _cosines(es: ElementSet, unit_vectors: np.ndarray) -> list[tuple[Directivity, np.ndarray, np.ndarray]]:
    """Group elements by directivity; return (directivity, element indices, cos theta) triples.

    `unit_vectors` has shape (n_elem, n_other, 3): from each element to each other element.
    """
    groups: dict[Directivity, list[int]] = {}
    for i, d in enumerate(es.directivities):
        groups.setdefault(d, []).append(i)
    out = []
    for d, idx in groups.items():
        if d.is_omni:
            continue
        cos = unit_vectors[idx] @ np.asarray(d.axis)
        out.append((d, np.asarray(idx), cos))
    return out


def _unit_phasors(k: np.ndarray, r: np.ndarray) -> np.ndarray:
    """exp(-j k r) for every wavenumber and distance, shape (n_freq,) + r.shape.

    Written piece by piece straight into the complex result with the table
    cos/sin of :mod:`arrayplan.kernels._trig` (within a few ulp of numpy's, several times
    faster than ``numpy.exp`` of a complex array).
    """
    phase = np.multiply.outer(k, r).reshape(-1)
    g = np.empty(phase.size, dtype=complex)
    parts = g.view(float).reshape(-1, 2)
    piece = max(1, min(_PIECE, phase.size))
    calc = _CosSin(piece)
    for start in range(0, phase.size, piece):
        sl = slice(start, start + piece)
        calc(phase[sl], parts[sl, 0], parts[sl, 1])
    np.negative(parts[:, 1], out=parts[:, 1])
    return g.reshape(k.shape + r.shape)


class FreeFieldKernel:
    """The free-field coupling of a rig.

    Parameters
    ----------
    rig : Rig
        Speakers, microphones and medium.  Use :meth:`between` for element
        sets that are not a validated rig (for example a field grid).
    """

    def __init__(self, rig: Rig) -> None:
        self._setup(rig.speakers, rig.mics, rig.medium, min_distance_m=0.0)

    @classmethod
    def between(cls, speakers: ElementSet, receivers: ElementSet, medium: Medium,
                min_distance_m: float = 1e-3) -> "FreeFieldKernel":
        """A kernel from `speakers` to arbitrary `receivers`; distances clamped at `min_distance_m`.

        Parameters
        ----------
        speakers : ElementSet
            Sources (columns of G), positions in m.
        receivers : ElementSet
            Receiving points (rows of G), positions in m.
        medium : Medium
            Speed of sound and air absorption.
        min_distance_m : float
            Smallest distance used (m), so a receiver on a speaker stays finite.

        Returns
        -------
        FreeFieldKernel
            Not checked like a rig (no coincidence or name checks).
        """
        self = cls.__new__(cls)
        self._setup(speakers, receivers, medium, min_distance_m)
        return self

    def _setup(self, speakers: ElementSet, mics: ElementSet, medium: Medium, min_distance_m: float) -> None:
        self.medium = medium
        self.speaker_names = speakers.names
        self.mic_names = mics.names
        diff = mics.positions[:, None, :] - speakers.positions[None, :, :]  # (n_mic, n_spk, 3), spk -> mic
        r = np.linalg.norm(diff, axis=-1)                                    # (n_mic, n_spk)
        unit = diff / np.where(r > 0, r, 1.0)[..., None]
        self._r = np.maximum(r, min_distance_m)
        # speakers look towards mics: vectors (n_spk, n_mic, 3); mics look towards speakers
        self._spk_groups = _cosines(speakers, np.swapaxes(unit, 0, 1))
        self._mic_groups = _cosines(mics, -unit)
        self._inv_4pi_r = 1.0 / (4.0 * np.pi * self._r)

    @property
    def distances_m(self) -> np.ndarray:
        """Speaker-to-microphone distances.

        Returns
        -------
        ndarray, shape (n_mic, n_spk)
            Distances (m), after clamping at the kernel's minimum distance.
        """
        return self._r

    def evaluate(self, hz: np.ndarray) -> np.ndarray:
        """Coupling matrices at `hz` (:meth:`arrayplan.kernels.coupling.Kernel.evaluate`).

        Parameters
        ----------
        hz : array_like, shape (n,)
            Frequencies (Hz), any subset in any order.

        Returns
        -------
        ndarray, complex, shape (n, n_mic, n_spk)
            G in Pa per unit source strength (1/m), exp(-jkr) sign.
        """
        hz = np.atleast_1d(np.asarray(hz, dtype=float))
        medium = self.medium
        k = 2.0 * np.pi * hz / medium.speed_of_sound
        g = _unit_phasors(k, self._r)
        if medium.air_absorption:
            alpha_np = medium.absorption_db_per_m(hz) * (np.log(10.0) / 20.0)
            g *= np.exp(-alpha_np[:, None, None] * self._r)
        g *= self._inv_4pi_r
        for d, idx, cos in self._spk_groups:          # cos: (n_idx, n_mic)
            gain = d.gain(cos, k) if d.depends_on_frequency else d.gain(cos)[None]
            g[:, :, idx] *= np.swapaxes(gain, -1, -2)
        for d, idx, cos in self._mic_groups:          # cos: (n_idx, n_spk)
            gain = d.gain(cos, k) if d.depends_on_frequency else d.gain(cos)[None]
            g[:, idx, :] *= gain
        return g
