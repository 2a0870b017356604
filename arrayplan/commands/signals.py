"""``arrayplan signal``: write safe test signals as WAV files with JSON sidecars.

Sub-commands: ``sweep`` (exponential or linear, with its inverse filter),
``noise`` (band-limited pink or white), ``tones`` (stepped tones),
``bursts`` (tone bursts), ``silence``, ``schedule`` (each speaker in turn)
and ``probe`` (one planned channel through its drive filters, all speakers
at once).  Every signal is faded at both ends, DC-blocked, held below a
peak cap (-12 dBFS unless ``--allow-above-cap``) and refused if it would
clip; with the speaker's sensitivity, the amplifier's voltage and the
listener distances the command estimates the level at the listeners and
refuses levels above a cap unless ``--allow-loud``.  The caution block is
printed on stderr whenever a playable signal is written.
"""

from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path
from typing import Any

import numpy as np

from ._args import (MAX_CHANNEL_NUMBER, FlatList, accept_old_spelling, add_command_group, add_exposure_options,
                    add_memory_limit, add_sweep_options, count, dbfs_level, finite_float, nonnegative_count,
                    nonnegative_float, positive_float, positive_floats, say)
from ._args import csv_names as _csv_names
from ..limits import check_memory
from ..errors import InputError
from ..formats.fileio import provenance
from ..formats.signal_sidecar import inverse_filter_sidecar, signal_sidecar
from ..safety.exposure_estimate import check_exposure, estimate_exposure, format_exposure
from ..safety.exposure_limits import DEFAULT_MAX_DBA
from ..safety import CAUTION_NOTE, print_caution
from ..signals.levels import (DEFAULT_PEAK_CAP_DBFS, block_dc, channel_rms_dbfs, check_peak, condition,
                              effective_cap_dbfs, peak_dbfs, rms_dbfs, scale_to_level, true_peak_dbfs)
from ..signals.noise import NOISE_COLOURS, band_limited_noise
from ..signals.probe import channel_probe, read_filter_wav
from ..signals.schedule import measurement_schedule
from ..signals.sweeps import SWEEP_KINDS, SweepSettings, make_sweep
from ..signals.tones import stepped_tones, tone_bursts
from ..signals.wavout import SAMPLE_FORMATS, inverse_path, sidecar_path, write_signal_files

__all__ = ["register", "above_cap_warning"]


# ----------------------------------------------------------------------------- options

#: Sweep settings whose defaults the options show (the library's).
_SWEEP = SweepSettings()
#: Highest sample rate accepted, Hz.
MAX_RATE_HZ = 768_000
#: Working copies of a signal held at once while it is built, conditioned and written (estimate).
_COPIES = 6


def _signal_size(args: argparse.Namespace) -> tuple[float, int]:
    """Estimated length (s) and channel count of the signal the options ask for, before building it."""
    pads = getattr(args, "pad_before_s", 0.0) + getattr(args, "pad_after_s", 0.0)
    kind = args.signal
    if kind == "tones":
        return len(args.freqs_hz) * (args.tone_s + args.gap_s) + pads, 1
    if kind == "bursts":
        return args.count * args.period_s + pads, 1
    if kind == "silence":
        return args.duration_s, args.channels
    if kind == "schedule":
        n = args.speakers or len(args.speaker_names or ()) or 1
        return n * (args.duration_s + pads), n
    return args.duration_s + pads, 1


def _add_output(p: argparse.ArgumentParser) -> None:
    g = p.add_argument_group("output")
    g.add_argument("--out", required=True, type=Path, metavar="FILE.wav",
                   help="signal file; its sidecar FILE.json (and FILE.inverse.wav for sweeps) go beside it")
    g.add_argument("--rate-hz", type=count(MAX_RATE_HZ), default=int(_SWEEP.sample_rate_hz), metavar="HZ",
                   help="sample rate, Hz")
    g.add_argument("--format", choices=tuple(SAMPLE_FORMATS), default="float32",
                   help="sample format of the signal file")
    add_memory_limit(p)


