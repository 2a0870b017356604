"""Levels and conditioning of test signals: dBFS, fades, DC blocking, high-pass, the peak cap.

Every playable signal arrayplan writes passes through :func:`condition`
(optional high-pass, raised-cosine fades at both ends, DC removal) and then
:func:`scale_to_level` and :func:`check_peak`, which refuses anything above
the peak cap (unless explicitly allowed) and anything that would clip.

Conventions
-----------
Full scale is a sample value of 1.0.  Sample peak level in dBFS is
``20 log10(max |x|)``; the *true peak* (:func:`true_peak_dbfs`) is the peak of
the signal a converter reconstructs between the samples, estimated by 4x
oversampling as ITU-R BS.1770-4 (2015), Annex 2, describes.  It is never below
the sample peak and is up to a few tenths of a dB above it for noise.  Peak
targets (:func:`scale_to_level`) and the peak cap (:func:`check_peak`) act on
the true peak, so nothing written overshoots full scale in a converter.  RMS level in dBFS is ``20 log10(rms(x))``, so a
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
    "true_peak_dbfs",
    "TRUE_PEAK_OVERSAMPLING",
    "rms_dbfs",
    "channel_rms_dbfs",
    "raised_cosine_fade",
    "block_dc",
    "highpass",
    "condition",
    "scale_to_level",
    "check_peak",
    "effective_cap_dbfs",
]

#: Default highest peak level a written test signal may have, dBFS.
DEFAULT_PEAK_CAP_DBFS = -12.0


def amplitude_from_dbfs(level_dbfs: float) -> float:
    """Linear amplitude (full scale = 1) of a level in dBFS.

    Parameters
    ----------
    level_dbfs : float
        Level (dBFS).

    Returns
    -------
    float
        10 ** (level_dbfs / 20).
    """
    return float(10.0 ** (level_dbfs / 20.0))


def _db(value: float) -> float:
    return 20.0 * math.log10(value) if value > 0 else -math.inf


def peak_dbfs(x: np.ndarray) -> float:
    """Peak level of `x` in dBFS over all samples and channels (-inf for silence).

    Parameters
    ----------
    x : array_like, shape (n_samples,) or (n_samples, n_channels)
        Signal, full scale = 1.

    Returns
    -------
    float
        Sample peak (dBFS); -inf for silence or an empty signal.
    """
    x = np.asarray(x, dtype=float)
    return _db(float(np.max(np.abs(x)))) if x.size else -math.inf


#: Oversampling factor of the true-peak estimate (ITU-R BS.1770-4, Annex 2: 4x at 48 kHz).
TRUE_PEAK_OVERSAMPLING = 4

#: Half-length, in input samples, of the interpolating filter of the true-peak estimate, and the
#: Kaiser window's beta: about 80 dB stop band and under 0.001 dB of pass-band error up to 0.46 x
#: the sample rate (Kaiser's design rule, J. F. Kaiser, "Nonrecursive digital filter design using
#: the I0-sinh window function", 1974).
_TP_HALF_TAPS = 32
_TP_KAISER_BETA = 8.0


def _interpolation_phases() -> np.ndarray:
    """Taps of the fractional-delay phases 1/4, 2/4, 3/4: shape (3, 2 K + 1), windowed sinc."""
    k = np.arange(-_TP_HALF_TAPS, _TP_HALF_TAPS + 1, dtype=float)
    frac = np.arange(1, TRUE_PEAK_OVERSAMPLING)[:, None] / TRUE_PEAK_OVERSAMPLING
    t = k[None, :] + frac
    edge = _TP_HALF_TAPS + 1.0
    window = np.i0(_TP_KAISER_BETA * np.sqrt(np.clip(1.0 - (t / edge) ** 2, 0.0, None))) / np.i0(_TP_KAISER_BETA)
    return np.sinc(t) * window


def true_peak_dbfs(x: np.ndarray) -> float:
    """True (inter-sample) peak level of `x` in dBFS, over all channels (-inf for silence).

    The signal is oversampled 4 times by band-limited (windowed-sinc)
    interpolation and the largest magnitude of the original and interpolated
    samples is taken, as ITU-R BS.1770-4 (2015), Annex 2 describes.  Samples
    outside `x` are taken as zero (a file is silent before and after), so the
    overshoot just past both ends counts too.

    Parameters
    ----------
    x : ndarray, shape (n_samples,) or (n_samples, n_channels)
        Full scale = 1.

    Returns
    -------
    float
        ``20 log10`` of the largest reconstructed magnitude, dBFS; never
        below :func:`peak_dbfs`.  Accurate to about 0.001 dB for content
        below 0.46 x the sample rate.
    """
    from scipy.signal import oaconvolve

    x = np.asarray(x, dtype=float)
    if not x.size:
        return -math.inf
    if x.ndim == 1:
        x = x[:, None]
    top = float(np.max(np.abs(x)))
    for taps in _interpolation_phases():
        y = oaconvolve(x, taps[:, None], mode="full", axes=0)
        top = max(top, float(np.max(np.abs(y))))
    return _db(top)


def rms_dbfs(x: np.ndarray) -> float:
    """RMS level of `x` in dBFS over all samples and channels (-inf for silence).

    Parameters
    ----------
    x : array_like, shape (n_samples,) or (n_samples, n_channels)
        Signal, full scale = 1.

    Returns
    -------
    float
        20 log10 of the RMS (dBFS; a full-scale sine reads -3.01 dBFS); -inf
        for silence or an empty signal.
    """
    x = np.asarray(x, dtype=float)
    return _db(float(np.sqrt(np.mean(x * x)))) if x.size else -math.inf


def channel_rms_dbfs(x: np.ndarray) -> np.ndarray:
    """RMS level of each channel of `x`.

    Parameters
    ----------
    x : array_like, shape (n_samples, n_channels) or (n_samples,)
        Signal, full scale = 1; a 1-D signal is one channel.

    Returns
    -------
    ndarray, shape (n_channels,)
        RMS per channel (dBFS); -inf for a silent channel.
    """
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
    source : str, optional
        Named in messages.

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
    source : str, optional
        Named in messages.

    Returns
    -------
    ndarray, same shape as `x`
        The filtered signal (second-order sections, filtered along axis 0).
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
    source : str, optional
        Named in messages.

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
    """Scale `x` so its true peak (or its RMS, over all channels) is the given level in dBFS.

    Exactly one of `peak_dbfs` and `rms_dbfs` must be given.  A peak target
    sets the true peak (:func:`true_peak_dbfs`); the sample peak is then at or
    a little below it.  An RMS target sets the RMS of `x` as given: pass the
    active part of a signal, before any silence is added around it.

    Parameters
    ----------
    x : ndarray, shape (n_samples,) or (n_samples, n_channels)
    peak_dbfs, rms_dbfs : float or None
        Target true peak or RMS level, dBFS.
    source : str, optional
        Named in messages.

    Returns
    -------
    ndarray, same shape as `x`
    """
    if (peak_dbfs is None) == (rms_dbfs is None):
        raise InputError("give exactly one of a peak level and an RMS level", source=source,
                         field="peak_dbfs/rms_dbfs")
    x = np.asarray(x, dtype=float)
    target = peak_dbfs if peak_dbfs is not None else rms_dbfs
    if not math.isfinite(target):
        raise InputError(f"level must be a finite number of dBFS, got {target!r}", source=source,
                         field="peak_dbfs" if peak_dbfs is not None else "rms_dbfs")
    if peak_dbfs is not None:
        now = amplitude_from_dbfs(true_peak_dbfs(x)) if np.any(x) else 0.0
    else:
        now = float(np.sqrt(np.mean(x * x)))
    if now <= 0:
        raise InputError("the signal is silent and cannot be scaled to a level", source=source)
    return x * (amplitude_from_dbfs(target) / now)


def effective_cap_dbfs(cap_dbfs: float, allow_above_cap: bool) -> float:
    """The peak limit that applies: a cap above the default counts only with consent.

    Raising the cap lifts it, so without `allow_above_cap` the limit is the
    lower of `cap_dbfs` and :data:`DEFAULT_PEAK_CAP_DBFS` (a cap can always
    be lowered).  With consent the limit is `cap_dbfs`, and 0 dBFS true
    peak always remains the hard limit.

    Parameters
    ----------
    cap_dbfs : float
        The cap asked for, dBFS (must be finite).
    allow_above_cap : bool
        The explicit consent to go above the default cap.

    Returns
    -------
    float
        The limit, dBFS.
    """
    if not math.isfinite(cap_dbfs):
        raise InputError(f"peak cap must be a finite number of dBFS, got {cap_dbfs!r}", field="peak_cap_dbfs")
    return float(cap_dbfs) if allow_above_cap else min(float(cap_dbfs), DEFAULT_PEAK_CAP_DBFS)


def check_peak(x: np.ndarray, *, cap_dbfs: float = DEFAULT_PEAK_CAP_DBFS,
               allow_above_cap: bool = False, source: str | None = None) -> float:
    """Refuse a signal whose true peak would clip or exceeds the cap; return its true peak in dBFS.

    Parameters
    ----------
    x : ndarray, shape (n_samples,) or (n_samples, n_channels)
    cap_dbfs : float
        Peak cap, dBFS; above :data:`DEFAULT_PEAK_CAP_DBFS` it applies only
        with `allow_above_cap` (:func:`effective_cap_dbfs`).
    allow_above_cap : bool
        Allow a true peak above the cap (never above 0 dBFS).
    source : str, optional
        Named in messages.

    Returns
    -------
    float
        The true peak (:func:`true_peak_dbfs`), dBFS.

    Raises
    ------
    InputError
        If the true peak exceeds 0 dBFS (it would clip in a converter,
        whatever the options), or exceeds the effective cap while
        `allow_above_cap` is False.
    """
    limit = effective_cap_dbfs(cap_dbfs, allow_above_cap)
    peak = true_peak_dbfs(x)
    if peak > 1e-9:
        raise InputError(f"true peak {peak:+.2f} dBFS (sample peak {peak_dbfs(x):+.2f} dBFS) would clip in a "
                         "converter", source=source, field="peak_dbfs",
                         fix="lower the level (an RMS target on noise implies a peak about 12 dB higher)")
    if peak > limit + 1e-9 and not allow_above_cap:
        what = ("the cap" if limit == cap_dbfs else
                f"the default cap (a cap raised to {cap_dbfs:+.1f} dBFS is lifted and needs consent)")
        raise InputError(f"true peak {peak:+.2f} dBFS is above {what} of {limit:+.1f} dBFS",
                         source=source, field="peak_dbfs",
                         fix="lower the level (an RMS target puts the peak higher by the signal's crest "
                             "factor), or pass `allow_above_cap` if you really need it")
    return peak
