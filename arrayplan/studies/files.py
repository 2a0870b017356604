"""Study folders: writing a study's tables, arrays, sidecar and figures, reading them back, and its verdict.

Capacity folder: ``capacity.csv`` (one row per SNR and frequency),
``capacity-channels.csv`` (per SNR, frequency and channel: power and floor),
``capacity-band.csv`` (per SNR: bit/s), ``capacity.npz`` (every array of
:class:`~arrayplan.studies.capacity.CapacityStudy`), ``capacity.json`` (the
sidecar, :mod:`arrayplan.formats.study_sidecars`) and figures.

Tolerance folder: ``tolerance.csv`` (one row per frequency and channel),
``tolerance.npz`` (the summary arrays), ``tolerance-trials.npz`` (every
trial), ``tolerance.json`` (the sidecar) and figures.
Channels are numbered from 1 in every file.
"""

from __future__ import annotations

import dataclasses
import os
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import InputError
from ..formats.study_sidecars import read_study_sidecar, stamp_study_sidecar
from ..formats.atomic_files import atomic_path, write_json_atomic, write_text_atomic
from ..formats.fileio import provenance
from ..formats.output_folders import staged_output_dir
from ..verification.channels import _ranges as channel_ranges
from ._common import STRONGEST_SNR_MEANING
from .capacity import CapacityStudy
from .tolerance import KR_LIMIT, ToleranceStudy
from .trials import TrialChunk

__all__ = ["write_capacity_study", "write_tolerance_study", "read_capacity_study",
           "read_tolerance_study", "capacity_verdict", "tolerance_verdict"]


def _g(x: float) -> str:
    return "" if not np.isfinite(x) else f"{x:.8g}"


def _csv(header: list[str], rows: list[list[Any]]) -> str:
    return "\n".join([",".join(header)] + [",".join(str(v) for v in r) for r in rows]) + "\n"


def _save_figures(stage: Path, figures: list[tuple[str, Any]]) -> None:
    for name, fig in figures:
        with atomic_path(stage / name) as tmp:
            fig.savefig(tmp, dpi=130)


def _bits(x: float) -> str:
    for unit, scale in (("Mbit/s", 1e6), ("kbit/s", 1e3)):
        if abs(x) >= scale:
            return f"{x / scale:.3g} {unit}"
    return f"{x:.3g} bit/s"


def capacity_verdict(study: CapacityStudy) -> str:
    """One line for people: what the plan carries at the lowest and highest SNR.

    The sidecar's ``verdict``; ``arrayplan study capacity`` prints it.

    Parameters
    ----------
    study : CapacityStudy
        The water-filling capacity per SNR and frequency.

    Returns
    -------
    str
        A sentence: bit/s over the planned band (bit/s/Hz for a single
        frequency) at each end of the SNR range, with and without water-filling,
        and the largest number of channels given power.
    """
    parts = []
    for k in sorted({0, len(study.snr_db) - 1}):
        if np.isfinite(study.band_capacity[k]):
            parts.append(f"{_bits(study.band_capacity[k])} at {study.snr_db[k]:g} dB "
                         f"({_bits(study.band_equal_capacity[k])} with equal power on the strong channels)")
        else:
            parts.append(f"{study.capacity[k, 0]:.3g} bit/s/Hz at {study.snr_db[k]:g} dB")
    band = f" over {study.hz[0]:.4g}-{study.hz[-1]:.4g} Hz" if len(study.hz) > 1 else f" at {study.hz[0]:.4g} Hz"
    return (f"Water-filling carries {'; '.join(parts)}{band}, with up to {int(study.active.max())} channels given "
            "power" + ("; the noise is the user's assumption (measured plan)" if study.measured else "") + ".")