#: Help text of the fade options of sweeps, schedules and probes (default: the sweep's Fresnel-length fades).
_FRESNEL_FADES = ("one Fresnel time of the sweep at f1 (fade-in) or f2 (fade-out), 1/sqrt(f ln(f2/f1)/T), "
                  "which keeps the band flat")
#: Fades of a noise probe when none are given, s (common practice, no source).
_NOISE_PROBE_FADES = (0.02, 0.005)


def _add_level(p: argparse.ArgumentParser, fade_in: float | None, fade_out: float | None) -> None:
    g = p.add_argument_group("level and conditioning")
    m = g.add_mutually_exclusive_group()
    m.add_argument("--peak-dbfs", type=dbfs_level, metavar="DB",
                   help="true peak level in dBFS, 4x oversampled (default: the peak cap)")
    m.add_argument("--rms-dbfs", type=dbfs_level, metavar="DB",
                   help="RMS level of the signal without its padding, in dBFS instead (20 log10 rms; full-scale "
                        "sine = -3.01)")
    g.add_argument("--peak-cap-dbfs", type=dbfs_level, default=DEFAULT_PEAK_CAP_DBFS, metavar="DB",
                   help="highest true peak allowed; lowering it needs nothing, raising it needs --allow-above-cap")
    g.add_argument("--allow-above-cap", action="store_true",
                   help="allow a true peak above the default cap or the cap given (never above 0 dBFS: "
                        "clipping is always refused)")
    g.add_argument("--fade-in-s", type=nonnegative_float, default=fade_in, metavar="S",
                   help=f"raised-cosine fade-in, s (default: {_FRESNEL_FADES if fade_in is None else f'{fade_in:g}'})")
    g.add_argument("--fade-out-s", type=nonnegative_float, default=fade_out, metavar="S",
                   help="raised-cosine fade-out, s "
                        f"(default: {'the same rule' if fade_out is None else f'{fade_out:g}'})")
    g.add_argument("--highpass-hz", type=positive_float, metavar="HZ",
                   help="Butterworth high-pass for small drivers, Hz (default: none)")
    g.add_argument("--highpass-order", type=count(12), default=_SWEEP.highpass_order, metavar="N",
                   help="its order (2: 12 dB per octave)")
    g.add_argument("--pad-before-s", type=nonnegative_float, default=_SWEEP.pad_before_s, metavar="S",
                   help="silence before the signal, s")


def _add_playable(p: argparse.ArgumentParser, fade_in: float | None, fade_out: float | None) -> None:
    """The options of a signal meant for a speaker: level and fades, the output file, the exposure check."""
    _add_level(p, fade_in, fade_out)
    _add_output(p)
    _add_exposure(p)


def _add_exposure(p: argparse.ArgumentParser) -> None:
    g = add_exposure_options(p, "exposure estimate (give the speaker's sensitivity and the amplifier's voltage "
                                "to get one)",
                             amp_help="volts RMS at the speaker terminals for a 0 dBFS sine (meter it, or DAC full "
                                      "scale x gain)")
    g.add_argument("--max-dba", type=finite_float, default=DEFAULT_MAX_DBA, metavar="DBA",
                   help="refuse above this estimated level at a listener, dBA")
    accept_old_spelling(p, "--speaker-sensitivity-db-spl", "--sensitivity-db-spl")


#: Duration of a noise signal when none is given, s (long enough for a stable spectrum; common practice, no source).
NOISE_DURATION_S = 10.0


def _add_sweep(p: argparse.ArgumentParser, *, kind: bool = True, what: str = "sweep") -> None:
    g = add_sweep_options(p, f1_hz=_SWEEP.f1_hz, duration_s=NOISE_DURATION_S if what == "noise" else _SWEEP.duration_s,
                          what=what)
    if kind:
        g.add_argument("--kind", choices=SWEEP_KINDS, default=_SWEEP.kind, help="sweep law")
    g.add_argument("--pad-after-s", type=nonnegative_float, default=_SWEEP.pad_after_s, metavar="S",
                   help="silence after each sweep: the room's decay time and the response length, s"
                   if what == "sweep" else f"silence after the {what}, s")


