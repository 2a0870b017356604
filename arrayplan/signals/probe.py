"""The channel probe: one planned channel's drive filters applied to a probe signal.

A channel's drive filters are a multichannel WAV file (float, one audio
channel per speaker, in rig speaker order), optionally with a JSON sidecar
of the same stem naming the speakers.  Convolving the probe signal (a sweep
or noise) with every filter gives a file with one channel per speaker: all
speakers play that channel at once.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from ..errors import InputError
from ..fileio import check_folder

__all__ = ["read_filter_wav", "filter_names_from_sidecar", "channel_probe"]


def filter_names_from_sidecar(wav_path: str | Path, n_channels: int) -> list[str] | None:
    """Speaker names from the JSON sidecar beside a filter WAV, if there is one.

    Looks for ``<stem>.json`` holding a list of ``n_channels`` names under one
    of the keys ``speaker_names``, ``speakers``, ``element_names`` or
    ``channel_names`` (plain strings, or objects with a ``name``).  Returns
    None when there is no sidecar or no such list.

    Raises
    ------
    InputError
        If the sidecar exists but is not valid JSON, or lists a different
        number of names than the WAV has channels.
    """
    side = Path(wav_path).with_suffix(".json")
    if not side.exists():
        return None
    try:
        obj = json.loads(side.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"not valid JSON ({exc})", source=str(side)) from None
    if not isinstance(obj, dict):
        return None
    for key in ("speaker_names", "speakers", "element_names", "channel_names"):
        entries = obj.get(key)
        if not isinstance(entries, list):
            continue
        names = [e if isinstance(e, str) else e.get("name") if isinstance(e, dict) else None for e in entries]
        if not names or not all(isinstance(n, str) and n for n in names):
            continue
        if len(names) != n_channels:
            raise InputError(f"lists {len(names)} speakers but the filter file has {n_channels} channels",
                             source=str(side), field=key, fix="use the sidecar written with the filter file")
        return names
    return None


def read_filter_wav(path: str | Path, *, sample_rate_hz: float | None = None) -> tuple[np.ndarray, int, list[str]]:
    """Read a channel's drive filters.

    Parameters
    ----------
    path : str or Path
        Multichannel WAV, one channel per speaker.
    sample_rate_hz : float, optional
        If given, the file's rate must equal it.

    Returns
    -------
    filters : ndarray, shape (n_taps, n_speakers)
    rate : int
        The file's sample rate, Hz.
    names : list of str
        Speaker names from the sidecar, else ``S1, S2, ...``.
    """
    import soundfile as sf

    path = Path(path)
    if not path.exists():
        raise InputError("filter file not found", source=str(path), field="filters")
    check_folder(path.parent, needed=(path.name,))  # a filter set's file must be the one written with it
    try:
        data, rate = sf.read(path, dtype="float64", always_2d=True)
    except Exception as exc:  # soundfile raises several types
        raise InputError(f"cannot read WAV ({exc})", source=str(path), field="filters") from None
    if data.shape[0] == 0:
        raise InputError("filter file has no samples", source=str(path), field="filters")
    if not np.all(np.isfinite(data)):
        raise InputError("filter file contains NaN or infinite samples", source=str(path), field="filters")
    if not np.any(data):
        raise InputError("every filter in the file is zero", source=str(path), field="filters")
    if sample_rate_hz is not None and rate != int(round(sample_rate_hz)):
        raise InputError(f"filter file is at {rate} Hz, the probe at {sample_rate_hz:g} Hz", source=str(path),
                         field="sample_rate_hz",
                         fix=f"use `sample_rate_hz`={rate} or design the filters at the probe's rate")
    names = filter_names_from_sidecar(path, data.shape[1]) or [f"S{i + 1}" for i in range(data.shape[1])]
    return data, int(rate), names


def channel_probe(source: np.ndarray, filters: np.ndarray) -> np.ndarray:
    """Convolve one probe signal with each speaker's drive filter.

    Parameters
    ----------
    source : ndarray, shape (n_samples,)
        The probe signal (a sweep or noise), full scale = 1.
    filters : ndarray, shape (n_taps, n_speakers)
        The channel's drive filters.

    Returns
    -------
    ndarray, shape (n_samples + n_taps - 1, n_speakers)
        Speaker k's drive signal, ``source * filters[:, k]``.
    """
    from scipy.signal import fftconvolve

    src = np.asarray(source, dtype=float).reshape(-1)
    filt = np.asarray(filters, dtype=float)
    if filt.ndim == 1:
        filt = filt[:, None]
    return fftconvolve(src[:, None], filt, axes=0)