def write_capacity_study(study: CapacityStudy, out_dir: str | os.PathLike, *, plan_source: str = "",
                         figures: bool = True, water_freq_index: int | None = None) -> list[Path]:
    """Write a capacity study's files into `out_dir` atomically; return their paths.

    Parameters
    ----------
    study : CapacityStudy
        The study to write.
    out_dir : path
        The study folder; an earlier arrayplan output there is replaced whole.
    plan_source : str
        Where the plan came from (a folder or rig file), recorded in the sidecar.
    figures : bool
        Also draw and save the study's PNG figures (:func:`capacity_figures`).
    water_freq_index : int, optional
        0-based frequency of the water-level figure (default: the middle one).

    Returns
    -------
    list of Path
        Every file written, sorted by name.

    Raises
    ------
    InputError
        When `out_dir` cannot be written (naming the path and the cause).
    """
    rows, chan_rows = [], []
    for k, snr in enumerate(study.snr_db):
        for f, hz in enumerate(study.hz):
            rows.append([_g(hz), _g(snr), _g(study.capacity[k, f]), int(study.active[k, f]),
                         _g(study.water_level[k, f]), _g(study.equal_capacity[k, f]), int(study.strong[f])])
            for j in range(study.power.shape[2]):
                chan_rows.append([_g(hz), _g(snr), j + 1, _g(study.power[k, f, j]), _g(study.noise_floor[k, f, j])])
    band = [[_g(snr), _g(study.band_capacity[k]), _g(study.band_equal_capacity[k])]
            for k, snr in enumerate(study.snr_db)]
    side = {"plan": plan_source, "verdict": capacity_verdict(study),
            "snr_db": study.snr_db.tolist(), "threshold_db": study.threshold_db, "measured_plan": study.measured,
            "conventions": {
                "snr": STRONGEST_SNR_MEANING + ": P s_1^2 / N0",
                "capacity": "C = sum_j log2(1 + p_j s_j^2 / N0), bit/s/Hz; p_j water-filling fractions of P "
                            "(Telatar 1999)",
                "equal_power": "p_j = 1 / n_strong on the channels within threshold_db of the strongest",
                "band": "each planned frequency stands for the band from the midpoints to its neighbours "
                        "(outer bins: half their inner spacing); bit/s = sum_f C_f * width_f; white noise",
                "noise": ("the SNR is the user's assumption about the noise: the plan was made from measured "
                          "responses, which do not tell the noise at the channel outputs") if study.measured
                         else "the SNR is the user's assumption about drive power and noise"},
            "band_capacity_bit_per_s": [None if not np.isfinite(x) else float(x) for x in study.band_capacity],
            "files": {"capacity.csv": "frequency_hz, snr_db, capacity_bit_per_s_per_hz, active_channels, "
                                      "water_level, equal_power_capacity_bit_per_s_per_hz, strong_channels",
                      "capacity-channels.csv": "frequency_hz, snr_db, channel (1-based), power_fraction, "
                                               "noise_floor_fraction",
                      "capacity-band.csv": "snr_db, capacity_bit_per_s, equal_power_capacity_bit_per_s",
                      "capacity.npz": "the arrays of CapacityStudy, SNR first then frequency then channel"},
            "provenance": provenance()}
    with staged_output_dir(out_dir) as stage:
        write_text_atomic(stage / "capacity.csv", _csv(
            ["frequency_hz", "snr_db", "capacity_bit_per_s_per_hz", "active_channels", "water_level",
             "equal_power_capacity_bit_per_s_per_hz", "strong_channels"], rows))
        write_text_atomic(stage / "capacity-channels.csv", _csv(
            ["frequency_hz", "snr_db", "channel", "power_fraction", "noise_floor_fraction"], chan_rows))
        write_text_atomic(stage / "capacity-band.csv", _csv(
            ["snr_db", "capacity_bit_per_s", "equal_power_capacity_bit_per_s"], band))
        with atomic_path(stage / "capacity.npz") as tmp:
            with open(tmp, "wb") as fh:
                np.savez(fh, **{k: np.asarray(v) for k, v in dataclasses.asdict(study).items()})
        write_json_atomic(stage / "capacity.json", stamp_study_sidecar(side, "capacity"))
        if figures:
            _save_figures(stage, capacity_figures(study, water_freq_index))
        names = sorted(p.name for p in stage.iterdir())
    return [Path(out_dir) / n for n in names]


def capacity_figures(study: CapacityStudy, water_freq_index: int | None = None) -> list[tuple[str, Any]]:
    """The capacity study's figures as (file name, Figure).

    Parameters
    ----------
    study : CapacityStudy
        The study to draw.
    water_freq_index : int, optional
        As for :func:`write_capacity_study`.

    Returns
    -------
    list of (str, Figure)
        ``capacity.png``, ``active-channels.png`` and ``water-levels.png``.
    """
    from ..plots.studies import plot_active_channels, plot_capacity, plot_water_levels

    return [("capacity.png", plot_capacity(study)), ("active-channels.png", plot_active_channels(study)),
            ("water-levels.png", plot_water_levels(study, water_freq_index))]


