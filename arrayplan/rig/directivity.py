"""Directivity of speakers and microphones.

Each pattern gives the complex gain D(f, theta) towards a direction at angle
theta from the element's axis, normalised to 1 on axis:

* ``omni``: D = 1.
* ``piston``: a rigid circular piston of radius a in an infinite baffle,
  D = 2 J1(k a sin theta) / (k a sin theta) in front of the baffle and 0
  behind it (theta > 90 degrees), after Kinsler et al., *Fundamentals of
  Acoustics*.
* first-order patterns ``D = alpha + (1 - alpha) cos theta``: ``cardioid``
  (alpha = 0.5), ``supercardioid`` (0.37), ``hypercardioid`` (0.25),
  ``figure8`` (0), or ``first_order`` with an explicit ``alpha``.

Notes
-----
Level convention.  Every pattern is 1 on axis, so an element of unit
strength gives, on its axis in the far field, the pressure of an omni
(monopole) element of unit strength: ``exp(-jkr) / (4 pi r)``.  For a
piston this is a choice, not the physics of a given volume velocity: a
rigid piston in an infinite baffle radiates into a half space, and for the
same volume velocity Q its far-field on-axis pressure is twice that of a
monopole in free space (``j rho c k Q / (2 pi r)`` against
``j rho c k Q / (4 pi r)``, +6.02 dB; Kinsler et al., *Fundamentals of
Acoustics*, 4th ed., 2000, sections 7.1 and 7.4).  So a piston's strength
in arrayplan is that of the monopole giving the same on-axis far-field
pressure, a monopole moving twice the piston's volume velocity.  In a rig that mixes pistons and
omnis, equal drive means equal on-axis far-field level, not equal volume
velocity: a piston and an omni moving the same volume velocity differ by
6 dB on axis, which the coupling does not include (add it to the piston's
drive if that is what the hardware does).  A piston used as a microphone
likewise has unit on-axis sensitivity, without the pressure doubling at
its baffle.  The pattern is a far-field one: within the Rayleigh distance
``pi a^2 / lambda`` the on-axis pressure of a real piston departs from it
by several dB, and ``check-rig`` warns about microphones there.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError

__all__ = ["Directivity", "OMNI", "FIRST_ORDER_ALPHA", "piston_factor"]

#: alpha of the named first-order patterns, D = alpha + (1 - alpha) cos(theta)
FIRST_ORDER_ALPHA = {"omni": 1.0, "cardioid": 0.5, "supercardioid": 0.37,
                     "hypercardioid": 0.25, "figure8": 0.0}


def piston_factor(v: np.ndarray) -> np.ndarray:
    """2 J1(v) / v, with the limit 1 at v = 0.

    Parameters
    ----------
    v : array_like
        Argument k a sin(theta) (dimensionless).

    Returns
    -------
    ndarray
        The piston's far-field pressure factor, same shape as `v`.
    """
    v = np.asarray(v, dtype=float)
    out = np.ones_like(v)
    nz = np.abs(v) > 1e-8
    from scipy import special   # here, not at import: scipy.special takes a third of a second to load

    out[nz] = 2.0 * special.j1(v[nz]) / v[nz]
    return out


@dataclass(frozen=True)
class Directivity:
    """A directivity pattern with its axis.

    Parameters
    ----------
    kind : str
        ``"omni"``, ``"piston"``, a first-order name (see module docstring)
        or ``"first_order"``.
    axis : tuple of 3 float
        Unit vector of the main axis (ignored for omni).
    radius : float
        Piston radius in metres (piston only).
    alpha : float
        Pressure share of a first-order pattern.
    """

    kind: str = "omni"
    axis: tuple[float, float, float] = (0.0, 0.0, 1.0)
    radius: float = 0.0
    alpha: float = 1.0

    @property
    def is_omni(self) -> bool:
        """Whether the gain is 1 in every direction.

        Returns
        -------
        bool
            True for ``"omni"`` and for a non-piston pattern with alpha = 1.
        """
        return self.kind == "omni" or (self.kind != "piston" and self.alpha == 1.0)

    @property
    def depends_on_frequency(self) -> bool:
        """Whether :meth:`gain` needs the wavenumber.

        Returns
        -------
        bool
            True for a piston, the only frequency-dependent pattern.
        """
        return self.kind == "piston"

    def gain(self, cos_theta: np.ndarray, wavenumber: np.ndarray | float | None = None) -> np.ndarray:
        """Directivity gain for directions with ``cos(theta) = cos_theta``.

        Parameters
        ----------
        cos_theta : ndarray, shape (...)
            Cosine of the angle from the axis.
        wavenumber : ndarray, shape (n_freq,), optional
            k in rad/m; needed for a piston.  The result then has shape
            (n_freq, ...).

        Returns
        -------
        ndarray
            Real gains; shape (...) or (n_freq, ...) for a piston.
        """
        c = np.clip(np.asarray(cos_theta, dtype=float), -1.0, 1.0)
        if self.kind == "piston":
            if wavenumber is None:
                raise ValueError("a piston's directivity needs the wavenumber")
            k = np.asarray(wavenumber, dtype=float).reshape((-1,) + (1,) * c.ndim)
            sin_t = np.sqrt(np.maximum(0.0, 1.0 - c ** 2))
            d = piston_factor(k * self.radius * sin_t)
            return np.where(c >= 0.0, d, 0.0)
        if self.is_omni:
            return np.ones_like(c)
        return self.alpha + (1.0 - self.alpha) * c


OMNI = Directivity()


def parse_directivity(spec: object, *, source: str, field: str,
                      default_axis: tuple[float, float, float] | None = None) -> Directivity:
    """A :class:`Directivity` from a rig-file value (a name or a table).

    A name alone (``"cardioid"``) or a table such as
    ``{ type = "piston", radius = 0.05, axis = [0, 1, 0] }``.

    Parameters
    ----------
    spec : str, dict or None
        The value read from the rig file; None gives omni.
    source : str
        File the value came from, for error messages.
    field : str
        Dotted name of the value in that file, for error messages.
    default_axis : tuple of 3 float, optional
        Axis used when the table has none (e.g. the group's outward
        direction); normalised here.

    Returns
    -------
    Directivity
        The pattern, with a unit axis; :data:`OMNI` for ``"omni"``.

    Raises
    ------
    InputError
        Unknown type or key, a missing or zero axis, a piston radius that is
        not a positive number of metres, or alpha outside 0..1.
    """
    if spec is None:
        return OMNI
    if isinstance(spec, str):
        spec = {"type": spec}
    if not isinstance(spec, dict):
        raise InputError("directivity must be a name or a table", source=source, field=field)
    kind = spec.get("type", "omni")
    known = set(FIRST_ORDER_ALPHA) | {"piston", "first_order"}
    if kind not in known:
        raise InputError(f"unknown directivity type {kind!r}", source=source, field=f"{field}.type",
                         fix=f"use one of {', '.join(sorted(known))}")
    unknown = set(spec) - {"type", "axis", "radius", "alpha"}
    if unknown:
        raise InputError(f"unknown key(s) {', '.join(sorted(unknown))}", source=source, field=field,
                         fix="directivity takes type, axis, radius (piston) and alpha (first_order)")
    if kind == "omni":
        return OMNI
    axis_val = spec.get("axis", default_axis)
    if axis_val is None:
        raise InputError("a directional element needs an axis", source=source, field=f"{field}.axis",
                         fix="add axis = [x, y, z] pointing where the element faces")
    axis = _unit_vector(axis_val, source=source, field=f"{field}.axis")
    if kind == "piston":
        radius = spec.get("radius")
        if not isinstance(radius, (int, float)) or isinstance(radius, bool) or not np.isfinite(radius) \
                or radius <= 0:
            raise InputError(f"piston radius must be a positive number of metres, got {radius!r}",
                             source=source, field=f"{field}.radius")
        return Directivity("piston", axis, radius=float(radius))
    if kind == "first_order":
        alpha = spec.get("alpha")
        if not isinstance(alpha, (int, float)) or isinstance(alpha, bool) or not 0.0 <= alpha <= 1.0:
            raise InputError(f"alpha must be a number from 0 to 1, got {alpha!r}", source=source,
                             field=f"{field}.alpha")
        return Directivity("first_order", axis, alpha=float(alpha))
    return Directivity(kind, axis, alpha=FIRST_ORDER_ALPHA[kind])


def _unit_vector(value: object, *, source: str, field: str) -> tuple[float, float, float]:
    arr = np.asarray(value, dtype=float) if _is_number_list(value, 3) else None
    if arr is None or not np.all(np.isfinite(arr)):
        raise InputError(f"expected 3 finite numbers, got {value!r}", source=source, field=field)
    norm = float(np.linalg.norm(arr))
    if norm == 0.0:
        raise InputError("axis has zero length", source=source, field=field)
    return tuple(float(x) for x in arr / norm)  # type: ignore[return-value]


def _is_number_list(value: object, n: int) -> bool:
    return (isinstance(value, (list, tuple)) and len(value) == n
            and all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value))
