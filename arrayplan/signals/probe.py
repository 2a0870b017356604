"""The channel probe: one planned channel's drive filters applied to a probe signal.

A channel's drive filters are a multichannel WAV file (float, one audio
channel per speaker, in rig speaker order), as ``arrayplan filters`` writes
them (``channel-NN-drive.wav``, named in the folder's ``filters.json`` with
the rig's speaker names), or a hand-made file with a JSON sidecar of the same
stem naming the speakers.  Convolving the probe signal (a sweep or noise)
with every filter gives a file with one channel per speaker: all speakers
play that channel at once.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..formats.audiofiles import read_audio
from ..errors import InputError
from ..formats.output_folders import check_folder
from ..formats._versioning import read_json_document
from ..formats.filter_set import FILTER_SET_SIDECAR, read_filter_set_sidecar

__all__ = ["read_filter_wav", "filter_names_from_sidecar", "filter_names_from_filter_set", "channel_probe",
           "FILTER_SET_SIDECAR"]


def filter_names_from_filter_set(wav_path: str | Path, n_channels: int) -> list[str] | None:
    """Speaker names for a drive-filter WAV that ``arrayplan filters`` wrote, from its folder's ``filters.json``.

    Parameters
    ----------
    wav_path : str or Path
        A channel's drive filter file (``channel-NN-drive.wav``).
    n_channels : int
        Audio channels in the file (one per speaker).

    Returns
    -------
    list of str or None
        The rig's speaker names (``speakers`` in ``filters.json``), or None
        when the folder holds no ``filters.json`` or it does not list the file.

    Raises
    ------
    InputError
        When the file is a combine filter (one channel per microphone, not
        something to play), or ``filters.json`` is not valid JSON, not of this
        format (:mod:`arrayplan.formats.filter_set`) or lists a different
        number of speakers than the file has channels.
    """
    wav = Path(wav_path)
    doc_path = wav.parent / FILTER_SET_SIDECAR
    if not doc_path.is_file():
        return None
    doc = read_filter_set_sidecar(doc_path)
    channels = doc.get("channels")
    if not isinstance(channels, list):
        return None
    entries = [c for c in channels if isinstance(c, dict)]
    for c in entries:
        if c.get("combine_file") == wav.name:
            drive = c.get("drive_file") or "the channel's drive file"
            raise InputError("is a combine filter file (one channel per microphone): the probe plays drive "
                             "filters", source=str(wav), fix=f"give {drive} from the same folder")
    if not any(c.get("drive_file") == wav.name for c in entries):
        return None
    names = doc.get("speakers")
    if not (isinstance(names, list) and names and all(isinstance(n, str) and n for n in names)):
        raise InputError("does not list the speakers' names", source=str(doc_path), field="speakers",
                         fix="use the folder exactly as 'arrayplan filters' wrote it")
    if len(names) != n_channels:
        raise InputError(f"lists {len(names)} speakers but {wav.name} has {n_channels} channels",
                         source=str(doc_path), field="speakers", fix="use the folder exactly as 'arrayplan filters' "
                                                                     "wrote it")
    return [str(n) for n in names]


def filter_names_from_sidecar(wav_path: str | Path, n_channels: int) -> list[str] | None:
    """Speaker names from the JSON sidecar beside a filter WAV, if there is one.

    Looks for ``<stem>.json`` holding a list of ``n_channels`` names under one
    of the keys ``speaker_names``, ``speakers``, ``element_names`` or
    ``channel_names`` (plain strings, or objects with a ``name``).  Returns
    None when there is no sidecar or no such list.

    Parameters
    ----------
    wav_path : str or Path
        The filter WAV.
    n_channels : int
        Channels of the WAV: the number of names expected.

    Returns
    -------
    list of str or None
        One speaker name per channel, in channel order.

    Raises
    ------
    InputError
        If the sidecar exists but is not valid JSON, or lists a different
        number of names than the WAV has channels.
    """
    side = Path(wav_path).with_suffix(".json")
    if not side.exists():
        return None
    obj = read_json_document(side)
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
        Speaker names from the file's own sidecar (``<stem>.json``), else from
        the ``filters.json`` of the filter set it belongs to, else ``S1, S2, ...``.
    """
    path = Path(path)
    if not path.exists():
        raise InputError("filter file not found", source=str(path), field="filters")
    check_folder(path.parent, needed=(path.name,))  # a filter set's file must be the one written with it
    data, rate = read_audio(path, what="WAV", field="filters")
    if data.shape[0] == 0:
        raise InputError("filter file has no samples", source=str(path), field="filters")
    if not np.all(np.isfinite(data)):
        raise InputError("filter file contains NaN or infinite samples", source=str(path), field="filters")
    if not np.any(data):
        raise InputError("every filter in the file is zero", source=str(path), field="filters")
    if sample_rate_hz is not None and rate != int(round(sample_rate_hz)):
        raise InputError(f"filter file is at {rate} Hz, the probe at {sample_rate_hz:g} Hz", source=str(path),
                         field="sample_rate_hz", fix=f"make the probe at {rate} Hz, or design the filters at the "
                                                     "probe's rate")
    names = (filter_names_from_sidecar(path, data.shape[1]) or filter_names_from_filter_set(path, data.shape[1])
             or [f"S{i + 1}" for i in range(data.shape[1])])
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
