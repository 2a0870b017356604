"""Impulse-response sets: the file format shared by measurement and verification.

An IR set is a folder::

    irset.json          the manifest (below)
    spk-001.wav         one WAV file per speaker, float32; its audio channels
    spk-002.wav         are the microphones, in manifest order
    ...

The manifest (JSON, UTF-8)::

    {
      "format": "arrayplan-irset",
      "format_version": 2,                 # 1 when zero_lag_samples is 0 (see below)
      "sample_rate_hz": 48000,
      "n_samples": 4096,
      "zero_lag_samples": 4800,            # index of zero lag; optional, default 0
      "units": "full_scale",              # or "pascal_per_volt", see below
      "latency_removed_samples": 0,        # what the producer already removed
      "speakers": [{"name": "L1", "position_m": [0, 0, 1.2], "file": "spk-001.wav"}, ...],
      "microphones": [{"name": "M1", "position_m": null}, ...],
      "warnings": ["..."],                 # every warning a producer raised
      "provenance": {...}                  # arrayplan.formats.fileio.provenance()
    }

``data[n, m, s]`` is the response at microphone ``m`` to speaker ``s`` at
sample ``n`` (time first, as in soundfile).  Sample ``zero_lag_samples``
(n0) is zero lag: the moment the speaker is driven, after the removed
latency; the n0 samples before it hold the pre-ringing of the band-limited
measurement pulse (see :mod:`arrayplan.signals.deconvolve`), so the response
at time ``t`` is ``data[n0 + round(t fs)]``.  Sets with n0 > 0 are written as
``format_version`` 2, so that readers that know only version 1 (and would
take sample 0 as zero lag) refuse them; sets with n0 = 0 stay version 1, and
manifests without the field read as n0 = 0.  ``units`` says what one unit of
the data means: ``"full_scale"`` (input full scale per output full scale,
uncalibrated), ``"pascal_per_full_scale"`` or ``"pascal_per_volt"`` when a
calibration record was applied.  Positions are optional (``null``); when
present they are in metres.

The loader checks every field, the rates, channel counts and lengths of every
WAV file, and rejects non-finite samples, each with a one-line message naming
the file and field.  A set arrayplan wrote also holds ``SHA256SUMS``
(every file's size and SHA-256, :func:`arrayplan.formats.output_folders.check_folder`); the
loader refuses a set whose files differ from it, so a folder mixing files of
two runs is never read.  Sets made by other programs need not have one.  :func:`read_irset` also reads AES69 (SOFA) files
(:mod:`arrayplan.formats.irset_sofa`).
"""

from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

import numpy as np

from ._versioning import check, stamp
from .audiofiles import read_audio
from ..errors import InputError
from .atomic_files import write_json_atomic
from .fileio import provenance as _provenance
from .output_folders import check_folder, staged_output_dir

__all__ = ["IRSet", "read_irset", "write_irset", "MANIFEST_NAME", "UNITS", "zero_lag_problem", "format_version_for"]

MANIFEST_NAME = "irset.json"
FORMAT_NAME = "arrayplan-irset"
FORMAT_VERSION = 2
#: Version written when zero lag is sample 0 (readable by every arrayplan).
FORMAT_VERSION_NO_PRE_ROLL = 1
UNITS = ("full_scale", "pascal_per_full_scale", "pascal_per_volt")