# ----------------------------------------------------------------------------- building

def _f2(args: argparse.Namespace) -> float:
    return args.f2_hz if args.f2_hz is not None else min(20000.0, 0.45 * args.rate_hz)


def _level_kwargs(args: argparse.Namespace) -> dict[str, float | None]:
    if args.peak_dbfs is None and args.rms_dbfs is None:
        return {"peak_dbfs": args.peak_cap_dbfs, "rms_dbfs": None}
    return {"peak_dbfs": args.peak_dbfs, "rms_dbfs": args.rms_dbfs}


def _check_cap_option(args: argparse.Namespace, src: str) -> None:
    """Refuse a cap raised above the default without consent: raising the cap lifts it."""
    cap = args.peak_cap_dbfs
    if not math.isfinite(cap):
        raise InputError(f"must be a finite number of dBFS, got {cap!r}", source=src, field="--peak-cap-dbfs")
    if cap > DEFAULT_PEAK_CAP_DBFS and not args.allow_above_cap:
        raise InputError(f"a cap of {cap:+.1f} dBFS is above the default {DEFAULT_PEAK_CAP_DBFS:+.1f} dBFS: raising "
                         "the cap lifts it", source=src, field="--peak-cap-dbfs",
                         fix="keep the cap at or below the default, or add --allow-above-cap if you really need it")


def above_cap_warning(true_peak: float, cap_dbfs: float) -> str | None:
    """The warning printed when a signal's true peak is above the cap (with consent), else None.

    `cap_dbfs` is the cap asked for; the warning is given above the lower of it and the default cap.
    """
    limit = min(cap_dbfs, DEFAULT_PEAK_CAP_DBFS)
    if not true_peak > limit + 1e-9:
        return None
    which = "the cap" if limit == cap_dbfs else "the default cap"
    return (f"true peak {true_peak:+.2f} dBFS is above {which} of {limit:+.1f} dBFS (allowed by --allow-above-cap): "
            "check the level at the speaker and the listeners before playing")


def _finish(x: np.ndarray, args: argparse.Namespace, src: str) -> np.ndarray:
    """Condition, set the level, and check the cap of a generated signal."""
    y = condition(x, args.rate_hz, fade_in_s=args.fade_in_s, fade_out_s=args.fade_out_s,
                  highpass_hz=args.highpass_hz, highpass_order=args.highpass_order, source=src)
    y = scale_to_level(y, **_level_kwargs(args), source=src)
    check_peak(y, cap_dbfs=args.peak_cap_dbfs, allow_above_cap=args.allow_above_cap, source=src)
    return y


def _pad(x: np.ndarray, before_s: float, after_s: float, fs: int, src: str) -> np.ndarray:
    for name, v in (("--pad-before-s", before_s), ("--pad-after-s", after_s)):
        if not (math.isfinite(v) and v >= 0):
            raise InputError(f"padding must be zero or a positive number of seconds, got {v!r}", source=src,
                             field=name)
    x = x if x.ndim == 2 else x[:, None]
    nb, na = int(round(before_s * fs)), int(round(after_s * fs))
    return np.concatenate([np.zeros((nb, x.shape[1])), x, np.zeros((na, x.shape[1]))])


def _sweep_settings(args: argparse.Namespace, **override: Any) -> SweepSettings:
    kw = dict(kind=getattr(args, "kind", "exponential"), f1_hz=args.f1_hz, f2_hz=_f2(args),
              duration_s=args.duration_s, sample_rate_hz=float(args.rate_hz), fade_in_s=args.fade_in_s,
              fade_out_s=args.fade_out_s, pad_before_s=args.pad_before_s, pad_after_s=args.pad_after_s,
              peak_dbfs=args.peak_dbfs, rms_dbfs=args.rms_dbfs, peak_cap_dbfs=args.peak_cap_dbfs,
              allow_above_cap=args.allow_above_cap, highpass_hz=args.highpass_hz,
              highpass_order=args.highpass_order)
    kw.update(override)
    return SweepSettings(**kw)


