"""The exposure estimate: the sound level a test signal makes at the listeners, and the check that fails closed.

From the speaker's sensitivity (dB SPL at 1 m for a stated drive voltage),
the amplifier's voltage at full scale, the signal's level and the listener
distances, the sound level at each listener (:func:`estimate_spl_at_listeners`,
:func:`estimate_exposure`), the permitted daily exposure after NIOSH and
OSHA (:mod:`arrayplan.safety.exposure_limits`), and a warning above 85 dBA and a
refusal above a cap unless overridden (:func:`check_exposure`).

Assumptions (stated in the printed report too): free field, inverse-square
spreading from 1 m, a speaker with a flat response at its rated sensitivity,
no room gain (a reverberant room adds to these figures), and, for several
speakers playing one signal, their pressures adding in phase (the worst
case).  The estimate is a guide for planning, not a measurement: check the
level with a sound level meter and follow local codes and licensed practice.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np

from ..errors import InputError
from .exposure_limits import (_EIGHT_HOURS_S, DEFAULT_MAX_DBA, DEFAULT_MAX_PEAK_DB_SPL, WARN_DBA, a_weight_signal,
                              max_window_rms, permitted_exposure_niosh, permitted_exposure_osha)

__all__ = [
    "RATING_VRMS",
    "DEFAULT_LISTENER_DISTANCE_M",
    "estimate_spl_at_listeners",
    "ExposureEstimate",
    "estimate_exposure",
    "check_exposure",
    "format_exposure",
    "PLAUSIBLE_SENSITIVITY_DB_SPL",
    "PLAUSIBLE_SENSITIVITY_VRMS",
    "PLAUSIBLE_AMP_VRMS",
    "PLAUSIBLE_DISTANCE_M",
    "ASSUMED_SENSITIVE_SPEAKER_DB_SPL",
    "check_exposure_inputs",
    "worst_case_unknown_speaker",
]

#: Drive voltage of a loudspeaker's sensitivity rating, V RMS: 2.83 V, 1 W into 8 ohm (common practice, no source).
RATING_VRMS = 2.83
#: Listener distance assumed when none is given, m: a person next to the speaker (common practice, no source).
DEFAULT_LISTENER_DISTANCE_M = 1.0


#: Ranges outside which an input of the estimate is refused as implausible
#: (common practice, no source).  Each bound is far outside what real rigs
#: use, so only typing slips and unit mix-ups land outside; the low ends
#: matter most, because a value too low there makes the estimate too quiet.
#: Speaker sensitivity, dB SPL at 1 m for the rating voltage.
PLAUSIBLE_SENSITIVITY_DB_SPL = (50.0, 130.0)
#: Drive voltage of a sensitivity rating, V RMS (ratings use 1 V to 4 V).
PLAUSIBLE_SENSITIVITY_VRMS = (0.1, 100.0)
#: Volts RMS at the speaker terminals for a full-scale sine (a converter's
#: line output up to a large power amplifier).
PLAUSIBLE_AMP_VRMS = (0.01, 1000.0)
#: Listener distance, m.
PLAUSIBLE_DISTANCE_M = (0.01, 1000.0)
#: Sensitivity assumed for a speaker whose rating is unknown: a sensitive
#: speaker, dB SPL at 1 m for 2.83 V (common practice, no source: hi-fi
#: and monitor speakers lie around 84-92 dB, pro and horn-loaded ones above).
ASSUMED_SENSITIVE_SPEAKER_DB_SPL = 100.0

#: The parameter names used in messages unless the caller gives its own
#: (a command-line front end passes its option names).
_DEFAULT_NAMES = {"sensitivity_db_spl": "sensitivity_db_spl", "sensitivity_vrms": "sensitivity_vrms",
                  "amp_vrms_full_scale": "amp_vrms_full_scale", "distances_m": "distances_m",
                  "max_dba": "max_dba", "max_peak_db_spl": "max_peak_db_spl", "allow_loud": "allow_loud"}


def _names(option_names: Mapping[str, str] | None) -> dict[str, str]:
    return {**_DEFAULT_NAMES, **(option_names or {})}


def _check_range(value: float, bounds: tuple[float, float], name: str, unit: str) -> float:
    """`value` as a float if it lies within `bounds`; otherwise refuse, naming the numbers.

    Written so that NaN fails: ``not (lo <= v <= hi)`` is True for NaN.
    """
    value = float(value)
    lo, hi = bounds
    if not (lo <= value <= hi):
        raise InputError(f"{value!r} {unit} is outside the plausible range {lo:g}..{hi:g} {unit}; the level "
                         "estimate would be meaningless", field=name,
                         fix="check the number and its unit; a value too low makes the estimate too quiet")
    return value


def check_exposure_inputs(*, sensitivity_db_spl: float, amp_vrms_full_scale: float, sensitivity_vrms: float,
                          option_names: Mapping[str, str] | None = None) -> None:
    """Refuse implausible inputs of the exposure estimate (NaN included), naming the numbers.

    Parameters
    ----------
    sensitivity_db_spl : float
        dB SPL at 1 m, within :data:`PLAUSIBLE_SENSITIVITY_DB_SPL`.
    amp_vrms_full_scale : float
        V RMS for a full-scale sine, within :data:`PLAUSIBLE_AMP_VRMS`.
    sensitivity_vrms : float
        V RMS of the rating, within :data:`PLAUSIBLE_SENSITIVITY_VRMS`.
    option_names : mapping, optional
        Names to use in messages instead of the parameter names.

    Raises
    ------
    InputError
        For a value outside its range.
    """
    n = _names(option_names)
    _check_range(sensitivity_db_spl, PLAUSIBLE_SENSITIVITY_DB_SPL, n["sensitivity_db_spl"], "dB SPL")
    _check_range(amp_vrms_full_scale, PLAUSIBLE_AMP_VRMS, n["amp_vrms_full_scale"], "V RMS")
    _check_range(sensitivity_vrms, PLAUSIBLE_SENSITIVITY_VRMS, n["sensitivity_vrms"], "V RMS")


def _distances(distances_m: Sequence[float] | np.ndarray, n_spk: int, name: str = "distances_m") -> np.ndarray:
    d = np.asarray(distances_m, dtype=float)
    if d.ndim == 1:
        d = np.repeat(d[:, None], n_spk, axis=1)
    if d.ndim != 2 or d.shape[1] != n_spk or d.shape[0] < 1:
        raise InputError(f"listener distances must have shape (n_listeners,) or (n_listeners, {n_spk}), "
                         f"got {np.asarray(distances_m).shape}", field=name)
    lo, hi = PLAUSIBLE_DISTANCE_M
    if not np.all((d >= lo) & (d <= hi)):   # NaN fails both comparisons
        raise InputError(f"listener distances must be positive and finite, within {lo:g}..{hi:g} m, got "
                         f"{np.asarray(distances_m).ravel().tolist()}", field=name)
    return d


def _combine(levels_db: np.ndarray, how: str) -> np.ndarray:
    """Combine per-speaker levels (n_listeners, n_spk) into one per listener."""
    if how == "coherent":
        return 20.0 * np.log10(np.sum(10.0 ** (levels_db / 20.0), axis=1))
    if how == "incoherent":
        return 10.0 * np.log10(np.sum(10.0 ** (levels_db / 10.0), axis=1))
    if how == "one_at_a_time":
        return np.max(levels_db, axis=1)
    raise ValueError(f"combine must be 'coherent', 'incoherent' or 'one_at_a_time', got {how!r}")


def estimate_spl_at_listeners(*, sensitivity_db_spl: float, amp_vrms_full_scale: float,
                              channel_level_dbfs: Sequence[float] | np.ndarray,
                              distances_m: Sequence[float] | np.ndarray,
                              sensitivity_vrms: float = RATING_VRMS, combine: str = "coherent",
                              option_names: Mapping[str, str] | None = None) -> np.ndarray:
    """Sound level (dB re 20 µPa) at each listener from the speakers' drive levels.

    Parameters
    ----------
    sensitivity_db_spl : float
        Speaker sensitivity, dB SPL at 1 m for `sensitivity_vrms` volts RMS.
    amp_vrms_full_scale : float
        Volts RMS at the speaker terminals for a full-scale (0 dBFS peak) sine.
        A sample of value 1 then gives sqrt(2) times this in volts.
    channel_level_dbfs : array_like, shape (n_spk,)
        Level (RMS or peak, dBFS) of the signal each speaker plays; an RMS
        level gives an RMS SPL, a peak level a peak SPL.
    distances_m : array_like, shape (n_listeners,) or (n_listeners, n_spk)
        Listener-to-speaker distances, m (one per listener applies to every speaker).
    sensitivity_vrms : float
        Drive voltage of the sensitivity rating, V RMS (2.83 V: 1 W into 8 ohm).
    combine : {"coherent", "incoherent", "one_at_a_time"}
        How several speakers add: in phase (worst case, for one signal
        through several speakers), in power, or one at a time (the largest).
    option_names : mapping, optional
        Names to use in messages instead of the parameter names (a
        command-line front end passes its option names).

    Returns
    -------
    ndarray, shape (n_listeners,)
        dB SPL: free field, inverse square from 1 m, flat speaker response.

    Raises
    ------
    InputError
        For a sensitivity, voltage or distance outside its plausible range
        (:data:`PLAUSIBLE_SENSITIVITY_DB_SPL` and the others), NaN included.
    """
    check_exposure_inputs(sensitivity_db_spl=sensitivity_db_spl, amp_vrms_full_scale=amp_vrms_full_scale,
                          sensitivity_vrms=sensitivity_vrms, option_names=option_names)
    lev = np.asarray(channel_level_dbfs, dtype=float).reshape(-1)
    d = _distances(distances_m, lev.size, _names(option_names)["distances_m"])
    volts = math.sqrt(2.0) * amp_vrms_full_scale * 10.0 ** (lev / 20.0)
    with np.errstate(divide="ignore"):
        at_1m = sensitivity_db_spl + 20.0 * np.log10(volts / sensitivity_vrms)
    return _combine(at_1m[None, :] - 20.0 * np.log10(d), combine)


@dataclass
class ExposureEstimate:
    """Estimated sound levels of a signal at the listeners and the permitted exposure.

    Attributes
    ----------
    distances_m : ndarray, shape (n_listeners,)  nearest distance of each listener
    spl_db : ndarray, shape (n_listeners,)  highest 125 ms RMS level, unweighted, dB SPL
    dba : ndarray, shape (n_listeners,)  the same A-weighted, dBA
    peak_spl_db : ndarray, shape (n_listeners,)  peak level, dB SPL
    niosh_s, osha_s : ndarray, shape (n_listeners,)  permitted daily exposure at `dba`, s
    play_s : float  duration of the signal's active part, s
    combine : str  how the speakers were summed
    assumptions : str  the model's assumptions, in words
    """

    distances_m: np.ndarray
    spl_db: np.ndarray
    dba: np.ndarray
    peak_spl_db: np.ndarray
    niosh_s: np.ndarray
    osha_s: np.ndarray
    play_s: float
    combine: str
    assumptions: str = ("free field, inverse square from 1 m, flat speaker at rated sensitivity, "
                        "no room gain, level = highest 125 ms RMS")

    def to_json(self) -> dict:
        """The estimate as plain data for sidecars.

        Returns
        -------
        dict
            Levels (dB SPL, dBA) and permitted times (s) per listener, rounded
            to 3 decimals, None where not finite; play time (s) and the model.
        """
        def fin(a):
            return [None if not math.isfinite(v) else round(float(v), 3) for v in np.asarray(a).ravel()]
        return {
            "listener_distances_m": fin(self.distances_m),
            "spl_db": fin(self.spl_db),
            "dba": fin(self.dba),
            "peak_spl_db": fin(self.peak_spl_db),
            "niosh_permitted_s": fin(self.niosh_s),
            "osha_permitted_s": fin(self.osha_s),
            "play_s": round(self.play_s, 6),
            "speakers_combined": self.combine,
            "assumptions": self.assumptions,
        }


def estimate_exposure(signal: np.ndarray, sample_rate_hz: float, *, sensitivity_db_spl: float,
                      amp_vrms_full_scale: float, distances_m: Sequence[float] | np.ndarray,
                      sensitivity_vrms: float = RATING_VRMS, combine: str = "coherent",
                      option_names: Mapping[str, str] | None = None) -> ExposureEstimate:
    """Estimate the levels a signal file produces at the listeners.

    Parameters
    ----------
    signal : ndarray, shape (n_samples,) or (n_samples, n_spk)
        The file, one channel per speaker, full scale = 1.
    sample_rate_hz : float
    sensitivity_db_spl, amp_vrms_full_scale, distances_m, sensitivity_vrms, combine, option_names
        As for :func:`estimate_spl_at_listeners`.

    Returns
    -------
    ExposureEstimate
        The level of each channel is its highest RMS over 125 ms (so silence
        padding does not dilute it); the A-weighted level weights the
        signal's own spectrum, as a flat speaker would radiate it.
    """
    x = np.asarray(signal, dtype=float)
    if x.ndim == 1:
        x = x[:, None]
    with np.errstate(divide="ignore"):
        rms_db = 20.0 * np.log10(max_window_rms(x, sample_rate_hz))
        a_db = 20.0 * np.log10(max_window_rms(a_weight_signal(x, sample_rate_hz), sample_rate_hz))
        peak_db = 20.0 * np.log10(np.max(np.abs(x), axis=0))
    kw = dict(sensitivity_db_spl=sensitivity_db_spl, amp_vrms_full_scale=amp_vrms_full_scale,
              distances_m=distances_m, sensitivity_vrms=sensitivity_vrms, combine=combine,
              option_names=option_names)
    spl = estimate_spl_at_listeners(channel_level_dbfs=rms_db, **kw)
    dba = estimate_spl_at_listeners(channel_level_dbfs=a_db, **kw)
    # Pressure is proportional to voltage, so the peak sample gives the peak pressure (coherent sum).
    peak = estimate_spl_at_listeners(channel_level_dbfs=peak_db, **{**kw, "combine": "coherent"
                                                                     if combine != "one_at_a_time" else combine})
    active = np.flatnonzero(np.any(x != 0, axis=1))
    play_s = (active[-1] - active[0] + 1) / sample_rate_hz if active.size else 0.0
    d = _distances(distances_m, x.shape[1], _names(option_names)["distances_m"]).min(axis=1)
    return ExposureEstimate(distances_m=d, spl_db=spl, dba=dba, peak_spl_db=peak,
                            niosh_s=np.array([permitted_exposure_niosh(v) for v in dba]),
                            osha_s=np.array([permitted_exposure_osha(v) for v in dba]),
                            play_s=float(play_s), combine=combine)


def check_exposure(estimate: ExposureEstimate, *, max_dba: float = DEFAULT_MAX_DBA,
                   max_peak_db_spl: float = DEFAULT_MAX_PEAK_DB_SPL, allow_loud: bool = False,
                   source: str | None = None, option_names: Mapping[str, str] | None = None) -> list[str]:
    """Warn above 85 dBA; refuse above `max_dba` or `max_peak_db_spl` unless `allow_loud`.

    Fails closed: every comparison is written so that a NaN level or a NaN
    cap refuses, and a cap above the defaults (:data:`DEFAULT_MAX_DBA`,
    :data:`DEFAULT_MAX_PEAK_DB_SPL`) is itself refused unless `allow_loud`,
    since raising the cap lifts the refusal.

    Parameters
    ----------
    estimate : ExposureEstimate
    max_dba : float
        Refusal cap on the A-weighted level at any listener, dBA; at most
        :data:`DEFAULT_MAX_DBA` without `allow_loud`.
    max_peak_db_spl : float
        Refusal cap on the peak level, dB SPL; at most
        :data:`DEFAULT_MAX_PEAK_DB_SPL` without `allow_loud`.
    allow_loud : bool
        The explicit consent to levels above the caps.
    source : str, optional
        Named in the messages.
    option_names : mapping, optional
        Names to use in messages for ``max_dba``, ``max_peak_db_spl``,
        ``allow_loud`` and ``distances_m`` (a command-line front end passes
        its option names).

    Returns
    -------
    list of str
        One-line warnings (empty when every listener is at or below 85 dBA).

    Raises
    ------
    InputError
        When a cap is not a finite number, when a cap above its default is
        asked for without `allow_loud`, or when a listener's estimated level
        exceeds a cap (or is not a number) and `allow_loud` is False.
    """
    n = _names(option_names)
    consent = n["allow_loud"] if n["allow_loud"].startswith("-") else f"`{n['allow_loud']}`"
    for value, default, name, unit in ((max_dba, DEFAULT_MAX_DBA, n["max_dba"], "dBA"),
                                       (max_peak_db_spl, DEFAULT_MAX_PEAK_DB_SPL, n["max_peak_db_spl"], "dB SPL")):
        value = float(value)
        if not math.isfinite(value):
            raise InputError(f"the cap must be a finite number of {unit}, got {value!r}", source=source, field=name,
                             fix=f"give a cap at or below {default:g} {unit}")
        if not (value <= default) and not allow_loud:
            raise InputError(f"a cap of {value:g} {unit} is above the refusal level of {default:g} {unit}: raising "
                             "it lifts the safety limit", source=source, field=name,
                             fix=f"keep the cap at or below {default:g} {unit}, or give {consent} as well "
                                 "with hearing protection in place")
    warnings = []
    dba = np.asarray(estimate.dba, dtype=float)
    # NaN counts as the loudest listener, so it is the one checked.
    loudest = int(np.argmax(np.where(np.isnan(dba), np.inf, dba)))
    top, dist = float(dba[loudest]), float(estimate.distances_m[loudest])
    peaks = np.asarray(estimate.peak_spl_db, dtype=float)
    peak = float(np.inf if np.any(np.isnan(peaks)) else np.max(peaks))
    within_dba = top <= max_dba          # False for NaN
    within_peak = peak <= max_peak_db_spl
    if not allow_loud:
        if not within_dba:
            raise InputError(f"estimated {top:.1f} dBA at the listener {dist:g} m away exceeds the cap of "
                             f"{max_dba:g} dBA", source=source, field=n["distances_m"],
                             fix=f"lower the level or the amplifier gain, move listeners away, "
                                 f"or pass {consent} with hearing protection in place")
        if not within_peak:
            raise InputError(f"estimated peak {peak:.1f} dB SPL at a listener exceeds the cap of "
                             f"{max_peak_db_spl:g} dB SPL", source=source, field=n["distances_m"],
                             fix=f"lower the level, or pass {consent} with hearing protection in place")
    if not (top <= WARN_DBA):
        warnings.append(f"estimated {top:.1f} dBA at the listener {dist:g} m away is above {WARN_DBA:g} dBA: "
                        f"NIOSH permits {_duration(_permitted_or_zero(permitted_exposure_niosh, top))} a day, OSHA "
                        f"{_duration(_permitted_or_zero(permitted_exposure_osha, top))}; use hearing protection")
    under_refusal = top <= min(max_dba, DEFAULT_MAX_DBA) and peak <= min(max_peak_db_spl, DEFAULT_MAX_PEAK_DB_SPL)
    if allow_loud and not under_refusal:
        warnings.append(f"level above the cap ({top:.1f} dBA, peak {peak:.1f} dB SPL) allowed by {consent}")
    return warnings


def _permitted_or_zero(rule, dba: float) -> float:
    """Permitted exposure under `rule`, or 0 s for a level that is not a number."""
    return rule(dba) if math.isfinite(dba) or dba == -math.inf else 0.0


def worst_case_unknown_speaker(signal: np.ndarray, sample_rate_hz: float, *, amp_vrms_full_scale: float,
                               distances_m: Sequence[float] | np.ndarray,
                               combine: str = "one_at_a_time",
                               option_names: Mapping[str, str] | None = None) -> ExposureEstimate:
    """Exposure estimate for a known output voltage and an unknown speaker sensitivity.

    Assumes a sensitive speaker, :data:`ASSUMED_SENSITIVE_SPEAKER_DB_SPL`
    dB SPL at 1 m for 2.83 V, so the figures bound what most speakers would
    produce from this output (a horn-loaded speaker can be louder still).

    Parameters
    ----------
    signal : ndarray, shape (n_samples,) or (n_samples, n_spk)
        Full scale = 1.
    sample_rate_hz : float
    amp_vrms_full_scale : float
        V RMS at the speaker terminals for a full-scale sine.
    distances_m, combine, option_names
        As for :func:`estimate_exposure`.

    Returns
    -------
    ExposureEstimate
    """
    return estimate_exposure(signal, sample_rate_hz, sensitivity_db_spl=ASSUMED_SENSITIVE_SPEAKER_DB_SPL,
                             amp_vrms_full_scale=amp_vrms_full_scale, distances_m=distances_m,
                             sensitivity_vrms=RATING_VRMS, combine=combine, option_names=option_names)


def _duration(seconds: float) -> str:
    if seconds >= _EIGHT_HOURS_S:
        return "8 h or more"
    if seconds >= 3600:
        return f"{seconds / 3600:.1f} h"
    if seconds >= 60:
        return f"{seconds / 60:.1f} min"
    return f"{seconds:.0f} s"


def format_exposure(estimate: ExposureEstimate) -> str:
    """A short human-readable report of an exposure estimate (several lines).

    Parameters
    ----------
    estimate : ExposureEstimate
        From the exposure estimate of a signal.

    Returns
    -------
    str
        Lines without a final newline.
    """
    lines = [f"Estimated level at the listeners ({estimate.assumptions}; speakers {estimate.combine.replace('_', ' ')}):"]
    for i in range(estimate.dba.size):
        dose = estimate.play_s / estimate.niosh_s[i] if estimate.niosh_s[i] > 0 else math.inf
        lines.append(f"  {estimate.distances_m[i]:g} m: {estimate.spl_db[i]:.1f} dB SPL, {estimate.dba[i]:.1f} dBA, "
                     f"peak {estimate.peak_spl_db[i]:.1f} dB SPL; permitted a day: NIOSH "
                     f"{_duration(estimate.niosh_s[i])}, OSHA {_duration(estimate.osha_s[i])}; one play "
                     f"({estimate.play_s:.2f} s) uses {100 * dose:.3g} % of the NIOSH daily dose")
    return "\n".join(lines)
