"""Recordings of a played sweep (made with any recorder) -> an IR set with its deconvolution summary.

The played file is known by its signal sidecar
(:mod:`arrayplan.formats.signal_sidecar`): a sweep, a schedule of sweeps
(each speaker in turn) or a sweep channel probe, with the inverse filter
beside it.  :func:`read_played_sweep` reads both, :func:`read_takes` the
recordings (one per speaker; or one of a whole schedule, split by its
segments; or one of a probe), :func:`deconvolve_takes` makes the linear
responses, the harmonic distortion products and the summary, and
:func:`write_offline_irs` writes them as one folder, all or nothing.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Sequence

import numpy as np

from ..errors import InputError
from ..formats.output_folders import staged_output_dir
from ..formats.deconvolution_summary import (DeconvolutionSummary, summarise, summary_record,
                                             write_deconvolution_summary)
from ..formats.signal_sidecar import read_signal_sidecar
from ..formats.irset import IRSet, write_irset
from .deconvolve import CLIP_THRESHOLD, DEFAULT_MIN_PEAK_TO_NOISE_DB, impulse_responses, split_schedule
from .sweep_record import SweepRecord
from .wavout import read_recording

__all__ = ["PlayedSweep", "Takes", "OfflineIRs", "read_played_sweep", "read_takes", "deconvolve_takes",
           "write_offline_irs"]


@dataclass(frozen=True)
class PlayedSweep:
    """A played file as its sidecar describes it, with the sweep's inverse filter.

    :func:`read_played_sweep` reads one from a signal sidecar and checks it.

    Attributes
    ----------
    sidecar_path : Path
    sidecar : dict
        The signal sidecar, checked.
    record : SweepRecord
        Its sweep block.
    inverse : ndarray, shape (n_sweep_samples,)
        The inverse filter, full scale = 1.
    """

    sidecar_path: Path
    sidecar: dict
    record: SweepRecord
    inverse: np.ndarray

    @property
    def sample_rate_hz(self) -> int:
        """The file's sample rate.

        Returns
        -------
        int
            Sample rate (Hz), rounded to a whole number.
        """
        return int(round(self.record.sample_rate_hz))

    @property
    def n_samples(self) -> int:
        """Samples in the played file.

        Returns
        -------
        int
            The sidecar's ``n_samples``.
        """
        return int(self.sidecar["n_samples"])


def read_played_sweep(sidecar_path: str | os.PathLike) -> PlayedSweep:
    """Read a played file's sidecar and its inverse filter, checked against each other.

    Parameters
    ----------
    sidecar_path : path
        The JSON written beside a sweep, schedule or sweep probe.

    Returns
    -------
    PlayedSweep
    """
    path = Path(sidecar_path)
    side = read_signal_sidecar(path)
    rec = SweepRecord.from_json(side.get("sweep"), source=str(path))
    rate = int(round(rec.sample_rate_hz))
    inv_path = path.parent / rec.inverse_filter_file
    inverse, inv_rate = read_recording(inv_path, field="sweep.inverse_filter_file")
    if inv_rate != rate or inverse.shape[1] != 1 or inverse.shape[0] != rec.n_sweep_samples:
        raise InputError(f"inverse filter does not match the sidecar ({inverse.shape[0]} samples, {inv_rate} Hz; "
                         f"expected {rec.n_sweep_samples} samples, {rate} Hz)", source=str(inv_path),
                         fix="use the files written together by arrayplan signal")
    return PlayedSweep(path, side, rec, inverse[:, 0])


@dataclass
class Takes:
    """Recordings of a played file, one per speaker.

    Attributes
    ----------
    recordings : list of ndarray, each shape (n_samples, n_mic)
        Full scale = 1, starting with the played file's first sample.
    speaker_names : list of str
        The played file's own names: a schedule's, a probe's channel, else S1, S2, ...
    files : list of str
        The recordings read.
    probe : bool
        True for a channel probe (one response per microphone to the channel).
    warnings : list of str
    """

    recordings: list[np.ndarray]
    speaker_names: list[str]
    files: list[str]
    probe: bool = False
    warnings: list[str] = field(default_factory=list)

    @property
    def n_mic(self) -> int:
        """Microphone channels in each recording.

        Returns
        -------
        int
            Columns of the first recording.
        """
        return int(self.recordings[0].shape[1])


def _check_length(n_rec: int, n_file: int, rate: int, src: str, warnings: list[str]) -> None:
    if n_rec < n_file:
        raise InputError(f"recording has {n_rec} samples ({n_rec / rate:.3f} s) but the played file has {n_file} "
                         f"({n_file / rate:.3f} s)", source=src,
                         fix="record the whole file, including the silence after the sweep")
    if n_rec > 2 * n_file:
        raise InputError(f"recording has {n_rec} samples, more than twice the played file's {n_file}: it may hold "
                         "several takes or start well before the file", source=src,
                         fix="trim it so it starts with the played file's first sample")
    if n_rec > n_file:
        warnings.append(f"{src}: recording is {(n_rec - n_file) / rate:.3f} s longer than the played file; "
                        "its first sample is taken as the file's first sample")


def _read_at_rate(path: str | os.PathLike, rate: int) -> np.ndarray:
    data, r = read_recording(path)
    if r != rate:
        raise InputError(f"recorded at {r} Hz but the sweep is at {rate} Hz", source=str(path),
                         fix="record at the sweep's rate (no resampling)")
    return data


def read_takes(played: PlayedSweep, paths: Sequence[str | os.PathLike]) -> Takes:
    """Read the recordings of `played`: one per speaker, or one of a whole schedule or probe.

    Parameters
    ----------
    played : PlayedSweep
    paths : sequence of path
        WAV files (any format soundfile reads), at the played file's rate.

    Returns
    -------
    Takes
    """
    src = str(played.sidecar_path)
    rate, n_file = played.sample_rate_hz, played.n_samples
    schedule, probe = played.sidecar.get("schedule"), played.sidecar.get("probe")
    warnings: list[str] = []
    if schedule is None and probe is None:
        recordings: list[np.ndarray] = []
        for path in paths:
            data = _read_at_rate(path, rate)
            if recordings and data.shape[1] != recordings[0].shape[1]:
                raise InputError(f"has {data.shape[1]} channels, the first recording {recordings[0].shape[1]}",
                                 source=str(path), fix="record every speaker with the same microphones")
            _check_length(data.shape[0], n_file, rate, str(path), warnings)
            recordings.append(data)
        return Takes(recordings, [f"S{i + 1}" for i in range(len(paths))], [str(p) for p in paths], False, warnings)
    if len(paths) != 1:
        raise InputError(f"a {'schedule' if schedule else 'channel probe'} is recorded as one file, got "
                         f"{len(paths)}", source=src, fix="give the one recording of the whole file")
    data = _read_at_rate(paths[0], rate)
    _check_length(data.shape[0], n_file, rate, str(paths[0]), warnings)
    if schedule is None:
        return Takes([data], [str(probe.get("channel_name", "probe"))], [str(paths[0])], True, warnings)
    try:
        starts = [int(e["segment_start_sample"]) for e in schedule["speakers"]]
        names = [str(e["speaker"]) for e in schedule["speakers"]]
        seg = int(schedule["segment_length_samples"])
    except (KeyError, TypeError, ValueError):
        raise InputError("malformed schedule block", source=src, field="schedule") from None
    return Takes(split_schedule(data, starts, seg), names, [str(paths[0])], False, warnings)


@dataclass
class OfflineIRs:
    """What :func:`deconvolve_takes` makes.

    Attributes
    ----------
    irset : IRSet
        The linear responses, shape (pre_roll + ir_length, n_mic, n_spk), full scale per full scale.
    harmonics : dict of int -> IRSet
        The harmonic distortion products by order (exponential sweeps).
    summary : DeconvolutionSummary
    notes : list of str
        What the user should know about the method's limits here.
    """

    irset: IRSet
    harmonics: dict[int, IRSet]
    summary: DeconvolutionSummary
    notes: list[str]


def deconvolve_takes(played: PlayedSweep, takes: Takes, *, speaker_names: Sequence[str], mic_names: Sequence[str],
                     ir_length: int, pre_roll: int, max_harmonic: int = 5,
                     min_peak_to_noise_db: float = DEFAULT_MIN_PEAK_TO_NOISE_DB,
                     speaker_positions: np.ndarray | None = None, mic_positions: np.ndarray | None = None,
                     provenance: dict[str, Any] | None = None, notes: Sequence[str] = (),
                     progress: Callable[[int, int], None] | None = None) -> OfflineIRs:
    """Deconvolve every take: linear responses, distortion products, their summary.

    Parameters
    ----------
    played : PlayedSweep
    takes : Takes
    speaker_names, mic_names : sequence of str
        One per take and one per recorded channel.
    ir_length : int
        Samples kept after zero lag (at most the silence after the sweep).
    pre_roll : int
        Samples kept before zero lag.
    max_harmonic : int
        Highest harmonic order separated (1 for none).
    min_peak_to_noise_db : float
        Warn below this peak-to-noise ratio, dB.
    speaker_positions, mic_positions : ndarray, shape (n, 3), optional
        Positions in metres, recorded in the set.
    provenance : dict, optional
        Recorded in the set's ``extra`` (e.g. where the names came from, the pre-roll rule).
    notes : sequence of str
        Notes so far (kept first).
    progress : callable (done, total), optional

    Returns
    -------
    OfflineIRs
    """
    rec, rate = played.record, played.sample_rate_hz
    notes = list(notes)
    offsets = rec.harmonic_offsets_samples(max_harmonic)
    if rec.kind == "exponential" and offsets and offsets[2] < ir_length:
        notes.append(f"the 2nd harmonic sits {offsets[2] / rate:.3f} s before the linear response, less than "
                     f"the response length {ir_length / rate:.3f} s: a long room tail may overlap the distortion "
                     "products (a longer sweep separates them further)")
    clean = rec.clean_recording() if offsets else None
    if offsets and clean is None:
        notes.append("the sidecar does not say how the sweep was faded, so the method's own distortion floor is "
                     "unknown: harmonic levels are judged against the noise floor only")
    result = impulse_responses(takes.recordings, played.inverse, linear_lag=rec.linear_lag_samples,
                               ir_length=ir_length, harmonic_offsets=offsets, speaker_names=list(speaker_names),
                               mic_names=list(mic_names), min_peak_to_noise_db=min_peak_to_noise_db,
                               clip_threshold=CLIP_THRESHOLD, pre_roll_samples=pre_roll, clean_recording=clean,
                               progress=progress)
    summary = summarise(result, speaker_names, mic_names, pre_roll_samples=pre_roll, sample_rate_hz=rate)
    extra = {"producer": "arrayplan deconvolve (offline)", "sweep_sidecar": played.sidecar_path.name,
             **(provenance or {}), "sweep": played.sidecar.get("sweep"), "recordings": list(takes.files),
             "harmonic_windows": {str(n): {"offset_samples": offsets[n], "samples": int(h.shape[0]),
                                           "nominal_index": int(result.harmonic_zero_index[n])}
                                  for n, h in result.harmonics.items()},
             "notes": notes, **summary_record(summary)}
    irs = IRSet(data=result.data, sample_rate_hz=float(rate), speaker_names=list(speaker_names),
                mic_names=list(mic_names), speaker_positions=speaker_positions, mic_positions=mic_positions,
                units="full_scale", latency_removed_samples=0, warnings=takes.warnings + result.warnings,
                extra=extra, zero_lag_samples=pre_roll)
    harmonics = {n: IRSet(
        data=h, sample_rate_hz=float(rate), speaker_names=list(speaker_names), mic_names=list(mic_names),
        units="full_scale",
        extra={"harmonic_order": n, "offset_samples": offsets[n], "nominal_index": int(result.harmonic_zero_index[n]),
               "note": f"order-{n} distortion product; sample nominal_index (the set's zero lag) is "
                       f"{offsets[n]:.1f} samples before the linear response's zero lag"},
        zero_lag_samples=min(int(result.harmonic_zero_index[n]), h.shape[0] - 1)) for n, h in result.harmonics.items()}
    return OfflineIRs(irs, harmonics, summary, notes)


def write_offline_irs(folder: str | os.PathLike, made: OfflineIRs, command: str = "arrayplan deconvolve") -> Path:
    """Write the IR set, ``harmonic-N/`` sets and ``deconvolution.csv`` into `folder`, all or nothing.

    Parameters
    ----------
    folder : str or PathLike
        Output folder, written through a staging folder.
    made : OfflineIRs
        The deconvolved responses, harmonics and summary.
    command : str
        The command recorded in the IR sets' provenance.

    Returns
    -------
    Path
        The folder.
    """
    with staged_output_dir(folder) as stage:
        write_irset(stage, made.irset, command=command)
        for n, h in made.harmonics.items():
            write_irset(stage / f"harmonic-{n}", h, command=command)
        write_deconvolution_summary(stage, made.summary)
    return Path(folder)
