"""Impulse responses of a model kernel (free field or room), for simulations with known truth.

The responses are the inverse real FFT of the kernel's coupling stack on an
FFT grid, so each arrival is a band-limited (sinc) interpolated fractional
delay of r / c with its gain (1 / (4 pi r), directivity, and for a room the
reflection coefficients of its path), exact up to the Nyquist frequency.
The record must be long enough to hold the longest path's delay plus the
sinc tails (:func:`required_samples`); the functions here check that.  A
room's responses end with its longest image path, which the reflection
order (or the room's max_delay_ms) sets.  Zero lag is sample 0 unless a
pre-roll is asked for (``zero_lag_samples``): then every response starts
that many samples before zero lag, and the sinc tails that lead each
arrival stay in front of it instead of wrapping to the record's end.

A simulated truth can differ from the model a plan was made with
(:class:`TruthErrors`, :func:`truth_irset`): elements placed off their
nominal positions (Gaussian errors per coordinate, seeded), per-element
gain and phase errors, and a reflecting floor, so that a plan verified on
the simulation can fail as it would on a real rig.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..formats.irset import IRSet
from . import FreeFieldKernel, RoomKernel, rig_kernel
from ..rig import Rig
from ..rig.room import BAND_CENTRES_HZ, SURFACES, Room

__all__ = ["TruthErrors", "free_field_impulse_responses", "free_field_irset", "kernel_impulse_responses",
           "perturbed_rig", "required_samples", "rig_irset", "truth_irset"]

#: Clearance of the open sides of the floor-only room around the elements, metres.
_FLOOR_ROOM_MARGIN_M = 1.0

#: Samples kept after the longest arrival for its interpolation tail.
_TAIL_SAMPLES = 64


def _longest_path_m(kernel) -> float:
    if hasattr(kernel, "longest_path_m"):
        return float(kernel.longest_path_m)
    return float(np.max(kernel.distances_m))


def required_samples(kernel, sample_rate_hz: float, zero_lag_samples: int = 0) -> int:
    """Fewest samples that hold a pre-roll, the kernel's longest path and its interpolation tail.

    Parameters
    ----------
    kernel : FreeFieldKernel or RoomKernel
    sample_rate_hz : float
    zero_lag_samples : int

    Returns
    -------
    int
    """
    delay = _longest_path_m(kernel) / kernel.medium.speed_of_sound * sample_rate_hz
    return int(np.ceil(int(zero_lag_samples) + delay + _TAIL_SAMPLES))


def kernel_impulse_responses(kernel, sample_rate_hz: float, n_samples: int, chunk_size: int = 256,
                             zero_lag_samples: int = 0) -> np.ndarray:
    """Impulse responses of a model kernel by inverse FFT of its coupling stack.

    Parameters
    ----------
    kernel : FreeFieldKernel or RoomKernel
        A kernel with a ``medium`` and a longest path (``distances_m`` or
        ``longest_path_m``).
    sample_rate_hz : float
    n_samples : int
        Length of each response; at least :func:`required_samples`.
    chunk_size : int
        FFT bins evaluated at once.
    zero_lag_samples : int
        Index of zero lag (samples kept before it), default 0.

    Returns
    -------
    ndarray, shape (n_samples, n_mic, n_spk)
        Pressure per unit source strength (1/m) against time; an arrival
        over a path of length r sits at sample ``zero_lag_samples + r fs / c``.

    Notes
    -----
    The Nyquist bin is set to zero, so each response is band-limited below
    fs / 2; DC takes the limit of the kernel at f -> 0.
    """
    n_samples = int(n_samples)
    n0 = int(zero_lag_samples)
    if n0 < 0:
        raise InputError(f"zero lag must be sample 0 or later, got {n0}", field="zero_lag_samples")
    need = required_samples(kernel, sample_rate_hz, n0)
    if n_samples < need:
        raise InputError(f"{n_samples} samples cannot hold a pre-roll of {n0} samples and the longest path's "
                         f"delay of {need - n0 - _TAIL_SAMPLES} samples", field="n_samples",
                         fix=f"use at least {need} samples")
    hz = np.fft.rfftfreq(n_samples, 1.0 / sample_rate_hz)
    spectrum = np.empty((hz.size, len(kernel.mic_names), len(kernel.speaker_names)), dtype=complex)
    # DC: evaluate just above 0 Hz (the limit is real); the other bins in evenly spaced chunks
    spectrum[0] = kernel.evaluate(np.array([1e-6]))[0].real
    for start in range(1, hz.size, chunk_size):
        spectrum[start:start + chunk_size] = kernel.evaluate(hz[start:start + chunk_size])
    if n_samples % 2 == 0:
        spectrum[-1] = 0.0
    if n0:
        spectrum *= np.exp(-2j * np.pi * hz * n0 / sample_rate_hz)[:, None, None]
    return np.fft.irfft(spectrum, n=n_samples, axis=0)


def free_field_impulse_responses(rig: Rig, sample_rate_hz: float, n_samples: int,
                                 chunk_size: int = 256, zero_lag_samples: int = 0) -> np.ndarray:
    """Impulse responses of the rig's free-field kernel (whatever its room).

    Parameters
    ----------
    rig : Rig
    sample_rate_hz, n_samples, chunk_size, zero_lag_samples
        As for :func:`kernel_impulse_responses`.

    Returns
    -------
    ndarray, shape (n_samples, n_mic, n_spk)
        Pressure per unit source strength (1/m) against time; the arrival
        over distance r sits at sample ``zero_lag_samples + r fs / c``.
    """
    return kernel_impulse_responses(FreeFieldKernel(rig), sample_rate_hz, n_samples, chunk_size,
                                    zero_lag_samples)


def free_field_irset(rig: Rig, sample_rate_hz: float, n_samples: int, zero_lag_samples: int = 0) -> IRSet:
    """:func:`free_field_impulse_responses` wrapped as an :class:`~arrayplan.formats.irset.IRSet`.

    `zero_lag_samples` (default 0) keeps that many samples before zero lag
    and is recorded in the set.

    Parameters
    ----------
    rig : Rig
        Speakers, microphones and medium; its room, if any, is ignored.
    sample_rate_hz : float
        Sample rate (Hz).
    n_samples : int
        Length of each response (samples).
    zero_lag_samples : int
        Samples kept before zero lag.

    Returns
    -------
    IRSet
        Responses of shape (n_samples, n_mic, n_spk), pressure per unit
        source strength (1/m).
    """
    return _irset(rig, FreeFieldKernel(rig), sample_rate_hz, n_samples, zero_lag_samples)


def rig_irset(rig: Rig, sample_rate_hz: float, n_samples: int | None = None, zero_lag_samples: int = 0) -> IRSet:
    """The impulse responses of the rig's model kernel (its room when it has one) as an IR set.

    Parameters
    ----------
    rig : Rig
    sample_rate_hz : float
    n_samples : int, optional
        Length of the responses; grown to :func:`required_samples` when
        shorter (a room's responses last as long as its longest image path).
    zero_lag_samples : int

    Returns
    -------
    IRSet
        ``extra["simulated"]`` names the kernel.
    """
    kernel = rig_kernel(rig)
    need = required_samples(kernel, sample_rate_hz, zero_lag_samples)
    return _irset(rig, kernel, sample_rate_hz, max(need, int(n_samples or 0)), zero_lag_samples)


def _irset(rig: Rig, kernel, sample_rate_hz: float, n_samples: int, zero_lag_samples: int) -> IRSet:
    data = kernel_impulse_responses(kernel, sample_rate_hz, n_samples, zero_lag_samples=zero_lag_samples)
    name = getattr(kernel, "name", "free field")
    return IRSet(data=data, sample_rate_hz=float(sample_rate_hz), speaker_names=list(rig.speakers.names),
                 mic_names=list(rig.mics.names), speaker_positions=np.asarray(rig.speakers.positions),
                 mic_positions=np.asarray(rig.mics.positions), units="full_scale",
                 extra={"simulated": name, "rig_sha256": rig.sha256}, zero_lag_samples=zero_lag_samples)


@dataclass(frozen=True)
class TruthErrors:
    """How a simulated rig differs from its rig file.

    Attributes
    ----------
    placement_mm : float
        Standard deviation of each element's position error, per coordinate
        (x, y, z independently, Gaussian), mm.
    gain_db : float
        Standard deviation of each element's gain error (Gaussian, in dB),
        speakers and microphones alike.
    phase_deg : float
        Standard deviation of each element's phase error (Gaussian), degrees:
        a frequency-independent rotation of its transfer functions (a mix of
        the response with its Hilbert transform), the DC bin left real.
    floor_absorption : float or None
        A reflecting floor, the plane z = 0 of the rig's coordinates, with
        this energy absorption (0 rigid .. 1 none; reflection coefficient
        sqrt(1 - alpha), real and angle-independent, one image per path);
        None for no floor.  Not with a rig that has a ``[room]`` (its room
        kernel already holds its floor).
    seed : int
        Seed of the errors' random generator.  The draws are made in one
        fixed order (speaker positions, microphone positions, speaker gains,
        microphone gains, speaker phases, microphone phases) whatever is
        zero, so one error does not change when another is switched on.
    """

    placement_mm: float = 0.0
    gain_db: float = 0.0
    phase_deg: float = 0.0
    floor_absorption: float | None = None
    seed: int = 0

    def __post_init__(self) -> None:
        for name in ("placement_mm", "gain_db", "phase_deg"):
            v = getattr(self, name)
            if not (np.isfinite(v) and v >= 0):
                raise InputError(f"must be a finite standard deviation >= 0, got {v!r}", field=name)
        a = self.floor_absorption
        if a is not None and not (np.isfinite(a) and 0 <= a <= 1):
            raise InputError(f"must lie in 0..1, got {a!r}", field="floor_absorption")

    @property
    def any(self) -> bool:
        """Whether the truth differs from the rig file at all.

        Returns
        -------
        bool
            True when any standard deviation is non-zero or a floor is set.
        """
        return bool(self.placement_mm or self.gain_db or self.phase_deg or self.floor_absorption is not None)

    def settings(self) -> dict:
        """Plain data for sidecars.

        Returns
        -------
        dict
            The fields by name (mm, dB, degrees, absorption, seed).
        """
        return dataclasses.asdict(self)


def _draws(rig: Rig, errors: TruthErrors) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(errors.seed)
    n_s, n_m = len(rig.speakers), len(rig.mics)
    return {"spk_pos": rng.normal(size=(n_s, 3)), "mic_pos": rng.normal(size=(n_m, 3)),
            "spk_gain": rng.normal(size=n_s), "mic_gain": rng.normal(size=n_m),
            "spk_phase": rng.normal(size=n_s), "mic_phase": rng.normal(size=n_m)}


def perturbed_rig(rig: Rig, errors: TruthErrors) -> Rig:
    """The rig with its elements moved by the placement errors of `errors` (metres from mm).

    Parameters
    ----------
    rig : Rig
    errors : TruthErrors

    Returns
    -------
    Rig
        Same names, directivities and medium; positions moved.
    """
    d = _draws(rig, errors)
    scale = errors.placement_mm * 1e-3
    spk = dataclasses.replace(rig.speakers, positions=np.asarray(rig.speakers.positions) + scale * d["spk_pos"])
    mic = dataclasses.replace(rig.mics, positions=np.asarray(rig.mics.positions) + scale * d["mic_pos"])
    return dataclasses.replace(rig, speakers=spk, mics=mic)


def _floor_kernel(rig: Rig, absorption: float) -> RoomKernel:
    """A reflecting floor at z = 0 as a room whose five other sides are open (absorption 1), order 1."""
    pos = np.vstack([rig.speakers.positions, rig.mics.positions])
    if np.any(pos[:, 2] <= 0):
        raise InputError("a floor at z = 0 needs every element above it (z > 0)", source=rig.source,
                         field="z", fix="give the rig's elements their heights above the floor")
    shift = np.array([_FLOOR_ROOM_MARGIN_M - pos[:, 0].min(), _FLOOR_ROOM_MARGIN_M - pos[:, 1].min(), 0.0])
    size = tuple(float(v) for v in (pos + shift).max(axis=0) + _FLOOR_ROOM_MARGIN_M)
    alpha = np.ones((len(SURFACES), BAND_CENTRES_HZ.size))
    alpha[SURFACES.index("floor")] = absorption
    moved = dataclasses.replace(
        rig, speakers=dataclasses.replace(rig.speakers, positions=np.asarray(rig.speakers.positions) + shift),
        mics=dataclasses.replace(rig.mics, positions=np.asarray(rig.mics.positions) + shift))
    return RoomKernel(moved, Room(size, alpha, reflection_order=1))


def truth_irset(rig: Rig, sample_rate_hz: float, n_samples: int | None = None, errors: TruthErrors | None = None,
                zero_lag_samples: int = 0) -> IRSet:
    """Impulse responses of the rig as built, not as drawn: its model kernel with `errors` applied.

    Parameters
    ----------
    rig : Rig
        The rig file's rig; its room (when it has one) stays in the truth.
    sample_rate_hz : float
    n_samples : int, optional
        Length of the responses; grown to hold the longest path.
    errors : TruthErrors, optional
        None (or no errors): the rig's own model, as :func:`rig_irset`.
    zero_lag_samples : int

    Returns
    -------
    IRSet
        Element names and positions are the rig file's (the nominal ones, as
        a real measurement would record them); ``extra["truth_errors"]``
        holds `errors` and ``extra["simulated"]`` the kernel.
    """
    errors = errors or TruthErrors()
    if not errors.any:
        return rig_irset(rig, sample_rate_hz, n_samples, zero_lag_samples)
    if errors.floor_absorption is not None and rig.room is not None:
        raise InputError("the rig has a [room], whose floor the simulation already holds", source=rig.source,
                         field="room", fix="leave the floor out, or remove the [room] table")
    moved = perturbed_rig(rig, errors)
    kernel = (_floor_kernel(moved, errors.floor_absorption) if errors.floor_absorption is not None
              else rig_kernel(moved))
    need = required_samples(kernel, sample_rate_hz, zero_lag_samples)
    n = max(need, int(n_samples or 0))
    data = kernel_impulse_responses(kernel, sample_rate_hz, n, zero_lag_samples=zero_lag_samples)
    if errors.gain_db or errors.phase_deg:
        d = _draws(rig, errors)
        spk = 10.0 ** (errors.gain_db * d["spk_gain"] / 20.0) * np.exp(1j * np.radians(errors.phase_deg * d["spk_phase"]))
        mic = 10.0 ** (errors.gain_db * d["mic_gain"] / 20.0) * np.exp(1j * np.radians(errors.phase_deg * d["mic_phase"]))
        spec = np.fft.rfft(data, axis=0) * (mic[:, None] * spk[None, :])[None]
        spec[0] = spec[0].real
        data = np.fft.irfft(spec, n=n, axis=0)
    name = getattr(kernel, "name", "free field")
    if errors.floor_absorption is not None:
        name = f"free field with a floor at z = 0 (absorption {errors.floor_absorption:g})"
    return IRSet(data=data, sample_rate_hz=float(sample_rate_hz), speaker_names=list(rig.speakers.names),
                 mic_names=list(rig.mics.names), speaker_positions=np.asarray(rig.speakers.positions),
                 mic_positions=np.asarray(rig.mics.positions), units="full_scale",
                 extra={"simulated": name, "rig_sha256": rig.sha256, "truth_errors": errors.settings()},
                 zero_lag_samples=zero_lag_samples)
