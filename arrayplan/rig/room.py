"""A rectangular room: its size, wall absorption and how many reflections to keep.

The room has one corner at the origin and its walls on the coordinate
planes: ``0 <= x <= Lx``, ``0 <= y <= Ly``, ``0 <= z <= Lz``.  The six
surfaces, in the order used throughout (:data:`SURFACES`), are ``x_min``,
``x_max``, ``y_min``, ``y_max``, ``floor`` (z = 0) and ``ceiling`` (z = Lz).

Absorption alpha is the energy share a surface takes from a reflection:
0 is rigid, 1 is an open side.  It is given per surface as one number or
as values for the seven octave bands 125 Hz ... 8 kHz (:data:`BAND_CENTRES_HZ`),
interpolated smoothly (monotone cubic, PCHIP) in log frequency between the
band centres and held flat outside them.  The pressure reflection
coefficient is beta = sqrt(1 - alpha), real and independent of the angle of
incidence.

Rig files give the room as a ``[room]`` table::

    [room]
    size_m = [5.0, 4.0, 2.7]
    absorption = 0.2                 # or a table per surface, below
    reflection_order = 8             # optional (default 8)
    max_delay_ms = 80                # optional: drop paths longer than this
    # allow_large_order = true       # optional: lift the image-count limit

    [room.absorption]                # per surface: a number or 7 band values
    x_min = 0.1
    x_max = 0.1
    y_min = [0.1, 0.15, 0.2, 0.3, 0.3, 0.3, 0.3]
    y_max = 0.1
    floor = 0.05
    ceiling = 0.6
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from ..errors import InputError

if TYPE_CHECKING:  # pragma: no cover
    from . import ElementSet
    from ..formats.tomlfields import FieldReader

__all__ = ["Room", "SURFACES", "BAND_CENTRES_HZ", "ROOM_KEYS", "IMAGE_LIMIT", "DEFAULT_ORDER", "WALL_CLEARANCE_M",
           "image_count", "parse_room", "sabine_t60_s", "eyring_t60_s", "schroeder_frequency_hz"]

#: The six surfaces, in the order of :attr:`Room.absorption`'s first axis.
SURFACES = ("x_min", "x_max", "y_min", "y_max", "floor", "ceiling")
#: Octave band centres of band absorption values, Hz.
BAND_CENTRES_HZ = np.array([125.0, 250.0, 500.0, 1000.0, 2000.0, 4000.0, 8000.0])
#: Keys of the ``[room]`` table.
ROOM_KEYS = {"size_m", "absorption", "reflection_order", "max_delay_ms", "allow_large_order"}
#: Reflection order used when a room table gives none.
DEFAULT_ORDER = 8
#: Most image sources a room may have without ``allow_large_order = true``.
IMAGE_LIMIT = 200_000
#: Elements closer than this to a wall (metres) are an error: the image source would sit on top of them.
WALL_CLEARANCE_M = 0.005


def image_count(order: int) -> int:
    """Number of image sources (the source itself included) up to reflection `order`.

    The lattice points with ``|i| + |j| + |k| <= order``: (2N+1)(2N^2+2N+3)/3.

    Parameters
    ----------
    order : int
        Highest reflection order N (>= 0).

    Returns
    -------
    int
        Image sources, 1 at order 0, 7 at order 1, 25 at order 2.
    """
    n = int(order)
    return (2 * n + 1) * (2 * n * n + 2 * n + 3) // 3


@dataclass(frozen=True)
class Room:
    """A rectangular room with one corner at the origin.

    Attributes
    ----------
    size_m : tuple of 3 float
        Lx, Ly, Lz in metres.
    absorption : ndarray, shape (6, 7)
        Energy absorption per surface (:data:`SURFACES`) and octave band
        (:data:`BAND_CENTRES_HZ`), each in [0, 1].
    reflection_order : int
        Highest number of reflections an image path may have (>= 0).
    max_delay_ms : float or None
        Paths longer than this many milliseconds of travel are dropped.
    """

    size_m: tuple[float, float, float]
    absorption: np.ndarray
    reflection_order: int = DEFAULT_ORDER
    max_delay_ms: float | None = None

    @classmethod
    def uniform(cls, size_m: tuple[float, float, float], alpha: float, reflection_order: int = DEFAULT_ORDER,
                max_delay_ms: float | None = None) -> "Room":
        """A room whose six surfaces all absorb `alpha` (0..1) at every frequency.

        Parameters
        ----------
        size_m : (float, float, float)
            Lx, Ly, Lz (m).
        alpha : float
            Energy absorption of every surface, 0 (rigid) .. 1 (open).
        reflection_order : int
            Highest reflection order kept.
        max_delay_ms : float, optional
            Drop paths longer than this (ms).

        Returns
        -------
        Room
            The room, with `alpha` in every surface and octave band.
        """
        return cls(tuple(float(s) for s in size_m), np.full((6, BAND_CENTRES_HZ.size), float(alpha)),
                   int(reflection_order), max_delay_ms)

    @property
    def volume_m3(self) -> float:
        """Volume of the room.

        Returns
        -------
        float
            Lx Ly Lz (m^3).
        """
        lx, ly, lz = self.size_m
        return lx * ly * lz

    @property
    def surface_areas_m2(self) -> np.ndarray:
        """Area of each surface in :data:`SURFACES` order.

        Returns
        -------
        ndarray, shape (6,)
            Areas (m^2).
        """
        lx, ly, lz = self.size_m
        return np.array([ly * lz, ly * lz, lx * lz, lx * lz, lx * ly, lx * ly])

    @property
    def frequency_independent(self) -> bool:
        """Whether every surface has the same absorption in every band.

        Returns
        -------
        bool
            True when each surface's seven band values are equal (surfaces may differ).
        """
        return bool(np.all(self.absorption == self.absorption[:, :1]))

    @property
    def n_images(self) -> int:
        """Number of image sources up to the room's reflection order.

        Returns
        -------
        int
            :func:`image_count` of :attr:`reflection_order` (before any
            `max_delay_ms` cut).
        """
        return image_count(self.reflection_order)

    def absorption_at(self, hz: np.ndarray) -> np.ndarray:
        """Absorption per surface at `hz`.

        Monotone cubic interpolation in log frequency between band centres,
        flat below 125 Hz and above 8 kHz.

        Parameters
        ----------
        hz : array_like, shape (n,)
            Frequencies (Hz); a scalar counts as one.

        Returns
        -------
        ndarray, shape (n, 6)
            Energy absorption per frequency and surface (:data:`SURFACES`
            order), in [0, 1].
        """
        hz = np.atleast_1d(np.asarray(hz, dtype=float))
        if self.frequency_independent:
            return np.broadcast_to(self.absorption[:, 0], (hz.size, 6)).copy()
        logf = np.log(np.clip(hz, BAND_CENTRES_HZ[0], BAND_CENTRES_HZ[-1]))
        from scipy.interpolate import PchipInterpolator   # here: slow to import, rarely needed

        out = PchipInterpolator(np.log(BAND_CENTRES_HZ), self.absorption, axis=1)(logf).T
        return np.clip(out, 0.0, 1.0)

    def reflection_coefficients(self, hz: np.ndarray) -> np.ndarray:
        """Pressure reflection coefficient beta = sqrt(1 - alpha) per surface.

        Parameters
        ----------
        hz : array_like, shape (n,)
            Frequencies (Hz).

        Returns
        -------
        ndarray, shape (n, 6)
            Real reflection coefficients in [0, 1], :data:`SURFACES` order.
        """
        return np.sqrt(1.0 - self.absorption_at(hz))

    def mean_absorption(self, hz: float = 1000.0) -> float:
        """Area-weighted mean absorption at `hz`.

        Parameters
        ----------
        hz : float
            Frequency (Hz).

        Returns
        -------
        float
            sum(alpha_i S_i) / sum(S_i), in [0, 1].
        """
        a = self.absorption_at(np.array([hz]))[0]
        s = self.surface_areas_m2
        return float(np.sum(a * s) / np.sum(s))

    def settings(self) -> dict:
        """The room as plain data for plan sidecars (JSON-ready).

        Returns
        -------
        dict
            ``size_m`` (m), ``surfaces``, ``band_centres_hz`` (Hz),
            ``absorption`` (6 x 7 nested lists), ``reflection_order``,
            ``images`` and ``max_delay_ms`` (ms or None).
        """
        return {"size_m": list(self.size_m), "surfaces": list(SURFACES),
                "band_centres_hz": BAND_CENTRES_HZ.tolist(), "absorption": self.absorption.tolist(),
                "reflection_order": self.reflection_order, "images": self.n_images,
                "max_delay_ms": self.max_delay_ms}

    def element_problems(self, es: "ElementSet", label: str, source: str) -> list[InputError]:
        """Elements of `es` outside the room or within :data:`WALL_CLEARANCE_M` of a wall.

        Parameters
        ----------
        es : ElementSet
            Speakers or microphones, positions in m.
        label : str
            ``"speakers"`` or ``"microphones"``, for the field name.
        source : str
            The rig file, named in messages.

        Returns
        -------
        list of InputError
            One per element too close to a wall or outside; empty when all
            are well inside.
        """
        pos = np.asarray(es.positions, dtype=float)
        size = np.asarray(self.size_m)
        clearance = np.minimum(pos, size - pos).min(axis=1)
        out = []
        for i in np.flatnonzero(~(clearance >= WALL_CLEARANCE_M)):
            where = "outside the room" if clearance[i] < 0 else f"{clearance[i] * 1000:.1f} mm from a wall"
            out.append(InputError(f"{es.names[i]!r} at {[round(float(x), 4) for x in pos[i]]} m is {where} "
                                  f"(room {list(self.size_m)} m, corner at the origin)", source=source,
                                  field=f"{label}[{es.names[i]}].position",
                                  fix=f"keep every element inside the room and at least "
                                      f"{WALL_CLEARANCE_M * 1000:g} mm from its walls"))
        return out


def sabine_t60_s(room: Room, hz: float = 1000.0, speed_of_sound: float = 343.0) -> float:
    """Sabine reverberation time 24 ln(10) V / (c S alpha_mean), s (0.161 V / (S alpha) at c = 343 m/s).

    Parameters
    ----------
    room : Room
        The room.
    hz : float
        Frequency at which the absorption is taken (Hz).
    speed_of_sound : float
        m/s.

    Returns
    -------
    float
        T60 (s); inf for a rigid room.
    """
    s = float(np.sum(room.surface_areas_m2))
    a = room.mean_absorption(hz)
    return math.inf if a <= 0 else 24.0 * math.log(10.0) * room.volume_m3 / (speed_of_sound * s * a)


def eyring_t60_s(room: Room, hz: float = 1000.0, speed_of_sound: float = 343.0) -> float:
    """Eyring reverberation time 24 ln(10) V / (-c S ln(1 - alpha_mean)), s.

    Parameters
    ----------
    room : Room
        The room.
    hz : float
        Frequency at which the absorption is taken (Hz).
    speed_of_sound : float
        m/s.

    Returns
    -------
    float
        T60 (s); inf for a rigid room, 0 when the mean absorption is 1.
    """
    s = float(np.sum(room.surface_areas_m2))
    a = room.mean_absorption(hz)
    if a <= 0:
        return math.inf
    if a >= 1:
        return 0.0
    return 24.0 * math.log(10.0) * room.volume_m3 / (-speed_of_sound * s * math.log(1.0 - a))


def schroeder_frequency_hz(t60_s: float, volume_m3: float) -> float:
    """Schroeder frequency 2000 sqrt(T60 / V), Hz (T60 in s, V in m^3).

    Parameters
    ----------
    t60_s : float
        Reverberation time (s).
    volume_m3 : float
        Room volume (m^3).

    Returns
    -------
    float
        Frequency above which the room's modes overlap (Hz).
    """
    return 2000.0 * math.sqrt(t60_s / volume_m3)


def _absorption_value(value: Any, field: str, r: "FieldReader") -> np.ndarray:
    nb = BAND_CENTRES_HZ.size
    if isinstance(value, bool):
        raise r.fail(field, f"expected a number or {nb} band values, got {value!r}")
    if isinstance(value, (int, float)):
        vals = [value]
    elif isinstance(value, list):
        if len(value) != nb:
            raise r.fail(field, f"expected {nb} octave-band values (125 Hz ... 8 kHz), got {len(value)}",
                         fix="give one number, or one value per octave band 125, 250, 500, 1000, 2000, 4000, "
                             "8000 Hz")
        vals = value
    else:
        raise r.fail(field, f"expected a number or {nb} band values, got {value!r}")
    if not all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) for v in vals):
        raise r.fail(field, f"expected finite numbers, got {value!r}")
    arr = np.asarray(vals, dtype=float)
    if np.any(arr < 0) or np.any(arr > 1):
        raise r.fail(field, f"absorption must lie in [0, 1] (0 rigid, 1 open), got {value!r}")
    return np.broadcast_to(arr, (nb,)).copy()


def parse_room(table: Any, r: "FieldReader") -> Room | None:
    """The :class:`Room` of a rig file's ``[room]`` table (None when the table is absent).

    Parameters
    ----------
    table : dict or None
        The parsed TOML table.
    r : FieldReader
        Typed access that names the rig file in its errors.

    Returns
    -------
    Room or None
        The room; None when `table` is None.

    Raises
    ------
    InputError
        Naming the file and the ``room.*`` field at the first problem.
    """
    if table is None:
        return None
    if not isinstance(table, dict):
        raise r.fail("room", "must be a table [room]")
    r.keys(table, ROOM_KEYS, "room")
    size = r.vector(table, "size_m", "room")
    if any(s <= 0 for s in size):
        raise r.fail("room.size_m", f"every side must be longer than 0 m, got {list(size)}")
    if "absorption" not in table:
        raise r.fail("room.absorption", "missing", fix="add absorption = 0.2 (or a [room.absorption] table)")
    spec = table["absorption"]
    if isinstance(spec, dict):
        r.keys(spec, set(SURFACES), "room.absorption")
        missing = [s for s in SURFACES if s not in spec]
        if missing:
            raise r.fail(f"room.absorption.{missing[0]}", "missing",
                         fix=f"give all six surfaces: {', '.join(SURFACES)} (1 = open side)")
        absorption = np.stack([_absorption_value(spec[s], f"room.absorption.{s}", r) for s in SURFACES])
    else:
        absorption = np.tile(_absorption_value(spec, "room.absorption", r), (6, 1))
    order = table.get("reflection_order", DEFAULT_ORDER)
    if isinstance(order, bool) or not isinstance(order, int) or order < 0:
        order = r.reject("room.reflection_order", f"expected a whole number >= 0, got {order!r}", DEFAULT_ORDER)
    allow = r.boolean(table, "allow_large_order", "room", default=False)
    if image_count(order) > IMAGE_LIMIT and not allow:
        order = r.reject("room.reflection_order", f"order {order} makes {image_count(order):,} image sources, "
                                                  f"more than the limit of {IMAGE_LIMIT:,}", DEFAULT_ORDER,
                         fix="lower the order, set max_delay_ms, or add allow_large_order = true")
    max_delay = r.number(table, "max_delay_ms", "room", default=None, positive=True)
    return Room(size, absorption, order, max_delay)
