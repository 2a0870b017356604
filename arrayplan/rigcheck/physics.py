"""Physical checks of a rig that loads: what will go wrong on the real rig before it is mounted."""

from __future__ import annotations

import re

import numpy as np
from scipy.spatial import cKDTree

from ..errors import InputError
from ..channels.heuristics import PARAXIAL_RATIO, aperture_shape
from ..limits import check_memory
from ..rig.medium import speed_of_sound_air
from ..rig.model import Rig
from ..rig.room import eyring_t60_s, sabine_t60_s, schroeder_frequency_hz
from .findings import Finding, SideGroup

__all__ = ["physical_findings", "aliasing_findings", "paraxial_findings", "coupling_findings", "piston_findings",
           "proximity_findings", "compact_findings", "hardware_findings", "medium_findings"]

#: Relative tolerance of the boundary tests (d = lambda / 2 exactly is still fine).
_EDGE_RTOL = 1e-9
#: Below this directivity gain (-40 dB re on-axis) a speaker-microphone path counts as absent.
_DEAD_GAIN = 1e-2


def _name_span(names: tuple[str, ...] | list[str]) -> str:
    """'T1..T12' for a run of numbered names, else a short list."""
    names = list(names)
    m = [re.fullmatch(r"(.*?)(\d+)", n) for n in names]
    if len(names) > 2 and all(m) and len({x.group(1) for x in m}) == 1:   # type: ignore[union-attr]
        nums = [int(x.group(2)) for x in m]                                # type: ignore[union-attr]
        if nums == list(range(nums[0], nums[0] + len(nums))):
            return f"{names[0]}..{names[-1]}"
    if len(names) <= 4:
        return ", ".join(names)
    return f"{', '.join(names[:3])} and {len(names) - 3} more"


def _group_spacing(g: SideGroup) -> float | None:
    """Largest distance between neighbouring elements of a group in metres (None for one element)."""
    pos = g.elements.positions
    n = len(pos)
    if n < 2:
        return None
    if g.elements.kind == "grid":
        nu, nv = g.counts
        steps = ([np.linalg.norm(pos[1] - pos[0])] if nu > 1 else []) + \
                ([np.linalg.norm(pos[nu] - pos[0])] if nv > 1 else [])
        return float(max(steps))
    if g.elements.kind in ("line", "arc", "circle"):
        return float(np.linalg.norm(pos[1] - pos[0]))
    nearest = cKDTree(pos).query(pos, k=2)[0][:, 1]
    return float(np.max(nearest))


def aliasing_findings(rig: Rig, groups: dict[str, list[SideGroup]]) -> list[Finding]:
    """A warning for each group whose spacing d exceeds half a wavelength at the top planned frequency.

    A uniformly spaced array forms no grating lobes at any steering angle
    when d <= lambda / 2 (the spatial sampling theorem for arrays); above it,
    from f = c / (2 d), it does.

    Parameters
    ----------
    rig : Rig
        The loaded rig.
    groups : dict of str to list of SideGroup
        The generated groups of each side.

    Returns
    -------
    list of Finding
        One warning per group spaced wider than half a wavelength.
    """
    if rig.frequencies is None:
        return []
    c = rig.medium.speed_of_sound
    f_top = float(rig.frequencies.hz[-1])
    half = c / (2.0 * f_top)
    out = []
    for label in ("speakers", "microphones"):
        for g in groups.get(label, []):
            d = _group_spacing(g)
            if d is None or d <= half * (1.0 + _EDGE_RTOL):
                continue
            f_alias = c / (2.0 * d)
            effect = "form grating lobes" if label == "speakers" else "alias the sound field (grating lobes)"
            out.append(Finding(
                "warning", g.field,
                f"{label} {_name_span(g.elements.names)} are up to {d:.3g} m apart; at {f_top:.0f} Hz half a "
                f"wavelength is {half:.3g} m, so the array will {effect} above {f_alias:.0f} Hz",
                f"space them closer than {half:.3g} m or plan below {f_alias:.0f} Hz"))
    return out