def _conditioning(args: argparse.Namespace, fades: tuple[float, float] | None = None) -> dict[str, Any]:
    """The sidecar's conditioning block; `fades` are the fades used when the builder resolved defaults."""
    fade_in, fade_out = fades if fades is not None else (args.fade_in_s, args.fade_out_s)
    return {"fade_in_s": fade_in, "fade_out_s": fade_out, "fade_shape": "raised cosine",
            "dc_blocked": True, "highpass_hz": args.highpass_hz,
            "highpass_order": args.highpass_order if args.highpass_hz is not None else None}


def _build_sweep(args: argparse.Namespace, src: str) -> dict[str, Any]:
    sw = make_sweep(_sweep_settings(args), source=src)
    inv = inverse_path(args.out)
    return {"signal": sw.signal[:, None], "kind": f"{sw.settings.kind}_sweep", "sweep": sw.sidecar(inv.name),
            "extra_wavs": {inv: sw.inverse}, "combine": "coherent", "channel_names": ["S1"],
            "parameters": {}, "fades": (sw.settings.fade_in_s, sw.settings.fade_out_s),
            "active": sw.sweep[:, None], "active_basis": "the sweep without the silence before and after it"}


def _one_channel(raw: np.ndarray, args: argparse.Namespace, src: str, kind: str, active_basis: str,
                 parameters: dict[str, Any]) -> dict[str, Any]:
    """A one-channel signal: `raw` faded, levelled and checked, then padded; with its sidecar entries."""
    active = _finish(raw, args, src)
    x = _pad(active, args.pad_before_s, args.pad_after_s, args.rate_hz, src)
    return {"signal": x, "kind": kind, "combine": "coherent", "channel_names": ["S1"], "active": active,
            "active_basis": active_basis, "parameters": parameters}


def _build_noise(args: argparse.Namespace, src: str) -> dict[str, Any]:
    raw = band_limited_noise(args.colour, args.duration_s, args.rate_hz, args.f1_hz, _f2(args),
                             seed=args.seed, source=src)
    return _one_channel(raw, args, src, f"{args.colour}_noise", "the noise without the silence before and after it",
                        {"colour": args.colour, "f1_hz": args.f1_hz, "f2_hz": _f2(args),
                         "duration_s": args.duration_s, "seed": args.seed})


def _build_tones(args: argparse.Namespace, src: str) -> dict[str, Any]:
    raw = stepped_tones(args.freqs_hz, args.tone_s, args.gap_s, args.rate_hz, args.fade_in_s, source=src)
    return _one_channel(raw, args, src, "stepped_tones",
                        "from the first tone's start to the last tone's end, the gaps between tones included, "
                        "without the silence before and after",
                        {"freqs_hz": args.freqs_hz, "tone_s": args.tone_s, "gap_s": args.gap_s,
                         "tone_fade_s": args.fade_in_s})


def _build_bursts(args: argparse.Namespace, src: str) -> dict[str, Any]:
    raw = tone_bursts(args.freq_hz, args.cycles, args.period_s, args.count, args.rate_hz,
                      fade_cycles=args.fade_cycles, source=src)
    return _one_channel(raw, args, src, "tone_bursts",
                        "from the first burst's start to the last period's end, the silences between bursts "
                        "included, without the padding",
                        {"freq_hz": args.freq_hz, "cycles": args.cycles, "period_s": args.period_s,
                         "count": args.count, "fade_cycles": args.fade_cycles})


def _build_silence(args: argparse.Namespace, src: str) -> dict[str, Any]:
    if not (math.isfinite(args.duration_s) and args.duration_s > 0):
        raise InputError(f"duration must be positive, got {args.duration_s!r} s", source=src, field="--duration-s")
    n = int(round(args.duration_s * args.rate_hz))
    return {"signal": np.zeros((n, args.channels)), "kind": "silence", "combine": "coherent",
            "channel_names": [f"S{i + 1}" for i in range(args.channels)],
            "parameters": {"duration_s": args.duration_s}, "playable": False}