@dataclass
class IRSet:
    """Impulse responses from every speaker to every microphone.

    Parameters
    ----------
    data : ndarray, shape (n_samples, n_mic, n_spk)
        Impulse responses, float.
    sample_rate_hz : float
        Sample rate in Hz.
    speaker_names, mic_names : sequence of str
        Element names, unique, in the order of the last and middle axes.
    speaker_positions, mic_positions : ndarray, shape (n, 3), optional
        Positions in metres (NaN rows where unknown), or None.
    units : str
        One of :data:`UNITS`.
    latency_removed_samples : int
        Latency already removed by the producer, in samples.
    zero_lag_samples : int
        Index of zero lag in `data` (0 <= n0 < n_samples); the samples
        before it are pre-ringing kept by the producer.
    warnings : list of str
        Warnings raised while producing the set (clipping, low peak-to-noise).
    extra : dict
        Further JSON-ready fields a producer keeps in the manifest's
        ``extra`` (for example the deconvolution summary's block,
        :func:`arrayplan.formats.deconvolution_summary.summary_record`).
    """

    data: np.ndarray
    sample_rate_hz: float
    speaker_names: list[str]
    mic_names: list[str]
    speaker_positions: np.ndarray | None = None
    mic_positions: np.ndarray | None = None
    units: str = "full_scale"
    latency_removed_samples: int = 0
    warnings: list[str] = field(default_factory=list)
    extra: dict[str, Any] = field(default_factory=dict)
    zero_lag_samples: int = 0

    def __post_init__(self) -> None:
        self.data = np.asarray(self.data, dtype=float)
        if self.data.ndim != 3:
            raise InputError(f"IR data must have shape (n_samples, n_mic, n_spk), got {self.data.shape}")
        n, m, s = self.data.shape
        self.speaker_names = [str(x) for x in self.speaker_names]
        self.mic_names = [str(x) for x in self.mic_names]
        if len(self.speaker_names) != s or len(self.mic_names) != m:
            raise InputError(f"IR data has {m} mics x {s} speakers but {len(self.mic_names)} mic "
                             f"names and {len(self.speaker_names)} speaker names")
        for kind, names in (("speaker", self.speaker_names), ("microphone", self.mic_names)):
            if len(set(names)) != len(names):
                raise InputError(f"{kind} names are not unique: {names}")
        if self.units not in UNITS:
            raise InputError(f"units must be one of {UNITS}, got {self.units!r}")
        if not np.all(np.isfinite(self.data)):
            raise InputError("IR data contains NaN or infinite samples")
        problem = zero_lag_problem(self.zero_lag_samples, n)
        if problem:
            raise InputError(problem, field="zero_lag_samples")
        self.zero_lag_samples = int(self.zero_lag_samples)

    @property
    def n_samples(self) -> int:
        """Length of every response.

        Time runs along the first axis of `data`; sample :attr:`zero_lag_samples` is zero lag.

        Returns
        -------
        int
            Samples per response.
        """
        return int(self.data.shape[0])

    @property
    def n_mic(self) -> int:
        """Number of microphones.

        The middle axis of `data`.

        Returns
        -------
        int
            One per name in :attr:`mic_names`, in their order.
        """
        return int(self.data.shape[1])

    @property
    def n_spk(self) -> int:
        """Number of speakers.

        One WAV file each; the last axis of `data`.

        Returns
        -------
        int
            The length of :attr:`speaker_names`.
        """
        return int(self.data.shape[2])


def zero_lag_problem(value: Any, n_samples: int) -> str | None:
    """What is wrong with `value` as the zero-lag index of `n_samples`-sample responses, or None.

    Parameters
    ----------
    value : object
        The candidate index (0-based sample), as given.
    n_samples : int
        Length of the responses, samples.

    Returns
    -------
    str or None
        The problem in words (for an :class:`~arrayplan.errors.InputError`),
        or None when `value` is a whole number in ``0..n_samples - 1``.
    """
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        return f"must be a whole number of samples, got {value!r}"
    if not 0 <= int(value) < n_samples:
        return f"must lie in 0..{n_samples - 1} (the responses have {n_samples} samples), got {int(value)}"
    return None


def format_version_for(irs: IRSet) -> int:
    """The ``format_version`` to write for a set.

    Parameters
    ----------
    irs : IRSet
        The set to be written.

    Returns
    -------
    int
        2 when zero lag is not sample 0 (pre-ringing kept), else 1.
    """
    return FORMAT_VERSION if irs.zero_lag_samples else FORMAT_VERSION_NO_PRE_ROLL


def _positions_json(pos: np.ndarray | None, i: int) -> list[float] | None:
    if pos is None:
        return None
    row = np.asarray(pos, dtype=float)[i]
    if not np.all(np.isfinite(row)):
        return None
    return [float(v) for v in row]


