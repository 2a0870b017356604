"""Room kernel: the frequency-domain image-source sum of a rectangular room.

G[f, m, s] = sum over images i of  B_i(f) D_s,i D_m,i exp(-j k r_ims) / (4 pi r_ims)

after J. B. Allen and D. A. Berkley, "Image method for efficiently
simulating small-room acoustics", JASA 65(4), 1979.  Each image of speaker
``s`` is a point source; ``r_ims`` is its distance to microphone ``m``;
``B_i(f)`` is the product of the reflection coefficients beta = sqrt(1 - alpha)
of the walls the path met.  The sum is exact at every frequency (no
fractional-delay filter), so it needs no sampling rate.

Notes
-----
Images: per axis, image index u has the coordinate u L + x (u even) or
(u + 1) L - x (u odd) and meets |floor(u / 2)| times the wall at 0 and
|floor((u + 1) / 2)| times the wall at L.  Images with
|ux| + |uy| + |uz| <= N are kept: (2N+1)(2N^2+2N+3)/3 of them.  Images
through an open side (absorption 1 in every band) are dropped before any
sum, so a room with every side open is the free field exactly.

Directivity: the speaker's gain is taken in the direction the path leaves
the real speaker, which is the direction from the image to the microphone
with the image's axis mirrored in every axis of odd u; the microphone's
gain in the direction the path arrives from.  Air absorption (ISO 9613-1,
when the medium asks for it) acts on each path's length.  Sign convention
exp(-j k r), unit 1/m, as :mod:`arrayplan.kernels.freefield`.

Reflection is specular and its coefficient real and independent of the
angle of incidence; the walls are the six planes of a rectangular box.

Evaluation: each phasor exp(-j k r) comes from a table of 4096 angles turned
by short polynomials (within a few ulp of numpy's cos and sin, about five
times faster); on an evenly spaced frequency grid, where the weights do
not depend on frequency, the phasors of one frequency are those of the last
times exp(-j dk r), evaluated afresh every 64 steps.
"""

from __future__ import annotations

from typing import Iterator

import numpy as np

from ..rig.directivity import Directivity
from ..errors import InputError
from ..rig.medium import Medium
from ..rig import ElementSet, Rig
from ..rig.room import Room
from ._trig import _PIECE, _CosSin, _cos_sin_of

__all__ = ["RoomKernel", "image_lattice"]

#: Geometry of this many image paths (images x mics x speakers) or fewer is kept between calls.
_CACHE_PATHS = 4_000_000


def image_lattice(order: int) -> np.ndarray:
    """Image indices (ux, uy, uz) with |ux| + |uy| + |uz| <= `order`.

    Parameters
    ----------
    order : int
        Largest reflection order N kept, >= 0.

    Returns
    -------
    ndarray of int, shape (n_img, 3)
        (2N+1)(2N^2+2N+3)/3 rows, sorted by |ux| + |uy| + |uz| (the real
        source, (0, 0, 0), first).

    Raises
    ------
    InputError
        When `order` is negative.
    """
    n = int(order)
    if n < 0:
        raise InputError(f"reflection order must be >= 0, got {n}", field="reflection_order")
    u = np.arange(-n, n + 1)
    ux, uy, uz = np.meshgrid(u, u, u, indexing="ij")
    lat = np.stack([ux.ravel(), uy.ravel(), uz.ravel()], axis=1)
    lat = lat[np.abs(lat).sum(axis=1) <= n]
    return lat[np.argsort(np.abs(lat).sum(axis=1), kind="stable")]


def _wall_hits(lattice: np.ndarray) -> np.ndarray:
    """Reflections off each surface (x_min, x_max, y_min, y_max, floor, ceiling); shape (n_img, 6), int."""
    lo = np.abs(np.floor_divide(lattice, 2))
    hi = np.abs(np.floor_divide(lattice + 1, 2))
    return np.stack([lo[:, 0], hi[:, 0], lo[:, 1], hi[:, 1], lo[:, 2], hi[:, 2]], axis=1)


def _groups(es: ElementSet) -> list[tuple[Directivity, np.ndarray]]:
    groups: dict[Directivity, list[int]] = {}
    for i, d in enumerate(es.directivities):
        if not d.is_omni:
            groups.setdefault(d, []).append(i)
    return [(d, np.asarray(idx)) for d, idx in groups.items()]


