"""Sine-sweep formulas: waveforms, inverse filters, band checks, harmonic offsets, fades and pre-roll.

The exponential sine sweep from ``f1`` to ``f2`` over ``T`` seconds is

    x(t) = sin(2 pi f1 L (exp(t / L) - 1)),   L = T / ln(f2 / f1),

and its inverse filter is the time-reversed sweep times ``exp(-t / L)``
(which undoes the sweep's pink, -3 dB per octave, spectrum).  The response
of a system to the sweep, convolved with the inverse, is its impulse
response at lag ``n_sweep - 1`` after the sweep's first sample; the n-th
harmonic distortion product appears ``T ln(n) / ln(f2 / f1)`` seconds
earlier (A. Farina, "Simultaneous measurement of impulse response and
distortion with a swept-sine technique", 108th AES Convention, Paris, 2000).

Fades
-----
Near the band edges the sweep's spectrum ripples (Fresnel ripple of the
short fades) and the time-reversed inverse does not undo it, so the unity
response is flat only inside :attr:`arrayplan.signals.sweeps.SweepSignal.flat_band_hz`, the band
around the centre where it stays within :data:`arrayplan.signals.unity.FLAT_BAND_TOLERANCE_DB`.
Longer fades widen it.  With fades one Fresnel time long (the time an
exponential sweep takes to cross one Fresnel zone, ``1 / sqrt(f ln(f2/f1) / T)``
seconds at f = f1 for the fade-in and f = f2 for the fade-out, see
:func:`fresnel_time_s`) the ripple stays within 0.1 dB from half an octave
above the fade-in's end to a tenth of an octave below the fade-out's start
(measured, see tests/test_signals_sweeps.py).  These are the default fades
(:func:`default_fades_s`), used when a fade is not given; a fixed 20 ms
fade-in is far shorter than that at 20 Hz (0.17 s for a 4 s sweep) and loses
more than an octave at the bottom.  :attr:`arrayplan.signals.sweeps.SweepSignal.flat_band_hz` says
where the band is flat in either case.

Pre-roll
--------
The deconvolved pulse is close to zero phase: it rings *before* zero lag as
much as after, and longest at the lowest frequencies, for about one Fresnel
time at f1.  A response cut at zero lag loses that pre-ringing when the
acoustic delay is shorter, and reads low near f1.  Producers of impulse
responses therefore keep :func:`default_pre_roll_s` before zero lag: one
Fresnel time at f1 (the default fade-in), but no more than half the time to
the 2nd harmonic's response (where the harmonic windows begin), so the
pre-roll holds no distortion products.  For a linear sweep the Fresnel time
is ``sqrt(T / (f2 - f1))`` at every frequency; it rings at both band edges and
keeps two Fresnel times, at most T / 4.

These are pure functions of the sweep's kind, limits, duration and sample
rate, taking and returning plain numbers and arrays; the playable sweep
(conditioning, level, padding, the normalised inverse) is
:func:`arrayplan.signals.sweeps.make_sweep`.
"""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError

__all__ = [
    "SWEEP_KINDS",
    "MIN_CYCLES_LOWEST_OCTAVE",
    "MIN_TIME_BANDWIDTH",
    "exponential_sweep",
    "linear_sweep",
    "exponential_inverse_filter",
    "linear_inverse_filter",
    "band_centre_hz",
    "fresnel_time_s",
    "default_fades_s",
    "default_pre_roll_s",
    "max_pre_roll_s",
    "harmonic_offset_s",
    "check_sweep_band",
]

SWEEP_KINDS = ("exponential", "linear")

#: An exponential sweep must hold at least this many periods of f1 while it
#: climbs its lowest octave (f1 T / ln(f2/f1) periods); shorter sweeps are
#: refused as too short for the band (common practice, no source).
MIN_CYCLES_LOWEST_OCTAVE = 2.0

#: A linear sweep must have a time-bandwidth product T (f2 - f1) of at least
#: this (common practice for pulse compression, no source).
MIN_TIME_BANDWIDTH = 100.0


def _times(duration_s: float, sample_rate_hz: float) -> np.ndarray:
    n = int(round(duration_s * sample_rate_hz))
    return np.arange(n) / sample_rate_hz


