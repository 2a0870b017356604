"""How low a harmonic distortion product the sweep method can resolve: its own floor and the noise's.

Even a perfectly linear system leaves some energy in the harmonic windows of
an exponential-sweep deconvolution: the band-limited pulse rings before zero
lag, the sweep's spectrum ripples at its band edges, and recorded noise is
spread over every lag.  A harmonic level at or near that energy is not a
measurement of distortion.  Two floors are estimated, each as a level
relative to the linear response's energy, like the harmonic levels
(:func:`arrayplan.signals.deconvolve.harmonic_levels_db`):

* the *method's floor*: the harmonic levels of the clean sweep file itself,
  deconvolved as a recording of a unity wire (no delay, no noise), for the
  sweep and windows actually used.  A delay or a room only moves the pulse
  away from the harmonic windows, so this is an upper bound for causal
  linear systems;
* the *noise floor*: the energy that the noise of the response's tail (the
  RMS of its last part, as :func:`~arrayplan.signals.deconvolve.peak_to_noise_db`
  takes it) would put into a window of each harmonic's length.  A tail that
  still holds the room's decay makes this floor high, never low.

A product is reported only when it stands :data:`DISTORTION_MARGIN_DB` above
the sum of both floors, where the floors' energy is at most a quarter of
what is read, so the level is within 1.25 dB of the distortion alone.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Mapping

import numpy as np

if TYPE_CHECKING:
    from .deconvolve import PreparedInverse

__all__ = ["DISTORTION_MARGIN_DB", "BELOW_METHOD_FLOOR", "BELOW_NOISE_FLOOR", "MEASURED",
           "method_floor_db", "noise_floor_db", "combined_floor_db", "harmonic_status"]

#: A harmonic level must exceed the floors by this much to be reported, dB (common practice, no source).
DISTORTION_MARGIN_DB = 6.0

#: Status texts of a harmonic level, as printed and written.
MEASURED = "measured"
BELOW_METHOD_FLOOR = "below the method's floor"
BELOW_NOISE_FLOOR = "below the noise floor"


def method_floor_db(clean_recording: np.ndarray, inverse: "np.ndarray | PreparedInverse", *, linear_lag: int, ir_length: int,
                    harmonic_offsets: Mapping[int, float], pre_samples: int | None = None,
                    pre_roll_samples: int = 0) -> dict[int, float]:
    """Harmonic levels the method reads for a unity wire: the played file deconvolved as its own recording.

    Parameters
    ----------
    clean_recording : ndarray, shape (n_samples,)
        The single-sweep file as played (silence, sweep, silence), any level.
    inverse : ndarray, shape (n_inverse,), or PreparedInverse
        The sweep's inverse filter.
    linear_lag, ir_length, harmonic_offsets, pre_samples, pre_roll_samples
        As for :func:`arrayplan.signals.deconvolve.deconvolve`, the same as the measurement's.

    Returns
    -------
    dict of int -> float
        Order -> level relative to the linear response's energy, dB (-inf where nothing leaks).
    """
    from .deconvolve import deconvolve, harmonic_levels_db

    clean = np.asarray(clean_recording, dtype=float).reshape(-1, 1)
    d = deconvolve(clean, inverse, linear_lag=linear_lag, ir_length=ir_length, harmonic_offsets=harmonic_offsets,
                   pre_samples=pre_samples, pre_roll_samples=pre_roll_samples)
    return {n: float(v[0]) for n, v in harmonic_levels_db(d.linear, d.harmonics).items()}


def noise_floor_db(linear: np.ndarray, window_lengths: Mapping[int, int],
                   noise_fraction: float = 0.1) -> dict[int, np.ndarray]:
    """Level that the response tail's noise would reach in each harmonic window, per channel, dB.

    Parameters
    ----------
    linear : ndarray, shape (n_samples, n_channels)
        Linear impulse responses.
    window_lengths : mapping of int -> int
        Order -> length of its harmonic window, samples.
    noise_fraction : float
        Fraction of the response, at its end, taken as noise (at least 16 samples).

    Returns
    -------
    dict of int -> ndarray, shape (n_channels,)
        ``10 log10(n_k * noise_rms^2 / sum h^2)``, dB (-inf for a noiseless tail).
    """
    h = np.asarray(linear, dtype=float)
    if h.ndim == 1:
        h = h[:, None]
    n_tail = min(h.shape[0], max(16, int(round(noise_fraction * h.shape[0]))))
    tail = h[-n_tail:]
    noise_power = np.mean(tail * tail, axis=0)
    energy = np.sum(h * h, axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        return {n: 10.0 * np.log10(int(k) * noise_power / energy) for n, k in window_lengths.items()}


def combined_floor_db(method_db: float | None, noise_db: np.ndarray) -> np.ndarray:
    """Energy sum of the method's floor (None: unknown, taken as none) and the noise floor, dB.

    Parameters
    ----------
    method_db : float or None
        The method's own floor (dB re the linear response).
    noise_db : array_like
        Noise floor (dB re the linear response), any shape.

    Returns
    -------
    ndarray
        10 log10 of the summed energies (dB), the shape of `noise_db`.
    """
    total = 10.0 ** (np.asarray(noise_db, dtype=float) / 10.0)
    if method_db is not None:
        total = total + 10.0 ** (method_db / 10.0)
    with np.errstate(divide="ignore"):
        return 10.0 * np.log10(total)


def harmonic_status(level_db: float, method_db: float | None, noise_db: float,
                    margin_db: float = DISTORTION_MARGIN_DB) -> str:
    """:data:`MEASURED` if `level_db` stands `margin_db` above both floors together, else which floor it is below.

    Parameters
    ----------
    level_db : float
        The harmonic level read, dB re the linear response.
    method_db : float or None
        The method's floor for that order (None: unknown).
    noise_db : float
        The noise floor for that order and channel.
    margin_db : float
        Margin above the floors, dB.

    Returns
    -------
    str
        :data:`MEASURED`, :data:`BELOW_METHOD_FLOOR` or :data:`BELOW_NOISE_FLOOR` (the larger floor names it).
    """
    floor = float(combined_floor_db(method_db, np.asarray(noise_db)))
    if math.isfinite(level_db) and level_db > floor + margin_db:
        return MEASURED
    return BELOW_METHOD_FLOOR if method_db is not None and method_db >= noise_db else BELOW_NOISE_FLOOR
