"""Impulse responses of a model kernel (free field or room), for simulations with known truth.

The responses are the inverse real FFT of the kernel's coupling stack on an
FFT grid, so each arrival is a band-limited (sinc) interpolated fractional
delay of r / c with its gain (1 / (4 pi r), directivity, and for a room the
reflection coefficients of its path), exact up to the Nyquist frequency.
The record must be long enough to hold the longest path's delay plus the
sinc tails (:func:`required_samples`); the functions here check that.  A
room's responses end with its longest image path, which the reflection
order (or the room's max_delay_ms) sets.  Zero lag is sample 0 unless a
pre-roll is asked for (``zero_lag_samples``): then every response starts
that many samples before zero lag, and the sinc tails that lead each
arrival stay in front of it instead of wrapping to the record's end.
"""

from __future__ import annotations

import numpy as np

from .errors import InputError
from .irset import IRSet
from .kernels import FreeFieldKernel, rig_kernel
from .rig import Rig

__all__ = ["free_field_impulse_responses", "free_field_irset", "kernel_impulse_responses", "required_samples",
           "rig_irset"]

#: Samples kept after the longest arrival for its interpolation tail.
_TAIL_SAMPLES = 64


def _longest_path_m(kernel) -> float:
    if hasattr(kernel, "longest_path_m"):
        return float(kernel.longest_path_m)
    return float(np.max(kernel.distances_m))


def required_samples(kernel, sample_rate_hz: float, zero_lag_samples: int = 0) -> int:
    """Fewest samples that hold a pre-roll, the kernel's longest path and its interpolation tail.

    Parameters
    ----------
    kernel : FreeFieldKernel or RoomKernel
    sample_rate_hz : float
    zero_lag_samples : int

    Returns
    -------
    int
    """
    delay = _longest_path_m(kernel) / kernel.medium.speed_of_sound * sample_rate_hz
    return int(np.ceil(int(zero_lag_samples) + delay + _TAIL_SAMPLES))


def kernel_impulse_responses(kernel, sample_rate_hz: float, n_samples: int, chunk_size: int = 256,
                             zero_lag_samples: int = 0) -> np.ndarray:
    """Impulse responses of a model kernel by inverse FFT of its coupling stack.

    Parameters
    ----------
    kernel : FreeFieldKernel or RoomKernel
        A kernel with a ``medium`` and a longest path (``distances_m`` or
        ``longest_path_m``).
    sample_rate_hz : float
    n_samples : int
        Length of each response; at least :func:`required_samples`.
    chunk_size : int
        FFT bins evaluated at once.
    zero_lag_samples : int
        Index of zero lag (samples kept before it), default 0.

    Returns
    -------
    ndarray, shape (n_samples, n_mic, n_spk)
        Pressure per unit source strength (1/m) against time; an arrival
        over a path of length r sits at sample ``zero_lag_samples + r fs / c``.

    Notes
    -----
    The Nyquist bin is set to zero, so each response is band-limited below
    fs / 2; DC takes the limit of the kernel at f -> 0.
    """
    n_samples = int(n_samples)
    n0 = int(zero_lag_samples)
    if n0 < 0:
        raise InputError(f"zero lag must be sample 0 or later, got {n0}", field="zero_lag_samples")
    need = required_samples(kernel, sample_rate_hz, n0)
    if n_samples < need:
        raise InputError(f"{n_samples} samples cannot hold a pre-roll of {n0} samples and the longest path's "
                         f"delay of {need - n0 - _TAIL_SAMPLES} samples", field="n_samples",
                         fix=f"use at least {need} samples")
    hz = np.fft.rfftfreq(n_samples, 1.0 / sample_rate_hz)
    spectrum = np.empty((hz.size, len(kernel.mic_names), len(kernel.speaker_names)), dtype=complex)
    # DC: evaluate just above 0 Hz (the limit is real); the other bins in evenly spaced chunks
    spectrum[0] = kernel.evaluate(np.array([1e-6]))[0].real
    for start in range(1, hz.size, chunk_size):
        spectrum[start:start + chunk_size] = kernel.evaluate(hz[start:start + chunk_size])
    if n_samples % 2 == 0:
        spectrum[-1] = 0.0
    if n0:
        spectrum *= np.exp(-2j * np.pi * hz * n0 / sample_rate_hz)[:, None, None]
    return np.fft.irfft(spectrum, n=n_samples, axis=0)


def free_field_impulse_responses(rig: Rig, sample_rate_hz: float, n_samples: int,
                                 chunk_size: int = 256, zero_lag_samples: int = 0) -> np.ndarray:
    """Impulse responses of the rig's free-field kernel (whatever its room).

    Parameters
    ----------
    rig : Rig
    sample_rate_hz, n_samples, chunk_size, zero_lag_samples
        As for :func:`kernel_impulse_responses`.

    Returns
    -------
    ndarray, shape (n_samples, n_mic, n_spk)
        Pressure per unit source strength (1/m) against time; the arrival
        over distance r sits at sample ``zero_lag_samples + r fs / c``.
    """
    return kernel_impulse_responses(FreeFieldKernel(rig), sample_rate_hz, n_samples, chunk_size,
                                    zero_lag_samples)


def free_field_irset(rig: Rig, sample_rate_hz: float, n_samples: int, zero_lag_samples: int = 0) -> IRSet:
    """:func:`free_field_impulse_responses` wrapped as an :class:`~arrayplan.irset.IRSet`.

    `zero_lag_samples` (default 0) keeps that many samples before zero lag
    and is recorded in the set.
    """
    return _irset(rig, FreeFieldKernel(rig), sample_rate_hz, n_samples, zero_lag_samples)


def rig_irset(rig: Rig, sample_rate_hz: float, n_samples: int | None = None, zero_lag_samples: int = 0) -> IRSet:
    """The impulse responses of the rig's model kernel (its room when it has one) as an IR set.

    Parameters
    ----------
    rig : Rig
    sample_rate_hz : float
    n_samples : int, optional
        Length of the responses; grown to :func:`required_samples` when
        shorter (a room's responses last as long as its longest image path).
    zero_lag_samples : int

    Returns
    -------
    IRSet
        ``extra["simulated"]`` names the kernel.
    """
    kernel = rig_kernel(rig)
    need = required_samples(kernel, sample_rate_hz, zero_lag_samples)
    return _irset(rig, kernel, sample_rate_hz, max(need, int(n_samples or 0)), zero_lag_samples)


def _irset(rig: Rig, kernel, sample_rate_hz: float, n_samples: int, zero_lag_samples: int) -> IRSet:
    data = kernel_impulse_responses(kernel, sample_rate_hz, n_samples, zero_lag_samples=zero_lag_samples)
    name = getattr(kernel, "name", "free field")
    return IRSet(data=data, sample_rate_hz=float(sample_rate_hz), speaker_names=list(rig.speakers.names),
                 mic_names=list(rig.mics.names), speaker_positions=np.asarray(rig.speakers.positions),
                 mic_positions=np.asarray(rig.mics.positions), units="full_scale",
                 extra={"simulated": name, "rig_sha256": rig.sha256}, zero_lag_samples=zero_lag_samples)