def _uniformly_spaced(k: np.ndarray) -> bool:
    """True for 8 or more values on an evenly spaced increasing grid (such as the wavenumbers of FFT bins)."""
    if k.size < 8:
        return False
    step = np.diff(k)
    return bool(step[0] > 0 and np.max(np.abs(step - step[0])) <= 1e-9 * max(1.0, float(np.max(np.abs(k)))))


def _phasor_sum(k: np.ndarray, r: np.ndarray, w: np.ndarray, piece: int = _PIECE,
                anchor_every: int = 64) -> np.ndarray:
    """sum_b w[b, p] exp(-j k[f] r[b, p]) for wavenumbers `k` (rad/m) and distances `r` (m).

    Parameters
    ----------
    k : ndarray, shape (n_f,)
    r, w : ndarray, shape (n_b, n_p)
        Path lengths and their weights.
    piece : int
        Elements (rows of `r` x n_p) evaluated at once, at least one row.
    anchor_every : int
        On an evenly spaced `k`, the phasors of each step are those of the
        step before times exp(-j dk r), and every `anchor_every` steps they
        are evaluated afresh, which bounds the rounding drift to about
        `anchor_every` ulp.  On any other `k` every phasor is evaluated
        (:class:`_CosSin`).

    Returns
    -------
    ndarray, shape (n_f, n_p), complex

    Notes
    -----
    The rows of `r` are taken a cache-sized block at a time, and every
    frequency is summed over the block before the next block is read.
    """
    n_b, n_p = r.shape
    rows = max(1, piece // max(1, n_p))
    out = np.zeros((k.size, n_p), dtype=complex)
    parts = out.view(float).reshape(k.size, n_p, 2)
    calc = _CosSin(rows * n_p)
    x, cos, sin = np.empty((3, rows * n_p))
    turning = _uniformly_spaced(k)
    phasor = np.empty(rows * n_p, dtype=complex) if turning else None
    turn = np.empty(rows * n_p, dtype=complex) if turning else None
    for b0 in range(0, n_b, rows):
        rb, wb = r[b0:b0 + rows], w[b0:b0 + rows]
        n = rb.size
        xb, cb, sb = x[:n], cos[:n], sin[:n]
        if turning:
            ph, ph_pairs = phasor[:n], phasor[:n].view(float).reshape(rb.shape + (2,))
            np.multiply(rb.reshape(-1), k[1] - k[0], out=xb)
            calc(xb, cb, sb)
            turn_pairs = turn[:n].view(float).reshape(n, 2)
            turn_pairs[:, 0], turn_pairs[:, 1] = cb, sb
            turn_pairs[:, 1] *= -1.0                                   # exp(-j dk r)
        for i, kf in enumerate(k):
            if turning and i % anchor_every:
                ph *= turn[:n]
                parts[i, :, 0] += np.einsum("bp,bp->p", ph_pairs[..., 0], wb)
                parts[i, :, 1] += np.einsum("bp,bp->p", ph_pairs[..., 1], wb)
                continue
            np.multiply(rb.reshape(-1), kf, out=xb)
            calc(xb, cb, sb)
            parts[i, :, 0] += np.einsum("bp,bp->p", cb.reshape(rb.shape), wb)
            parts[i, :, 1] -= np.einsum("bp,bp->p", sb.reshape(rb.shape), wb)
            if turning:
                ph_pairs[..., 0], ph_pairs[..., 1] = cb.reshape(rb.shape), sb.reshape(rb.shape)
                ph_pairs[..., 1] *= -1.0
    return out


class RoomKernel:
    """The coupling of a rig in a rectangular room, by the image-source method.

    Parameters
    ----------
    rig : Rig
        Speakers, microphones and medium.
    room : Room, optional
        The room (default: ``rig.room``).
    chunk_elements : int
        Upper bound on image paths x frequencies evaluated at once; the
        working memory is a few arrays of this many float64 values
        (default 2**19, about 4 MiB each), whatever the number of frequencies.

    Attributes
    ----------
    name : str
        ``"room"``, recorded in plans.
    n_images : int
        Image sources kept (those not lost through an open side).
    """

    name = "room"

    def __init__(self, rig: Rig, room: Room | None = None, *, chunk_elements: int = 2 ** 19) -> None:
        room = room if room is not None else rig.room
        if room is None:
            raise InputError("the rig has no room", source=rig.source, field="room",
                             fix="add a [room] table with size_m and absorption")
        self._setup(rig.speakers, rig.mics, rig.medium, room, 0.0, chunk_elements)

    @classmethod
    def between(cls, speakers: ElementSet, receivers: ElementSet, medium: Medium, room: Room,
                min_distance_m: float = 1e-3, chunk_elements: int = 2 ** 19) -> "RoomKernel":
        """A kernel from `speakers` to arbitrary `receivers` (field points, not only a rig's microphones).

        Parameters
        ----------
        speakers : ElementSet
            Sources: positions (m) and directivities.
        receivers : ElementSet
            Receiving points in the coupling's rows: positions (m) and directivities.
        medium : Medium
            Speed of sound and air absorption.
        room : Room
            Size, absorption, reflection order and delay cut.
        min_distance_m : float
            Path lengths below this are clamped to it, m (a receiver on a
            source or image stays finite).
        chunk_elements : int
            As for :class:`RoomKernel`.

        Returns
        -------
        RoomKernel
            Rows: `receivers` in order; columns: `speakers`.
        """
        self = cls.__new__(cls)
        self._setup(speakers, receivers, medium, room, min_distance_m, chunk_elements)
        return self

    def _setup(self, speakers: ElementSet, mics: ElementSet, medium: Medium, room: Room,
               min_distance_m: float, chunk_elements: int) -> None:
        self.medium = medium
        self.room = room
        self.speaker_names = speakers.names
        self.mic_names = mics.names
        self._spk = np.asarray(speakers.positions, dtype=float)
        self._mic = np.asarray(mics.positions, dtype=float)
        self._spk_groups = _groups(speakers)
        self._mic_groups = _groups(mics)
        self._min_r = float(min_distance_m)
        self._chunk = max(1, int(chunk_elements))
        lattice = image_lattice(room.reflection_order)
        hits = _wall_hits(lattice)
        open_side = np.all(room.absorption >= 1.0, axis=1)           # (6,)
        keep = ~np.any(hits[:, open_side] > 0, axis=1)
        self._lattice, self._hits = lattice[keep], hits[keep]
        size = np.asarray(room.size_m, dtype=float)
        odd = (self._lattice % 2) != 0
        self._sign = np.where(odd, -1.0, 1.0)                        # (n_img, 3) mirror of each axis
        self._offset = np.where(odd, self._lattice + 1, self._lattice) * size
        self._r_max = (np.inf if room.max_delay_ms is None
                       else room.max_delay_ms * 1e-3 * medium.speed_of_sound)
        self._beta_flat = room.frequency_independent
        if self._beta_flat:
            beta = room.reflection_coefficients(np.array([1000.0]))[0]
            self._amp = np.prod(beta[None, :] ** self._hits, axis=1)    # (n_img,)
        n_pairs = len(self._mic) * len(self._spk)
        self._img_block = max(1, self._chunk // max(1, n_pairs))
        self._cache = (list(self._blocks()) if self.n_images * n_pairs <= _CACHE_PATHS else None)

    @property
    def n_images(self) -> int:
        """Image sources kept: the lattice of the room's reflection order less those through an open side.

        Returns
        -------
        int
            Count, the real source included.
        """
        return len(self._lattice)

    @property
    def longest_path_m(self) -> float:
        """Length of the longest image path kept (sets how long the room's responses last).

        Returns
        -------
        float
            Metres, over every kept image and every microphone-speaker pair,
            leaving out paths longer than the room's delay cut.
        """
        if not hasattr(self, "_longest"):
            blocks = self._cache if self._cache is not None else self._blocks()
            self._longest = max(float(np.max(r, initial=0.0, where=r <= self._r_max)) for _, r, *_ in blocks)
        return self._longest

    def settings(self) -> dict:
        """The kernel and its settings as plain data (for plan sidecars).

        Returns
        -------
        dict
            ``kernel`` (name), ``room`` (its settings), ``images_kept``,
            ``air_absorption``, ``speed_of_sound`` (m/s) and ``chunk_elements``.
        """
        return {"kernel": self.name, "room": self.room.settings(), "images_kept": self.n_images,
                "air_absorption": self.medium.air_absorption, "speed_of_sound": self.medium.speed_of_sound,
                "chunk_elements": self._chunk}

    # ---------------------------------------------------------------- geometry per block of images

    def _blocks(self) -> Iterator[tuple[slice, np.ndarray, np.ndarray, list, list]]:
        """Per block of images: (slice, r, static weight, speaker cosines, mic cosines).

        r and the weight have shape (n_blk, n_mic, n_spk); the weight is the
        frequency-independent part (1 / (4 pi r), frequency-independent
        directivity, the max-delay cut, flat reflection coefficients).
        """
        for start in range(0, self.n_images, self._img_block):
            sl = slice(start, min(start + self._img_block, self.n_images))
            sign = self._sign[sl]
            img = self._offset[sl][:, None, :] + sign[:, None, :] * self._spk[None]      # (b, n_spk, 3)
            diff = self._mic[None, :, None, :] - img[:, None, :, :]                      # (b, n_mic, n_spk, 3)
            r = np.sqrt(np.einsum("bmsc,bmsc->bms", diff, diff))
            unit = diff / np.where(r > 0, r, 1.0)[..., None]
            r = np.maximum(r, self._min_r)
            w = 1.0 / (4.0 * np.pi * r)
            if self._beta_flat:
                w *= self._amp[sl][:, None, None]
            if np.isfinite(self._r_max):
                w[r > self._r_max] = 0.0
            spk_cos = []
            for d, idx in self._spk_groups:       # the image's axis is the real axis mirrored
                cos = np.einsum("bmsc,bc->bms", unit[:, :, idx], sign * np.asarray(d.axis)[None, :])
                if d.depends_on_frequency:
                    spk_cos.append((d, idx, cos))
                else:
                    w[:, :, idx] *= d.gain(cos)
            mic_cos = []
            for d, idx in self._mic_groups:       # arrival direction: from the microphone towards the image
                cos = -unit[:, idx] @ np.asarray(d.axis)
                if d.depends_on_frequency:
                    mic_cos.append((d, idx, cos))
                else:
                    w[:, idx, :] *= d.gain(cos)
            yield sl, r, w, spk_cos, mic_cos

    def evaluate(self, hz: np.ndarray) -> np.ndarray:
        """Coupling matrices at `hz`: the image-source sum of the module docstring.

        Parameters
        ----------
        hz : array_like, shape (n,)
            Frequencies, Hz; any subset in any order (an evenly spaced
            ascending grid is fastest, see the module Notes).

        Returns
        -------
        ndarray, complex, shape (n, n_mic, n_spk)
            G in 1/m (as the free-field kernel), exp(-jkr) sign.
        """
        hz = np.atleast_1d(np.asarray(hz, dtype=float))
        n_mic, n_spk = len(self._mic), len(self._spk)
        out = np.zeros((hz.size, n_mic, n_spk), dtype=complex)
        k_all = 2.0 * np.pi * hz / self.medium.speed_of_sound
        air_all = self.medium.absorption_db_per_m(hz) * (np.log(10.0) / 20.0) if self.medium.air_absorption \
            else None
        beta_all = None if self._beta_flat else self.room.reflection_coefficients(hz)     # (n, 6)
        blocks = self._cache if self._cache is not None else self._blocks()
        for sl, r, w, spk_cos, mic_cos in blocks:
            paths = r.size
            if beta_all is None and air_all is None and not spk_cos and not mic_cos:   # weights fixed in f
                out += _phasor_sum(k_all, r.reshape(len(r), -1), w.reshape(len(w), -1),
                                   piece=min(_PIECE, self._chunk)).reshape(out.shape)
                continue
            f_step = max(1, self._chunk // max(1, paths))
            for f0 in range(0, hz.size, f_step):
                fs = slice(f0, min(f0 + f_step, hz.size))
                k = k_all[fs]
                phase = k[:, None, None, None] * r[None]                                  # (nf, b, m, s)
                weight, static = w, True
                if beta_all is not None:
                    amp = np.prod(beta_all[fs][:, None, :] ** self._hits[sl][None], axis=2)   # (nf, b)
                    weight, static = weight[None] * amp[:, :, None, None], False
                if air_all is not None:
                    weight, static = weight * np.exp(-air_all[fs][:, None, None, None] * r[None]), False
                for d, idx, cos in spk_cos:
                    weight = np.broadcast_to(weight, phase.shape).copy() if static else weight
                    weight[:, :, :, idx] *= d.gain(cos, k)
                    static = False
                for d, idx, cos in mic_cos:
                    weight = np.broadcast_to(weight, phase.shape).copy() if static else weight
                    weight[:, :, idx, :] *= d.gain(cos, k)
                    static = False
                nf = phase.shape[0]
                weight = np.broadcast_to(weight, phase.shape)
                cos_phase, sin_phase = _cos_sin_of(phase)
                re = np.einsum("fbms,fbms->fms", cos_phase, weight).reshape(nf, -1)
                im = np.einsum("fbms,fbms->fms", sin_phase, weight).reshape(nf, -1)
                out[fs] += (re - 1j * im).reshape(-1, n_mic, n_spk)
        return out