def _build_schedule(args: argparse.Namespace, src: str) -> dict[str, Any]:
    names = args.speaker_names or [f"S{i + 1}" for i in range(args.speakers or 0)]
    if not names:
        raise InputError("say how many speakers the schedule has", source=src, field="--speakers",
                         fix="give --speakers N or --speaker-names A,B,...")
    if args.speakers is not None and args.speaker_names and args.speakers != len(args.speaker_names):
        raise InputError(f"--speakers {args.speakers} but {len(args.speaker_names)} names", source=src,
                         field="--speaker-names")
    sw = make_sweep(_sweep_settings(args), source=src)
    sched = measurement_schedule(sw, len(names), source=src)
    inv = inverse_path(args.out)
    return {"signal": sched.signal, "kind": f"{sw.settings.kind}_sweep_schedule", "sweep": sw.sidecar(inv.name),
            "extra_wavs": {inv: sw.inverse}, "combine": "one_at_a_time", "channel_names": names,
            "active": sw.sweep[:, None], "active_basis": "one speaker's sweep, without the silence around it "
                                                         "(every speaker plays the same sweep in turn)",
            "parameters": {"n_speakers": len(names)}, "fades": (sw.settings.fade_in_s, sw.settings.fade_out_s),
            "schedule": {"segment_length_samples": sched.segment_length,
                         "speakers": [{"speaker": n, "channel": k + 1, "sweep_start_sample": sched.sweep_starts[k],
                                       "segment_start_sample": sched.segment_starts[k]}
                                      for k, n in enumerate(names)]}}


def _build_probe(args: argparse.Namespace, src: str) -> dict[str, Any]:
    filters, _, names = read_filter_wav(args.filters, sample_rate_hz=args.rate_hz)
    fs = args.rate_hz
    sweep_block = None
    extra = {}
    if args.source == "sweep":
        # Unit-peak sweep; its inverse is rescaled below to the level actually played.
        sw = make_sweep(_sweep_settings(args, peak_dbfs=0.0, rms_dbfs=None, allow_above_cap=True,
                                        pad_before_s=0.0, pad_after_s=1.0 / fs), source=src)
        unit = sw.sweep
        fades = (sw.settings.fade_in_s, sw.settings.fade_out_s)
    else:
        fades = (_NOISE_PROBE_FADES[0] if args.fade_in_s is None else args.fade_in_s,
                 _NOISE_PROBE_FADES[1] if args.fade_out_s is None else args.fade_out_s)
        unit = condition(band_limited_noise(args.source, args.duration_s, fs, args.f1_hz, _f2(args),
                                            seed=args.seed, source=src), fs, fade_in_s=fades[0],
                         fade_out_s=fades[1], highpass_hz=args.highpass_hz,
                         highpass_order=args.highpass_order, source=src)
    # The source is faded at both ends, so each speaker's drive starts and ends at zero too;
    # only the DC the filters could add is removed again.
    out = block_dc(channel_probe(unit, filters))
    lev = _level_kwargs(args)
    played = scale_to_level(out, **lev, source=src)
    check_peak(played, cap_dbfs=args.peak_cap_dbfs, allow_above_cap=args.allow_above_cap, source=src)
    scale = float(np.max(np.abs(played)) / np.max(np.abs(out)))
    x = _pad(played, args.pad_before_s, args.pad_after_s, fs, src)
    channel = args.channel_name or Path(args.filters).stem
    if args.source == "sweep":
        inv = inverse_path(args.out)
        extra = {inv: sw.inverse / scale}
        sweep_block = sw.sidecar(inv.name)
        nb = int(round(args.pad_before_s * fs))
        sweep_block.update({
            "pad_before_samples": nb, "pad_before_s": args.pad_before_s,
            "pad_after_samples": x.shape[0] - nb - sw.n_sweep,
            "pad_after_s": (x.shape[0] - nb - sw.n_sweep) / fs,
            "linear_lag_samples": nb + sw.n_sweep - 1,
            "sweep_peak_dbfs": 20 * math.log10(scale), "sweep_rms_dbfs": rms_dbfs(unit * scale),
            "inverse_normalisation": "|DFT(sweep * inverse)| = 1 at the band centre for the sweep at its level "
                                     "before the filters, so a deconvolved recording is the channel's response "
                                     "per unit channel input",
        })
    return {"signal": x, "kind": f"channel_probe_{args.source}", "sweep": sweep_block, "extra_wavs": extra,
            "active": played, "active_basis": "every speaker's drive together, without the padding",
            "combine": "coherent", "channel_names": names, "fades": fades,
            "parameters": {"source": args.source, "f1_hz": args.f1_hz, "f2_hz": _f2(args),
                           "duration_s": args.duration_s, "seed": getattr(args, "seed", None)},
            "probe": {"channel_name": channel, "filters_file": str(Path(args.filters).name),
                      "n_filter_taps": int(filters.shape[0]), "speaker_names": names,
                      "source_gain_db": 20 * math.log10(scale)}}