def write_irset(folder: str | os.PathLike, irs: IRSet, **provenance_extra: Any) -> Path:
    """Write `irs` to `folder` (created if needed) as an IR set, atomically.

    All files are staged and moved into place together; a failure leaves
    `folder` as it was.

    Parameters
    ----------
    folder : path
        The IR set folder; an earlier arrayplan output there is replaced whole.
    irs : IRSet
        The responses and their names, positions (m) and units.
    **provenance_extra
        Added to the manifest's ``provenance`` header
        (:func:`arrayplan.formats.fileio.provenance`), for example ``rig_sha256=...``.

    Returns
    -------
    Path
        The manifest, ``folder / "irset.json"``.

    Raises
    ------
    InputError
        When `folder` cannot be written (naming the path and the cause).
    """
    import soundfile as sf

    folder = Path(folder)
    speakers = []
    with staged_output_dir(folder) as stage:
        for s, name in enumerate(irs.speaker_names):
            fname = f"spk-{s + 1:03d}.wav"
            sf.write(stage / fname, irs.data[:, :, s].astype(np.float32), int(round(irs.sample_rate_hz)),
                     subtype="FLOAT", format="WAV")
            speakers.append({"name": name, "position_m": _positions_json(irs.speaker_positions, s),
                             "file": fname})
        manifest = stamp({
            "sample_rate_hz": float(irs.sample_rate_hz),
            "n_samples": irs.n_samples,
            "zero_lag_samples": irs.zero_lag_samples,
            "units": irs.units,
            "latency_removed_samples": int(irs.latency_removed_samples),
            "speakers": speakers,
            "microphones": [{"name": name, "position_m": _positions_json(irs.mic_positions, m)}
                            for m, name in enumerate(irs.mic_names)],
            "warnings": list(irs.warnings),
            "extra": irs.extra,
            "provenance": _provenance(**provenance_extra),
        }, FORMAT_NAME, format_version_for(irs))
        write_json_atomic(stage / MANIFEST_NAME, manifest)
    return folder / MANIFEST_NAME


def _require(obj: dict, key: str, kind: type | tuple, src: str, where: str) -> Any:
    if key not in obj:
        raise InputError("missing field", source=src, field=f"{where}{key}",
                         fix=f"add '{key}' to the manifest")
    val = obj[key]
    if not isinstance(val, kind) or isinstance(val, bool) and kind is not bool:
        raise InputError(f"wrong type {type(val).__name__}", source=src, field=f"{where}{key}")
    return val


def _read_positions(entries: Sequence[dict], src: str, kind: str) -> np.ndarray | None:
    rows = []
    for i, e in enumerate(entries):
        p = e.get("position_m")
        if p is None:
            rows.append([math.nan] * 3)
            continue
        if (not isinstance(p, list) or len(p) != 3
                or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in p)
                or not all(math.isfinite(v) for v in p)):
            raise InputError(f"position must be 3 finite numbers in metres or null, got {p!r}",
                             source=src, field=f"{kind}[{i}].position_m")
        rows.append([float(v) for v in p])
    arr = np.array(rows, dtype=float).reshape(-1, 3)
    return None if np.all(np.isnan(arr)) else arr


