"""Writing a plan to a folder, and reading its weights back.

Files (all written together, atomically, by :func:`write_plan`):

``channels.csv``
    One row per (frequency, channel): ``frequency_hz, channel, singular_value,
    power_coupling, share_of_sum_rule, level_db``.  Channels are numbered
    from 1, strongest first (or by tracked identity when tracking is on).
``summary.csv``
    One row per frequency: ``frequency_hz, sum_rule, strong_channels,
    usable_channels, effective_channels, heuristic_channels`` (empty where
    the paraxial estimate does not apply); a truncated plan adds
    ``channels_computed, share_not_computed``.
``weights.npz``
    ``frequency_hz`` (n_freq,), ``singular_value`` (n_freq, n_chan),
    ``drive`` (n_freq, n_spk, n_chan) and ``combine`` (n_freq, n_mic, n_chan),
    complex128, plus ``speaker_names`` and ``mic_names``.
``weights.csv``
    The same weights as a long table ``frequency_hz, channel, side, element,
    re, im`` with side ``drive`` or ``combine``.
``weights.json``
    The sidecar: conventions, normalisation, units, element names and
    order, settings, tool version and the rig's hash; for a plan made from
    measured responses, the ``measurement`` it was made from
    (:func:`measurement_record`) and the coupling's units in that set's units.
``rig.png``, ``couplings.png``, ``channel-counts.png``
    Figures.
"""

from __future__ import annotations

import contextlib
import csv
import json
import os
from pathlib import Path
from typing import Any, Callable

import numpy as np

from ..channels.svd import ChannelSet
from ..errors import InputError
from ._versioning import check
from .npz import write_npz
from .plan_provenance import (MEASURED_UNITS, coupling_text, irset_sha256, measurement_fields, measurement_record,
                              planned_rig_file)
from .plan_tables import (LONG_TABLE_MAX_ROWS, long_table_rows, write_channels_csv, write_summary_csv,
                          write_weights_csv)
from .fileio import atomic_path, check_folder, provenance, staged_output_dir, write_json_atomic
from ..frequency import FrequencyAxis
from ..channels.heuristics import paraxial_estimate
from ..channels.planning import Plan
from ..parallel import alongside
from ..rig import Rig

__all__ = ["PLAN_FORMAT", "PLAN_FORMAT_VERSION", "write_plan", "read_weights", "read_plan", "PlanWeights", "summary_lines", "measurement_record",
           "coupling_text", "long_table_rows", "LONG_TABLE_MAX_ROWS", "planned_rig_file", "irset_sha256", "MEASURED_UNITS"]

NORMALISATION = ("drive and combine weight vectors have unit Euclidean norm per channel and frequency; "
                 "combine^T G drive = diag(singular_value)")
PHASE = ("the speaker entry of largest magnitude in each drive vector is real and positive "
         "(tracked plans: phase follows the previous bin instead)")


#: ``format`` and ``format_version`` of ``weights.json`` (plans of the previous release: ``kind``, same version).
PLAN_FORMAT = "arrayplan-plan"
PLAN_FORMAT_VERSION = 1