def paraxial_findings(rig: Rig) -> list[Finding]:
    """A warning when two facing arrays are too close for the paraxial channel estimate.

    Criterion: the estimate Ls Lr / (lambda L) (lines) or As Ar / (lambda L)^2
    (areas) assumes small angles (paraxial regime); it is called rough when
    half the sum of the two apertures exceeds half the distance L, the same
    rule :func:`arrayplan.channels.heuristics.paraxial_estimate` uses.

    Parameters
    ----------
    rig : Rig
        The loaded rig.

    Returns
    -------
    list of Finding
        Empty, or one warning.
    """
    spk, mic = aperture_shape(rig.speakers.positions), aperture_shape(rig.mics.positions)
    if spk.kind != mic.kind or spk.kind not in ("line", "area"):
        return []
    dist = float(np.linalg.norm(mic.centre - spk.centre))
    span = (spk.extent + mic.extent) / 2.0
    if dist < 0.05 * max(spk.extent, mic.extent):
        return [Finding("note", "speakers/microphones",
                        "the two arrays share a centre (one surrounds the other), so the quick estimate of "
                        "Ls Lr / (lambda L) does not apply; the SVD counts from 'arrayplan plan' are the ones "
                        "to trust")]
    if span <= PARAXIAL_RATIO * dist:
        return []
    angle = float(np.degrees(np.arctan(span / dist)))
    return [Finding(
        "warning", "speakers/microphones",
        f"the arrays span {spk.extent:.3g} m and {mic.extent:.3g} m but are only {dist:.3g} m apart "
        f"(less than the {span / PARAXIAL_RATIO:.3g} m the paraxial estimate needs): paths reach {angle:.0f} "
        f"degrees off axis, in the near field of the apertures, so the quick count of the estimate is rough",
        f"move the arrays at least {span / PARAXIAL_RATIO:.3g} m apart, or rely on the SVD counts of "
        f"'arrayplan plan' rather than the estimate")]


