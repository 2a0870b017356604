"""The data model of a rig: its elements, medium, hardware map and planning settings, and its problems.

A :class:`Rig` is built from arrays with :meth:`Rig.from_positions` or read
from a file by :func:`arrayplan.rig.reader.load_rig`; this module knows
nothing of files.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from .directivity import OMNI, Directivity
from ..errors import InputError
from ..formats.fileio import sha256_of_text
from ..frequency import FrequencyAxis
from .medium import Medium
from .room import Room

__all__ = ["COINCIDENT_M", "MAX_COORDINATE_M", "MAX_COINCIDENT_LISTED", "TEMPERATURE_RANGE_C", "ElementSet",
           "EntryElements", "HardwareMap", "PlanSettings", "Rig", "coincident_pairs"]

#: Two elements closer than this (metres) are taken as coincident.
COINCIDENT_M = 1e-6
#: Largest coordinate accepted in a rig, m (1000 km: distances between elements stay far from overflow).
MAX_COORDINATE_M = 1e6
#: Coincident pairs listed at most (a rig with every element at one point would have n^2 / 2).
MAX_COINCIDENT_LISTED = 100
#: Air temperatures accepted, °C.
TEMPERATURE_RANGE_C = (-100.0, 100.0)


@dataclass(frozen=True)
class ElementSet:
    """The speakers or the microphones of a rig.

    Attributes
    ----------
    names : tuple of str
        Unique names, in the order of the coupling stack's axis.
    positions : ndarray, shape (n, 3)
        Positions in metres.
    directivities : tuple of Directivity
        One per element.
    channels : tuple of int
        1-based hardware channel per element (output for speakers, input for
        microphones).
    """

    names: tuple[str, ...]
    positions: np.ndarray
    directivities: tuple[Directivity, ...]
    channels: tuple[int, ...]

    def __len__(self) -> int:
        return len(self.names)

    @property
    def all_omni(self) -> bool:
        """Whether every element is omnidirectional.

        Returns
        -------
        bool
            True when each directivity's ``is_omni`` is (also for an empty set).
        """
        return all(d.is_omni for d in self.directivities)


@dataclass(frozen=True)
class HardwareMap:
    """How the rig connects to the audio interface (all channels 1-based).

    Attributes
    ----------
    device : str, int or None
        Audio device by name substring or index; None for the default.
    sample_rate_hz : float or None
        Sample rate to run the device at (Hz).
    reference_output, reference_input : int or None
        1-based output and input channel of the loopback reference, if any.
    calibration : Path or None
        Calibration file of the rig's inputs and outputs.
    """

    device: str | int | None = None
    sample_rate_hz: float | None = None
    reference_output: int | None = None
    reference_input: int | None = None
    calibration: Path | None = None


@dataclass(frozen=True)
class PlanSettings:
    """Planning options a rig file may set (command-line flags override them).

    Attributes
    ----------
    threshold_db : float
        A channel is *strong* when its power coupling is within this many dB
        of the strongest channel (default 3 dB: at least half its power).
    snr_db : float
        Signal-to-noise ratio of the strongest channel; channels more than
        this many dB below it are under the noise floor.
    track : bool
        Order and phase-align channels from bin to bin (see
        :func:`arrayplan.channels.svd.track_channels`).
    chunk_size : int, optional
        Frequencies evaluated and decomposed at once; default from
        `memory_mb`.
    workers : int, optional
        Worker processes; default every core for a large plan.
    max_channels : int or "auto", optional
        Compute only the strongest channels (see :mod:`arrayplan.channels.topk`).
    memory_mb : float
        Working-memory budget per worker that sets the default chunk size, MB.
    """

    threshold_db: float = 3.0
    snr_db: float = 40.0
    track: bool = False
    chunk_size: int | None = None
    workers: int | None = None
    max_channels: int | str | None = None
    memory_mb: float = 64.0


@dataclass(frozen=True)
class Rig:
    """A complete rig description.

    Attributes
    ----------
    speakers, mics : ElementSet
        The speakers (columns of G) and microphones (rows of G).
    medium : Medium
        Speed of sound and air absorption.
    frequencies : FrequencyAxis or None
        Planning frequencies (Hz), if the rig gives them.
    hardware : HardwareMap
        Audio device, sample rate and reference channels.
    planning : PlanSettings
        Planning options from the rig file.
    name, description : str
        Label and free text.
    source : str
        The file the rig came from, or ``"<arrays>"``; named in messages.
    room : Room or None
        Rectangular room around the rig; None for free field.
    zones : tuple of Zone
        Listening zones from ``[[zones]]`` (see :mod:`arrayplan.rig.zones`).
    """

    speakers: ElementSet
    mics: ElementSet
    medium: Medium = field(default_factory=Medium)
    frequencies: FrequencyAxis | None = None
    hardware: HardwareMap = field(default_factory=HardwareMap)
    planning: PlanSettings = field(default_factory=PlanSettings)
    name: str = "rig"
    description: str = ""
    source: str = "<arrays>"
    room: Room | None = None
    zones: tuple = ()  # of arrayplan.rig.zones.Zone, from [[zones]]

    @property
    def sha256(self) -> str:
        """Hash of the resolved geometry, directivities and medium (not of file layout).

        Returns
        -------
        str
            Hex SHA-256 of the canonical JSON of names, positions (rounded to
            1e-9 m), directivities, medium and room settings.
        """
        canon = {
            "speakers": _canon(self.speakers),
            "mics": _canon(self.mics),
            "medium": [self.medium.speed_of_sound, self.medium.air_absorption, self.medium.temperature_c,
                       self.medium.relative_humidity_pct, self.medium.pressure_kpa],
        }
        if self.room is not None:
            canon["room"] = self.room.settings()
        return sha256_of_text(json.dumps(canon, sort_keys=True))

    @classmethod
    def from_positions(cls, speaker_positions: np.ndarray, mic_positions: np.ndarray, *,
                       speed_of_sound: float = 343.2, frequencies: Sequence[float] | None = None,
                       speaker_names: Sequence[str] | None = None, mic_names: Sequence[str] | None = None,
                       speaker_directivity: Directivity = OMNI, mic_directivity: Directivity = OMNI,
                       name: str = "rig", source: str = "<arrays>") -> "Rig":
        """A rig from position arrays in metres, shapes (n_spk, 3) and (n_mic, 3).

        Parameters
        ----------
        speaker_positions : array_like, shape (n_spk, 3)
            Speaker positions (m).
        mic_positions : array_like, shape (n_mic, 3)
            Microphone positions (m).
        speed_of_sound : float
            m/s.
        frequencies : sequence of float, optional
            Planning frequencies (Hz).
        speaker_names, mic_names : sequence of str, optional
            Default ``S1, S2, ...`` and ``M1, M2, ...``.
        speaker_directivity, mic_directivity : Directivity
            One pattern for every element of the side (default omni).
        name : str
            Label of the rig.
        source : str
            Named in messages.

        Returns
        -------
        Rig
            Validated; hardware channels 1..n in order on each side.

        Raises
        ------
        InputError
            Wrong shapes, name counts or any problem of :meth:`problems`.
        """
        spk = _element_set(speaker_positions, speaker_names, "S", speaker_directivity, source, "speakers")
        mic = _element_set(mic_positions, mic_names, "M", mic_directivity, source, "microphones")
        rig = cls(spk, mic, Medium(speed_of_sound=float(speed_of_sound)),
                  FrequencyAxis(frequencies, source=source) if frequencies is not None else None,
                  name=name, source=source)
        rig.validate()
        return rig

    def validate(self) -> None:
        """Check positions for NaN, coincidences and name or channel clashes.

        Raises
        ------
        InputError
            The first of :meth:`problems`.
        """
        found = self.problems(limit=1)
        if found:
            raise found[0]

    def problems(self, limit: int | None = None) -> list[InputError]:
        """Every structural problem of the rig, in the order :meth:`validate` meets them.

        Parameters
        ----------
        limit : int, optional
            Stop after this many problems.

        Returns
        -------
        list of InputError
            Empty sides, non-finite positions, repeated names or channels,
            coincident elements (each pair once).
        """
        out: list[InputError] = []
        for label, es in (("speakers", self.speakers), ("microphones", self.mics)):
            out += _side_problems(es, label, self.source)
        if len(self.speakers) and len(self.mics):
            out += _coincident(self.speakers, self.mics, self.source, "speakers/microphones", same=False)
        if self.room is not None:
            out += self.room.element_problems(self.speakers, "speakers", self.source)
            out += self.room.element_problems(self.mics, "microphones", self.source)
        return out[:limit] if limit is not None else out


def _side_problems(es: ElementSet, label: str, source: str) -> list[InputError]:
    if len(es) == 0:
        return [InputError(f"the rig has no {label}", source=source, field=label,
                           fix=f"add at least one entry under [[{label}]]")]
    out = []
    bad = ~np.all(np.isfinite(es.positions), axis=1)
    for i in np.flatnonzero(bad):
        out.append(InputError(f"position of {es.names[i]!r} is not finite", source=source,
                              field=f"{label}[{es.names[i]}].position"))
    out += _repeats(es.names, f"{label} names", source, label)
    out += _repeats([str(c) for c in es.channels], f"{label} channels", source, label)
    out += _coincident(es, es, source, label, same=True)
    return out


def _canon(es: ElementSet) -> list:
    return [[n, [round(float(x), 9) for x in p], repr(d)] for n, p, d in
            zip(es.names, es.positions, es.directivities)]


def _element_set(positions: np.ndarray, names: Sequence[str] | None, prefix: str, directivity: Directivity,
                 source: str, label: str) -> ElementSet:
    pos = np.asarray(positions, dtype=float)
    if pos.ndim != 2 or pos.shape[1] != 3:
        raise InputError(f"positions must have shape (n, 3), got {pos.shape}", source=source, field=label)
    n = pos.shape[0]
    names = tuple(str(x) for x in names) if names is not None else tuple(f"{prefix}{i + 1}" for i in range(n))
    if len(names) != n:
        raise InputError(f"{len(names)} names for {n} positions", source=source, field=label)
    pos = pos.copy()
    pos.setflags(write=False)
    return ElementSet(names, pos, (directivity,) * n, tuple(range(1, n + 1)))


def _repeats(values: Sequence[str], what: str, source: str, label: str) -> list[InputError]:
    seen: set[str] = set()
    out = []
    for v in values:
        if v in seen:
            out.append(InputError(f"{what} must be unique; {v!r} appears twice", source=source, field=label))
        seen.add(v)
    return out


#: Up to this many pairs, coincident points are found from every distance; beyond it with a KD-tree.
_BRUTE_FORCE_PAIRS = 1_000_000


def coincident_pairs(a: np.ndarray, b: np.ndarray | None = None, radius_m: float = COINCIDENT_M,
                     limit: int = MAX_COINCIDENT_LISTED) -> list[tuple[int, int]]:
    """Pairs of points closer than `radius_m`: every distance for small sets, else a KD-tree (n log n, linear memory).

    Parameters
    ----------
    a : ndarray, shape (n, 3)
        Positions, m; rows that are not finite are skipped.
    b : ndarray, shape (m, 3), optional
        Second set; None pairs `a` with itself (each pair once, ``i < j``).
    radius_m : float
        Pairs strictly closer than this are returned, m.
    limit : int
        Stop after this many pairs.

    Returns
    -------
    list of (int, int)
        Row indices into `a` and `b` (or `a`), ordered by the first index, then the second.
    """
    same = b is None
    b = a if same else b
    ia = np.flatnonzero(np.all(np.isfinite(a), axis=1))
    ib = np.flatnonzero(np.all(np.isfinite(b), axis=1))
    if not len(ia) or not len(ib):
        return []
    r = float(np.nextafter(radius_m, 0.0))            # strictly closer than radius_m
    if len(ia) * len(ib) <= _BRUTE_FORCE_PAIRS:       # small rigs: every distance (no scipy.spatial import)
        d = np.sqrt(np.sum((a[ia][:, None, :] - b[ib][None, :, :]) ** 2, axis=-1))
        out = []
        for k, m in zip(*np.nonzero(d <= r)):
            i, j = int(ia[k]), int(ib[m])
            if not same or j > i:
                out.append((i, j))
                if len(out) >= limit:
                    break
        return out
    from scipy.spatial import cKDTree

    tree_b = cKDTree(b[ib])
    counts = tree_b.query_ball_point(a[ia], r, return_length=True)
    out: list[tuple[int, int]] = []
    for k in np.flatnonzero(counts > (1 if same else 0)):
        i = int(ia[k])
        for j in sorted(int(ib[m]) for m in tree_b.query_ball_point(a[i], r)):
            if not same or j > i:
                out.append((i, j))
                if len(out) >= limit:
                    return out
    return out


def _coincident(a: ElementSet, b: ElementSet, source: str, label: str, same: bool) -> list[InputError]:
    close = coincident_pairs(a.positions, None if same else b.positions)
    return [InputError(f"{a.names[i]!r} and {b.names[j]!r} are at the same position "
                       f"{[float(x) for x in np.round(a.positions[i], 6)]}", source=source, field=label,
                       fix="move one of them; elements must be at least 1 µm apart") for i, j in close]


@dataclass(frozen=True)
class EntryElements:
    """The elements one ``[[speakers]]`` or ``[[microphones]]`` entry of a rig file resolves to.

    Attributes
    ----------
    kind : str
        ``"point"``, ``"csv"`` or the group's shape (``"line"``, ``"grid"``, ...).
    names : tuple of str
    positions : ndarray, shape (n, 3), metres
    directivities : tuple of Directivity
    channels : tuple of int
        1-based hardware channels.
    """

    kind: str
    names: tuple[str, ...]
    positions: np.ndarray
    directivities: tuple[Directivity, ...]
    channels: tuple[int, ...]
