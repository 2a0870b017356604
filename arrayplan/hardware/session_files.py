"""The files of a measurement session: ``session.json``, the take folders, the combined IR set.

:func:`arrayplan.hardware.measure.measure` runs the take loop; this module
writes and reads back what it keeps (the layout is in that module's
docstring).  A take is built in a hidden staging folder named with the
process id (:func:`arrayplan.formats.output_folders.new_staging_folder`), given
``SHA256SUMS`` and published whole (:func:`arrayplan.formats.output_folders.publish_folder`);
staging left by a dead run is removed by the next one.
"""

from __future__ import annotations

import io
import shutil
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np

from ..errors import InputError
from ..formats.atomic_files import write_json_atomic
from ..formats.fileio import provenance
from ..formats.hidden_names import clean_stale_staging
from ..formats.output_folders import check_folder, new_staging_folder, publish_folder, write_checksums
from ..formats.irset import IRSet, read_irset, write_irset

if TYPE_CHECKING:
    from ..signals.sweeps import SweepSignal
    from .duplex import AudioLink, DuplexResult
    from .measure import MeasurementSettings, RigWiring

__all__ = ["SESSION_FILE", "TakeResult", "take_folder_name", "completed_takes"]

SESSION_FILE = "session.json"


_STAGING_PREFIX = ".staging-"


@dataclass
class TakeResult:
    """One speaker's take, as saved in its take.json.

    Attributes
    ----------
    index : int
        0-based speaker index in the rig.
    speaker : str
        The speaker's name.
    folder : Path
        The take's folder (``takes/<take_folder_name>``).
    status : str
        ``"ok"``, or ``"marked"`` when the take has warnings.
    warnings : list of str
        One line each.
    latency_samples : int or None
        Round-trip latency used (samples).
    latency_source : str
        ``"reference"``, ``"calibration"``, ``"given"`` or ``"none"``.
    peak_to_noise_db : list of float or None
        Per microphone, the response's peak-to-noise ratio (dB); None where
        not measured.
    resumed : bool
        True when the take was read back from an earlier run.
    details : dict
        Further figures of the take's analysis.
    """

    index: int
    speaker: str
    folder: Path
    status: str
    warnings: list[str]
    latency_samples: int | None
    latency_source: str
    peak_to_noise_db: list[float | None]
    resumed: bool = False
    details: dict[str, Any] = field(default_factory=dict)


def take_folder_name(index: int, speaker: str) -> str:
    """``"003-S3"``: 1-based index and the speaker's name made safe for file systems.

    Parameters
    ----------
    index : int
        0-based speaker index.
    speaker : str
        The speaker's name; characters other than letters, digits, ``-``,
        ``_`` and ``.`` become ``_``.

    Returns
    -------
    str
        Three-digit 1-based index, ``-``, safe name.
    """
    safe = "".join(ch if ch.isalnum() or ch in "-_." else "_" for ch in speaker)
    return f"{index + 1:03d}-{safe}"


def completed_takes(out_dir: Path) -> dict[str, Path]:
    """Finished take folders in `out_dir` by folder name (those holding a take.json).

    Parameters
    ----------
    out_dir : Path
        The measurement folder (its ``takes/`` subfolder is searched).

    Returns
    -------
    dict of str to Path
        Folder name -> folder, in name order; empty without ``takes/``.
    """
    takes = Path(out_dir) / "takes"
    if not takes.is_dir():
        return {}
    return {p.name: p for p in sorted(takes.iterdir())
            if p.is_dir() and not p.name.startswith(".") and (p / "take.json").is_file()}


def _session_record(link: AudioLink, wiring: RigWiring, settings: MeasurementSettings,
                    sweep: SweepSignal, latency_source: str, units: str) -> dict[str, Any]:
    return {
        "format": "arrayplan-measurement",
        "format_version": 1,
        "sample_rate_hz": float(link.sample_rate_hz),
        "wiring": wiring.to_json(),
        "settings": asdict(settings),
        "sweep": sweep.sidecar(None),
        "latency_source": latency_source,
        "units": units,
    }


_SESSION_KEYS_THAT_MUST_MATCH = ("sample_rate_hz", "wiring", "settings", "latency_source", "units")


