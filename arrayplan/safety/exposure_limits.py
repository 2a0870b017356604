"""Occupational noise limits and the levels they are judged on: NIOSH and OSHA, A-weighting, windowed RMS.

* The permitted daily exposure after NIOSH (85 dBA for 8 h, 3 dB exchange
  rate) and OSHA (90 dBA for 8 h, 5 dB exchange rate)
  (:func:`permitted_exposure_niosh`, :func:`permitted_exposure_osha`).
* The warning level (:data:`WARN_DBA`) and the caps above which a signal is
  refused unless the explicit consent is given (:data:`DEFAULT_MAX_DBA`,
  :data:`DEFAULT_MAX_PEAK_DB_SPL`).
* A-weighting (:func:`a_weighting_db`, :func:`a_weight_signal`) and the
  highest running RMS level over a sound level meter's "fast" window
  (:func:`max_window_rms`).

The estimate of the level a signal makes at the listeners, and the check
against these limits, are :mod:`arrayplan.safety.exposure_estimate`.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError

__all__ = [
    "NIOSH_CRITERION_DBA",
    "NIOSH_EXCHANGE_RATE_DB",
    "OSHA_CRITERION_DBA",
    "OSHA_EXCHANGE_RATE_DB",
    "WARN_DBA",
    "DEFAULT_MAX_DBA",
    "DEFAULT_MAX_PEAK_DB_SPL",
    "LEVEL_WINDOW_S",
    "permitted_exposure_niosh",
    "permitted_exposure_osha",
    "a_weighting_db",
    "a_weight_signal",
    "max_window_rms",
]

NIOSH_CRITERION_DBA = 85.0   # NIOSH Publication 98-126 (1998): 85 dBA for 8 h
NIOSH_EXCHANGE_RATE_DB = 3.0
OSHA_CRITERION_DBA = 90.0    # OSHA 29 CFR 1910.95, Table G-16: 90 dBA for 8 h
OSHA_EXCHANGE_RATE_DB = 5.0
_EIGHT_HOURS_S = 8 * 3600.0

#: Level (dBA) above which a warning is raised (the NIOSH recommended limit).
WARN_DBA = 85.0
#: Level (dBA) above which a signal is refused unless explicitly allowed
#: (NIOSH permits 15 min a day at 100 dBA).
DEFAULT_MAX_DBA = 100.0
#: Peak level (dB SPL) above which a signal is refused unless allowed:
#: 200 Pa, the limit value of EU Directive 2003/10/EC Art. 3 (140 dB(C)).
DEFAULT_MAX_PEAK_DB_SPL = 140.0
#: Window of the running RMS level, s (a sound level meter's "fast" time
#: weighting is 125 ms, IEC 61672-1; value from memory).
LEVEL_WINDOW_S = 0.125


def _permitted(dba: float, criterion: float, exchange: float) -> float:
    if not math.isfinite(dba):
        if dba == -math.inf:
            return math.inf
        raise InputError(f"sound level must be a finite number of dBA, got {dba!r}")
    return _EIGHT_HOURS_S / 2.0 ** ((dba - criterion) / exchange)


def permitted_exposure_niosh(dba: float) -> float:
    """Permitted daily exposure (s) at `dba` after NIOSH: 8 h at 85 dBA, 3 dB exchange rate.

    ``T = 8 h / 2^((L - 85) / 3)`` (NIOSH Publication 98-126, 1998).  Levels
    below 85 dBA give more than 8 h.

    Parameters
    ----------
    dba : float
        A-weighted level (dBA).

    Returns
    -------
    float
        Permitted exposure per day (s).
    """
    return _permitted(float(dba), NIOSH_CRITERION_DBA, NIOSH_EXCHANGE_RATE_DB)


def permitted_exposure_osha(dba: float) -> float:
    """Permitted daily exposure (s) at `dba` after OSHA: 8 h at 90 dBA, 5 dB exchange rate.

    ``T = 8 h / 2^((L - 90) / 5)`` (OSHA 29 CFR 1910.95, Table G-16 and its
    formula).  Levels below 90 dBA give more than 8 h.

    Parameters
    ----------
    dba : float
        A-weighted level (dBA), as for :func:`permitted_exposure_niosh`.

    Returns
    -------
    float
        Permitted exposure per day (s), by the OSHA rule.
    """
    return _permitted(float(dba), OSHA_CRITERION_DBA, OSHA_EXCHANGE_RATE_DB)


def a_weighting_db(freq_hz: float | np.ndarray) -> np.ndarray:
    """A-weighting in dB at `freq_hz` (IEC 61672-1 analogue formula, 0 dB at 1 kHz).

    Parameters
    ----------
    freq_hz : float or array_like
        Frequencies (Hz).

    Returns
    -------
    ndarray
        A-weighting (dB), the shape of `freq_hz`; -inf at 0 Hz.
    """
    f2 = np.asarray(freq_hz, dtype=float) ** 2
    ra = (12194.0 ** 2 * f2 ** 2) / ((f2 + 20.6 ** 2) * np.sqrt((f2 + 107.7 ** 2) * (f2 + 737.9 ** 2))
                                      * (f2 + 12194.0 ** 2))
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(ra) + 2.00


def a_weight_signal(x: np.ndarray, sample_rate_hz: float) -> np.ndarray:
    """A-weight each channel of `x` by zero-phase weighting of its spectrum.

    Parameters
    ----------
    x : ndarray, shape (n_samples,) or (n_samples, n_channels)
    sample_rate_hz : float

    Returns
    -------
    ndarray, same shape
    """
    x = np.asarray(x, dtype=float)
    n = x.shape[0]
    nfft = 1 << max(1, int(math.ceil(math.log2(max(2, 2 * n)))))
    spec = np.fft.rfft(x, nfft, axis=0)
    gain = 10.0 ** (a_weighting_db(np.fft.rfftfreq(nfft, 1.0 / sample_rate_hz)) / 20.0)
    shape = (-1,) + (1,) * (x.ndim - 1)
    return np.fft.irfft(spec * gain.reshape(shape), nfft, axis=0)[:n]


def max_window_rms(x: np.ndarray, sample_rate_hz: float, window_s: float = LEVEL_WINDOW_S) -> np.ndarray:
    """Highest RMS over any window of `window_s` seconds, per channel (full scale = 1).

    A signal shorter than the window is measured over its whole length.

    Parameters
    ----------
    x : array_like, shape (n_samples, n_channels) or (n_samples,)
        Signal, full scale = 1.
    sample_rate_hz : float
        Sample rate (Hz).
    window_s : float
        Window length (s).

    Returns
    -------
    ndarray, shape (n_channels,)
        Highest windowed RMS per channel (full scale = 1).
    """
    x = np.asarray(x, dtype=float)
    if x.ndim == 1:
        x = x[:, None]
    n = x.shape[0]
    w = max(1, min(n, int(round(window_s * sample_rate_hz))))
    c = np.concatenate([np.zeros((1, x.shape[1])), np.cumsum(x * x, axis=0)])
    energy = c[w:] - c[:-w]
    return np.sqrt(np.maximum(energy.max(axis=0), 0.0) / w)
