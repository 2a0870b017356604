"""Band-limited white and pink noise.

The noise is made in the frequency domain: independent complex Gaussian
coefficients, shaped (flat for white, power falling as 1/f, i.e. 3.01 dB per
octave, for pink) inside the band and zero outside it, then transformed
back.  The result is Gaussian noise whose spectrum follows the shape
exactly on average and has nothing outside the band.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError

__all__ = ["NOISE_COLOURS", "MIN_PERIODS_OF_LOWEST", "band_limited_noise", "check_noise_band"]

NOISE_COLOURS = ("white", "pink")

#: Noise must last at least this many periods of its lowest frequency, so the
#: lowest band holds enough frequency bins (common practice, no source).
MIN_PERIODS_OF_LOWEST = 10.0


def check_noise_band(duration_s: float, sample_rate_hz: float, f_lo_hz: float, f_hi_hz: float,
                     *, source: str | None = None) -> None:
    """Refuse band limits outside (0, fs/2] and durations too short for the band.

    Parameters
    ----------
    duration_s : float
        Noise duration (s); at least :data:`MIN_PERIODS_OF_LOWEST` periods of
        `f_lo_hz`.
    sample_rate_hz : float
        Sample rate (Hz).
    f_lo_hz, f_hi_hz : float
        Band limits (Hz), 0 < low < high <= fs / 2.
    source : str, optional
        Named in messages.

    Raises
    ------
    InputError
        Naming the bad limit or the duration.
    """
    nyq = sample_rate_hz / 2.0
    for name, f in (("f1_hz", f_lo_hz), ("f2_hz", f_hi_hz)):
        if not (math.isfinite(f) and 0 < f <= nyq):
            raise InputError(f"band limit {f:g} Hz is outside (0, {nyq:g}] Hz (half the sample rate)",
                             source=source, field=name, fix="choose limits between 0 Hz and fs/2")
    if not f_lo_hz < f_hi_hz:
        raise InputError(f"band is empty: lower limit {f_lo_hz:g} Hz is not below the upper limit {f_hi_hz:g} Hz",
                         source=source, field="f1_hz")
    if not (math.isfinite(duration_s) and duration_s > 0):
        raise InputError(f"duration must be positive, got {duration_s!r} s", source=source, field="duration_s")
    need = MIN_PERIODS_OF_LOWEST / f_lo_hz
    if duration_s < need:
        raise InputError(f"{duration_s:g} s of noise is too short for a band starting at {f_lo_hz:g} Hz",
                         source=source, field="duration_s", fix=f"use at least {need:.3g} s or raise `f1_hz`")


def band_limited_noise(colour: str, duration_s: float, sample_rate_hz: float, f_lo_hz: float,
                       f_hi_hz: float, *, seed: int | None = None, source: str | None = None) -> np.ndarray:
    """Gaussian noise limited to [f_lo_hz, f_hi_hz], white or pink, peak normalised to 1.

    Parameters
    ----------
    colour : {"white", "pink"}
        White: flat power spectral density.  Pink: density proportional to
        1/f, falling 3.01 dB per octave.
    duration_s : float
        Length, s.
    sample_rate_hz : float
        Sample rate, Hz.
    f_lo_hz, f_hi_hz : float
        Band limits, Hz, 0 < f_lo < f_hi <= fs/2.
    seed : int or None
        Seed of numpy's default generator, for a reproducible file.
    source : str, optional
        Named in messages.

    Returns
    -------
    ndarray, shape (round(duration_s * sample_rate_hz),)
        Peak magnitude 1 (set the level afterwards); no fades yet.
    """
    if colour not in NOISE_COLOURS:
        raise InputError(f"noise colour must be one of {', '.join(NOISE_COLOURS)}, got {colour!r}",
                         source=source, field="colour")
    check_noise_band(duration_s, sample_rate_hz, f_lo_hz, f_hi_hz, source=source)
    n = int(round(duration_s * sample_rate_hz))
    rng = np.random.default_rng(seed)
    freqs = np.fft.rfftfreq(n, 1.0 / sample_rate_hz)
    coeffs = rng.standard_normal(freqs.size) + 1j * rng.standard_normal(freqs.size)
    in_band = (freqs >= f_lo_hz) & (freqs <= f_hi_hz)
    shape = np.zeros(freqs.size)
    shape[in_band] = 1.0 if colour == "white" else 1.0 / np.sqrt(freqs[in_band])
    x = np.fft.irfft(coeffs * shape, n)
    return x / np.max(np.abs(x))
