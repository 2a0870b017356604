"""Sound-zone drive weights and their figures of merit: contrast control, pressure matching, contrast, effort.

Per frequency, with G_b (n_b, n_spk) and G_d (n_d, n_spk) the coupling from
the speakers to the bright- and dark-zone points and R_z = G_z^H G_z / n_z
their spatial correlation matrices, three designs are compared:

* **Acoustic contrast control** (J.-W. Choi and Y.-H. Kim, "Generation of an
  acoustically bright zone with an illuminated region using multiple
  sources", JASA 111(4), 2002): w maximises
  w^H R_b w / w^H (R_d + delta I) w, the principal generalised eigenvector
  of (R_b, R_d + delta I).
* **Pressure matching**: w minimises ||G w - p_t||^2 + beta ||w||^2 with G
  the bright rows over the dark rows and p_t the target pressure in the
  bright zone over zeros in the dark zone:
  w = (G^H G + beta I)^-1 G^H p_t.

Figures of merit (P. Coleman et al., "Acoustic contrast, planarity and
robustness of sound zone methods using a circular loudspeaker array",
JASA 136(4), 2014; S. J. Elliott et al., "Robustness and regularization of
personal audio systems", IEEE TASLP 20(7), 2012):

* acoustic contrast 10 log10(mean|G_b w|^2 / mean|G_d w|^2), dB;
* array effort 10 log10(||w||^2 / |q_ref|^2), dB, where q_ref is the drive
  a single reference speaker (the one nearest the array's centre) needs to
  give the same mean-square bright-zone pressure;
* bright-zone matching error 10 log10(||G_b w - p_b||^2 / ||p_b||^2), dB.

Notes
-----
:func:`contrast_weights` and :func:`matching_weights` take the
regularisation as absolute values (unit of G squared); the zone study
(:func:`arrayplan.studies.zones.study_zones`) scales a relative value per
frequency.  :func:`align_to_reference` scales weights so that the
mean-square bright-zone pressure equals that of the reference speaker
(:func:`reference_speaker`) at unit drive, with the bright-zone pressure in
phase with the reference speaker's (so the weights are smooth across
frequency and make causal filters); :func:`target_pressure` gives the
target of pressure matching that same level and the reference speaker's
delay at the bright zone's centre.  Sign convention exp(-jkr); weights are
complex source strengths per unit input.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np
import scipy.linalg

from ..errors import InputError

__all__ = ["ZoneTarget", "contrast_weights", "matching_weights", "target_pressure", "contrast_db", "effort_db",
           "matching_error_db", "reference_speaker", "align_to_reference"]

_TINY = 1e-300


@dataclass(frozen=True)
class ZoneTarget:
    """The target field of pressure matching in the bright zone.

    Attributes
    ----------
    kind : str
        ``"plane"`` (a plane wave travelling along `vector`) or ``"point"``
        (the field of a virtual point source at `vector`).
    vector : tuple of 3 float
        Unit direction of travel (plane) or source position in m (point).
    """

    kind: str
    vector: tuple[float, float, float]

    @classmethod
    def plane(cls, direction: Sequence[float], source: str = "target") -> "ZoneTarget":
        """A plane wave travelling along `direction` (any length above zero).

        Parameters
        ----------
        direction : sequence of 3 float
            Direction of travel; normalised here.
        source : str
            Named in messages.

        Returns
        -------
        ZoneTarget
            Kind ``"plane"`` with a unit vector.

        Raises
        ------
        InputError
            Not 3 finite numbers of non-zero length.
        """
        d = np.asarray(direction, dtype=float)
        n = float(np.linalg.norm(d)) if d.shape == (3,) and np.all(np.isfinite(d)) else 0.0
        if n == 0.0:
            raise InputError(f"target direction must be 3 finite numbers of non-zero length, got {list(d)}",
                             source=source, fix="give the direction the wave travels in, e.g. 0,1,0")
        return cls("plane", tuple(float(x) for x in d / n))  # type: ignore[arg-type]

    @classmethod
    def point(cls, position: Sequence[float], source: str = "target") -> "ZoneTarget":
        """The field of a virtual point source at `position` (m).

        Parameters
        ----------
        position : sequence of 3 float
            Source position (m).
        source : str
            Named in messages.

        Returns
        -------
        ZoneTarget
            Kind ``"point"``.

        Raises
        ------
        InputError
            Not 3 finite numbers.
        """
        p = np.asarray(position, dtype=float)
        if p.shape != (3,) or not np.all(np.isfinite(p)):
            raise InputError(f"virtual source position must be 3 finite numbers, got {list(p)}", source=source)
        return cls("point", tuple(float(x) for x in p))  # type: ignore[arg-type]

    def describe(self) -> str:
        """The target in words, for reports.

        Returns
        -------
        str
            E.g. ``"plane wave travelling along (0, 1, 0)"`` or
            ``"virtual point source at (1, 2, 0.5) m"``.
        """
        v = ", ".join(f"{x:.3g}" for x in self.vector)
        return f"plane wave travelling along ({v})" if self.kind == "plane" else f"virtual point source at ({v}) m"


def _correlation(g: np.ndarray) -> np.ndarray:
    """G^H G / n_points, shape (n_freq, n_spk, n_spk)."""
    return np.einsum("fps,fpt->fst", np.conj(g), g) / g.shape[1]


def contrast_weights(g_bright: np.ndarray, g_dark: np.ndarray, delta: np.ndarray | float) -> np.ndarray:
    """Acoustic-contrast drive weights: the principal generalised eigenvector of (R_b, R_d + delta I).

    Parameters
    ----------
    g_bright : ndarray, complex, shape (n_freq, n_b, n_spk)
    g_dark : ndarray, complex, shape (n_freq, n_d, n_spk)
    delta : float or ndarray, shape (n_freq,)
        Absolute regularisation (unit of G squared), >= 0; R_d + delta I
        must be positive definite.

    Returns
    -------
    ndarray, complex, shape (n_freq, n_spk)
        Unit-norm weights (phase arbitrary).
    """
    r_b, r_d = _correlation(g_bright), _correlation(g_dark)
    n_f, n_s = r_b.shape[:2]
    delta = np.broadcast_to(np.asarray(delta, dtype=float), (n_f,))
    out = np.empty((n_f, n_s), dtype=complex)
    eye = np.eye(n_s)
    for f in range(n_f):
        _, vec = scipy.linalg.eigh(r_b[f], r_d[f] + delta[f] * eye, subset_by_index=[n_s - 1, n_s - 1])
        w = vec[:, 0]
        out[f] = w / np.linalg.norm(w)
    return out


def matching_weights(g_bright: np.ndarray, g_dark: np.ndarray, p_target: np.ndarray,
                     beta: np.ndarray | float) -> np.ndarray:
    """Pressure-matching drive weights (G^H G + beta I)^-1 G^H [p_target; 0].

    Parameters
    ----------
    g_bright : ndarray, complex, shape (n_freq, n_b, n_spk)
    g_dark : ndarray, complex, shape (n_freq, n_d, n_spk)
        n_d may be 0 (no dark zone).
    p_target : ndarray, complex, shape (n_freq, n_b)
        Target pressure in the bright zone (Pa per unit input).
    beta : float or ndarray, shape (n_freq,)
        Absolute regularisation (unit of G squared), >= 0.  At 0 the
        minimum-norm least-squares solution is returned.

    Returns
    -------
    ndarray, complex, shape (n_freq, n_spk)
    """
    g = np.concatenate([g_bright, g_dark], axis=1)
    p = np.concatenate([p_target, np.zeros((g.shape[0], g_dark.shape[1]), dtype=complex)], axis=1)
    n_f, _, n_s = g.shape
    beta = np.broadcast_to(np.asarray(beta, dtype=float), (n_f,))
    out = np.empty((n_f, n_s), dtype=complex)
    for f in range(n_f):
        if beta[f] == 0:
            out[f] = np.linalg.lstsq(g[f], p[f], rcond=None)[0]
        else:
            gh = np.conj(g[f].T)
            out[f] = np.linalg.solve(gh @ g[f] + beta[f] * np.eye(n_s), gh @ p[f])
    return out


def reference_speaker(speaker_positions: np.ndarray) -> int:
    """0-based index of the speaker nearest the centroid of all speakers (the effort's reference).

    Parameters
    ----------
    speaker_positions : array_like, shape (n_spk, 3)
        The speakers' positions (m), in rig order.

    Returns
    -------
    int
        0-based speaker index (the first on a tie).
    """
    pos = np.asarray(speaker_positions, dtype=float)
    return int(np.argmin(np.linalg.norm(pos - pos.mean(axis=0), axis=1)))


def target_pressure(target: ZoneTarget, points: np.ndarray, hz: np.ndarray, speed_of_sound: float,
                    g_ref: np.ndarray, ref_position: np.ndarray) -> np.ndarray:
    """Target pressure at the bright-zone points.

    Parameters
    ----------
    target : ZoneTarget
    points : ndarray, shape (n_b, 3)
        Bright-zone points, m.
    hz : ndarray, shape (n_freq,)
    speed_of_sound : float
        m/s.
    g_ref : ndarray, complex, shape (n_freq, n_b)
        The reference speaker's coupling to the points; sets the level
        (equal mean-square pressure).
    ref_position : ndarray, shape (3,)
        The reference speaker's position, m; its distance to the zone centre
        sets the target's delay there.

    Returns
    -------
    ndarray, complex, shape (n_freq, n_b)
    """
    k = 2 * np.pi * np.asarray(hz, dtype=float)[:, None] / speed_of_sound
    centre = points.mean(axis=0)
    if target.kind == "plane":
        d0 = np.linalg.norm(centre - ref_position)
        path = (points - centre) @ np.asarray(target.vector) + d0            # (n_b,)
    else:
        src = np.asarray(target.vector)
        path = np.linalg.norm(points - src, axis=1) - np.linalg.norm(centre - src) \
            + np.linalg.norm(centre - ref_position)
    shape = np.exp(-1j * k * path[None, :])
    if target.kind == "point":
        r = np.maximum(np.linalg.norm(points - np.asarray(target.vector), axis=1), 1e-3)
        shape = shape / r[None, :]
    rms_ref = np.sqrt(np.mean(np.abs(g_ref) ** 2, axis=1, keepdims=True))
    rms_shape = np.sqrt(np.mean(np.abs(shape) ** 2, axis=1, keepdims=True))
    return shape * rms_ref / rms_shape


def _mean_sq(p: np.ndarray) -> np.ndarray:
    return np.mean(np.abs(p) ** 2, axis=-1)


def contrast_db(weights: np.ndarray, g_bright: np.ndarray, g_dark: np.ndarray) -> np.ndarray:
    """Acoustic contrast: mean |p|^2 over the bright points over that over the dark points.

    Parameters
    ----------
    weights : ndarray, complex, shape (n_freq, n_spk)
        Drive weights.
    g_bright : ndarray, complex, shape (n_freq, n_b, n_spk)
        Coupling to the bright-zone points.
    g_dark : ndarray, complex, shape (n_freq, n_d, n_spk)
        Coupling to the dark-zone points.

    Returns
    -------
    ndarray, shape (n_freq,)
        Contrast (dB); both energies floored at 1e-300.
    """
    pb = _mean_sq(np.einsum("fps,fs->fp", g_bright, weights))
    pd = _mean_sq(np.einsum("fps,fs->fp", g_dark, weights))
    return 10 * np.log10(np.maximum(pb, _TINY) / np.maximum(pd, _TINY))


def effort_db(weights: np.ndarray, g_bright: np.ndarray, g_ref: np.ndarray) -> np.ndarray:
    """Array effort in dB re the reference speaker.

    ``||w||^2 mean|g_ref|^2 / mean|G_b w|^2``: the drive energy needed for
    the bright-zone level, against one reference speaker driven alone.

    Parameters
    ----------
    weights, g_bright : ndarray, complex
        As for :func:`contrast_db`.
    g_ref : ndarray, complex, shape (n_freq, n_b)
        Coupling of the reference speaker to the bright-zone points.

    Returns
    -------
    ndarray, shape (n_freq,)
        Effort (dB); 0 dB for the reference speaker alone at unit drive.
    """
    pb = _mean_sq(np.einsum("fps,fs->fp", g_bright, weights))
    return 10 * np.log10(np.sum(np.abs(weights) ** 2, axis=1) * _mean_sq(g_ref) / np.maximum(pb, _TINY))


def matching_error_db(weights: np.ndarray, g_bright: np.ndarray, p_target: np.ndarray) -> np.ndarray:
    """Bright-zone matching error 10 log10(||G_b w - p_t||^2 / ||p_t||^2).

    Parameters
    ----------
    weights, g_bright : ndarray, complex
        As for :func:`contrast_db`.
    p_target : ndarray, complex, shape (n_freq, n_b)
        Target pressure at those points (unit of G).

    Returns
    -------
    ndarray, shape (n_freq,)
        Matching error (dB); the error energy is floored at 1e-300.
    """
    err = np.einsum("fps,fs->fp", g_bright, weights) - p_target
    return 10 * np.log10(np.maximum(_mean_sq(err), _TINY) / _mean_sq(p_target))


def align_to_reference(weights: np.ndarray, g_bright: np.ndarray, g_ref: np.ndarray) -> np.ndarray:
    """Scale and rotate weights so the bright-zone pressure matches the reference speaker's level and phase.

    Parameters
    ----------
    weights, g_bright, g_ref : ndarray, complex
        As for :func:`effort_db`.

    Returns
    -------
    ndarray, complex, shape (n_freq, n_spk)
        Weights with mean|G_b w|^2 = mean|g_ref|^2 and
        sum(conj(g_ref) G_b w) real and positive.
    """
    p = np.einsum("fps,fs->fp", g_bright, weights)
    c = np.sum(np.conj(g_ref) * p, axis=1)
    phase = np.where(np.abs(c) > 0, np.conj(c) / np.maximum(np.abs(c), _TINY), 1.0)
    scale = np.sqrt(_mean_sq(g_ref) / np.maximum(_mean_sq(p), _TINY))
    return weights * (phase * scale)[:, None]

