"""Drive FIR filters from a zone design, and their time-domain check.

The zone weights are evaluated on the FFT bins of the filter length; speaker
s gets the spectrum ``H_s(f) = w_s(f) W(f) exp(-j 2 pi f D / fs)`` with W the
band window of :func:`arrayplan.filters.band_window` and D = taps // 2
the bulk delay; the taps are its inverse real FFT with the channel filters'
Tukey time window (:data:`arrayplan.filters.design.TUKEY_ALPHA`).  The request
(rate, band, taps, and taps enough for the delay spread from the speakers to
the zone points) is checked by :func:`arrayplan.filters.validate_request`.
The check convolves the taps with the simulated impulse responses (the
rig's room when it has one, else the free field) from the speakers to every
zone point (in the time domain) and measures the contrast the filters realise in each FFT bin of the band and
over the whole band (or, when given, with measured responses instead).

Notes
-----
Taps are dimensionless (source strength per unit input); the zone weights
are normalised so the reference speaker at unit drive gives the same
bright-zone level, so one filter set plays at about the level of one speaker.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy.signal import fftconvolve

from ..rig.directivity import OMNI
from ..errors import InputError
from ..filters import band_window, validate_request
from ..filters.design import taps_from_weights
from ..frequency import FrequencyAxis
from ..rig import ElementSet, Rig
from ..kernels.model_irs import kernel_impulse_responses, required_samples
from ..rig.zones import Zone
from .zones import points_model_kernel

__all__ = ["ZoneFilters", "zone_filter_taps", "check_zone_filters", "zone_points_rig"]

#: Bins of the band listed in the check (evenly spread); the band's contrast uses every bin.
MAX_CHECK_BINS = 64


@dataclass(frozen=True)
class ZoneFilters:
    """Drive filters of one zone design and what they realise.

    Attributes
    ----------
    taps : ndarray, shape (n_taps, n_spk)
    sample_rate_hz : float
    band_hz : (float, float)
    check_hz : ndarray, shape (n_bins,)
        FFT bins of the band listed (at most MAX_CHECK_BINS, evenly spread), Hz.
    designed_db, realised_db : ndarray, shape (n_bins,)
        Contrast of the weights and of the filters in each bin, dB.
    band_contrast_db : float
        Bright over dark energy in the whole band, realised by the filters, dB.
    """

    taps: np.ndarray
    sample_rate_hz: float
    band_hz: tuple[float, float]
    check_hz: np.ndarray
    designed_db: np.ndarray
    realised_db: np.ndarray
    band_contrast_db: float


def zone_filter_taps(weights_at: Callable[[FrequencyAxis], np.ndarray], points: Rig, sample_rate_hz: float,
                     taps: int, band_hz: tuple[float, float]) -> np.ndarray:
    """FIR taps realising the weights ``weights_at(axis)`` -> (n_freq, n_spk) in the band.

    Parameters
    ----------
    weights_at : callable
        Weights of the design at the given frequencies.
    points : Rig
        The speakers and the zone points (:func:`zone_points_rig`): the
        request must hold their delay spread.
    sample_rate_hz : float
        Hz.
    taps : int
        Filter length (>= 16); the bulk delay is taps // 2 samples.
    band_hz : (low, high)
        Hz, 0 < low < high < fs / 2.

    Returns
    -------
    ndarray, shape (n_taps, n_spk)
        Dimensionless taps.

    Raises
    ------
    InputError
        From :func:`arrayplan.filters.validate_request` when rate, band or
        taps cannot work.
    """
    validate_request(points, sample_rate_hz, taps, band_hz)
    fs, taps = float(sample_rate_hz), int(taps)
    hz = np.fft.rfftfreq(taps, 1.0 / fs)
    window = band_window(hz, (float(band_hz[0]), float(band_hz[1])), fs)
    idx = np.flatnonzero(window > 0)
    w = weights_at(FrequencyAxis(hz[idx]))
    return taps_from_weights(w[:, :, None], window, idx, taps, taps // 2, fs)[:, :, 0]


def zone_points_rig(rig: Rig, zones: list[Zone]) -> Rig:
    """The rig's speakers with the points of `zones` (in zone order) as its microphones.

    Parameters
    ----------
    rig : Rig
        Speakers and medium.
    zones : list of Zone
        Zones whose points become omnidirectional microphones.

    Returns
    -------
    Rig
        Microphones named ``<zone>:<point>``, channels 1..n; no room, zones
        or frequencies carried over.
    """
    pos = np.vstack([z.positions for z in zones])
    names = tuple(f"{z.name}:{n}" for z in zones for n in z.point_names)
    es = ElementSet(names, pos, (OMNI,) * len(pos), tuple(range(1, len(pos) + 1)))
    return Rig(rig.speakers, es, rig.medium, source=rig.source)


def check_zone_filters(rig: Rig, bright: list[Zone], dark: list[Zone], taps: np.ndarray, sample_rate_hz: float,
                       band_hz: tuple[float, float], designed: Callable[[FrequencyAxis], np.ndarray],
                       impulse_responses: np.ndarray | None = None) -> ZoneFilters:
    """Convolve the filters with the responses to the zone points and measure the contrast.

    Parameters
    ----------
    rig : Rig
    bright, dark : list of Zone
    taps : ndarray, shape (n_taps, n_spk)
    sample_rate_hz : float
    band_hz : (low, high)
    designed : callable
        ``designed(axis)`` -> contrast of the weights in dB at those
        frequencies, shape (n_freq,).
    impulse_responses : ndarray, shape (n_samples, n_points, n_spk), optional
        Responses to the bright then the dark points, from zero lag, at
        `sample_rate_hz` (for example measured ones); default the responses
        of the rig's room (or free field) simulated here.

    Returns
    -------
    ZoneFilters
    """
    fs = float(sample_rate_hz)
    n_b = sum(len(z) for z in bright)
    if impulse_responses is not None:
        ir = np.asarray(impulse_responses, dtype=float)
        if ir.ndim != 3 or ir.shape[1:] != (n_b + sum(len(z) for z in dark), taps.shape[1]):
            raise InputError(f"responses of shape {ir.shape} do not match the zones' points and the speakers",
                             source="impulse_responses")
    else:
        pts = zone_points_rig(rig, list(bright) + list(dark))
        kern = points_model_kernel(rig, pts.mics)
        n_ir = int(max(1024, 2 ** int(np.ceil(np.log2(required_samples(kern, fs) + 192)))))
        ir = kernel_impulse_responses(kern, fs, n_ir)                     # (n_ir, n_points, n_spk)
    y = fftconvolve(ir, taps[:, None, :], axes=0).sum(axis=2)             # (n_out, n_points)
    n_fft = 2 ** int(np.ceil(np.log2(y.shape[0])))
    spec = np.fft.rfft(y, n=n_fft, axis=0)
    hz = np.fft.rfftfreq(n_fft, 1.0 / fs)
    band = np.flatnonzero((hz >= band_hz[0]) & (hz <= band_hz[1]))
    e_b = np.mean(np.abs(spec[band, :n_b]) ** 2, axis=1)
    e_d = np.mean(np.abs(spec[band, n_b:]) ** 2, axis=1)
    realised = 10 * np.log10(e_b / np.maximum(e_d, 1e-300))
    whole = 10 * np.log10(np.sum(e_b) / max(float(np.sum(e_d)), 1e-300))
    shown = np.unique(np.linspace(0, band.size - 1, min(band.size, MAX_CHECK_BINS)).round().astype(int))
    check_hz = hz[band][shown]
    return ZoneFilters(taps, fs, (float(band_hz[0]), float(band_hz[1])), check_hz,
                       designed(FrequencyAxis(check_hz)), realised[shown], float(whole))