def _open_session(out_dir: Path, record: dict[str, Any], device: str) -> None:
    """Create the folder's session.json, or check that it matches a resumed run."""
    path = out_dir / SESSION_FILE
    if path.exists():
        import json

        try:
            old = json.loads(path.read_text(encoding="utf-8"))
        except (UnicodeDecodeError, json.JSONDecodeError) as exc:
            raise InputError(f"not valid JSON ({exc})", source=str(path),
                             fix="measure into a new `out` folder") from None
        for key in _SESSION_KEYS_THAT_MUST_MATCH:
            if json.loads(json.dumps(old.get(key), default=str)) != json.loads(json.dumps(record[key], default=str)):
                raise InputError(f"this folder holds a measurement with other '{key}' than asked for now",
                                 source=str(path), field=key,
                                 fix="resume with the same rig and options as before, or use a new `out` folder")
        return
    write_json_atomic(path, dict(record, device=device, provenance=provenance(rig_sha256=record["wiring"]["rig_sha256"])))


def _cleanup_staging(takes_dir: Path, wiring: RigWiring) -> list[str]:
    """Remove unfinished takes of dead runs (those of a live run into the same folder are left alone)."""
    removed = []
    if takes_dir.is_dir():
        for p in takes_dir.iterdir():   # names of versions before staging names carried the process id
            if p.name.startswith(_STAGING_PREFIX) or p.name.startswith(".replaced-"):
                shutil.rmtree(p, ignore_errors=True)
                removed.append(p.name)
        for s, speaker in enumerate(wiring.speaker_names):
            removed += [p.name for p in clean_stale_staging(takes_dir / take_folder_name(s, speaker))]
    return removed


def _undo_fresh_session(out_dir: Path, takes_dir: Path | None, created: list[Path]) -> None:
    """Remove what a new session created before it failed with no take finished."""
    import contextlib

    with contextlib.suppress(OSError):
        (out_dir / SESSION_FILE).unlink()
    if takes_dir is not None:
        shutil.rmtree(takes_dir, ignore_errors=True)
    for d in reversed(created):
        with contextlib.suppress(OSError):
            d.rmdir()


def _load_take(folder: Path, index: int, speaker: str) -> TakeResult:
    import json

    path = folder / "take.json"
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
        return TakeResult(index=index, speaker=speaker, folder=folder, status=str(data["status"]),
                          warnings=[str(w) for w in data["warnings"]], latency_samples=data["latency_samples"],
                          latency_source=str(data["latency_source"]),
                          peak_to_noise_db=list(data["peak_to_noise_db"]), details=dict(data.get("details", {})))
    except (OSError, ValueError, KeyError, TypeError) as exc:
        raise InputError(f"cannot read a finished take ({exc})", source=str(path),
                         fix="delete this take's folder to measure it again") from None


def _save_take(take: TakeResult, result: DuplexResult, ir: np.ndarray, units: str, wiring: RigWiring,
               sweep: SweepSignal, settings: MeasurementSettings, latency_source: str, sf: Any,
               out_dir: Path, n_kept: int) -> None:
    """Write the take under a staging name and rename it into place."""
    takes_dir = take.folder.parent
    s = take.index
    stage = new_staging_folder(take.folder)
    try:
        # Encoded in memory and written with plain file I/O, so a full disk is an OSError.
        wav = io.BytesIO()
        sf.write(wav, result.recording.astype(np.float32), int(round(result.sample_rate_hz)),
                 subtype="FLOAT", format="WAV")
        (stage / "recording.wav").write_bytes(wav.getvalue())
        pos_s = None if wiring.speaker_positions is None else wiring.speaker_positions[[s]]
        irs = IRSet(data=ir[:, :, None], sample_rate_hz=result.sample_rate_hz, speaker_names=[take.speaker],
                    mic_names=list(wiring.mic_names), speaker_positions=pos_s, mic_positions=wiring.mic_positions,
                    units=units, latency_removed_samples=int(take.latency_samples or 0), warnings=take.warnings,
                    extra={"take": take.folder.name, "status": take.status},
                    zero_lag_samples=int(take.details.get("zero_lag_samples", 0)))
        write_irset(stage / "irset", irs, rig_sha256=wiring.rig_sha256)
        in_names = list(wiring.mic_names) + (["reference"] if wiring.reference else [])
        write_json_atomic(stage / "take.json", {
            "speaker": take.speaker, "index": s + 1, "output_channel": wiring.speaker_outputs[s] + 1,
            "status": take.status, "warnings": take.warnings,
            "latency_samples": take.latency_samples, "latency_source": latency_source,
            "peak_to_noise_db": take.peak_to_noise_db, "microphones": list(wiring.mic_names),
            "recording": {"file": "recording.wav", "channels": in_names, "repeats": settings.repeats,
                          "samples_per_repeat": sweep.signal.size},
            "details": take.details,
            "provenance": provenance(rig_sha256=wiring.rig_sha256),
        })
        write_checksums(stage)
        publish_folder(stage, take.folder, ours_only=False)  # a marked take measured again is swapped out whole
    except (OSError, sf.SoundFileError) as exc:
        shutil.rmtree(stage, ignore_errors=True)
        reason = getattr(exc, "strerror", None) or " ".join(str(exc).split())
        raise InputError(f"could not save the take of speaker {take.speaker} ({reason})",
                         source=str(out_dir),
                         fix=f"free disk space or choose another folder; the {n_kept} finished take(s) are "
                             "intact and running the same command again resumes") from None
    except BaseException:
        shutil.rmtree(stage, ignore_errors=True)
        raise