def tolerance_verdict(study: ToleranceStudy) -> str:
    """One line for people: which channels keep the isolation limit in 95 % of trials.

    The sidecar's ``verdict``; ``arrayplan study tolerance`` prints it.

    Parameters
    ----------
    study : ToleranceStudy
        The Monte Carlo results and their settings (error sizes in m, dB, degrees).

    Returns
    -------
    str
        A sentence naming the channels (1-based) that keep the isolation in
        95 % of trials at every frequency, those that do not (with the worst
        channel and frequency, Hz), and where the first-order model stops
        holding.
    """
    s = study.settings
    errs = f"{1000 * s['position_sd_m']:g} mm / {s['gain_sd_db']:g} dB / {s['phase_sd_deg']:g}°"
    worst = np.min(np.where(study.judged, study.survival, np.inf), axis=0)         # per channel
    chans = np.flatnonzero(study.judged.any(axis=0))
    keep = [int(j) + 1 for j in chans if worst[j] >= 0.95]
    lose = [int(j) for j in chans if worst[j] < 0.95]
    text = []
    if keep:
        text.append(f"channels {channel_ranges(keep)} keep {s['isolation_db']:g} dB isolation in 95 % of trials "
                    f"at {errs}")
    if lose:
        j = min(lose, key=lambda c: worst[c])
        f = int(np.nanargmin(np.where(study.judged[:, j], study.survival[:, j], np.inf)))
        text.append(f"channels {channel_ranges([c + 1 for c in lose])} "
                    + ("do not" if keep else f"do not keep {s['isolation_db']:g} dB isolation in 95 % of trials at {errs}")
                    + f" (worst: channel {j + 1} at {study.hz[f]:.4g} Hz, {100 * worst[j]:.0f} % of trials)")
    line = "; ".join(text) if text else "no channel is in use"
    if np.any(study.beyond_first_order):
        line += f"; above {study.hz[np.argmax(study.beyond_first_order)]:.4g} Hz only the Monte Carlo holds"
    return line[0].upper() + line[1:] + "."


def write_tolerance_study(study: ToleranceStudy, out_dir: str | os.PathLike, *, plan_source: str = "",
                          figures: bool = True, trials: bool = True) -> list[Path]:
    """Write a tolerance study's files into `out_dir` atomically; return their paths.

    Parameters
    ----------
    study : ToleranceStudy
        The study to write.
    out_dir, plan_source : path, str
        As for :func:`write_capacity_study`.
    figures : bool
        Also draw and save the study's PNG figures (:func:`tolerance_figures`).
    trials : bool
        Also write every trial (``tolerance-trials.npz``, shapes
        (n_trials, n_freq, n_chan)).

    Returns
    -------
    list of Path
        Every file written, sorted by name.
    """
    rows = []
    z = 1.6448536269514722
    for f, hz in enumerate(study.hz):
        for j in range(study.judged.shape[1]):
            fo = study.predicted_gain_sd_db[f, j]
            rows.append([_g(hz), j + 1, int(study.judged[f, j]), *(_g(v) for v in study.gain_pct_db[:, f, j]),
                         _g(study.gain_sd_db[f, j]), _g(fo), _g(-z * fo), _g(z * fo),
                         *(_g(v) for v in study.crosstalk_pct_db[:, f, j]), _g(study.survival[f, j]),
                         *(_g(v) for v in study.strength_pct_db[:, f, j]), _g(study.strength_sd_db[f, j]),
                         _g(study.predicted_strength_sd_db[f, j]), _g(study.wng_speaker_db[f, j]),
                         _g(study.wng_mic_db[f, j]), int(study.beyond_first_order[f])])
    header = ["frequency_hz", "channel", "in_use", "gain_p5_db", "gain_p50_db", "gain_p95_db", "gain_sd_db",
              "first_order_gain_sd_db", "first_order_gain_p5_db", "first_order_gain_p95_db", "crosstalk_p5_db",
              "crosstalk_p50_db", "crosstalk_p95_db", "keeps_isolation_fraction", "strength_p5_db",
              "strength_p50_db", "strength_p95_db", "strength_sd_db", "first_order_strength_sd_db",
              "white_noise_gain_speakers_db", "white_noise_gain_mics_db", "beyond_first_order"]
    side = {"plan": plan_source, "verdict": tolerance_verdict(study),
            "settings": study.settings,
            "conventions": {
                "errors": "Gaussian: each position coordinate (position_sd_m, m), each element's gain (gain_sd_db, "
                          "dB) and phase (phase_sd_deg, degrees); trial t draws from numpy default_rng([seed, t])",
                "gain": "20 log10(|C_jj| / s_j), C = combine^T G_trial drive with the planned weights, dB",
                "crosstalk": "worst |C_ij| or |C_ji| among the channels in use, dB re |C_jj|; empty: no other "
                             "channel in use",
                "keeps_isolation": f"crosstalk <= -{study.settings['isolation_db']:g} dB",
                "strength": "singular values of G_trial re the planned ones, k-th strongest, dB",
                "first_order": "gain: Gaussian, sd from the linearised perturbation; strength: degenerate "
                               "clusters as blocks; trusted only where k * position_sd_m <= "
                               f"{KR_LIMIT:g} (beyond_first_order = 0)",
                "white_noise_gain": "s_j^2 / sum_s |v_sj|^2 ||G[:, s]||^2 (speakers), likewise for microphones, "
                                    "dB (Gilbert and Morgan 1955; Cox, Zeskind and Kooij 1987)",
                "coupling_model": "direct: the kernel at the perturbed positions; ratio: the plan's couplings "
                                  "times the kernel's change on each path"},
            "files": {"tolerance.csv": ", ".join(header),
                      "tolerance.npz": "summary arrays of ToleranceStudy, percentile first (5, 50, 95), then "
                                       "frequency, then channel",
                      "tolerance-trials.npz": "trials, gain_db, crosstalk_db, strength, predicted_strength: "
                                              "(n_trials, n_freq, n_chan)"},
            "provenance": provenance()}
    arrays = {k.name: np.asarray(getattr(study, k.name)) for k in dataclasses.fields(study)
              if k.name not in ("trials", "settings")}
    with staged_output_dir(out_dir) as stage:
        write_text_atomic(stage / "tolerance.csv", _csv(header, rows))
        for name, data in (("tolerance.npz", arrays),
                           ("tolerance-trials.npz", dataclasses.asdict(study.trials) if trials else None)):
            if data is not None:
                with atomic_path(stage / name) as tmp:
                    with open(tmp, "wb") as fh:
                        np.savez(fh, **data)
        write_json_atomic(stage / "tolerance.json", stamp_study_sidecar(side, "tolerance"))
        if figures:
            _save_figures(stage, tolerance_figures(study))
        names = sorted(p.name for p in stage.iterdir())
    return [Path(out_dir) / n for n in names]


