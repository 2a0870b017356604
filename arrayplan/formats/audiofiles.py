"""Reading audio files (WAV and whatever else soundfile reads) with one kind of error.

soundfile raises several exception types (its own, ``RuntimeError``,
``TypeError`` for some malformed headers); :func:`read_audio` turns all of
them into one :class:`~arrayplan.errors.InputError` naming the file.
"""

from __future__ import annotations

import os

import numpy as np

from ..errors import InputError

__all__ = ["read_audio"]


def read_audio(path: str | os.PathLike, *, what: str = "audio file", field: str | None = None,
               fix: str | None = None) -> tuple[np.ndarray, int]:
    """The samples and sample rate of an audio file.

    Parameters
    ----------
    path : str or PathLike
        The file.
    what : str
        What the file is, for the message ``"cannot read <what> (<reason>)"``.
    field, fix : str, optional
        The field that named the file, and how to mend it, for the error.

    Returns
    -------
    data : ndarray, shape (n_samples, n_channels)
        float64 samples, full scale = 1.
    rate : int
        Sample rate, Hz.

    Raises
    ------
    InputError
        When soundfile cannot read the file (the reason on one line).
    """
    import soundfile as sf

    try:
        data, rate = sf.read(os.fspath(path), dtype="float64", always_2d=True)
    except Exception as exc:  # soundfile raises several types
        raise InputError(f"cannot read {what} ({' '.join(str(exc).split())})", source=str(path), field=field,
                         fix=fix) from None
    return data, int(rate)