_BUILDERS = {"sweep": _build_sweep, "noise": _build_noise, "tones": _build_tones, "bursts": _build_bursts,
             "silence": _build_silence, "schedule": _build_schedule, "probe": _build_probe}


# ----------------------------------------------------------------------------- running

def _finite(v: float) -> float | None:
    return float(v) if math.isfinite(v) else None


#: Option names for the messages of the exposure estimate and check.
_EXPOSURE_OPTIONS = {"sensitivity_db_spl": "--speaker-sensitivity-db-spl", "sensitivity_vrms": "--sensitivity-vrms",
                     "amp_vrms_full_scale": "--amp-vrms", "distances_m": "--listener-distance-m",
                     "max_dba": "--max-dba", "allow_loud": "--allow-loud"}


def _exposure(args: argparse.Namespace, x: np.ndarray, combine: str, src: str):
    given = [args.speaker_sensitivity_db_spl is not None, args.amp_vrms is not None]
    if not any(given):
        return None
    if not all(given):
        raise InputError("the exposure estimate needs both --speaker-sensitivity-db-spl and --amp-vrms",
                         source=src, field="--speaker-sensitivity-db-spl" if given[1] else "--amp-vrms",
                         fix="give both, or neither to skip the estimate")
    return estimate_exposure(x, args.rate_hz, sensitivity_db_spl=args.speaker_sensitivity_db_spl,
                             amp_vrms_full_scale=args.amp_vrms, distances_m=args.listener_distance_m,
                             sensitivity_vrms=args.sensitivity_vrms, combine=combine,
                             option_names=_EXPOSURE_OPTIONS)


_DBFS_CONVENTION = ("20 log10 of peak or RMS, full scale = 1 (full-scale sine: -3.01 dBFS RMS); true peak: "
                    "4x oversampled, ITU-R BS.1770-4 Annex 2")


def _level_block(args: argparse.Namespace, x: np.ndarray, built: dict[str, Any]) -> dict[str, Any]:
    """The sidecar's level block: levels of the active part, the request, the whole file's RMS."""
    active = built.get("active")
    block: dict[str, Any] = {"dbfs_convention": _DBFS_CONVENTION}
    if active is None:
        block.update({"basis": "whole file", "peak_dbfs": peak_dbfs(x), "true_peak_dbfs": true_peak_dbfs(x),
                      "rms_dbfs": rms_dbfs(x), "file_rms_dbfs": rms_dbfs(x)})
        return block
    requested = _level_kwargs(args)
    block.update({
        "basis": "active part: " + built["active_basis"],
        "requested_peak_dbfs": requested["peak_dbfs"], "requested_rms_dbfs": requested["rms_dbfs"],
        "requested_peak_basis": "true peak" if requested["peak_dbfs"] is not None else None,
        "peak_dbfs": peak_dbfs(active), "true_peak_dbfs": true_peak_dbfs(x),
        "rms_dbfs": rms_dbfs(active), "channel_rms_dbfs": [_finite(v) for v in channel_rms_dbfs(active)],
        "file_rms_dbfs": rms_dbfs(x),
        "file_rms_note": "RMS over the whole file, silence included (lower than the active part's)",
        "peak_cap_dbfs": args.peak_cap_dbfs,
        "cap_applied_dbfs": effective_cap_dbfs(args.peak_cap_dbfs, args.allow_above_cap),
        "above_cap_allowed": bool(args.allow_above_cap)})
    return block


