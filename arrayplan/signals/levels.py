"""Levels and conditioning of test signals: dBFS, fades, DC blocking, high-pass, the peak cap.

Every playable signal arrayplan writes passes through :func:`condition`
(optional high-pass, raised-cosine fades at both ends, DC removal) and then
:func:`scale_to_level` and :func:`check_peak`, which refuses anything above
the peak cap (unless explicitly allowed) and anything that would clip.

Conventions
-----------
Full scale is a sample value of 1.0.  Peak level in dBFS is
``20 log10(max |x|)``.  RMS level in dBFS is ``20 log10(rms(x))``, so a
full-scale square wave is 0 dBFS RMS and a full-scale sine is -3.01 dBFS RMS
(the other common convention, AES17, adds 3.01 dB so that the sine reads
0 dBFS; arrayplan does not).  Signals are ``(n_samples,)`` or
``(n_samples, n_channels)``; levels of a multichannel signal are taken over
all channels together unless stated otherwise.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError

__all__ = [
    "DEFAULT_PEAK_CAP_DBFS",
    "amplitude_from_dbfs",
    "peak_dbfs",
    "rms_dbfs",
    "channel_rms_dbfs",
    "raised_cosine_fade",
    "block_dc",
    "highpass",
    "condition",
    "scale_to_level",
    "check_peak",
]

#: Default highest peak level a written test signal may have, dBFS.
DEFAULT_PEAK_CAP_DBFS = -12.0


def amplitude_from_dbfs(level_dbfs: float) -> float:
    """Linear amplitude (full scale = 1) of a level in dBFS."""
    return float(10.0 ** (level_dbfs / 20.0))


def _db(value: float) -> float:
    return 20.0 * math.log10(value) if value > 0 else -math.inf


def peak_dbfs(x: np.ndarray) -> float:
    """Peak level of `x` in dBFS over all samples and channels (-inf for silence)."""
    x = np.asarray(x, dtype=float)
    return _db(float(np.max(np.abs(x)))) if x.size else -math.inf


def rms_dbfs(x: np.ndarray) -> float:
    """RMS level of `x` in dBFS over all samples and channels (-inf for silence)."""
    x = np.asarray(x, dtype=float)
    return _db(float(np.sqrt(np.mean(x * x)))) if x.size else -math.inf


def channel_rms_dbfs(x: np.ndarray) -> np.ndarray:
    """RMS level of each channel of `x`, shape (n_samples, n_channels) -> (n_channels,), dBFS."""
    x = np.asarray(x, dtype=float)
    if x.ndim == 1:
        x = x[:, None]
    rms = np.sqrt(np.mean(x * x, axis=0))
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(rms)


def _fade_lengths(n: int, sample_rate_hz: float, fade_in_s: float, fade_out_s: float,
                  source: str | None) -> tuple[int, int]:
    for name, value in (("fade_in_s", fade_in_s), ("fade_out_s", fade_out_s)):
        if not (math.isfinite(value) and value > 0):
            raise InputError(f"fade must be a positive duration in seconds, got {value!r}",
                             source=source, field=name, fix="fades are always applied; give e.g. 0.01")
    n_in = max(2, int(round(fade_in_s * sample_rate_hz)))
    n_out = max(2, int(round(fade_out_s * sample_rate_hz)))
    if n_in + n_out > n:
        raise InputError(f"fades ({fade_in_s:g} s + {fade_out_s:g} s) are longer than the signal "
                         f"({n / sample_rate_hz:g} s)", source=source, field="fade_in_s",
                         fix="shorten the fades or lengthen the signal")
    return n_in, n_out


def raised_cosine_fade(x: np.ndarray, sample_rate_hz: float, fade_in_s: float, fade_out_s: float,
                       *, source: str | None = None) -> np.ndarray:
    """Apply raised-cosine (half-Hann) fades to both ends of `x`.

    Parameters
    ----------
    x : ndarray, shape (n_samples,) or (n_samples, n_channels)
        The signal (not modified).
    sample_rate_hz : float
        Sample rate in Hz.
    fade_in_s, fade_out_s : float
        Fade durations in seconds, both > 0 (at least 2 samples each).

    Returns
    -------
    ndarray, same shape as `x`
        The faded signal; its first and last samples are exactly zero.
    """
    x = np.array(x, dtype=float)
    n = x.shape[0]
    n_in, n_out = _fade_lengths(n, sample_rate_hz, fade_in_s, fade_out_s, source)
    ramp_in = 0.5 * (1.0 - np.cos(np.pi * np.arange(n_in) / n_in))
    ramp_out = 0.5 * (1.0 - np.cos(np.pi * np.arange(n_out) / n_out))[::-1]
    shape = (-1,) + (1,) * (x.ndim - 1)
    x[:n_in] *= ramp_in.reshape(shape)
    x[n - n_out:] *= ramp_out.reshape(shape)
    return x


def block_dc(x: np.ndarray) -> np.ndarray:
    """Remove the DC content of each channel of `x` without disturbing its ends.

    A Hann-shaped pulse spanning the whole signal, scaled to the channel's
    mean, is subtracted, so the result sums to zero (no DC) while the first
    and last samples stay where they were (zero after the fades).  The pulse's
    spectrum lies below about 2/duration Hz, far below any sweep or noise band.

    Parameters
    ----------
    x : ndarray, shape (n_samples,) or (n_samples, n_channels)

    Returns
    -------
    ndarray, same shape as `x`
    """
    x = np.array(x, dtype=float)
    n = x.shape[0]
    if n < 3:
        return x - x.mean(axis=0)
    w = np.sin(np.pi * np.arange(n) / (n - 1)) ** 2
    shape = (-1,) + (1,) * (x.ndim - 1)
    return x - w.reshape(shape) * (x.sum(axis=0) / w.sum())


def highpass(x: np.ndarray, sample_rate_hz: float, cutoff_hz: float, order: int = 2,
             *, source: str | None = None) -> np.ndarray:
    """Causal Butterworth high-pass (to protect small drivers from low frequencies).

    Parameters
    ----------
    x : ndarray, shape (n_samples,) or (n_samples, n_channels)
    sample_rate_hz : float
        Sample rate in Hz.
    cutoff_hz : float
        -3 dB frequency in Hz, inside (0, sample_rate_hz / 2).
    order : int
        Filter order (roll-off 6 dB per octave per order), 1 to 8.
    """
    from scipy.signal import butter, sosfilt

    nyq = sample_rate_hz / 2.0
    if not (math.isfinite(cutoff_hz) and 0 < cutoff_hz < nyq):
        raise InputError(f"high-pass cutoff {cutoff_hz:g} Hz is outside (0, {nyq:g}) Hz",
                         source=source, field="highpass_hz", fix="choose a cutoff below half the sample rate")
    if not 1 <= int(order) <= 8:
        raise InputError(f"high-pass order must be 1 to 8, got {order}", source=source,
                         field="highpass_order")
    sos = butter(int(order), cutoff_hz, btype="highpass", fs=sample_rate_hz, output="sos")
    return sosfilt(sos, np.asarray(x, dtype=float), axis=0)


def condition(x: np.ndarray, sample_rate_hz: float, *, fade_in_s: float, fade_out_s: float,
              highpass_hz: float | None = None, highpass_order: int = 2,
              source: str | None = None) -> np.ndarray:
    """High-pass (optional), fade both ends, remove DC: the conditioning every signal gets.

    Parameters
    ----------
    x : ndarray, shape (n_samples,) or (n_samples, n_channels)
    sample_rate_hz : float
        Sample rate in Hz.
    fade_in_s, fade_out_s : float
        Raised-cosine fade durations in seconds (> 0; fades are never skipped).
    highpass_hz : float or None
        Cutoff of a Butterworth high-pass applied first, or None for none.
    highpass_order : int
        Its order.

    Returns
    -------
    ndarray, same shape as `x`
    """
    y = np.asarray(x, dtype=float)
    if highpass_hz is not None:
        y = highpass(y, sample_rate_hz, highpass_hz, highpass_order, source=source)
    y = raised_cosine_fade(y, sample_rate_hz, fade_in_s, fade_out_s, source=source)
    return block_dc(y)


def scale_to_level(x: np.ndarray, *, peak_dbfs: float | None = None,
                   rms_dbfs: float | None = None, source: str | None = None) -> np.ndarray:
    """Scale `x` so its peak (or its RMS, over all channels) is the given level in dBFS.

    Exactly one of `peak_dbfs` and `rms_dbfs` must be given.
    """
    if (peak_dbfs is None) == (rms_dbfs is None):
        raise InputError("give exactly one of a peak level and an RMS level", source=source,
                         field="peak_dbfs/rms_dbfs")
    x = np.asarray(x, dtype=float)
    target = peak_dbfs if peak_dbfs is not None else rms_dbfs
    if not math.isfinite(target):
        raise InputError(f"level must be a finite number of dBFS, got {target!r}", source=source,
                         field="peak_dbfs" if peak_dbfs is not None else "rms_dbfs")
    now = float(np.max(np.abs(x))) if peak_dbfs is not None else float(np.sqrt(np.mean(x * x)))
    if now <= 0:
        raise InputError("the signal is silent and cannot be scaled to a level", source=source)
    return x * (amplitude_from_dbfs(target) / now)


def check_peak(x: np.ndarray, *, cap_dbfs: float = DEFAULT_PEAK_CAP_DBFS,
               allow_above_cap: bool = False, source: str | None = None) -> float:
    """Refuse a signal that would clip, or whose peak exceeds the cap; return its peak in dBFS.

    Raises
    ------
    InputError
        If the peak exceeds 0 dBFS (it would clip, whatever the options), or
        exceeds `cap_dbfs` while `allow_above_cap` is False.
    """
    peak = peak_dbfs(x)
    if peak > 1e-9:
        raise InputError(f"peak level {peak:+.2f} dBFS would clip", source=source, field="peak_dbfs",
                         fix="lower the level (an RMS target on noise implies a peak about 12 dB higher)")
    if peak > cap_dbfs + 1e-9 and not allow_above_cap:
        raise InputError(f"peak level {peak:+.2f} dBFS is above the cap of {cap_dbfs:+.1f} dBFS",
                         source=source, field="peak_dbfs",
                         fix="lower the level (an RMS target puts the peak higher by the signal's crest "
                             "factor), or pass `allow_above_cap` if you really need it")
    return peak