def exponential_sweep(f1_hz: float, f2_hz: float, duration_s: float, sample_rate_hz: float) -> np.ndarray:
    """Unit-amplitude exponential sine sweep, no fades.

    Parameters
    ----------
    f1_hz, f2_hz : float
        Start and end frequencies in Hz, 0 < f1 < f2 < sample_rate_hz / 2.
    duration_s : float
        Sweep duration T in seconds.
    sample_rate_hz : float
        Sample rate in Hz.

    Returns
    -------
    ndarray, shape (round(T * fs),)
        ``sin(2 pi f1 L (exp(t/L) - 1))`` with ``L = T / ln(f2/f1)``, t = n / fs.
    """
    t = _times(duration_s, sample_rate_hz)
    rate = duration_s / math.log(f2_hz / f1_hz)
    return np.sin(2.0 * math.pi * f1_hz * rate * np.expm1(t / rate))


def linear_sweep(f1_hz: float, f2_hz: float, duration_s: float, sample_rate_hz: float) -> np.ndarray:
    """Unit-amplitude linear sine sweep ``sin(2 pi (f1 t + (f2 - f1) t^2 / (2 T)))``, no fades.

    Parameters
    ----------
    f1_hz, f2_hz : float
        Start and end frequencies (Hz).
    duration_s : float
        Sweep duration T (s).
    sample_rate_hz : float
        Sample rate fs (Hz).

    Returns
    -------
    ndarray, shape (round(T * fs),)
        The sweep at t = n / fs.
    """
    t = _times(duration_s, sample_rate_hz)
    return np.sin(2.0 * math.pi * (f1_hz * t + (f2_hz - f1_hz) * t * t / (2.0 * duration_s)))


def exponential_inverse_filter(sweep: np.ndarray, f1_hz: float, f2_hz: float, duration_s: float,
                               sample_rate_hz: float) -> np.ndarray:
    """Unnormalised inverse of an exponential sweep: reversed sweep times ``exp(-t / L)``.

    Parameters
    ----------
    sweep : ndarray, shape (n_sweep,)
        The sweep (faded or not), one channel.
    f1_hz, f2_hz, duration_s, sample_rate_hz : float
        The sweep's parameters (Hz, s).

    Returns
    -------
    ndarray, shape (n_sweep,)
        Scale it with :func:`normalise_inverse` (unit gain at the band centre, as :func:`make_sweep` does).
    """
    sweep = np.asarray(sweep, dtype=float).reshape(-1)
    rate = duration_s / math.log(f2_hz / f1_hz)
    t = np.arange(sweep.size) / sample_rate_hz
    return sweep[::-1] * np.exp(-t / rate)


def linear_inverse_filter(sweep: np.ndarray) -> np.ndarray:
    """Unnormalised inverse (matched filter) of a linear sweep: the sweep reversed in time.

    A linear sweep's spectrum is flat over its band, so its time reversal is
    its inverse there.

    Parameters
    ----------
    sweep : array_like, shape (n_sweep,)
        The sweep, one channel.

    Returns
    -------
    ndarray, shape (n_sweep,)
        The sweep reversed (a copy); scale it with :func:`normalise_inverse`.
    """
    return np.asarray(sweep, dtype=float).reshape(-1)[::-1].copy()


def harmonic_offset_s(order: int, f1_hz: float, f2_hz: float, duration_s: float) -> float:
    """Time (s) by which the `order`-th harmonic's impulse response precedes the linear one.

    ``T ln(order) / ln(f2 / f1)`` for an exponential sweep (Farina 2000).

    Parameters
    ----------
    order : int
        Harmonic order, >= 1 (1 gives 0).
    f1_hz, f2_hz : float
        Sweep limits (Hz).
    duration_s : float
        Sweep duration T (s).

    Returns
    -------
    float
        Offset (s).

    Raises
    ------
    ValueError
        `order` below 1.
    """
    if order < 1:
        raise ValueError(f"harmonic order must be >= 1, got {order}")
    return duration_s * math.log(order) / math.log(f2_hz / f1_hz)


