"""Playable sine sweeps: settings, the conditioned and padded sweep, its normalised inverse filter.

The formulas (waveforms, inverse filters, band checks, harmonic offsets,
fades and pre-roll) are in :mod:`arrayplan.signals.sweep_formulas` and
importable from here too.

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

The pure functions (:mod:`arrayplan.signals.sweep_formulas`) take and
return plain arrays; :func:`make_sweep`
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
from . import sweep_formulas as _formulas
from .sweep_formulas import (MIN_CYCLES_LOWEST_OCTAVE, MIN_TIME_BANDWIDTH, SWEEP_KINDS, band_centre_hz,
                             check_sweep_band, default_fades_s, default_pre_roll_s, exponential_inverse_filter,
                             exponential_sweep, fresnel_time_s, harmonic_offset_s, linear_inverse_filter, linear_sweep,
                             max_pre_roll_s)
from .unity import (FLAT_BAND_PHASE_TOLERANCE_DEG, FLAT_BAND_TOLERANCE_DB, compensate_highpass_phase,
                    flat_band_hz, highpass_response, normalise_inverse, unity_response)
from .levels import (DEFAULT_PEAK_CAP_DBFS, check_peak, condition, effective_cap_dbfs, peak_dbfs, raised_cosine_fade,
                     rms_dbfs, scale_to_level, true_peak_dbfs)

__all__ = [
    *_formulas.__all__,
    "normalise_inverse",
    "FLAT_BAND_TOLERANCE_DB",
    "unity_response",
    "flat_band_hz",
    "SweepSettings",
    "SweepSignal",
    "make_sweep",
]


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