def read_irset(folder: str | os.PathLike) -> IRSet:
    """Read and validate the IR set in `folder` (or the path of its manifest).

    A path ending in ``.sofa`` is read as an AES69 (SOFA) file through
    :func:`arrayplan.formats.irset_sofa.read_irset_sofa`.

    Parameters
    ----------
    folder : path
        The IR set folder, its ``irset.json``, or a ``.sofa`` file.

    Returns
    -------
    IRSet
        Data of shape (n_samples, n_mic, n_spk), in manifest order.

    Raises
    ------
    InputError
        With the file and field, for any malformed or inconsistent content.
    """
    path = Path(folder)
    if path.suffix.lower() == ".sofa":
        from .irset_sofa import read_irset_sofa

        return read_irset_sofa(path)
    manifest_path = path if path.is_file() else path / MANIFEST_NAME
    folder = manifest_path.parent
    src = str(manifest_path)
    if not manifest_path.exists():
        raise InputError("no IR-set manifest found", source=src,
                         fix=f"point at a folder containing {MANIFEST_NAME}")
    try:
        manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"not valid JSON ({exc})", source=src) from None
    check(manifest, FORMAT_NAME, FORMAT_VERSION, src, fix=f"point at a folder containing an {FORMAT_NAME} manifest")
    rate = float(_require(manifest, "sample_rate_hz", (int, float), src, ""))
    if not math.isfinite(rate) or rate <= 0:
        raise InputError(f"sample rate must be positive, got {rate}", source=src, field="sample_rate_hz")
    units = manifest.get("units", "full_scale")
    if units not in UNITS:
        raise InputError(f"units must be one of {', '.join(UNITS)}; got {units!r}", source=src, field="units")
    speakers = _require(manifest, "speakers", list, src, "")
    mics = _require(manifest, "microphones", list, src, "")
    if not speakers or not mics:
        raise InputError("needs at least one speaker and one microphone", source=src,
                         field="speakers" if not speakers else "microphones")
    for kind, entries in (("speakers", speakers), ("microphones", mics)):
        for i, e in enumerate(entries):
            if not isinstance(e, dict):
                raise InputError("each entry must be an object", source=src, field=f"{kind}[{i}]")
            _require(e, "name", str, src, f"{kind}[{i}].")
    spk_names = [e["name"] for e in speakers]
    mic_names = [e["name"] for e in mics]
    for kind, names in (("speakers", spk_names), ("microphones", mic_names)):
        seen = set()
        for i, n in enumerate(names):
            if n in seen:
                raise InputError(f"name {n!r} is used twice", source=src, field=f"{kind}[{i}].name")
            seen.add(n)
    n_samples = manifest.get("n_samples")
    blocks = []
    for i, e in enumerate(speakers):
        fname = _require(e, "file", str, src, f"speakers[{i}].")
        wav = folder / fname
        if not wav.exists():
            raise InputError("file listed in the manifest is missing", source=str(wav),
                             field=f"speakers[{i}].file")
        data, wav_rate = read_audio(wav, what="WAV")
        if wav_rate != round(rate):
            raise InputError(f"sample rate {wav_rate} Hz differs from the manifest's {rate:g} Hz",
                             source=str(wav), fix="re-export all files at one rate")
        if data.shape[1] != len(mic_names):
            raise InputError(f"has {data.shape[1]} channels but the manifest lists {len(mic_names)} "
                             "microphones", source=str(wav), fix="one channel per microphone, in order")
        if n_samples is not None and data.shape[0] != n_samples:
            raise InputError(f"has {data.shape[0]} samples but the manifest says n_samples = {n_samples}",
                             source=str(wav), fix="the file is truncated; re-export it")
        if blocks and data.shape[0] != blocks[0].shape[0]:
            raise InputError(f"has {data.shape[0]} samples, other files {blocks[0].shape[0]}",
                             source=str(wav), fix="all responses in a set must have one length")
        if not np.all(np.isfinite(data)):
            raise InputError("contains NaN or infinite samples", source=str(wav))
        if not np.any(data):
            raise InputError("is silent (all samples zero)", source=str(wav),
                             fix="check the wiring of this speaker and measure again")
        blocks.append(data)
    zero_lag = manifest.get("zero_lag_samples", 0)
    problem = (f"expected a whole number, got {zero_lag!r}" if isinstance(zero_lag, bool) or
               not isinstance(zero_lag, int) else zero_lag_problem(zero_lag, blocks[0].shape[0]))
    if problem:
        raise InputError(problem, source=src, field="zero_lag_samples",
                         fix="give the index of zero lag in the responses (0 when none was kept before it)")
    latency = manifest.get("latency_removed_samples", 0)
    if isinstance(latency, bool) or not isinstance(latency, int) or latency < 0:
        raise InputError(f"expected a whole number of samples >= 0, got {latency!r}", source=src,
                         field="latency_removed_samples")
    for key, kind in (("warnings", list), ("extra", dict)):
        if not isinstance(manifest.get(key, kind()), kind):
            raise InputError(f"must be a{'n array' if kind is list else 'n object'}", source=src, field=key)
    # A folder arrayplan wrote carries checksums: refuse one whose files come from different runs.
    check_folder(folder, needed=(MANIFEST_NAME, "*.wav"))
    return IRSet(
        data=np.stack(blocks, axis=2),
        sample_rate_hz=rate,
        speaker_names=spk_names,
        mic_names=mic_names,
        speaker_positions=_read_positions(speakers, src, "speakers"),
        mic_positions=_read_positions(mics, src, "microphones"),
        units=units,
        latency_removed_samples=int(manifest.get("latency_removed_samples", 0)),
        warnings=[str(w) for w in manifest.get("warnings", [])],
        extra=dict(manifest.get("extra", {})),
        zero_lag_samples=int(zero_lag),
    )