def _gains(rig: Rig, k: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Directivity gains (n_freq, n_mic, n_spk) of the speakers towards the mics and of the mics towards them."""
    diff = rig.mics.positions[:, None, :] - rig.speakers.positions[None, :, :]
    unit = diff / np.linalg.norm(diff, axis=-1, keepdims=True)              # speaker -> mic
    g_spk = np.ones((len(k),) + unit.shape[:2])
    g_mic = np.ones_like(g_spk)
    for j, d in enumerate(rig.speakers.directivities):
        cos = unit[:, j, :] @ np.asarray(d.axis)
        g_spk[:, :, j] = d.gain(cos, k) if d.depends_on_frequency else d.gain(cos)[None]
    for i, d in enumerate(rig.mics.directivities):
        cos = -unit[i] @ np.asarray(d.axis)
        g_mic[:, i, :] = d.gain(cos, k) if d.depends_on_frequency else d.gain(cos)[None]
    return np.abs(g_spk), np.abs(g_mic)


def coupling_findings(rig: Rig, freqs_hz: np.ndarray) -> list[Finding]:
    """Microphones that hear no speaker and speakers no microphone hears (baffles, nulls).

    Parameters
    ----------
    rig : Rig
        The loaded rig.
    freqs_hz : ndarray, shape (n_freq,)
        Frequencies checked (Hz).

    Returns
    -------
    list of Finding
        An error when no path is heard at all; else warnings naming the
        unheard microphones and the unheard speakers.
    """
    k = 2.0 * np.pi * freqs_hz / rig.medium.speed_of_sound
    g_spk, g_mic = _gains(rig, k)
    path = (g_spk * g_mic).max(axis=0)                                       # (n_mic, n_spk)
    dead = path < _DEAD_GAIN
    if dead.all():
        return [Finding("error", "speakers/microphones",
                        "no microphone hears any speaker: every path lies behind a piston's baffle or in the null "
                        "of a directional pattern, so the rig carries no channel at all",
                        "check the signs of the directivity axes: speakers should point towards the "
                        "microphones and the microphones towards the speakers")]
    out = []
    deaf = np.flatnonzero(dead.all(axis=1))
    if deaf.size:
        by_speakers = (g_spk.max(axis=0)[deaf] < _DEAD_GAIN).all(axis=1)
        why = ("behind the baffle or in the null of every speaker" if by_speakers.all() else
               "in the null of its own pattern towards every speaker" if not by_speakers.any() else
               "behind the speakers' baffles or in the null of its own pattern")
        names = [rig.mics.names[i] for i in deaf]
        out.append(Finding("warning", "microphones",
                           f"microphones {_name_span(names)} hear none of the speakers: each is {why}",
                           "turn the microphones or the speakers to face each other (directivity axis)"))
    mute = np.flatnonzero(dead.all(axis=0))
    if mute.size:
        names = [rig.speakers.names[j] for j in mute]
        out.append(Finding("warning", "speakers",
                           f"speakers {_name_span(names)} reach none of the microphones (behind their own baffle "
                           f"or in a null of every microphone)",
                           "turn them towards the microphones (directivity axis)"))
    n_dead = int(dead.sum()) - int(dead[deaf].sum()) - int(dead[:, mute].sum()) + int(dead[np.ix_(deaf, mute)].sum())
    if n_dead:
        out.append(Finding("note", "speakers/microphones",
                           f"{n_dead} of {dead.size} speaker-microphone paths have no direct sound (behind a "
                           f"baffle or in a null, below -40 dB)", None))
    return out


def piston_findings(rig: Rig, f_top: float) -> list[Finding]:
    """Pistons that overlap their neighbours, and microphones inside a piston's Rayleigh distance.

    The far-field piston pattern 2 J1(ka sin theta) / (ka sin theta) holds
    beyond the Rayleigh distance pi a^2 / lambda.

    Parameters
    ----------
    rig : Rig
        The loaded rig.
    f_top : float
        Highest planned frequency (Hz).

    Returns
    -------
    list of Finding
        Warnings for overlapping pistons and microphones too close to one.
    """
    out = []
    spk = rig.speakers
    radii = np.array([d.radius if d.kind == "piston" else 0.0 for d in spk.directivities])
    if radii.max(initial=0.0) == 0.0:
        return out
    if len(spk) > 1:
        gap = np.linalg.norm(spk.positions[:, None] - spk.positions[None], axis=-1) + np.diag(np.full(len(spk), np.inf))
        out += _first_pair(np.triu(gap < radii[:, None] + radii[None, :], 1), "speakers", lambda i, j, n: (
            f"pistons {spk.names[i]} and {spk.names[j]} are {gap[i, j]:.3g} m apart but "
            f"{2 * radii[i]:.3g} m and {2 * radii[j]:.3g} m across, so they cannot both be "
            f"mounted there ({n} such pair(s))"), "space the drivers wider or give smaller radii")
    lam = rig.medium.speed_of_sound / f_top
    rayleigh = np.pi * radii ** 2 / lam
    dist = np.linalg.norm(rig.mics.positions[:, None] - spk.positions[None], axis=-1)
    out += _first_pair(dist < rayleigh[None, :], "speakers/microphones", lambda i, j, n: (
        f"microphone {rig.mics.names[i]} is {dist[i, j]:.3g} m from piston {spk.names[j]}, inside "
        f"its Rayleigh distance pi a^2 / lambda = {rayleigh[j]:.3g} m at {f_top:.0f} Hz, where "
        f"the far-field piston pattern does not hold ({n} such pair(s))"),
        "move the microphones further out or plan below that frequency")
    return out


def _first_pair(flagged: np.ndarray, field: str, problem, fix: str) -> list[Finding]:
    """A warning about the first flagged pair (i, j) of a boolean matrix, counting all of them; else none.

    `problem(i, j, n_pairs)` words it.
    """
    pairs = np.argwhere(flagged)
    if not pairs.size:
        return []
    i, j = pairs[0]
    return [Finding("warning", field, problem(i, j, len(pairs)), fix)]


def proximity_findings(rig: Rig, f_low: float) -> list[Finding]:
    """Directional microphones within kr < 1 of a speaker at the lowest frequency (proximity effect).

    Parameters
    ----------
    rig : Rig
        The loaded rig.
    f_low : float
        Lowest planned frequency (Hz).

    Returns
    -------
    list of Finding
        Empty, or one warning naming the directional microphones within
        kr < 1 of a speaker.
    """
    c = rig.medium.speed_of_sound
    k = 2.0 * np.pi * f_low / c
    idx = [i for i, d in enumerate(rig.mics.directivities) if not d.is_omni and d.kind != "piston"]
    if not idx:
        return []
    dist = np.linalg.norm(rig.mics.positions[idx][:, None] - rig.speakers.positions[None], axis=-1).min(axis=1)
    near = [(rig.mics.names[i], r) for i, r in zip(idx, dist) if k * r < 1.0]
    if not near:
        return []
    names = [n for n, _ in near]
    r_min = min(r for _, r in near)
    return [Finding("warning", "microphones",
                    f"directional microphones {_name_span(names)} are as close as {r_min:.3g} m to a speaker; at "
                    f"{f_low:.0f} Hz that is kr = {k * r_min:.2f} < 1, where a pressure-gradient microphone "
                    f"boosts the bass (proximity effect) and the far-field pattern in the model does not hold",
                    f"keep them further than {1.0 / k:.3g} m away or plan above {c / (2 * np.pi * r_min):.0f} Hz")]


def compact_findings(rig: Rig, f_top: float) -> list[Finding]:
    """A side much smaller than a wavelength at the top frequency (k a < 1) carries one strong channel.

    Parameters
    ----------
    rig : Rig
        The loaded rig.
    f_top : float
        Highest planned frequency (Hz).

    Returns
    -------
    list of Finding
        Per side: a note for a single element, or a warning when the side
        spans k a < 1.
    """
    c = rig.medium.speed_of_sound
    k = 2.0 * np.pi * f_top / c
    out = []
    for label, es in (("speakers", rig.speakers), ("microphones", rig.mics)):
        if len(es) < 2:
            out.append(Finding("note", label, f"the rig has a single {label[:-1]}: one channel at most"))
            continue
        radius = float(np.max(np.linalg.norm(es.positions - es.positions.mean(axis=0), axis=1)))
        if k * radius < 1.0:
            out.append(Finding(
                "warning", label,
                f"the {label} fit in a sphere of radius {radius:.3g} m; at the top planned frequency "
                f"{f_top:.0f} Hz a wavelength is {c / f_top:.3g} m (k a = {k * radius:.2f} < 1), so the {label} act "
                f"like one point and the rig carries one strong channel at most",
                f"plan above {c / (2 * np.pi * radius):.0f} Hz or spread the {label} wider"))
    return out


def hardware_findings(rig: Rig, f_top: float | None) -> list[Finding]:
    """Sample rate against the planned band, missing calibration file, reference channel clashes.

    Parameters
    ----------
    rig : Rig
        The loaded rig.
    f_top : float or None
        Highest planned frequency (Hz); None skips the sample-rate check.

    Returns
    -------
    list of Finding
        Warnings about the ``[hardware]`` table.
    """
    hw, out = rig.hardware, []
    if hw.sample_rate_hz and f_top is not None and f_top >= hw.sample_rate_hz / 2.0:
        out.append(Finding("warning", "hardware.sample_rate_hz",
                           f"the top planned frequency {f_top:g} Hz is at or above half the sample rate "
                           f"({hw.sample_rate_hz / 2:g} Hz), so the interface cannot play or record it",
                           f"plan below {hw.sample_rate_hz / 2:g} Hz (in practice below "
                           f"{0.45 * hw.sample_rate_hz:g} Hz) or raise the sample rate"))
    if hw.calibration is not None and not hw.calibration.exists():
        out.append(Finding("warning", "hardware.calibration",
                           f"names {hw.calibration}, which does not exist (yet); a measurement that applies it will fail",
                           "run 'arrayplan calibrate' to make it, or remove the key"))
    if hw.reference_output is not None and hw.reference_output in rig.speakers.channels:
        name = rig.speakers.names[rig.speakers.channels.index(hw.reference_output)]
        out.append(Finding("warning", "hardware.reference.output_channel",
                           f"output channel {hw.reference_output} is both the reference loop and speaker {name}",
                           "give the reference loop an output channel no speaker uses"))
    if hw.reference_input is not None and hw.reference_input in rig.mics.channels:
        name = rig.mics.names[rig.mics.channels.index(hw.reference_input)]
        out.append(Finding("warning", "hardware.reference.input_channel",
                           f"input channel {hw.reference_input} is both the reference loop and microphone {name}",
                           "give the reference loop an input channel no microphone uses"))
    return out


def medium_findings(rig: Rig, raw_medium: dict) -> list[Finding]:
    """speed_of_sound and temperature_c that disagree by more than 0.5 %.

    Parameters
    ----------
    rig : Rig
        The loaded rig.
    raw_medium : dict
        The [medium] table as written in the file.

    Returns
    -------
    list of Finding
        Empty, or one warning.
    """
    if "speed_of_sound" in raw_medium and "temperature_c" in raw_medium:
        c_t = speed_of_sound_air(rig.medium.temperature_c)
        c = rig.medium.speed_of_sound
        if abs(c - c_t) > 0.005 * c_t:
            return [Finding("warning", "medium.speed_of_sound",
                            f"{c:g} m/s is given, but air at {rig.medium.temperature_c:g} °C carries sound at "
                            f"{c_t:.1f} m/s; the planner uses {c:g} m/s",
                            "give only one of speed_of_sound and temperature_c, or make them agree")]
    return []


#: Time per image path and frequency assumed for the room estimate, s (benchmarks/room_speed.py measures
#: 20-80 ns on a 2-core machine: the low end on evenly spaced frequencies, the high end on others).
ROOM_NS_PER_PATH = 80e-9
#: A room plan estimated to take longer than this many seconds is warned about.
ROOM_SLOW_S = 60.0


def room_findings(rig: Rig, freqs_hz: np.ndarray | None) -> list[Finding]:
    """The room's cost estimate (warning when slow) and its reverberation guides (notes).

    Parameters
    ----------
    rig : Rig
        The loaded rig.
    freqs_hz : ndarray, shape (n_freq,), or None
        Planned frequencies (Hz), if any.

    Returns
    -------
    list of Finding
        Empty without a room; else the cost estimate and reverberation notes.
    """
    room = rig.room
    if room is None:
        return []
    out = []
    n_img = room.n_images
    paths = n_img * len(rig.speakers) * len(rig.mics)
    n_f = 1 if freqs_hz is None else len(freqs_hz)
    seconds = paths * n_f * ROOM_NS_PER_PATH
    geometry_mb = min(paths, 4_000_000) * 16 / 1e6 + n_img * 72 / 1e6
    estimate = (f"order {room.reflection_order} keeps {n_img:,} image sources, {paths:,} image paths per "
                f"frequency; a plan at {n_f} frequencies takes about {seconds:.2g} s at "
                f"{ROOM_NS_PER_PATH * 1e9:.0f} ns per path and frequency, and about {geometry_mb:.2g} MB for the "
                f"image geometry (plus a working set bounded by the chunk size)")
    if seconds > ROOM_SLOW_S:
        out.append(Finding("warning", "room.reflection_order", estimate + f": more than {ROOM_SLOW_S:g} s",
                           "lower reflection_order, set max_delay_ms, or plan at fewer frequencies"))
    else:
        out.append(Finding("note", "room.reflection_order", estimate))
    c = rig.medium.speed_of_sound
    sabine, eyring = sabine_t60_s(room, 1000.0, c), eyring_t60_s(room, 1000.0, c)
    if np.isfinite(sabine) and sabine > 0:
        f_s = schroeder_frequency_hz(sabine, room.volume_m3)
        out.append(Finding("note", "room.absorption",
                           f"at 1 kHz (mean absorption {room.mean_absorption(1000.0):.2f}) the Sabine reverberation "
                           f"time is {sabine:.2f} s and the Eyring time {eyring:.2f} s; the Schroeder frequency "
                           f"2000 sqrt(T60/V) is {f_s:.0f} Hz, below which single room modes dominate. These are "
                           "guides from diffuse-field formulas, not what the image model will show"))
        longest_s = (room.max_delay_ms / 1e3 if room.max_delay_ms is not None
                     else room.reflection_order * min(room.size_m) / c)
        decay_db = 60.0 * longest_s / sabine
        if decay_db < 30.0:
            out.append(Finding("note", "room.reflection_order",
                               f"the image paths kept reach roughly {longest_s * 1e3:.0f} ms, about {decay_db:.0f} dB "
                               f"into a {sabine:.2f} s decay: the room's late reflections are left out",
                               "raise reflection_order (or max_delay_ms) to model more of the decay"))
    return out


def physical_findings(rig: Rig, groups: dict[str, list[SideGroup]], raw_medium: dict | None = None
                      ) -> list[Finding]:
    """Warnings and notes about a rig that loads: what will go wrong on the real rig.

    Parameters
    ----------
    rig : Rig
    groups : dict
        ``{"speakers": [SideGroup, ...], "microphones": [...]}``, one group per
        generated/CSV entry and one for the points of a side.
    raw_medium : dict, optional
        The ``[medium]`` table as written (to see which keys were given).

    Returns
    -------
    list of Finding
    """
    out = medium_findings(rig, raw_medium or {})
    out += room_findings(rig, None if rig.frequencies is None else rig.frequencies.hz)
    if rig.frequencies is None:
        out.append(Finding("note", "frequencies",
                           "no [frequencies] table: 'arrayplan plan' will need frequencies on its command line, and "
                           "the checks that depend "
                           "on frequency (spacing, near field, nulls, sample rate) were skipped",
                           "add [frequencies] with start, stop and count in Hz"))
        return out + paraxial_findings(rig) + hardware_findings(rig, None)
    hz = rig.frequencies.hz
    out += aliasing_findings(rig, groups)
    out += paraxial_findings(rig)
    try:    # tables of every speaker-microphone path at every frequency: estimated before they are built
        check_memory(8.0 * len(rig.mics) * len(rig.speakers) * (2 * len(hz) + 8),
                     "checking every speaker-microphone path", source=rig.source)
    except InputError as exc:
        out.append(Finding("note", "speakers/microphones", "the checks of each speaker-microphone path (nulls, "
                           f"baffles, pistons' near field, proximity) were skipped: {exc.problem}", exc.fix))
    else:
        out += coupling_findings(rig, hz)
        out += piston_findings(rig, float(hz[-1]))
        out += proximity_findings(rig, float(hz[0]))
    out += compact_findings(rig, float(hz[-1]))
    out += hardware_findings(rig, float(hz[-1]))
    return out
