"""Free-field impulse responses of a rig, for simulations with known truth.

The responses are the inverse real FFT of the free-field coupling stack on
an FFT grid, so each is a band-limited (sinc) interpolated fractional delay
of r / c with gain 1 / (4 pi r) and the elements' directivity, exact up to
the Nyquist frequency.  The record must be long enough to hold the longest
delay plus the sinc tails; :func:`free_field_irset` checks that.  Zero lag is
sample 0 unless a pre-roll is asked for (``zero_lag_samples``): then every
response starts that many samples before zero lag, and the sinc tails that
lead each arrival stay in front of it instead of wrapping to the record's end.
"""

from __future__ import annotations

import numpy as np

from .errors import InputError
from .irset import IRSet
from .kernels.freefield import FreeFieldKernel
from .rig import Rig

__all__ = ["free_field_impulse_responses", "free_field_irset"]


def free_field_impulse_responses(rig: Rig, sample_rate_hz: float, n_samples: int,
                                 chunk_size: int = 256, zero_lag_samples: int = 0) -> np.ndarray:
    """Impulse responses of the free-field kernel.

    Parameters
    ----------
    rig : Rig
    sample_rate_hz : float
    n_samples : int
        Length of each response; must exceed the pre-roll plus the longest
        delay in samples by at least 64 samples so the interpolation tails
        do not wrap.
    chunk_size : int
        FFT bins evaluated at once.
    zero_lag_samples : int
        Index of zero lag (samples kept before it), default 0.

    Returns
    -------
    ndarray, shape (n_samples, n_mic, n_spk)
        Pressure per unit source strength (1/m) against time; the arrival
        over distance r sits at sample ``zero_lag_samples + r fs / c``.

    Notes
    -----
    The Nyquist bin is set to zero, so each response is band-limited below
    fs / 2; DC takes the limit of the kernel at f -> 0 (1 / (4 pi r) times
    the directivity at low frequency).
    """
    n_samples = int(n_samples)
    n0 = int(zero_lag_samples)
    if n0 < 0:
        raise InputError(f"zero lag must be sample 0 or later, got {n0}", field="zero_lag_samples")
    kernel = FreeFieldKernel(rig)
    r_max = float(np.max(kernel.distances_m))
    delay = r_max / rig.medium.speed_of_sound * sample_rate_hz
    if n_samples < n0 + delay + 64:
        raise InputError(f"{n_samples} samples cannot hold a pre-roll of {n0} samples and the rig's longest "
                         f"delay of {delay:.0f} samples", field="n_samples",
                         fix=f"use at least {int(np.ceil(n0 + delay + 64))} samples")
    hz = np.fft.rfftfreq(n_samples, 1.0 / sample_rate_hz)
    spectrum = np.empty((hz.size, len(rig.mics), len(rig.speakers)), dtype=complex)
    # DC: evaluate just above 0 Hz (the limit is real); Nyquist of an even record is zeroed.
    eval_hz = hz.copy()
    eval_hz[0] = 1e-6
    for start in range(0, hz.size, chunk_size):
        spectrum[start:start + chunk_size] = kernel.evaluate(eval_hz[start:start + chunk_size])
    spectrum[0] = spectrum[0].real
    if n_samples % 2 == 0:
        spectrum[-1] = 0.0
    if n0:
        spectrum *= np.exp(-2j * np.pi * hz * n0 / sample_rate_hz)[:, None, None]
    return np.fft.irfft(spectrum, n=n_samples, axis=0)


def free_field_irset(rig: Rig, sample_rate_hz: float, n_samples: int, zero_lag_samples: int = 0) -> IRSet:
    """:func:`free_field_impulse_responses` wrapped as an :class:`~arrayplan.irset.IRSet`.

    `zero_lag_samples` (default 0) keeps that many samples before zero lag
    and is recorded in the set.
    """
    data = free_field_impulse_responses(rig, sample_rate_hz, n_samples, zero_lag_samples=zero_lag_samples)
    return IRSet(data=data, sample_rate_hz=float(sample_rate_hz), speaker_names=list(rig.speakers.names),
                 mic_names=list(rig.mics.names), speaker_positions=np.asarray(rig.speakers.positions),
                 mic_positions=np.asarray(rig.mics.positions), units="full_scale",
                 extra={"simulated": "free field", "rig_sha256": rig.sha256}, zero_lag_samples=zero_lag_samples)