def _write_combined(out_dir: Path, takes: Sequence[TakeResult], wiring: RigWiring, fs: float, units: str,
                    session_warnings: list[str], latency_source: str, zero_lag: int) -> Path | None:
    """Stack every take's responses into out_dir/irset once all takes are there.

    `zero_lag` is the session's pre-roll (the same for every take: resumed
    takes were measured with the same settings, which session.json checks).
    """
    if len(takes) != len(wiring.speaker_names):
        return None
    blocks = []
    for t in takes:
        try:
            check_folder(t.folder, needed=("take.json", "recording.wav", "irset/*"))
        except InputError as exc:
            raise InputError(exc.problem, source=exc.source,
                             fix="delete this take's folder to measure it again") from None
        try:
            take = read_irset(t.folder / "irset")
        except InputError as exc:
            raise InputError(exc.problem, source=exc.source, field=exc.field,
                             fix="delete this take's folder to measure it again") from None
        if round(take.sample_rate_hz) != round(fs) or take.n_mic != len(wiring.mic_names) or take.n_spk != 1:
            raise InputError(f"take does not match the session ({take.n_mic} microphones x {take.n_spk} speakers at "
                             f"{take.sample_rate_hz:g} Hz)", source=str(t.folder / "irset"),
                             fix="delete this take's folder to measure it again")
        blocks.append(take.data[:, :, 0])
    lengths = {b.shape[0] for b in blocks}
    if len(lengths) != 1:
        raise InputError(f"takes have different lengths {sorted(lengths)}", source=str(out_dir))
    for t in takes:
        if int(t.details.get("zero_lag_samples", 0)) != zero_lag:
            raise InputError(f"take of speaker {t.speaker} keeps {t.details.get('zero_lag_samples', 0)} samples "
                             f"before zero lag, this session {zero_lag}", source=str(t.folder / "take.json"),
                             fix="delete this take's folder to measure it again")
    lat = [t.latency_samples for t in takes]
    irs = IRSet(data=np.stack(blocks, axis=2), sample_rate_hz=fs, speaker_names=list(wiring.speaker_names),
                mic_names=list(wiring.mic_names), speaker_positions=wiring.speaker_positions,
                mic_positions=wiring.mic_positions, units=units,
                latency_removed_samples=int(round(float(np.median(lat)))) if latency_source != "none" else 0,
                warnings=session_warnings + [f"speaker {t.speaker}: {w}" for t in takes for w in t.warnings],
                zero_lag_samples=zero_lag,
                extra={"measurement": {
                    "latency_source": latency_source,
                    "takes": [{"speaker": t.speaker, "status": t.status, "latency_samples": t.latency_samples,
                               "peak_to_noise_db": t.peak_to_noise_db} for t in takes]}})
    try:
        return write_irset(out_dir / "irset", irs, rig_sha256=wiring.rig_sha256)
    except OSError as exc:
        raise InputError(f"could not write the combined impulse responses ({exc.strerror or exc})",
                         source=str(out_dir / "irset"),
                         fix="free disk space and run the same command again: the finished takes are kept") from None
