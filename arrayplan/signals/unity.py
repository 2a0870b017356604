"""What deconvolution makes of a unity system: the inverse's gain, its flat band, the high-pass phase.

A sweep convolved with its inverse filter is, ideally, a pure delay of
``n_sweep - 1`` samples with unit gain in the band.  :func:`normalise_inverse`
sets the gain to exactly 1 at the band centre; :func:`flat_band_hz` finds the
band around it where the magnitude stays within :data:`FLAT_BAND_TOLERANCE_DB`
*and* the phase (the delay taken out) within
:data:`FLAT_BAND_PHASE_TOLERANCE_DEG`.  A played sweep that went through a
high-pass (to protect small drivers) carries the high-pass's phase, tens of
degrees an octave or two above its cutoff; :func:`compensate_highpass_phase`
takes that phase out of the inverse filter (its magnitude stays, so the band
starts where the high-pass's attenuation is within the tolerance).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["FLAT_BAND_TOLERANCE_DB", "FLAT_BAND_PHASE_TOLERANCE_DEG", "normalise_inverse", "unity_response",
           "flat_band_hz", "highpass_response", "compensate_highpass_phase"]

#: Ripple allowed in the deconvolved response of a unity system inside the
#: sweep's flat band (common practice for loudspeaker response work, no source).
FLAT_BAND_TOLERANCE_DB = 0.1

#: Phase allowed there, degrees: the angle whose complex error |1 - exp(j phi)| equals the
#: magnitude tolerance's, 10^(0.1/20) - 1 = 0.0116 rad = 0.66 degrees (derived, no source).
FLAT_BAND_PHASE_TOLERANCE_DEG = math.degrees(10.0 ** (FLAT_BAND_TOLERANCE_DB / 20.0) - 1.0)


def _dtft(x: np.ndarray, freq_hz: float, sample_rate_hz: float) -> complex:
    n = np.arange(x.size)
    return complex(np.dot(x, np.exp(-2j * math.pi * freq_hz / sample_rate_hz * n)))


def normalise_inverse(played: np.ndarray, inverse: np.ndarray, centre_hz: float,
                      sample_rate_hz: float) -> np.ndarray:
    """Scale `inverse` so that ``played * inverse`` has unit magnitude at `centre_hz`.

    Parameters
    ----------
    played : ndarray, shape (n,)
        The sweep as played (same scale as the file: full scale = 1).
    inverse : ndarray, shape (m,)
        Unnormalised inverse filter.
    centre_hz : float
        Frequency of unit gain, Hz (:func:`band_centre_hz`).
    sample_rate_hz : float
        Sample rate, Hz.

    Returns
    -------
    ndarray, shape (m,)
        ``inverse / |X(fc) Y(fc)|`` with X, Y the discrete-time Fourier
        transforms of `played` and `inverse` at the centre: a unity system
        then deconvolves to 0 dB there.
    """
    played = np.asarray(played, dtype=float).reshape(-1)
    inverse = np.asarray(inverse, dtype=float).reshape(-1)
    gain = abs(_dtft(played, centre_hz, sample_rate_hz) * _dtft(inverse, centre_hz, sample_rate_hz))
    if not gain > 0:
        raise ValueError(f"the sweep and its inverse have no energy at {centre_hz:g} Hz")
    return inverse / gain


def unity_response(played: np.ndarray, inverse: np.ndarray, sample_rate_hz: float,
                   n_fft: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Spectrum of ``played * inverse``: what deconvolution makes of a unity system.

    Parameters
    ----------
    played, inverse : ndarray, shape (n,) and (m,)
    sample_rate_hz : float
    n_fft : int, optional
        DFT length (default: the next power of two >= n + m - 1, no time aliasing).

    Returns
    -------
    freqs_hz : ndarray, shape (n_fft // 2 + 1,)
    response : ndarray, complex, same shape
        Linear-phase term of the lag ``n - 1`` included (magnitude is what matters).
    """
    played = np.asarray(played, dtype=float).reshape(-1)
    inverse = np.asarray(inverse, dtype=float).reshape(-1)
    if n_fft is None:
        n_fft = 1 << int(math.ceil(math.log2(played.size + inverse.size - 1)))
    resp = np.fft.rfft(played, n_fft) * np.fft.rfft(inverse, n_fft)
    return np.fft.rfftfreq(n_fft, 1.0 / sample_rate_hz), resp