def write_plan(plan: Plan, out_dir: str | os.PathLike, figures: bool = True, *,
               measurement: dict[str, Any] | None = None, long_weights: bool | None = None,
               progress: Callable[[float, float], None] | None = None) -> list[Path]:
    """Write every plan file into `out_dir` (created if needed); return their paths.

    Parameters
    ----------
    plan : Plan
    out_dir : path
    figures : bool
        Draw the figures too.
    measurement : dict, optional
        For a plan made from measured responses: :func:`measurement_record`
        of the IR set and kernel, stored in ``weights.json``.
    long_weights : bool, optional
        Write the long table ``weights.csv``: True always, False never,
        None (default) when it has at most :data:`LONG_TABLE_MAX_ROWS` rows.
        ``weights.npz`` always holds every weight.
    progress : callable, optional
        ``progress(done, total)`` while the files are written (in units of
        table rows).

    Returns
    -------
    list of Path

    Notes
    -----
    Every table is streamed to its file a frequency at a time (never held
    whole in memory) and costs time in proportion to its size; the NPZ
    archive is written from the plan's arrays without a copy.
    """
    ch = plan.channels
    n_freq, n_elem = len(ch.axis), len(ch.speaker_names) + len(ch.mic_names)
    rows = int(np.sum(ch.channels_computed()))
    with_long = long_table_rows(plan) <= LONG_TABLE_MAX_ROWS if long_weights is None else bool(long_weights)
    # work in units of text rows; binary weights and figures counted as rough equivalents
    steps = [rows, n_freq, rows * n_elem // 8 + 1, rows * n_elem if with_long else 0, 1, 2000 if figures else 0]
    total, done = float(sum(steps)), [0.0]

    def advance(amount: float) -> None:
        done[0] += amount
        if progress is not None:
            progress(min(done[0], total), total)

    with staged_output_dir(out_dir) as stage:
        # the channel table is formatted in a second process while this one writes the rest
        beside = rows >= _CHANNELS_BESIDE_ROWS
        with (alongside(write_channels_csv, plan, stage / "channels.csv", _no_progress) if beside
              else contextlib.nullcontext()):
            if not beside:
                write_channels_csv(plan, stage / "channels.csv", lambda f: advance(steps[0] / max(1, n_freq)))
            write_summary_csv(plan, stage / "summary.csv")
            advance(steps[1])
            with atomic_path(stage / "weights.npz") as tmp:
                extra = {} if ch.computed is None else {"computed_channels": np.asarray(ch.computed)}
                write_npz(tmp, dict(frequency_hz=ch.axis.hz, singular_value=ch.singular_values, drive=ch.drive,
                                    combine=ch.combine, sum_rule=ch.sum_rule,
                                    speaker_names=np.array(ch.speaker_names), mic_names=np.array(ch.mic_names),
                                    **extra))
            advance(steps[2])
            if with_long:
                write_weights_csv(plan, stage / "weights.csv", lambda f: advance(steps[3] / max(1, n_freq)))
            write_json_atomic(stage / "weights.json", _sidecar(plan, with_long) | measurement_fields(measurement))
            advance(steps[4])
        if beside:
            advance(steps[0])
        if figures:
            _write_figures(plan, stage)
        advance(steps[5])
        written = sorted(p.name for p in stage.iterdir())
    return [Path(out_dir) / name for name in written]


#: From this many rows on, ``channels.csv`` is written by a second process (a fork costs ~10 ms).
_CHANNELS_BESIDE_ROWS = 50_000


def _no_progress(_f: int) -> None:
    pass


def _sidecar(plan: Plan, with_long: bool = True) -> dict[str, Any]:
    ch, rig = plan.channels, plan.rig
    truncation = None
    if ch.truncated:
        truncation = {"channels_computed_max": int(np.max(ch.channels_computed())),
                      "channels_computed_min": int(np.min(ch.channels_computed())),
                      "largest_share_not_computed": float(np.max(ch.share_not_computed())),
                      "note": "only the strongest channels were computed at each frequency (computed_channels "
                              "in weights.npz, channels_computed in summary.csv); the sum rule comes from G, "
                              "and share_not_computed is the part of it in the channels not computed"}
    doc = {
        "format": PLAN_FORMAT,
        "format_version": PLAN_FORMAT_VERSION,
        "rig": {"name": rig.name, "source": rig.source, "sha256": rig.sha256,
                "speed_of_sound_m_per_s": rig.medium.speed_of_sound, "air_absorption": rig.medium.air_absorption},
        "kernel": plan.kernel_name,
        "kernel_settings": plan.kernel_settings,
        "coupling": coupling_text(),
        "channels": "G = U S V^H per frequency; drive = V, combine = conj(U); power coupling = s^2",
        "normalisation": NORMALISATION,
        "phase_convention": PHASE,
        "tracked": ch.tracked,
        "precision": "single (complex64 SVD)" if ch.drive.dtype == np.complex64 else "double (complex128)",
        "truncated": truncation,
        "speaker_names": list(ch.speaker_names),
        "mic_names": list(ch.mic_names),
        "speaker_positions_m": rig.speakers.positions.tolist(),
        "mic_positions_m": rig.mics.positions.tolist(),
        "n_frequencies": len(ch.axis),
        "n_channels": ch.n_channels,
        "threshold_db": plan.threshold_db,
        "snr_db": plan.snr_db,
        "heuristic": {"kind": plan.estimate.kind, "distance_m": plan.estimate.distance_m,
                      "speaker_aperture": plan.estimate.speaker_size, "mic_aperture": plan.estimate.mic_size,
                      "warning": plan.estimate.warning},
        "files": {"weights.npz": "frequency_hz (n_freq,), singular_value (n_freq, n_chan), drive (n_freq, n_spk, "
                                 "n_chan), combine (n_freq, n_mic, n_chan), sum_rule (n_freq,)"
                                 + (", computed_channels (n_freq,)" if ch.truncated else ""),
                  "weights.csv": ("frequency_hz, channel (1-based), side (drive|combine), element, re, im"
                                  if with_long else
                                  f"not written: {long_table_rows(plan)} rows exceed {LONG_TABLE_MAX_ROWS}; "
                                  "weights.npz holds every weight (ask for the long table to write it)")},
        "provenance": provenance(rig_sha256=rig.sha256),
        **_piston_note(rig),
    }
    return doc


def _piston_note(rig) -> dict[str, str]:
    """The level convention of pistons (see arrayplan.rig.directivity), for a rig that has any."""
    sides = {side: {d.kind for d in elements.directivities}
             for side, elements in (("speakers", rig.speakers), ("microphones", rig.mics))}
    if not any("piston" in kinds for kinds in sides.values()):
        return {}
    note = ("piston patterns are 1 on axis: a piston of unit strength gives on axis, in the far field, the "
            "pressure of an omni of unit strength; a real baffled piston moving the same volume velocity gives "
            "+6 dB (half-space radiation), which the coupling does not include")
    mixed = [side for side, kinds in sides.items() if "piston" in kinds and kinds - {"piston"}]
    if mixed:
        note += (f"; the {' and '.join(mixed)} mix pistons with other patterns, so their relative levels compare "
                 "equal on-axis far-field output, not equal volume velocity")
    return {"level_convention": note + "; valid beyond the Rayleigh distance pi a^2 / lambda"}


def _write_figures(plan: Plan, folder: Path) -> None:
    from ..plots import plot_channel_counts, plot_couplings, plot_rig

    for name, fig in (("rig.png", plot_rig(plan.rig)), ("couplings.png", plot_couplings(plan)),
                      ("channel-counts.png", plot_channel_counts(plan))):
        with atomic_path(folder / name) as tmp:
            fig.savefig(tmp, dpi=130)


class PlanWeights:
    """Weights read back from a plan folder (see :func:`read_weights`).

    Attributes
    ----------
    axis : FrequencyAxis
    singular_values : ndarray, (n_freq, n_chan)
    drive : ndarray, complex, (n_freq, n_spk, n_chan)
    combine : ndarray, complex, (n_freq, n_mic, n_chan)
    speaker_names, mic_names : tuple of str
    sidecar : dict
        The folder's ``weights.json``.
    sum_rule : ndarray, shape (n_freq,), or None
        sum |G|^2 per frequency; None from plans written before it was stored.
    computed : ndarray of int, shape (n_freq,), or None
        Channels computed per frequency of a truncated plan; None when complete.

    Parameters
    ----------
    axis, singular_values, drive, combine, speaker_names, mic_names, sidecar, sum_rule, computed
        As the attributes.
    """

    def __init__(self, axis, singular_values, drive, combine, speaker_names, mic_names, sidecar, sum_rule=None,
                 computed=None) -> None:
        self.axis = axis
        self.singular_values = singular_values
        self.drive = drive
        self.combine = combine
        self.speaker_names = speaker_names
        self.mic_names = mic_names
        self.sidecar = sidecar
        self.sum_rule = sum_rule      # (n_freq,), None from plans written before it was stored
        self.computed = computed      # (n_freq,) channels computed in a truncated plan, else None


#: Arrays of ``weights.npz`` and the number of dimensions of each.
_WEIGHT_ARRAYS = {"frequency_hz": 1, "singular_value": 2, "drive": 3, "combine": 3, "speaker_names": 1,
                  "mic_names": 1}


#: Arrays that newer plans add: the sum rule from G, and the channels computed of a truncated plan.
_OPTIONAL_ARRAYS = ("sum_rule", "computed_channels")


def _weight_arrays(npz: Path) -> dict[str, np.ndarray]:
    """The arrays of a plan's ``weights.npz``, with their shapes checked against each other."""
    import zipfile

    src = str(npz)
    try:
        with np.load(npz, allow_pickle=False) as z:
            missing = sorted(set(_WEIGHT_ARRAYS) - set(z.files))
            if missing:
                raise InputError(f"has no array {', '.join(missing)}", source=src,
                                 fix="run 'arrayplan plan' again to rewrite the folder")
            data = {k: z[k] for k in _WEIGHT_ARRAYS}
            data.update({k: z[k] for k in _OPTIONAL_ARRAYS if k in z.files})
    except (ValueError, OSError, EOFError, zipfile.BadZipFile) as exc:
        raise InputError(f"not a readable NumPy archive ({exc.__class__.__name__}: {' '.join(str(exc).split())})",
                         source=src, fix="run 'arrayplan plan' again to rewrite the folder") from None
    for key, ndim in _WEIGHT_ARRAYS.items():
        if data[key].ndim != ndim:
            raise InputError(f"expected {ndim} dimensions, got shape {data[key].shape}", source=src, field=key)
    n_f, n_c = data["singular_value"].shape
    expected = {"frequency_hz": (n_f,), "drive": (n_f, len(data["speaker_names"]), n_c),
                "combine": (n_f, len(data["mic_names"]), n_c)}
    for key, shape in expected.items():
        if data[key].shape != shape:
            raise InputError(f"shape {data[key].shape} does not match the other arrays (expected {shape})",
                             source=src, field=key)
    return data


def read_weights(plan_dir: str | os.PathLike) -> PlanWeights:
    """Read ``weights.npz`` and ``weights.json`` from a plan folder, with checks.

    The folder must match its checksums (:func:`arrayplan.formats.fileio.check_folder`),
    so weights of one run are never read beside a sidecar of another.

    Parameters
    ----------
    plan_dir : path
        A folder written by :func:`write_plan`.

    Returns
    -------
    PlanWeights

    Raises
    ------
    InputError
        A missing, damaged or mixed file, naming it.
    """
    folder = Path(plan_dir)
    npz, side = folder / "weights.npz", folder / "weights.json"
    for p in (npz, side):
        if not p.exists():
            raise InputError("missing", source=str(p), fix="point at a folder written by 'arrayplan plan'")
    try:
        sidecar = json.loads(side.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise InputError(f"not valid JSON ({' '.join(str(exc).split())})", source=str(side),
                         fix="run 'arrayplan plan' again to rewrite the folder") from None
    check(sidecar, PLAN_FORMAT, PLAN_FORMAT_VERSION, str(side), legacy=PLAN_FORMAT,
          fix="point at a folder written by 'arrayplan plan'")
    data = _weight_arrays(npz)
    check_folder(folder, needed=("weights.*", "*.csv"))
    return PlanWeights(FrequencyAxis(data["frequency_hz"], source=str(npz)), data["singular_value"],
                       data["drive"], data["combine"], tuple(str(x) for x in data["speaker_names"]),
                       tuple(str(x) for x in data["mic_names"]), sidecar, data.get("sum_rule"),
                       data.get("computed_channels"))


def read_plan(plan_dir: str | os.PathLike, rig: Rig | None = None, weights: PlanWeights | None = None) -> Plan:
    """Rebuild the :class:`Plan` a plan folder was written from.

    Parameters
    ----------
    plan_dir : path
        A folder written by :func:`write_plan`.
    rig : Rig, optional
        The rig the plan was made for (it must have the plan's element names,
        in order).  Default: a rig of omnidirectional elements at the
        positions stored in ``weights.json``, with its speed of sound.
    weights : PlanWeights, optional
        The folder's weights when the caller has read them already (for
        example memory-mapped); default: :func:`read_weights`.

    Returns
    -------
    Plan
        Channels, counts and the paraxial estimate as planned; the sum rule
        as stored (older plans: the sum of s^2, equal to sum |G|^2 by the SVD).

    Raises
    ------
    InputError
        When the folder lacks its files, or (without `rig`) was written by a
        version that did not store positions.
    """
    w = weights if weights is not None else read_weights(plan_dir)
    side = w.sidecar
    src = str(Path(plan_dir) / "weights.json")
    if rig is None:
        pos = {k: side.get(k) for k in ("speaker_positions_m", "mic_positions_m")}
        if any(v is None for v in pos.values()):
            raise InputError("the plan does not store element positions", source=src,
                             field="speaker_positions_m", fix="give the rig file, or plan again")
        try:
            rig = Rig.from_positions(np.asarray(pos["speaker_positions_m"], dtype=float),
                                     np.asarray(pos["mic_positions_m"], dtype=float),
                                     speed_of_sound=float(side["rig"]["speed_of_sound_m_per_s"]),
                                     speaker_names=w.speaker_names, mic_names=w.mic_names,
                                     name=str(side["rig"].get("name", "rig")), source=src)
        except (KeyError, TypeError, ValueError) as exc:
            raise InputError(f"malformed rig description ({exc})", source=src, field="rig") from None
    elif tuple(rig.speakers.names) != w.speaker_names or tuple(rig.mics.names) != w.mic_names:
        raise InputError("the rig's element names differ from the plan's", source=src, field="speaker_names",
                         fix="give the rig file the plan was made from")
    sv = np.asarray(w.singular_values, dtype=float)
    sum_rule = np.sum(sv ** 2, axis=1) if w.sum_rule is None else np.asarray(w.sum_rule, dtype=float)
    channels = ChannelSet(w.axis, sv, w.drive, w.combine, sum_rule, w.speaker_names,
                          w.mic_names, bool(side.get("tracked", False)), w.computed)
    estimate = paraxial_estimate(rig.speakers.positions, rig.mics.positions,
                                 w.axis.wavelengths(rig.medium.speed_of_sound))
    return Plan(rig, channels, estimate, float(side.get("threshold_db", 3.0)), float(side.get("snr_db", 40.0)),
                str(side.get("kernel", "free field")))


def summary_lines(plan: Plan, max_rows: int = 12) -> list[str]:
    """A short human summary of a plan, for stdout.

    Parameters
    ----------
    plan : Plan
    max_rows : int
        Frequencies shown (spread evenly over the axis).

    Returns
    -------
    list of str
        Lines without newlines.
    """
    ch, rig = plan.channels, plan.rig
    hz = ch.axis.hz
    lines = [f"Rig '{rig.name}': {len(rig.speakers)} speakers, {len(rig.mics)} microphones, "
             f"c = {rig.medium.speed_of_sound:.2f} m/s, {len(hz)} frequencies "
             f"({hz[0]:g}..{hz[-1]:g} Hz), kernel: {plan.kernel_name}"]
    if plan.estimate.warning:
        lines.append(f"note: paraxial estimate: {plan.estimate.warning}")
    lines.append(f"{'frequency (Hz)':>15} {'strong':>7} {'usable':>7} {'effective':>10} {'paraxial':>9} "
                 f"{'strongest s^2 (%)':>18}")
    picks = np.unique(np.linspace(0, len(hz) - 1, min(max_rows, len(hz))).round().astype(int))
    share = ch.share_of_sum_rule()
    eff = ch.effective_channels()
    for f in picks:
        est = plan.estimate.counts[f]
        lines.append(f"{hz[f]:15.6g} {int(plan.strong_channels[f]):7d} {int(plan.usable_channels[f]):7d} "
                     f"{eff[f]:10.2f} {('%.1f' % est) if np.isfinite(est) else '-':>9} "
                     f"{100 * share[f].max():18.1f}")
    if len(picks) < len(hz):
        lines.append(f"({len(hz) - len(picks)} more frequencies in summary.csv)")
    if ch.truncated:
        n = ch.channels_computed()
        lines.append(f"truncated plan: only the strongest {n.min()}..{n.max()} of {min(len(rig.speakers), len(rig.mics))} "
                     f"channels computed per frequency; at most {100 * ch.share_not_computed().max():.3g} % of "
                     f"the sum rule lies in the channels not computed")
        weakest = ch.level_db()[np.arange(len(hz)), np.maximum(n - 1, 0)]
        short = int(np.sum(weakest > -abs(plan.snr_db)))
        if short:
            lines.append(f"note: at {short} of {len(hz)} frequencies the weakest computed channel is still above "
                         f"the noise floor, so the usable count there is a lower bound; compute more channels")
    lines.append(f"strong: within {plan.threshold_db:g} dB of the strongest channel; usable: above the noise "
                 f"floor at an SNR of {plan.snr_db:g} dB on the strongest channel")
    return lines
