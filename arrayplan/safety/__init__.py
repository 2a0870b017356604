"""Safety for loud test signals: the caution block, and the one import point for the exposure estimate.

:data:`CAUTION_TEXT` and :func:`print_caution` are the caution block printed
(on stderr) whenever a playable signal is written or played, and
:data:`CAUTION_NOTE` is its one-line form stored in every signal's sidecar.

The exposure estimate is importable from here too:

* :mod:`arrayplan.safety.exposure_limits`: the permitted daily exposure after
  NIOSH and OSHA, the warning level and the caps, A-weighting and the
  windowed RMS level;
* :mod:`arrayplan.safety.exposure_estimate`: the sound level at each listener
  from the speaker's sensitivity, the amplifier's voltage, the signal and
  the distances, and the check that warns above 85 dBA and refuses above a
  cap unless overridden (fails closed).

The estimate is a guide for planning, not a measurement: check the level
with a sound level meter and follow local codes and licensed practice.
"""

from __future__ import annotations

import sys
from typing import TextIO

from . import exposure_estimate as _estimate, exposure_limits as _limits
from .exposure_estimate import (ASSUMED_SENSITIVE_SPEAKER_DB_SPL, DEFAULT_LISTENER_DISTANCE_M, PLAUSIBLE_AMP_VRMS,
                                PLAUSIBLE_DISTANCE_M, PLAUSIBLE_SENSITIVITY_DB_SPL, PLAUSIBLE_SENSITIVITY_VRMS,
                                RATING_VRMS, ExposureEstimate, check_exposure, check_exposure_inputs,
                                estimate_exposure, estimate_spl_at_listeners, format_exposure,
                                worst_case_unknown_speaker)
from .exposure_limits import (DEFAULT_MAX_DBA, DEFAULT_MAX_PEAK_DB_SPL, LEVEL_WINDOW_S, NIOSH_CRITERION_DBA,
                              NIOSH_EXCHANGE_RATE_DB, OSHA_CRITERION_DBA, OSHA_EXCHANGE_RATE_DB, WARN_DBA,
                              a_weight_signal, a_weighting_db, max_window_rms, permitted_exposure_niosh,
                              permitted_exposure_osha)
from ..units import P_REF_PA, pressure_from_spl, spl_from_pressure

__all__ = [
    "CAUTION_TEXT",
    "CAUTION_NOTE",
    "print_caution",
    "P_REF_PA",
    "spl_from_pressure",
    "pressure_from_spl",
    *_limits.__all__,
    *_estimate.__all__,
]

CAUTION_TEXT = """\
CAUTION - loud test signals can harm hearing and loudspeakers.
  * Hearing: keep people out of the room or give them hearing protection;
    sweeps and noise at measurement level are loud, and damage adds up over
    the day.  Above 85 dBA, limit the time (NIOSH: 8 h at 85 dBA, half the
    time for every 3 dB more).
  * Tweeters and small drivers: sweeps and noise carry sustained
    high-frequency energy that music rarely has; they can burn a tweeter
    voice coil.  Use the high-pass option for small drivers and keep the
    level modest at the top of the band.
  * Start quiet and raise slowly: set the amplifier gain low, play, and step
    up a few dB at a time while listening for distortion, rattles or strain.
  * Watch the clip indicators of the interface, the converters and the
    amplifier; a clipped signal is a wrong measurement and a danger to the
    drivers.  Stop at once if anything sounds wrong.
  * The level estimate arrayplan prints is a planning guide (free field,
    rated sensitivity); check with a sound level meter.  Defer to local
    codes, workplace rules and licensed practice."""

#: The caution in one line, stored in every signal file's sidecar.
CAUTION_NOTE = ("Loud test signal: can harm hearing and loudspeakers (tweeters especially). "
                "Start quiet, raise slowly, watch clip indicators, protect listeners; "
                "defer to local codes and licensed practice.")


def print_caution(stream: TextIO | None = None) -> None:
    """Print :data:`CAUTION_TEXT` to `stream` (default: standard error).

    Parameters
    ----------
    stream : text stream, optional
        Where to print.
    """
    stream = sys.stderr if stream is None else stream
    print(CAUTION_TEXT, file=stream)
    stream.flush()