def flat_band_hz(played: np.ndarray, inverse: np.ndarray, centre_hz: float, sample_rate_hz: float,
                 tolerance_db: float = FLAT_BAND_TOLERANCE_DB,
                 phase_tolerance_deg: float = FLAT_BAND_PHASE_TOLERANCE_DEG) -> tuple[float, float]:
    """Widest band around `centre_hz` where the unity response stays within `tolerance_db` of 0 dB.

    Parameters
    ----------
    played, inverse : ndarray
        The sweep as played and its normalised inverse filter.
    centre_hz, sample_rate_hz : float
        Band centre and sample rate, Hz.
    tolerance_db : float
        Allowed deviation from 0 dB, dB.
    phase_tolerance_deg : float
        Allowed phase, degrees, after the pure delay of ``len(played) - 1``
        samples (the linear lag) is taken out.

    Returns
    -------
    (low_hz, high_hz) : tuple of float
        The lowest and highest DFT frequencies of the contiguous run of bins,
        containing the centre, whose magnitude and phase are both within
        their tolerances (the widest such run if the centre is not in one,
        as when a high-pass still attenuates there; the centre alone if no
        bin is within).
    """
    f, resp = unity_response(played, inverse, sample_rate_hz)
    with np.errstate(divide="ignore"):
        ok = np.abs(20.0 * np.log10(np.abs(resp))) <= tolerance_db
    lag = np.asarray(played).size - 1
    phase = np.degrees(np.angle(resp * np.exp(2j * np.pi * f * lag / sample_rate_hz)))
    ok &= np.abs(phase) <= phase_tolerance_deg
    c = int(np.argmin(np.abs(f - centre_hz)))
    if not ok[c]:
        # A high-pass may still attenuate at the centre: take the widest run of good bins instead.
        edges = np.flatnonzero(np.diff(np.concatenate([[0], ok.astype(np.int8), [0]])))
        if not edges.size:
            return (float(f[c]), float(f[c]))
        starts, stops = edges[0::2], edges[1::2]
        k = int(np.argmax(stops - starts))
        return (float(f[starts[k]]), float(f[stops[k] - 1]))
    bad_below = np.flatnonzero(~ok[:c])
    bad_above = np.flatnonzero(~ok[c:])
    lo = int(bad_below[-1]) + 1 if bad_below.size else 0
    hi = c + int(bad_above[0]) - 1 if bad_above.size else f.size - 1
    return (float(f[lo]), float(f[hi]))


def highpass_response(freqs_hz: np.ndarray, cutoff_hz: float, order: int, sample_rate_hz: float) -> np.ndarray:
    """Complex response of :func:`arrayplan.signals.levels.highpass` at `freqs_hz` (shape kept).

    Parameters
    ----------
    freqs_hz : array_like
        Frequencies (Hz), any shape.
    cutoff_hz : float
        -3 dB frequency of the Butterworth high-pass (Hz).
    order : int
        Its order.
    sample_rate_hz : float
        Sample rate (Hz).

    Returns
    -------
    ndarray, complex
        H at each frequency, the shape of `freqs_hz`.
    """
    from scipy.signal import butter, sosfreqz

    sos = butter(int(order), cutoff_hz, btype="highpass", fs=sample_rate_hz, output="sos")
    freqs = np.atleast_1d(np.asarray(freqs_hz, dtype=float))
    return sosfreqz(sos, worN=freqs, fs=sample_rate_hz)[1].reshape(np.shape(freqs_hz))


def compensate_highpass_phase(inverse: np.ndarray, cutoff_hz: float, order: int,
                              sample_rate_hz: float) -> np.ndarray:
    """Take the phase of the played sweep's Butterworth high-pass out of an inverse filter.

    The inverse is multiplied, in the frequency domain, by ``conj(H) / |H|``
    (an all-pass with the opposite phase of the high-pass ``H`` of
    :func:`arrayplan.signals.levels.highpass`), on a DFT grid twice the
    filter's length so the short, mostly anticausal all-pass response does
    not wrap into the kept samples; the result keeps the inverse's length and
    lag.  The magnitude of ``H`` is left alone: it is where the high-pass
    protects the driver, and :func:`flat_band_hz` starts the flat band above it.

    Parameters
    ----------
    inverse : ndarray, shape (n,)
        The inverse filter of the sweep before the high-pass.
    cutoff_hz : float
        The high-pass's -3 dB frequency, Hz.
    order : int
        Its order.
    sample_rate_hz : float
        Sample rate, Hz.

    Returns
    -------
    ndarray, shape (n,)
    """
    from scipy.fft import irfft, next_fast_len, rfft

    inverse = np.asarray(inverse, dtype=float).reshape(-1)
    n = inverse.size
    n_fft = next_fast_len(2 * n, real=True)
    h = highpass_response(np.fft.rfftfreq(n_fft, 1.0 / sample_rate_hz), cutoff_hz, order, sample_rate_hz)
    mag = np.abs(h)
    allpass = np.where(mag > 0, np.conj(h) / np.where(mag > 0, mag, 1.0), 1.0)
    return irfft(rfft(inverse, n_fft) * allpass, n_fft)[:n]
