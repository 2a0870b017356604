"""WAV files of test signals with their JSON sidecars, written atomically; recordings read back."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from ..formats.audiofiles import read_audio
from ..errors import InputError
from ..formats.atomic_files import atomic_paths
from ..formats.signal_sidecar import write_signal_sidecar
from .levels import true_peak_dbfs

__all__ = ["SAMPLE_FORMATS", "sidecar_path", "inverse_path", "write_signal_files", "read_recording"]

#: Sample formats a signal file may have: option value -> soundfile subtype.
SAMPLE_FORMATS = {"float32": "FLOAT", "pcm24": "PCM_24"}


def sidecar_path(wav_path: str | os.PathLike) -> Path:
    """The JSON sidecar beside a WAV file: same folder, same stem, ``.json``.

    Parameters
    ----------
    wav_path : str or PathLike
        The WAV file.

    Returns
    -------
    Path
        ``<stem>.json`` beside it.
    """
    return Path(wav_path).with_suffix(".json")


def inverse_path(wav_path: str | os.PathLike) -> Path:
    """Where a sweep's inverse filter goes: ``<stem>.inverse.wav`` beside it.

    Parameters
    ----------
    wav_path : str or PathLike
        The sweep's WAV file.

    Returns
    -------
    Path
        ``<stem>.inverse.wav`` in the same folder.
    """
    p = Path(wav_path)
    return p.with_name(p.stem + ".inverse.wav")


def write_signal_files(wav_path: str | os.PathLike, signal: np.ndarray, sample_rate_hz: int, sample_format: str,
                       sidecar: Mapping[str, Any], extra_wavs: Mapping[str | os.PathLike, np.ndarray] | None = None,
                       extra_sidecars: Mapping[str | os.PathLike, Mapping[str, Any]] | None = None) -> list[Path]:
    """Write a signal WAV, its sidecar and any extra float32 WAVs, all or nothing.

    Every file is written to a temporary name first; they are renamed into
    place only after all of them were written, so a failure leaves none.

    Parameters
    ----------
    wav_path : path
        The signal file (``.wav``).
    signal : ndarray, shape (n_samples,) or (n_samples, n_channels)
        Full scale = 1; neither its samples nor its true peak (4x
        oversampled, :func:`arrayplan.signals.levels.true_peak_dbfs`) may exceed it.
    sample_rate_hz : int
    sample_format : {"float32", "pcm24"}
    sidecar : mapping
        Written as JSON to :func:`sidecar_path` of `wav_path`
        (:func:`arrayplan.formats.signal_sidecar.write_signal_sidecar`, which checks it).
    extra_wavs : mapping of path -> ndarray, optional
        Further files (e.g. an inverse filter), always float32.
    extra_sidecars : mapping of path -> mapping, optional
        Further sidecars (e.g. the inverse filter's own), written the same way.

    Returns
    -------
    list of Path
        The files written, signal first.
    """
    import soundfile as sf

    wav_path = Path(wav_path)
    if wav_path.suffix.lower() != ".wav":
        raise InputError("output file must end in .wav", source=str(wav_path), field="out")
    if sample_format not in SAMPLE_FORMATS:
        raise InputError(f"sample format must be one of {', '.join(SAMPLE_FORMATS)}, got {sample_format!r}",
                         field="format")
    signal = np.asarray(signal, dtype=float)
    if not np.all(np.isfinite(signal)) or (signal.size and np.max(np.abs(signal)) > 1.0):
        raise InputError("signal exceeds full scale or is not finite; refusing to write it", source=str(wav_path))
    if signal.size and true_peak_dbfs(signal) > 1e-9:
        raise InputError(f"signal's true peak {true_peak_dbfs(signal):+.2f} dBFS would clip in a converter; "
                         "refusing to write it", source=str(wav_path))
    targets: list[tuple[Path, Any]] = [(wav_path, ("wav", signal, SAMPLE_FORMATS[sample_format]))]
    for p, data in (extra_wavs or {}).items():
        targets.append((Path(p), ("wav", np.asarray(data, dtype=float), "FLOAT")))
    targets.append((sidecar_path(wav_path), ("json", dict(sidecar), None)))
    for p, obj in (extra_sidecars or {}).items():
        targets.append((Path(p), ("json", dict(obj), None)))
    with atomic_paths([p for p, _ in targets]) as temps:
        for tmp, (path, (kind, data, subtype)) in zip(temps, targets):
            if kind == "wav":
                sf.write(tmp, data.astype(np.float32) if subtype == "FLOAT" else data, int(sample_rate_hz),
                         subtype=subtype, format="WAV")
            else:
                write_signal_sidecar(tmp, data)
    return [p for p, _ in targets]


def read_recording(path: str | os.PathLike, *, field: str | None = None) -> tuple[np.ndarray, int]:
    """Read a recording (any WAV soundfile reads) as float64, full scale = 1.

    Parameters
    ----------
    path : str or PathLike
        The recording.
    field : str, optional
        Field named in messages (e.g. the sidecar key that gave the path).

    Returns
    -------
    data : ndarray, shape (n_samples, n_channels)
    rate : int
        Sample rate, Hz.

    Raises
    ------
    InputError
        A missing or unreadable file, no samples, or NaN or infinite samples.
    """
    path = Path(path)
    if not path.exists():
        raise InputError("recording not found", source=str(path), field=field)
    data, rate = read_audio(path, field=field)
    if data.shape[0] == 0:
        raise InputError("recording has no samples", source=str(path), field=field)
    if not np.all(np.isfinite(data)):
        raise InputError("recording contains NaN or infinite samples", source=str(path), field=field)
    return data, int(rate)