def _level_text(level: dict[str, Any]) -> str:
    """One-line summary of a level block for the printout."""
    if level["basis"] == "whole file":
        return f"peak {level['peak_dbfs']:+.2f} dBFS"
    return (f"true peak {level['true_peak_dbfs']:+.2f} dBFS, sample peak {level['peak_dbfs']:+.2f} dBFS, "
            f"RMS {level['rms_dbfs']:+.2f} dBFS of the active part, {level['file_rms_dbfs']:+.2f} dBFS "
            "over the whole file")


def _run(args: argparse.Namespace) -> int:
    src = f"signal {args.signal}"
    seconds, channels = _signal_size(args)
    check_memory(_COPIES * 8.0 * seconds * args.rate_hz * channels,
                 f"a {seconds:.3g} s signal of {channels} channel(s) at {args.rate_hz} Hz", source=src)
    if hasattr(args, "peak_cap_dbfs"):
        _check_cap_option(args, src)
    built = _BUILDERS[args.signal](args, src)
    x = built["signal"]
    playable = built.get("playable", True)
    warnings: list[str] = []
    estimate = _exposure(args, x, built["combine"], src) if playable else None
    if estimate is not None:
        warnings += [say(w, args) for w in check_exposure(estimate, max_dba=args.max_dba, allow_loud=args.allow_loud,
                                                          source=src, option_names=_EXPOSURE_OPTIONS)]
    elif playable:
        warnings.append("no exposure estimate: give --speaker-sensitivity-db-spl and --amp-vrms (and "
                        "--listener-distance-m) to check the level at the listeners")
    level = _level_block(args, x, built)
    above = above_cap_warning(level["true_peak_dbfs"], args.peak_cap_dbfs) if playable else None
    if above is not None:
        warnings.append(above)
    sidecar = signal_sidecar(
        signal=built["kind"], file=args.out.name, sample_rate_hz=args.rate_hz, n_samples=x.shape[0],
        n_channels=x.shape[1], channel_names=built["channel_names"], sample_format=args.format,
        level={k: (_finite(v) if isinstance(v, float) else v) for k, v in level.items()},
        conditioning=_conditioning(args, built.get("fades")) if playable else None,
        parameters=built["parameters"], sweep=built.get("sweep"), schedule=built.get("schedule"),
        probe=built.get("probe"), exposure=estimate.to_json() if estimate is not None else None,
        warnings=warnings, caution=CAUTION_NOTE, provenance=provenance(command=f"arrayplan signal {args.signal}"))
    extra_sidecars = {
        sidecar_path(path): inverse_filter_sidecar(
            file=Path(path).name, signal_file=args.out.name, sample_rate_hz=args.rate_hz,
            n_samples=np.asarray(inv).shape[0], sweep=built.get("sweep"), caution=CAUTION_NOTE,
            provenance=provenance(command=f"arrayplan signal {args.signal}"))
        for path, inv in (built.get("extra_wavs") or {}).items()}
    written = write_signal_files(args.out, x, args.rate_hz, args.format, sidecar, built.get("extra_wavs"),
                                 extra_sidecars)
    if playable:
        print_caution(sys.stderr)
    for w in warnings:
        print(f"arrayplan signal: warning: {w}", file=sys.stderr)
    print(f"wrote {written[0]} ({built['kind']}, {x.shape[1]} channel(s), {x.shape[0] / args.rate_hz:.3f} s at "
          f"{args.rate_hz} Hz, {args.format}; {_level_text(level)})")
    for p in written[1:]:
        print(f"wrote {p}")
    if estimate is not None:
        print(format_exposure(estimate))
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``signal`` command and its sub-commands."""
    flags = {"sample_rate_hz": "--rate-hz", "amp_vrms_full_scale": "--amp-vrms",
             "distances_m": "--listener-distance-m", "fade_s": "--fade-in-s"}
    sub = add_command_group(subparsers, "signal", __doc__, dest="signal", metavar="KIND", run=_run,
                            parameter_flags=flags)

    s = sub.add_parser("sweep", help="exponential or linear sine sweep, with its inverse filter")
    _add_sweep(s)
    _add_playable(s, None, None)

    s = sub.add_parser("noise", help="band-limited pink or white noise")
    s.add_argument("--colour", choices=NOISE_COLOURS, default="pink", help="spectrum (default: pink)")
    s.add_argument("--seed", type=nonnegative_count(2 ** 32 - 1), help="random seed, for a reproducible file")
    _add_sweep(s, kind=False, what="noise")
    _add_playable(s, 0.05, 0.05)

    s = sub.add_parser("tones", help="stepped steady tones separated by silence")
    s.add_argument("--freqs-hz", type=positive_floats, nargs="+", action=FlatList, required=True, metavar="HZ",
                   help="tone frequencies, Hz, space-separated")
    s.add_argument("--tone-s", type=positive_float, default=1.0, help="duration of each tone, s (default: 1)")
    s.add_argument("--gap-s", type=nonnegative_float, default=0.5, help="silence between tones, s (default: 0.5)")
    s.add_argument("--pad-after-s", type=nonnegative_float, default=0.1,
                   help="silence after the last tone, s (default: 0.1)")
    _add_playable(s, 0.01, 0.01)

    s = sub.add_parser("bursts", help="tone bursts: a few periods of a tone, repeated")
    s.add_argument("--freq-hz", type=positive_float, required=True, help="tone frequency, Hz")
    s.add_argument("--cycles", type=positive_float, default=10.0,
                   help="periods per burst, fades included (default: 10)")
    s.add_argument("--fade-cycles", type=nonnegative_float, default=2.0,
                   help="fade at each end of a burst, periods (default: 2)")
    s.add_argument("--period-s", type=positive_float, default=0.5, help="time from burst to burst, s (default: 0.5)")
    s.add_argument("--count", type=count(), default=8, help="number of bursts (default: 8)")
    s.add_argument("--pad-after-s", type=nonnegative_float, default=0.1,
                   help="silence after the last burst, s (default: 0.1)")
    _add_playable(s, 0.001, 0.001)

    s = sub.add_parser("silence", help="silence, for padding a playlist or recording the noise floor")
    s.add_argument("--duration-s", type=positive_float, default=1.0, help="duration, s (default: 1)")
    s.add_argument("--channels", type=count(MAX_CHANNEL_NUMBER), default=1, help="number of channels (default: 1)")
    _add_output(s)

    s = sub.add_parser("schedule", help="each speaker plays the sweep in turn, with a decay gap between")
    s.add_argument("--speakers", type=count(MAX_CHANNEL_NUMBER), help="number of speakers (channels, rig order)")
    s.add_argument("--speaker-names", type=_csv_names, help="speaker names, comma-separated (default: S1, S2, ...)")
    _add_sweep(s)
    _add_playable(s, None, None)

    s = sub.add_parser("probe", help="one planned channel: a sweep or noise through its drive filters, "
                                     "all speakers at once")
    s.add_argument("--filters", type=Path, required=True, metavar="FILTERS.wav",
                   help="the channel's drive filters: float WAV, one channel per speaker in rig order, such "
                        "as channel-NN-drive.wav written by 'arrayplan filters' (speaker names from FILTERS.json "
                        "beside it if it exists, else from that folder's filters.json)")
    s.add_argument("--source", choices=("sweep",) + NOISE_COLOURS, default="sweep",
                   help="probe signal before the filters (default: sweep; its inverse filter is written too; "
                        "noise is faded 0.02 s in and 0.005 s out unless the fades are given)")
    s.add_argument("--channel-name", help="name of the channel in the sidecar (default: the filter file's stem)")
    s.add_argument("--seed", type=nonnegative_count(2 ** 32 - 1), help="random seed for a noise source")
    _add_sweep(s)
    _add_playable(s, None, None)

