"""Multi-zone sound: drive weights that make one zone loud and another quiet.

Per frequency, with G_b (n_b, n_spk) and G_d (n_d, n_spk) the coupling from
the speakers to the bright- and dark-zone points, three designs are compared
(their formulas, references and figures of merit are in
:mod:`arrayplan.studies.zone_weights`, importable from here too):

* **Acoustic contrast control** (J.-W. Choi and Y.-H. Kim, JASA 111(4), 2002).
* **Pressure matching** of a target field in the bright zone and silence in
  the dark zone.
* **The plan's own channels**: of the rig's strong channels (within the
  rig's ``threshold_db`` of the strongest), the drive vector (column of V
  of the rig's coupling matrix) that gives the highest contrast.

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

from ..errors import InputError
from ..frequency import FrequencyAxis
from ..kernels import rig_kernel
from ..kernels.freefield import FreeFieldKernel
from ..kernels.room import RoomKernel
from ..rig import ElementSet, Rig
from ..rig.directivity import OMNI
from ..rig.zones import Zone, zones_overlap
from .zone_weights import (_TINY, ZoneTarget, _correlation, align_to_reference, contrast_db, contrast_weights, effort_db,
                           matching_error_db, matching_weights, reference_speaker, target_pressure)

__all__ = ["ZoneTarget", "MethodResult", "ZoneStudy", "zone_coupling", "contrast_weights", "matching_weights",
           "target_pressure", "contrast_db", "effort_db", "matching_error_db", "reference_speaker",
           "align_to_reference", "study_zones", "perturbed_contrast", "points_model_kernel", "AUTO_REGULARISATION"]

#: The relative regularisation values swept when none are given.
AUTO_REGULARISATION = (1e-4, 1e-3, 1e-2, 1e-1, 1.0)
#: Method keys, in the order results are listed.
METHODS = ("contrast", "matching", "channel")


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
