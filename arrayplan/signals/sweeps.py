"""Sine sweeps and their inverse filters (exponential after A. Farina, 2000; linear).

The exponential sine sweep from ``f1`` to ``f2`` over ``T`` seconds is

    x(t) = sin(2 pi f1 L (exp(t / L) - 1)),   L = T / ln(f2 / f1),

and its inverse filter is the time-reversed sweep times ``exp(-t / L)``
(which undoes the sweep's pink, -3 dB per octave, spectrum).  The response
of a system to the sweep, convolved with the inverse, is its impulse
response at lag ``n_sweep - 1`` after the sweep's first sample; the n-th
harmonic distortion product appears ``T ln(n) / ln(f2 / f1)`` seconds
earlier (A. Farina, "Simultaneous measurement of impulse response and
distortion with a swept-sine technique", 108th AES Convention, Paris, 2000).

Gain of the deconvolution
-------------------------
The inverse is scaled so that the played sweep convolved with it has unit
magnitude *in the band*: exactly 0 dB at the band's centre (the frequency the
sweep passes half-way through, ``sqrt(f1 f2)`` for an exponential sweep,
``(f1 + f2) / 2`` for a linear one).  A deconvolved response is then the
system's transfer function in the band (in the IR set's units: full scale
per full scale, or Pa/V when calibrated), as the planner and verification
read it through the DFT (S. Müller and P. Massarani, "Transfer-function
measurement with sweeps", JAES 49(6), 2001: the deconvolved spectrum of a
unity system is flat in band).  In the time domain the band-limited pulse of
a pure delay then peaks *below* 1 (about ``2 (f2 - f1) / fs`` for a wide
band); its position is still exact to the sample.

Near the band edges the sweep's spectrum ripples (Fresnel ripple of the
short fades) and the time-reversed inverse does not undo it, so the unity
response is flat only inside :attr:`SweepSignal.flat_band_hz`, the band
around the centre where it stays within :data:`FLAT_BAND_TOLERANCE_DB`.
Longer fades widen it.  With fades one Fresnel time long (the time an
exponential sweep takes to cross one Fresnel zone, ``1 / sqrt(f ln(f2/f1) / T)``
seconds at f = f1 for the fade-in and f = f2 for the fade-out, see
:func:`fresnel_time_s`) the ripple stays within 0.1 dB from half an octave
above the fade-in's end to a tenth of an octave below the fade-out's start
(measured, see tests/test_signals_sweeps.py).  These are the default fades
(:func:`default_fades_s`), used when a fade is not given; a fixed 20 ms
fade-in is far shorter than that at 20 Hz (0.17 s for a 4 s sweep) and loses
more than an octave at the bottom.  :attr:`SweepSignal.flat_band_hz` says
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

The pure functions (:func:`exponential_sweep`, :func:`linear_sweep`,
:func:`exponential_inverse_filter`, :func:`linear_inverse_filter`,
:func:`harmonic_offset_s`) take and return plain arrays; :func:`make_sweep`
adds the conditioning, level, padding and normalisation a playable file
needs and returns a :class:`SweepSignal`, whose :meth:`SweepSignal.sidecar`
holds everything :mod:`arrayplan.signals.deconvolve` needs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from ..errors import InputError
from .unity import (FLAT_BAND_PHASE_TOLERANCE_DEG, FLAT_BAND_TOLERANCE_DB, compensate_highpass_phase,
                    flat_band_hz, highpass_response, normalise_inverse, unity_response)
from .levels import (DEFAULT_PEAK_CAP_DBFS, check_peak, condition, effective_cap_dbfs, peak_dbfs, raised_cosine_fade,
                     rms_dbfs, scale_to_level, true_peak_dbfs)

__all__ = [
    "SWEEP_KINDS",
    "MIN_CYCLES_LOWEST_OCTAVE",
    "MIN_TIME_BANDWIDTH",
    "exponential_sweep",
    "linear_sweep",
    "exponential_inverse_filter",
    "linear_inverse_filter",
    "normalise_inverse",
    "FLAT_BAND_TOLERANCE_DB",
    "band_centre_hz",
    "unity_response",
    "flat_band_hz",
    "fresnel_time_s",
    "default_fades_s",
    "default_pre_roll_s",
    "harmonic_offset_s",
    "check_sweep_band",
    "SweepSettings",
    "SweepSignal",
    "make_sweep",
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


@dataclass(frozen=True)
class SweepSettings:
    """Everything that defines a playable sweep.

    Parameters
    ----------
    kind : {"exponential", "linear"}
    f1_hz, f2_hz : float
        Start and end frequencies, Hz.
    duration_s : float
        Sweep duration, s (padding excluded).
    sample_rate_hz : float
        Sample rate, Hz.
    fade_in_s, fade_out_s : float or None
        Raised-cosine fades on the sweep, s (> 0); None (the default) takes
        one Fresnel time at f1 and f2 (:func:`default_fades_s`).
        :func:`make_sweep` returns the settings with the values used.
    pad_before_s, pad_after_s : float
        Silence before and after the sweep, s.  The silence after is the
        room's decay time the recording captures: the impulse-response length.
    peak_dbfs, rms_dbfs : float or None
        Target level, dBFS: true peak (4x oversampled) or RMS of the sweep
        without its padding; at most one is set (default: true peak at the cap).
    peak_cap_dbfs : float
        Highest peak allowed unless `allow_above_cap`, dBFS.
    allow_above_cap : bool
        Consent to a peak above `peak_cap_dbfs`.
    highpass_hz : float or None
        Optional Butterworth high-pass for small drivers, Hz.
    highpass_order : int
        Order of that high-pass.
    """

    kind: str = "exponential"
    f1_hz: float = 20.0
    f2_hz: float = 20000.0
    duration_s: float = 4.0
    sample_rate_hz: float = 48000.0
    fade_in_s: float | None = None
    fade_out_s: float | None = None
    pad_before_s: float = 0.1
    pad_after_s: float = 1.0
    peak_dbfs: float | None = None
    rms_dbfs: float | None = None
    peak_cap_dbfs: float = DEFAULT_PEAK_CAP_DBFS
    allow_above_cap: bool = False
    highpass_hz: float | None = None
    highpass_order: int = 2

    def with_fades(self) -> "SweepSettings":
        """These settings with the default fades (:func:`default_fades_s`) filled in where None.

        Returns
        -------
        SweepSettings
            `self` when both fades are given, else a copy with the defaults (s).
        """
        if self.fade_in_s is not None and self.fade_out_s is not None:
            return self
        auto_in, auto_out = default_fades_s(self.kind, self.f1_hz, self.f2_hz, self.duration_s)
        return replace(self, fade_in_s=auto_in if self.fade_in_s is None else self.fade_in_s,
                       fade_out_s=auto_out if self.fade_out_s is None else self.fade_out_s)

    def level(self) -> dict[str, float | None]:
        """The level target as keyword arguments of :func:`scale_to_level`.

        Returns
        -------
        dict
            ``peak_dbfs`` and ``rms_dbfs`` (dBFS or None); without either, a
            true peak at the effective cap.
        """
        if self.peak_dbfs is None and self.rms_dbfs is None:
            cap = effective_cap_dbfs(self.peak_cap_dbfs, self.allow_above_cap)
            return {"peak_dbfs": cap, "rms_dbfs": None}
        return {"peak_dbfs": self.peak_dbfs, "rms_dbfs": self.rms_dbfs}


@dataclass
class SweepSignal:
    """A playable sweep, its normalised inverse filter, and where the responses land.

    Attributes
    ----------
    settings : SweepSettings
    sweep : ndarray, shape (n_sweep,)
        The conditioned, scaled sweep as played (no padding), full scale = 1.
    signal : ndarray, shape (n_pad_before + n_sweep + n_pad_after,)
        The file content: silence, sweep, silence.
    inverse : ndarray, shape (n_sweep,)
        Inverse filter, scaled so that ``sweep * inverse`` has unit
        magnitude at the band centre (:func:`normalise_inverse`).
    n_pad_before, n_pad_after : int
        Padding in samples.
    linear_lag : int
        Index, in ``fftconvolve(file, inverse)``, of the linear impulse
        response's zero lag: ``n_pad_before + n_sweep - 1``.
    extra : dict
        Values computed on the way: ``fade_rule`` (how the fades were
        chosen) and the cached ``flat_band_hz``.
    """

    settings: SweepSettings
    sweep: np.ndarray
    signal: np.ndarray
    inverse: np.ndarray
    n_pad_before: int
    n_pad_after: int
    extra: dict[str, Any] = field(default_factory=dict)

    @property
    def n_sweep(self) -> int:
        """Length of the sweep without padding.

        Returns
        -------
        int
            Samples.
        """
        return int(self.sweep.size)

    @property
    def centre_hz(self) -> float:
        """The band centre where the deconvolution gain is exactly 1.

        Returns
        -------
        float
            :func:`band_centre_hz` of the settings (Hz).
        """
        return band_centre_hz(self.settings.kind, self.settings.f1_hz, self.settings.f2_hz)

    @property
    def flat_band_hz(self) -> tuple[float, float]:
        """Band around the centre where a unity system deconvolves to 0 dB within
        :data:`FLAT_BAND_TOLERANCE_DB` (computed once, then kept).

        Returns
        -------
        (float, float)
            Lowest and highest frequency of the band (Hz).
        """
        if "flat_band_hz" not in self.extra:
            self.extra["flat_band_hz"] = flat_band_hz(self.sweep, self.inverse, self.centre_hz,
                                                      self.settings.sample_rate_hz)
        return self.extra["flat_band_hz"]

    @property
    def linear_lag(self) -> int:
        """Zero lag of the linear response in ``fftconvolve(file, inverse)``.

        Returns
        -------
        int
            0-based sample index ``n_pad_before + n_sweep - 1``.
        """
        return self.n_pad_before + self.n_sweep - 1

    @property
    def pre_roll_samples(self) -> int:
        """Samples to keep before zero lag in a deconvolved response (:func:`default_pre_roll_s`).

        Returns
        -------
        int
            The pre-roll in samples, rounded down.
        """
        s = self.settings
        return int(math.floor(default_pre_roll_s(s.kind, s.f1_hz, s.f2_hz, s.duration_s) * s.sample_rate_hz))

    def harmonic_offsets_samples(self, max_order: int = 5) -> dict[int, float]:
        """Offsets (samples, fractional) of harmonics 2..max_order before the linear response.

        Empty for a linear sweep, whose harmonics do not separate in time.

        Parameters
        ----------
        max_order : int
            Highest harmonic order.

        Returns
        -------
        dict of int to float
            Harmonic order -> offset (samples, fractional).
        """
        s = self.settings
        if s.kind != "exponential":
            return {}
        return {n: harmonic_offset_s(n, s.f1_hz, s.f2_hz, s.duration_s) * s.sample_rate_hz
                for n in range(2, max_order + 1)}

    def sidecar(self, inverse_file: str | None) -> dict[str, Any]:
        """The ``sweep`` block of the JSON sidecar: everything deconvolution needs.

        Parameters
        ----------
        inverse_file : str or None
            File name of the inverse filter written beside the sweep, if any.

        Returns
        -------
        dict
            JSON-ready: limits (Hz), durations and fades (s), paddings, lags and
            offsets (samples), the sweep's levels (dBFS), the flat band and
            how the inverse is normalised.
        """
        s = self.settings
        return {
            "kind": s.kind,
            "f1_hz": s.f1_hz,
            "f2_hz": s.f2_hz,
            "duration_s": s.duration_s,
            "sample_rate_hz": s.sample_rate_hz,
            "n_sweep_samples": self.n_sweep,
            "pad_before_samples": self.n_pad_before,
            "pad_after_samples": self.n_pad_after,
            "pad_before_s": s.pad_before_s,
            "pad_after_s": s.pad_after_s,
            "fade_in_s": s.fade_in_s,
            "fade_out_s": s.fade_out_s,
            "fade_shape": "raised cosine",
            "fade_rule": self.extra.get("fade_rule", "as given"),
            "dc_blocked": True,
            "highpass_hz": s.highpass_hz,
            "highpass_order": s.highpass_order if s.highpass_hz is not None else None,
            "sweep_peak_dbfs": peak_dbfs(self.sweep),
            "sweep_true_peak_dbfs": true_peak_dbfs(self.sweep),
            "sweep_rms_dbfs": rms_dbfs(self.sweep),
            "inverse_filter_file": inverse_file,
            "inverse_normalisation": ("|DFT(sweep * inverse)| = 1 at the band centre for the sweep as played "
                                      "(deconvolved responses carry the system's in-band gain)"
                                      if s.highpass_hz is None else
                                      "|DFT(sweep * inverse)| = |H| of the high-pass at the band centre, so 1 "
                                      "above the high-pass (deconvolved responses carry the system's in-band "
                                      "gain and the high-pass's magnitude, not its phase)"),
            "unity_gain_at_hz": self.centre_hz,
            "flat_band_hz": list(self.flat_band_hz),
            "flat_band_tolerance_db": FLAT_BAND_TOLERANCE_DB,
            "flat_band_phase_tolerance_deg": FLAT_BAND_PHASE_TOLERANCE_DEG,
            "highpass_phase": ("compensated in the inverse filter (responses keep the high-pass's magnitude, "
                               "not its phase)" if s.highpass_hz is not None else None),
            "linear_lag_samples": self.linear_lag,
            "pre_roll_samples": self.pre_roll_samples,
            "pre_roll_rule": "one Fresnel time at f1, at most half the time to the 2nd harmonic "
                             "(linear sweeps: two Fresnel times, at most a quarter of the sweep)",
            "harmonic_offsets_samples": {str(k): v for k, v in self.harmonic_offsets_samples().items()},
        }


def _pad_samples(value_s: float, fs: float, name: str, source: str | None) -> int:
    if not (math.isfinite(value_s) and value_s >= 0):
        raise InputError(f"padding must be zero or a positive number of seconds, got {value_s!r}",
                         source=source, field=name)
    return int(round(value_s * fs))


def make_sweep(settings: SweepSettings, *, source: str | None = None) -> SweepSignal:
    """Build a playable sweep: generate, condition, set the level, pad, and make its inverse.

    Parameters
    ----------
    settings : SweepSettings
        What to build.
    source : str, optional
        Named in messages (e.g. the output file).

    Returns
    -------
    SweepSignal
        The sweep, the padded file content (n_samples,), the normalised
        inverse filter, and the settings with the fades used.

    Raises
    ------
    InputError
        Limits outside (0, fs/2), a duration too short for the band, fades
        that do not fit, a level above the cap or one that would clip.
    """
    s = settings
    check_sweep_band(s.kind, s.f1_hz, s.f2_hz, s.duration_s, s.sample_rate_hz,
                     fade_in_s=s.fade_in_s, fade_out_s=s.fade_out_s, source=source)
    given = [name for name, v in (("fade-in", s.fade_in_s), ("fade-out", s.fade_out_s)) if v is not None]
    fade_rule = ("as given" if len(given) == 2 else
                 "one Fresnel time at f1 (fade-in) and f2 (fade-out)"
                 + (f"; {given[0]} as given" if given else ""))
    s = s.with_fades()
    n_before = _pad_samples(s.pad_before_s, s.sample_rate_hz, "pad_before_s", source)
    n_after = _pad_samples(s.pad_after_s, s.sample_rate_hz, "pad_after_s", source)
    if n_after < 1:
        raise InputError("a sweep needs silence after it: that silence is the decay time the recording "
                         "captures and the impulse-response length", source=source, field="pad_after_s",
                         fix="give the room's decay time, e.g. `pad_after_s` 1")
    make = exponential_sweep if s.kind == "exponential" else linear_sweep
    raw = make(s.f1_hz, s.f2_hz, s.duration_s, s.sample_rate_hz)
    played = condition(raw, s.sample_rate_hz, fade_in_s=s.fade_in_s, fade_out_s=s.fade_out_s,
                       highpass_hz=s.highpass_hz, highpass_order=s.highpass_order, source=source)
    played = scale_to_level(played, **s.level(), source=source)
    check_peak(played, cap_dbfs=s.peak_cap_dbfs, allow_above_cap=s.allow_above_cap, source=source)
    faded = raised_cosine_fade(raw, s.sample_rate_hz, s.fade_in_s, s.fade_out_s, source=source)
    if s.kind == "exponential":
        inverse = exponential_inverse_filter(faded, s.f1_hz, s.f2_hz, s.duration_s, s.sample_rate_hz)
    else:
        inverse = linear_inverse_filter(faded)
    if s.highpass_hz is not None:
        inverse = compensate_highpass_phase(inverse, s.highpass_hz, s.highpass_order, s.sample_rate_hz)
    centre = band_centre_hz(s.kind, s.f1_hz, s.f2_hz)
    inverse = normalise_inverse(played, inverse, centre, s.sample_rate_hz)
    if s.highpass_hz is not None:
        # Unit gain above the high-pass, not at the centre, where the high-pass may still attenuate.
        inverse = inverse * abs(highpass_response(centre, s.highpass_hz, s.highpass_order, s.sample_rate_hz))
    signal = np.concatenate([np.zeros(n_before), played, np.zeros(n_after)])
    return SweepSignal(settings=s, sweep=played, signal=signal, inverse=inverse,
                       n_pad_before=n_before, n_pad_after=n_after, extra={"fade_rule": fade_rule})


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
    f1_hz, f2_hz : float
        Sweep limits (Hz).
    duration_s : float
        Sweep duration T (s).

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
    kind : {"exponential", "linear"}
    f1_hz, f2_hz : float
        Sweep limits, Hz.
    duration_s : float
        Sweep duration T, s.

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
    transfer function across :attr:`SweepSignal.flat_band_hz`; one Fresnel
    time left 0.11 dB for linear sweeps (measured, tests/test_deconvolve.py).
    Without it, a delay shorter than the pre-ringing reads up to a few dB low
    near f1.

    Parameters
    ----------
    kind : str
        ``"exponential"`` or ``"linear"``.
    f1_hz, f2_hz : float
        Sweep limits (Hz).
    duration_s : float
        Sweep duration T (s).

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