def tolerance_figures(study: ToleranceStudy) -> list[tuple[str, Any]]:
    """The tolerance study's figures as (file name, Figure).

    Parameters
    ----------
    study : ToleranceStudy
        The study to draw.

    Returns
    -------
    list of (str, Figure)
        ``gain-spread.png`` and ``survival.png``.
    """
    from ..plots.studies import plot_gain_spread, plot_survival

    return [("gain-spread.png", plot_gain_spread(study)), ("survival.png", plot_survival(study))]


def _load(folder: Path, study: str, npz_name: str) -> tuple[dict, dict]:
    side = read_study_sidecar(folder, study)
    try:
        with np.load(folder / npz_name, allow_pickle=False) as z:
            arrays = {k: z[k] for k in z.files}
    except (OSError, ValueError, AttributeError) as exc:
        raise InputError(f"cannot read the study ({exc})", source=str(folder)) from None
    return side, arrays


def read_capacity_study(folder: str | os.PathLike) -> tuple[CapacityStudy, dict]:
    """A capacity study and its sidecar, read back from a folder written by :func:`write_capacity_study`.

    Parameters
    ----------
    folder : path
        The study folder.

    Returns
    -------
    study : CapacityStudy
        Every array as written.
    sidecar : dict
        ``capacity.json``, checked for its format and version.

    Raises
    ------
    InputError
        Naming the file: a sidecar of another format or a newer version, an
        unreadable or incomplete ``capacity.npz``.
    """
    side, a = _load(Path(folder), "capacity", "capacity.npz")
    try:
        values = {f.name: a[f.name] for f in dataclasses.fields(CapacityStudy)}
    except KeyError as exc:
        raise InputError(f"array {exc} missing", source=str(Path(folder) / "capacity.npz")) from None
    values["threshold_db"] = float(values["threshold_db"])
    values["measured"] = bool(values["measured"])
    return CapacityStudy(**values), side


def read_tolerance_study(folder: str | os.PathLike) -> tuple[ToleranceStudy, dict]:
    """A tolerance study (without its trials: an empty TrialChunk) and its sidecar, read back from a folder.

    Parameters
    ----------
    folder : path
        The study folder, as :func:`write_tolerance_study` wrote it.

    Returns
    -------
    study : ToleranceStudy
        The summary arrays as written; settings from the sidecar.
    sidecar : dict
        ``tolerance.json``, checked for its format and version.

    Raises
    ------
    InputError
        As for :func:`read_capacity_study` (with ``tolerance.npz``).
    """
    side, a = _load(Path(folder), "tolerance", "tolerance.npz")
    try:
        values: dict[str, Any] = {f.name: a[f.name] for f in dataclasses.fields(ToleranceStudy)
                                  if f.name not in ("trials", "settings")}
    except KeyError as exc:
        raise InputError(f"array {exc} missing", source=str(Path(folder) / "tolerance.npz")) from None
    empty = np.empty((0,) + values["judged"].shape)
    values["trials"] = TrialChunk(np.empty(0, int), empty, empty, empty, empty)
    values["settings"] = dict(side.get("settings", {}))
    return ToleranceStudy(**values), side