def check_sweep_band(kind: str, f1_hz: float, f2_hz: float, duration_s: float, sample_rate_hz: float,
                     *, fade_in_s: float | None = None, fade_out_s: float | None = None,
                     source: str | None = None) -> None:
    """Refuse sweep limits outside (0, fs/2) and durations too short for the band.

    Parameters
    ----------
    kind : str
        ``"exponential"`` or ``"linear"``.
    f1_hz, f2_hz : float
        Sweep limits (Hz), 0 < f1 < f2 < fs / 2.
    duration_s : float
        Sweep duration (s).
    sample_rate_hz : float
        Sample rate fs (Hz).
    fade_in_s, fade_out_s : float, optional
        Fades to check (s): at most half an octave's time (exponential) or a
        quarter of the sweep (linear).
    source : str, optional
        Named in messages.

    Raises
    ------
    InputError
        One line naming the option and the bad value.
    """
    if kind not in SWEEP_KINDS:
        raise InputError(f"sweep kind must be one of {', '.join(SWEEP_KINDS)}, got {kind!r}", source=source)
    if not (math.isfinite(sample_rate_hz) and sample_rate_hz > 0):
        raise InputError(f"sample rate must be a positive number of Hz, got {sample_rate_hz!r}",
                         source=source, field="rate_hz")
    nyq = sample_rate_hz / 2.0
    for name, f in (("f1_hz", f1_hz), ("f2_hz", f2_hz)):
        if not (math.isfinite(f) and 0 < f < nyq):
            raise InputError(f"sweep limit {f:g} Hz is outside (0, {nyq:g}) Hz (half the sample rate)",
                             source=source, field=name, fix="choose limits between 0 Hz and fs/2")
    if not f1_hz < f2_hz:
        raise InputError(f"sweep must rise: f1 = {f1_hz:g} Hz is not below f2 = {f2_hz:g} Hz",
                         source=source, field="f1_hz", fix="swap the limits")
    if not (math.isfinite(duration_s) and duration_s > 0):
        raise InputError(f"sweep duration must be positive, got {duration_s!r} s", source=source,
                         field="duration_s")
    if kind == "exponential":
        rate = duration_s / math.log(f2_hz / f1_hz)
        cycles = f1_hz * rate
        if cycles < MIN_CYCLES_LOWEST_OCTAVE:
            need = MIN_CYCLES_LOWEST_OCTAVE * math.log(f2_hz / f1_hz) / f1_hz
            raise InputError(f"a {duration_s:g} s sweep is too short for {f1_hz:g}-{f2_hz:g} Hz: it holds "
                             f"{cycles:.2f} periods of f1 in its lowest octave, at least "
                             f"{MIN_CYCLES_LOWEST_OCTAVE:g} are needed", source=source, field="duration_s",
                             fix=f"use `duration_s` {math.ceil(need * 100) / 100:g} or more, or raise `f1_hz`")
        octave_s = rate * math.log(2.0)
        for name, fade in (("fade_in_s", fade_in_s), ("fade_out_s", fade_out_s)):
            if fade is not None and fade > octave_s / 2:
                raise InputError(f"fade of {fade:g} s is longer than half the time the sweep spends in an "
                                 f"octave ({octave_s:.3g} s) and would cut into the band", source=source,
                                 field=name, fix="shorten the fade or lengthen the sweep")
    else:
        tbw = duration_s * (f2_hz - f1_hz)
        if tbw < MIN_TIME_BANDWIDTH:
            raise InputError(f"a {duration_s:g} s linear sweep over {f2_hz - f1_hz:g} Hz has a time-bandwidth "
                             f"product of {tbw:.3g}, below {MIN_TIME_BANDWIDTH:g}", source=source,
                             field="duration_s", fix="lengthen the sweep or widen the band")
        for name, fade in (("fade_in_s", fade_in_s), ("fade_out_s", fade_out_s)):
            if fade is not None and fade > duration_s / 4:
                raise InputError(f"fade of {fade:g} s is longer than a quarter of the sweep", source=source,
                                 field=name, fix="shorten the fade")

def band_centre_hz(kind: str, f1_hz: float, f2_hz: float) -> float:
    """Frequency the sweep passes half-way through its duration, Hz.

    ``sqrt(f1 f2)`` for an exponential sweep, ``(f1 + f2) / 2`` for a linear one.

    Parameters
    ----------
    kind : str
        ``"exponential"``; anything else counts as linear.
    f1_hz, f2_hz : float
        Sweep limits (Hz).

    Returns
    -------
    float
        Band centre (Hz).
    """
    if kind == "exponential":
        return math.sqrt(f1_hz * f2_hz)
    return 0.5 * (f1_hz + f2_hz)


def fresnel_time_s(freq_hz: float, f1_hz: float, f2_hz: float, duration_s: float) -> float:
    """Time (s) an exponential sweep takes to cross one Fresnel zone at `freq_hz`.

    ``1 / sqrt(df/dt)`` with ``df/dt = f ln(f2/f1) / T`` (Hz/s); a raised-cosine
    fade at least this long keeps the sweep's edge ripple out of the band
    (measured; common practice, no source).

    Parameters
    ----------
    freq_hz : float
        Frequency (Hz).
    f1_hz, f2_hz, duration_s : float
        As for :func:`harmonic_offset_s` (Hz, s).

    Returns
    -------
    float
        Fresnel time (s).
    """
    return 1.0 / math.sqrt(freq_hz * math.log(f2_hz / f1_hz) / duration_s)


