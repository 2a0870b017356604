"""Stepped tones and tone bursts, each with raised-cosine fades of its own."""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np

from ..errors import InputError

__all__ = ["MIN_TONE_PERIODS", "stepped_tones", "tone_bursts"]

#: A steady tone must hold at least this many periods between its fades
#: (common practice, no source).
MIN_TONE_PERIODS = 4.0


def _check_freq(f: float, fs: float, name: str, source: str | None) -> None:
    nyq = fs / 2.0
    if not (math.isfinite(f) and 0 < f < nyq):
        raise InputError(f"tone frequency {f:g} Hz is outside (0, {nyq:g}) Hz (half the sample rate)",
                         source=source, field=name, fix="choose frequencies below fs/2")


def _fade_window(n: int, n_fade: int) -> np.ndarray:
    w = np.ones(n)
    ramp = 0.5 * (1.0 - np.cos(np.pi * np.arange(n_fade) / n_fade))
    w[:n_fade] = ramp
    w[n - n_fade:] = ramp[::-1]
    return w


def stepped_tones(freqs_hz: Sequence[float], tone_s: float, gap_s: float, sample_rate_hz: float,
                  fade_s: float, *, source: str | None = None) -> np.ndarray:
    """Steady sine tones one after another, separated by silence.

    Parameters
    ----------
    freqs_hz : sequence of float
        Tone frequencies, Hz, each in (0, fs/2).
    tone_s : float
        Duration of each tone, s, fades included.
    gap_s : float
        Silence between tones, s (>= 0).
    sample_rate_hz : float
    fade_s : float
        Raised-cosine fade at both ends of every tone, s (> 0).
    source : str, optional
        Named in messages.

    Returns
    -------
    ndarray, shape (n_tones * n_tone + (n_tones - 1) * n_gap,)
        Unit amplitude; the first and last samples are zero.
    """
    freqs = [float(f) for f in freqs_hz]
    if not freqs:
        raise InputError("no tone frequencies given", source=source, field="freqs_hz",
                         fix="give a comma-separated list, e.g. 250,1000,4000")
    if not (math.isfinite(fade_s) and fade_s > 0):
        raise InputError(f"fade must be positive, got {fade_s!r} s", source=source, field="fade_in_s")
    if not (math.isfinite(gap_s) and gap_s >= 0):
        raise InputError(f"gap must be zero or positive, got {gap_s!r} s", source=source, field="gap_s")
    n_tone = int(round(tone_s * sample_rate_hz)) if math.isfinite(tone_s) and tone_s > 0 else 0
    n_fade = max(2, int(round(fade_s * sample_rate_hz)))
    if n_tone < 2 * n_fade:
        raise InputError(f"tones of {tone_s!r} s are shorter than their two fades ({2 * fade_s:g} s)",
                         source=source, field="tone_s", fix="lengthen the tones or shorten the fades")
    steady_s = (n_tone - 2 * n_fade) / sample_rate_hz
    parts = []
    gap = np.zeros(int(round(gap_s * sample_rate_hz)))
    t = np.arange(n_tone) / sample_rate_hz
    window = _fade_window(n_tone, n_fade)
    for i, f in enumerate(freqs):
        _check_freq(f, sample_rate_hz, f"freqs_hz[{i + 1}]", source)
        if steady_s * f < MIN_TONE_PERIODS:
            raise InputError(f"a {tone_s:g} s tone at {f:g} Hz holds {steady_s * f:.2f} periods between its "
                             f"fades, at least {MIN_TONE_PERIODS:g} are needed", source=source,
                             field="tone_s", fix="lengthen the tones")
        if i:
            parts.append(gap)
        parts.append(np.sin(2 * np.pi * f * t) * window)
    return np.concatenate(parts)


def tone_bursts(freq_hz: float, cycles: float, period_s: float, count: int, sample_rate_hz: float,
                *, fade_cycles: float = 1.0, source: str | None = None) -> np.ndarray:
    """A train of tone bursts: `cycles` periods of a sine, repeated every `period_s`.

    Parameters
    ----------
    freq_hz : float
        Tone frequency, Hz, in (0, fs/2).
    cycles : float
        Periods per burst, fades included (>= 2 * fade_cycles).
    period_s : float
        Time from one burst's start to the next, s (>= the burst length).
    count : int
        Number of bursts, >= 1.
    sample_rate_hz : float
    fade_cycles : float
        Raised-cosine fade at each end of every burst, in periods (> 0).
    source : str, optional
        Named in messages.

    Returns
    -------
    ndarray, shape ((count - 1) * n_period + n_burst,)
        Unit amplitude; the first and last samples are zero.
    """
    _check_freq(freq_hz, sample_rate_hz, "freq_hz", source)
    if not (math.isfinite(fade_cycles) and fade_cycles > 0):
        raise InputError(f"fade must be a positive number of periods, got {fade_cycles!r}", source=source,
                         field="fade_cycles")
    if not (math.isfinite(cycles) and cycles >= 2 * fade_cycles):
        raise InputError(f"a burst of {cycles!r} periods is shorter than its two fades ({2 * fade_cycles:g} "
                         "periods)", source=source, field="cycles", fix="give more cycles per burst")
    if int(count) < 1:
        raise InputError(f"burst count must be at least 1, got {count}", source=source, field="count")
    n_burst = int(round(cycles / freq_hz * sample_rate_hz))
    n_period = int(round(period_s * sample_rate_hz)) if math.isfinite(period_s) else -1
    if n_period < n_burst:
        raise InputError(f"burst period {period_s!r} s is shorter than a burst ({n_burst / sample_rate_hz:.4g} s)",
                         source=source, field="period_s", fix="lengthen the period or shorten the bursts")
    n_fade = max(2, int(round(fade_cycles / freq_hz * sample_rate_hz)))
    t = np.arange(n_burst) / sample_rate_hz
    burst = np.sin(2 * np.pi * freq_hz * t) * _fade_window(n_burst, n_fade)
    out = np.zeros((int(count) - 1) * n_period + n_burst)
    for k in range(int(count)):
        out[k * n_period:k * n_period + n_burst] = burst
    return out
