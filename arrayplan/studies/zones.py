"""Multi-zone sound: drive weights that make one zone loud and another quiet.

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
* **The plan's own channels**: of the rig's strong channels (within the
  rig's ``threshold_db`` of the strongest), the drive vector (column of V
  of the rig's coupling matrix) that gives the highest contrast.

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
Regularisation is given relative (dimensionless beta_rel) and scaled per
frequency: delta = beta_rel tr(R_b) / n_spk for contrast control and
beta = beta_rel tr(G^H G) / n_spk for pressure matching, so one value means
the same across frequencies and rigs.  The library functions
:func:`contrast_weights` and :func:`matching_weights` take absolute values
(unit of G squared).  Contrast-control and channel weights are scaled so
that the mean-square bright-zone pressure equals that of the reference
speaker at unit drive, with the bright-zone pressure in phase with the
reference speaker's (so the weights are smooth across frequency and make
causal filters).  The target of pressure matching has that same level and
the reference speaker's delay at the bright zone's centre.  Sign
convention exp(-jkr); weights are complex source strengths per unit input.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import partial
from typing import Any, Callable, Sequence

import numpy as np
import scipy.linalg

from ..errors import InputError
from ..frequency import FrequencyAxis
from ..kernels import rig_kernel
from ..kernels.freefield import FreeFieldKernel
from ..kernels.room import RoomKernel
from ..rig import ElementSet, Rig
from ..rig.directivity import OMNI
from ..rig.zones import Zone, zones_overlap

__all__ = ["ZoneTarget", "MethodResult", "ZoneStudy", "zone_coupling", "contrast_weights", "matching_weights",
           "target_pressure", "contrast_db", "effort_db", "matching_error_db", "reference_speaker",
           "align_to_reference", "study_zones", "perturbed_contrast", "points_model_kernel", "AUTO_REGULARISATION"]

#: The relative regularisation values swept when none are given.
AUTO_REGULARISATION = (1e-4, 1e-3, 1e-2, 1e-1, 1.0)
#: Method keys, in the order results are listed.
METHODS = ("contrast", "matching", "channel")
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


@dataclass(frozen=True)
class MethodResult:
    """One design method across the regularisation sweep.

    Attributes
    ----------
    method : str
        ``"contrast"``, ``"matching"`` or ``"channel"``.
    regularisation : ndarray, shape (n_reg,)
        Relative regularisation (NaN for the channel method).
    contrast_db, effort_db, error_db : ndarray, shape (n_reg, n_freq)
        Acoustic contrast, array effort and bright-zone matching error, dB.
    weights : ndarray, complex, shape (n_reg, n_freq, n_spk)
        Speaker drive weights (source strength per unit input).
    chosen : int
        Index into `regularisation` of the design used for maps and filters.
    channel_index : ndarray of int, shape (n_freq,) or None
        0-based plan channel used at each frequency (channel method only).
    """

    method: str
    regularisation: np.ndarray
    contrast_db: np.ndarray
    effort_db: np.ndarray
    error_db: np.ndarray
    weights: np.ndarray
    chosen: int
    channel_index: np.ndarray | None = None


@dataclass(frozen=True)
class ZoneStudy:
    """The result of :func:`study_zones`.

    Attributes
    ----------
    axis : FrequencyAxis
    bright, dark : tuple of Zone
    target : ZoneTarget
    results : dict of str to MethodResult
        Keyed by method (``METHODS``).
    reference_speaker : int
        0-based index of the reference speaker of the effort.
    max_effort_db : float
        The effort limit the chosen regularisation keeps to (worst frequency).
    kernel_name : str
    """

    axis: FrequencyAxis
    bright: tuple[Zone, ...]
    dark: tuple[Zone, ...]
    target: ZoneTarget
    results: dict[str, MethodResult]
    reference_speaker: int
    max_effort_db: float
    kernel_name: str


def zone_coupling(rig: Rig, zones: Sequence[Zone], hz: np.ndarray, kernel: Any = None,
                  points_kernel: Callable[[ElementSet], Any] | None = None) -> np.ndarray:
    """Coupling from the speakers to every point of `zones`.

    Parameters
    ----------
    rig : Rig
    zones : sequence of Zone
    hz : ndarray, shape (n_freq,)
        Frequencies in Hz.
    kernel : object with ``evaluate(hz) -> (n_freq, n_mic, n_spk)``, optional
        The rig's kernel (free field, room or measured) for zones made of
        microphones; default the rig's model kernel (its room when it has a
        ``[room]``, else the free field).
    points_kernel : callable, optional
        ``points_kernel(receivers)`` returns a kernel from the rig's speakers
        to generated control points; default the rig's room or free field
        between the speakers and those points.

    Returns
    -------
    ndarray, complex, shape (n_freq, n_points, n_spk)
        Points in zone order, each zone's points in its own order (unit of G).
    """
    hz = np.atleast_1d(np.asarray(hz, dtype=float))
    parts = []
    g_rig = None
    for z in zones:
        if z.mic_indices is not None:
            if g_rig is None:
                g_rig = (kernel if kernel is not None else rig_kernel(rig)).evaluate(hz)
            parts.append(g_rig[:, list(z.mic_indices), :])
        else:
            es = ElementSet(z.point_names, z.positions, (OMNI,) * len(z), tuple(range(1, len(z) + 1)))
            parts.append((points_kernel or partial(points_model_kernel, rig))(es).evaluate(hz))
    return np.concatenate(parts, axis=1)


def points_model_kernel(rig: Rig, receivers: ElementSet) -> Any:
    """The rig's model kernel (room when it has one, else free field) from its speakers to `receivers`.

    Parameters
    ----------
    rig : Rig
        Speakers, medium and room.
    receivers : ElementSet
        Receiving points (m), e.g. zone points.

    Returns
    -------
    Kernel
        ``evaluate(hz)`` gives shape (n, n_receivers, n_spk); distances
        clamped at 1 mm.
    """
    if rig.room is not None:
        return RoomKernel.between(rig.speakers, receivers, rig.medium, rig.room)
    return FreeFieldKernel.between(rig.speakers, receivers, rig.medium)


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
        Speaker positions (m).

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
    weights : ndarray, complex, shape (n_freq, n_spk)
        Drive weights.
    g_bright : ndarray, complex, shape (n_freq, n_b, n_spk)
        Coupling to the bright-zone points.
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
    weights : ndarray, complex, shape (n_freq, n_spk)
        Drive weights.
    g_bright : ndarray, complex, shape (n_freq, n_b, n_spk)
        Coupling to the bright-zone points.
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
    weights : ndarray, complex, shape (n_freq, n_spk)
        Drive weights.
    g_bright : ndarray, complex, shape (n_freq, n_b, n_spk)
        Coupling to the bright-zone points.
    g_ref : ndarray, complex, shape (n_freq, n_b)
        Coupling of the reference speaker to the bright-zone points.

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


def _pick(effort: np.ndarray, max_effort_db: float) -> int:
    """The least-regularised design whose worst effort stays within the limit (else the most regularised)."""
    ok = np.flatnonzero(np.max(effort, axis=1) <= max_effort_db)
    return int(ok[0]) if ok.size else int(effort.shape[0] - 1)


def study_zones(rig: Rig, bright: Sequence[Zone], dark: Sequence[Zone], axis: FrequencyAxis, *,
                target: ZoneTarget, regularisation: Sequence[float] = AUTO_REGULARISATION,
                max_effort_db: float = 10.0, kernel: Any = None,
                points_kernel: Callable[[ElementSet], Any] | None = None) -> ZoneStudy:
    """Contrast control, pressure matching and the plan's channels on one rig (module docstring).

    Parameters
    ----------
    rig : Rig
    bright, dark : sequence of Zone
        At least one each, not sharing points.
    axis : FrequencyAxis
    target : ZoneTarget
        Pressure-matching target in the bright zone.
    regularisation : sequence of float
        Relative regularisation values (> 0), ascending after sorting.
    max_effort_db : float
        The chosen design of each method is the least regularised one whose
        worst-frequency array effort is at most this (dB).
    kernel, points_kernel : optional
        See :func:`zone_coupling`.

    Returns
    -------
    ZoneStudy
    """
    if not bright or not dark:
        raise InputError("a zone study needs at least one bright and one dark zone", source=rig.source,
                         field="zones")
    for z in (*bright, *dark):
        if len(z) == 0:
            raise InputError(f"zone {z.name!r} has no points", source=rig.source, field="zones")
    why = zones_overlap(bright, dark)
    if why:
        raise InputError(f"bright and dark zones overlap: {why}", source=rig.source, field="zones",
                         fix="choose zones that share no microphone or point")
    betas = np.sort(np.asarray(regularisation, dtype=float))
    if betas.size == 0 or not np.all(np.isfinite(betas)) or np.any(betas <= 0):
        raise InputError(f"regularisation values must be positive numbers, got {list(regularisation)}",
                         source="regularisation", fix="give values such as 0.001,0.01,0.1")
    hz = axis.hz
    g_b = zone_coupling(rig, bright, hz, kernel, points_kernel)
    g_d = zone_coupling(rig, dark, hz, kernel, points_kernel)
    ref = reference_speaker(rig.speakers.positions)
    g_ref = g_b[:, :, ref]
    points_b = np.vstack([z.positions for z in bright])
    p_t = target_pressure(target, points_b, hz, rig.medium.speed_of_sound, g_ref, rig.speakers.positions[ref])
    n_s = g_b.shape[2]
    scale_acc = np.real(np.trace(_correlation(g_b), axis1=1, axis2=2)) / n_s
    g_all = np.concatenate([g_b, g_d], axis=1)
    scale_pm = np.sum(np.abs(g_all) ** 2, axis=(1, 2)) / n_s

    def metrics(w: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        return contrast_db(w, g_b, g_d), effort_db(w, g_b, g_ref), matching_error_db(w, g_b, p_t)

    results: dict[str, MethodResult] = {}
    for method in ("contrast", "matching"):
        ws, cs, es, ers = [], [], [], []
        for beta in betas:
            if method == "contrast":
                w = align_to_reference(contrast_weights(g_b, g_d, beta * scale_acc), g_b, g_ref)
            else:
                w = matching_weights(g_b, g_d, p_t, beta * scale_pm)
            c, e, er = metrics(w)
            ws.append(w), cs.append(c), es.append(e), ers.append(er)
        effort = np.array(es)
        results[method] = MethodResult(method, betas, np.array(cs), effort, np.array(ers), np.array(ws),
                                       _pick(effort, max_effort_db))
    # the plan's channels: SVD of the rig's own coupling; the channel with the highest contrast
    g_rig = (kernel if kernel is not None else rig_kernel(rig)).evaluate(hz)
    _, sv, vh = np.linalg.svd(g_rig, full_matrices=False)
    v = np.conj(np.swapaxes(vh, -1, -2))                              # (n_f, n_spk, n_chan)
    per_chan = np.stack([contrast_db(v[:, :, j], g_b, g_d) for j in range(v.shape[2])], axis=1)
    strong = 20 * np.log10(np.maximum(sv, _TINY) / sv[:, :1]) >= -rig.planning.threshold_db - 1e-12
    per_chan = np.where(strong, per_chan, -np.inf)                    # only the plan's strong channels
    best = np.argmax(per_chan, axis=1)
    w_ch = align_to_reference(v[np.arange(len(hz)), :, best], g_b, g_ref)
    c, e, er = metrics(w_ch)
    results["channel"] = MethodResult("channel", np.array([np.nan]), c[None], e[None], er[None], w_ch[None], 0,
                                      best)
    if kernel is None:
        name = "room" if rig.room is not None else "free field"
    else:
        name = getattr(kernel, "name", type(kernel).__name__)
    return ZoneStudy(axis, tuple(bright), tuple(dark), target, results, ref, float(max_effort_db), name)


def perturbed_contrast(rig: Rig, bright: Sequence[Zone], dark: Sequence[Zone], weights: np.ndarray,
                       axis: FrequencyAxis, *, sigma_m: float, trials: int = 20, seed: int = 0) -> np.ndarray:
    """Contrast of fixed weights on rigs with Gaussian position errors (the rig's room or free field).

    Every speaker and zone point moves by an independent N(0, sigma_m^2)
    error on each coordinate; the weights stay as designed.

    Parameters
    ----------
    rig : Rig
    bright, dark : sequence of Zone
    weights : ndarray, complex, shape (n_freq, n_spk)
    axis : FrequencyAxis
    sigma_m : float
        Standard deviation of the position error per coordinate, m (> 0).
    trials : int
        Perturbed rigs.
    seed : int
        Seed of numpy's default generator (results repeat exactly).

    Returns
    -------
    ndarray, shape (trials, n_freq)
        Acoustic contrast in dB.
    """
    if not (np.isfinite(sigma_m) and sigma_m > 0) or trials < 1:
        raise InputError(f"tolerance needs a positive position error and at least one trial, got {sigma_m} m, "
                         f"{trials} trials", source="tolerance")
    rng = np.random.default_rng(seed)
    out = np.empty((trials, len(axis)))
    spk = rig.speakers

    def moved(z: Zone) -> Zone:
        pos = z.positions + rng.normal(0.0, sigma_m, z.positions.shape)
        return Zone(z.name, z.role, z.point_names, pos, None)

    for t in range(trials):
        s_pos = spk.positions + rng.normal(0.0, sigma_m, spk.positions.shape)
        rig_t = Rig(ElementSet(spk.names, s_pos, spk.directivities, spk.channels), rig.mics, rig.medium,
                    room=rig.room)
        b = [moved(z) for z in bright]
        d = [moved(z) for z in dark]
        out[t] = contrast_db(weights, zone_coupling(rig_t, b, axis.hz), zone_coupling(rig_t, d, axis.hz))
    return out