def _linear_fresnel_time_s(f1_hz: float, f2_hz: float, duration_s: float) -> float:
    """``1 / sqrt(df/dt)`` of a linear sweep, ``df/dt = (f2 - f1) / T`` (the same at every frequency), s."""
    return 1.0 / math.sqrt((f2_hz - f1_hz) / duration_s)


def _fade_limit_s(kind: str, f1_hz: float, f2_hz: float, duration_s: float) -> float:
    """Longest fade :func:`check_sweep_band` accepts, s: half an octave's time, or a quarter of a linear sweep."""
    if kind == "exponential":
        return duration_s / math.log(f2_hz / f1_hz) * math.log(2.0) / 2.0
    return duration_s / 4.0


def default_fades_s(kind: str, f1_hz: float, f2_hz: float, duration_s: float) -> tuple[float, float]:
    """Fades (s) that keep the band flat: one Fresnel time at f1 (fade-in) and at f2 (fade-out).

    Parameters
    ----------
    kind, f1_hz, f2_hz, duration_s
        The sweep's kind, limits (Hz) and duration T (s), as :func:`default_pre_roll_s` takes them.

    Returns
    -------
    (fade_in_s, fade_out_s) : tuple of float
        :func:`fresnel_time_s` at f1 and f2 for an exponential sweep,
        ``sqrt(T / (f2 - f1))`` for both ends of a linear one; each at most
        the longest fade the sweep allows (half the time of an octave, or a
        quarter of a linear sweep), which binds only for short sweeps.
    """
    limit = _fade_limit_s(kind, f1_hz, f2_hz, duration_s)
    if kind == "exponential":
        fades = (fresnel_time_s(f1_hz, f1_hz, f2_hz, duration_s), fresnel_time_s(f2_hz, f1_hz, f2_hz, duration_s))
    else:
        t = _linear_fresnel_time_s(f1_hz, f2_hz, duration_s)
        fades = (t, t)
    return (min(fades[0], limit), min(fades[1], limit))


def default_pre_roll_s(kind: str, f1_hz: float, f2_hz: float, duration_s: float) -> float:
    """Time (s) a deconvolved response keeps before zero lag to hold the pulse's pre-ringing.

    One Fresnel time at f1 (:func:`fresnel_time_s`; the pulse's lowest
    frequencies ring about that long before zero lag), but at most half the
    time between the linear response and the 2nd harmonic's,
    ``T ln 2 / (2 ln(f2/f1))``, where :func:`arrayplan.signals.deconvolve.harmonic_windows`
    starts the 2nd harmonic's window; for an exponential sweep that is the
    default fade-in (:func:`default_fades_s`).  Linear sweeps ring at both band
    edges: two Fresnel times, ``2 sqrt(T / (f2 - f1))``, at most T / 4.

    With it, a known system measured at any delay reads within 0.1 dB of its
    transfer function across :attr:`arrayplan.signals.sweeps.SweepSignal.flat_band_hz`; one Fresnel
    time left 0.11 dB for linear sweeps (measured, tests/test_deconvolve.py).
    Without it, a delay shorter than the pre-ringing reads up to a few dB low
    near f1.

    Parameters
    ----------
    kind : str
        ``"exponential"`` or ``"linear"``.
    f1_hz, f2_hz, duration_s : float
        The sweep's limits (Hz) and duration T (s), as for :func:`harmonic_offset_s`.

    Returns
    -------
    float
        Pre-roll (s).
    """
    if kind == "exponential":
        return default_fades_s(kind, f1_hz, f2_hz, duration_s)[0]
    return min(2.0 * _linear_fresnel_time_s(f1_hz, f2_hz, duration_s), _fade_limit_s(kind, f1_hz, f2_hz, duration_s))


def max_pre_roll_s(kind: str, f1_hz: float, f2_hz: float, duration_s: float) -> float:
    """Longest pre-roll (s) that stays clear of the 2nd harmonic: half its offset (linear sweeps: T / 4).

    Parameters
    ----------
    kind, f1_hz, f2_hz, duration_s
        As for :func:`default_pre_roll_s` (Hz, s).

    Returns
    -------
    float
        Longest pre-roll (s).
    """
    return _fade_limit_s(kind, f1_hz, f2_hz, duration_s)
