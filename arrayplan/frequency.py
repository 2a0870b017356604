"""The frequency axis: one immutable object shared by every stage.

Frequencies are stored in hertz as a read-only float64 array.  Two axes are
equal when they have the same length and agree within a relative tolerance
(1e-9), so an axis read back from a CSV file equals the one that wrote it.
"""

from __future__ import annotations

from typing import Iterable, Sequence

import numpy as np

from .errors import InputError

__all__ = ["FrequencyAxis"]

_RTOL = 1e-9


class FrequencyAxis:
    """An ordered set of frequencies in hertz.

    Parameters
    ----------
    hz : array_like, shape (n_freq,)
        Frequencies in Hz, strictly positive, finite and strictly increasing.
    source : str, optional
        File the frequencies came from, named in messages.
    field : str, optional
        Field named in messages.

    Raises
    ------
    InputError
        No frequencies, a value that is not finite or not above 0 Hz, or
        values not strictly increasing.

    Notes
    -----
    Integer and slice indexing return a new axis and never interpolate.
    """

    __slots__ = ("_hz",)

    def __init__(self, hz: Iterable[float] | np.ndarray, *, source: str | None = None,
                 field: str | None = "frequencies") -> None:
        arr = np.array(hz, dtype=float).reshape(-1)
        if arr.size == 0:
            raise InputError("no frequencies given", source=source, field=field,
                             fix="give at least one frequency in Hz")
        if not np.all(np.isfinite(arr)):
            raise InputError("frequencies must be finite numbers", source=source, field=field)
        if np.any(arr <= 0):
            raise InputError(f"frequencies must be above 0 Hz, got {arr.min():g} Hz",
                             source=source, field=field, fix="drop 0 Hz and negative values")
        if arr.size > 1 and np.any(np.diff(arr) <= 0):
            raise InputError("frequencies must be strictly increasing without repeats",
                             source=source, field=field, fix="sort the list and remove duplicates")
        arr.setflags(write=False)
        self._hz = arr

    # construction -----------------------------------------------------
    @classmethod
    def spaced(cls, start_hz: float, stop_hz: float, count: int, spacing: str = "log",
               *, source: str | None = None, field: str | None = "frequencies") -> "FrequencyAxis":
        """`count` frequencies from `start_hz` to `stop_hz`, ``"log"`` or ``"linear"`` spaced.

        Parameters
        ----------
        start_hz, stop_hz : float
            First and last frequency (Hz), 0 < start <= stop.
        count : int
            Number of frequencies (>= 1; 1 when start equals stop).
        spacing : str
            ``"log"`` (geometric) or ``"linear"``.
        source, field : str, optional
            Named in messages.

        Returns
        -------
        FrequencyAxis
            Both ends included.
        """
        if int(count) != count or count < 1:
            raise InputError(f"count must be a whole number >= 1, got {count!r}",
                             source=source, field=field)
        if not (np.isfinite(start_hz) and np.isfinite(stop_hz)) or start_hz <= 0 or stop_hz < start_hz:
            raise InputError(f"need 0 < start <= stop, got start={start_hz!r}, stop={stop_hz!r}",
                             source=source, field=field)
        if count > 1 and stop_hz == start_hz:
            raise InputError("start equals stop but count > 1", source=source, field=field,
                             fix="use count = 1 or widen the range")
        if spacing == "log":
            hz = np.geomspace(start_hz, stop_hz, int(count))
        elif spacing == "linear":
            hz = np.linspace(start_hz, stop_hz, int(count))
        else:
            raise InputError(f"spacing must be 'log' or 'linear', got {spacing!r}",
                             source=source, field=field)
        return cls(hz, source=source, field=field)

    @classmethod
    def fft_bins(cls, sample_rate_hz: float, n_fft: int, band_hz: tuple[float, float] | None = None
                 ) -> "FrequencyAxis":
        """The positive bins of an `n_fft`-point FFT at `sample_rate_hz` (DC excluded).

        With `band_hz` = (low, high), only bins inside the closed band are kept.

        Parameters
        ----------
        sample_rate_hz : float
            Sample rate (Hz).
        n_fft : int
            FFT length (samples).
        band_hz : (float, float), optional
            Lowest and highest frequency kept (Hz).

        Returns
        -------
        FrequencyAxis
            Bins k * sample_rate_hz / n_fft for k = 1 .. n_fft // 2 (Hz),
            as :func:`numpy.fft.rfftfreq` gives them.
        """
        hz = np.fft.rfftfreq(int(n_fft), 1.0 / float(sample_rate_hz))[1:]
        if band_hz is not None:
            lo, hi = band_hz
            hz = hz[(hz >= lo) & (hz <= hi)]
        return cls(hz)

    # access -----------------------------------------------------------
    @property
    def hz(self) -> np.ndarray:
        """The frequencies.

        Returns
        -------
        ndarray, shape (n_freq,)
            Frequencies (Hz), read-only float64.
        """
        return self._hz

    def angular(self) -> np.ndarray:
        """Angular frequencies omega = 2 pi f.

        Returns
        -------
        ndarray, shape (n_freq,)
            omega (rad/s).
        """
        return 2.0 * np.pi * self._hz

    def wavenumbers(self, speed_of_sound: float) -> np.ndarray:
        """Wavenumbers k = 2 pi f / c.

        Parameters
        ----------
        speed_of_sound : float
            c (m/s).

        Returns
        -------
        ndarray, shape (n_freq,)
            k (rad/m).
        """
        return self.angular() / float(speed_of_sound)

    def wavelengths(self, speed_of_sound: float) -> np.ndarray:
        """Wavelengths c / f.

        Parameters
        ----------
        speed_of_sound : float
            c (m/s).

        Returns
        -------
        ndarray, shape (n_freq,)
            Wavelengths (m).
        """
        return float(speed_of_sound) / self._hz

    def __len__(self) -> int:
        return self._hz.size

    def __iter__(self):
        return iter(self._hz.tolist())

    def __getitem__(self, index: int | slice | Sequence[int] | np.ndarray) -> "FrequencyAxis":
        picked = self._hz[index]
        return FrequencyAxis(np.atleast_1d(picked))

    def index_of(self, hz: float) -> int:
        """Index of the bin nearest to `hz` (no interpolation).

        Parameters
        ----------
        hz : float
            Frequency (Hz).

        Returns
        -------
        int
            0-based index of the nearest frequency (the lower one on a tie).
        """
        return int(np.argmin(np.abs(self._hz - float(hz))))

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, FrequencyAxis):
            return NotImplemented
        return len(self) == len(other) and bool(np.allclose(self._hz, other._hz, rtol=_RTOL, atol=0))

    def __hash__(self) -> int:
        return hash((len(self), round(float(self._hz[0]), 6), round(float(self._hz[-1]), 6)))

    def __repr__(self) -> str:
        if len(self) == 1:
            return f"FrequencyAxis([{self._hz[0]:g}] Hz)"
        return f"FrequencyAxis({len(self)} points, {self._hz[0]:g}..{self._hz[-1]:g} Hz)"
