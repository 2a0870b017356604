"""``arrayplan irset``: convert IR sets between folders and AES69 (SOFA) files, and summarise them.

Work with impulse-response sets: IR-set folders (irset.json plus one WAV per speaker) and AES69
(SOFA) files, told apart by the '.sofa' ending.
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np

from ._args import add_command_group
from ..errors import InputError
from ..formats.irset import IRSet, read_irset, write_irset
from ..formats.irset_sofa import write_irset_sofa

#: Largest table ``show`` prints (speakers across, microphones down).
MAX_TABLE_SPEAKERS = 6
MAX_TABLE_MICS = 16
MAX_LISTED_NAMES = 12


def register(sub: argparse._SubParsersAction) -> None:
    actions = add_command_group(sub, "irset", __doc__, dest="irset_action", metavar="ACTION")
    conv = actions.add_parser("convert", help="copy an IR set from SRC to DST, SOFA file <-> IR-set folder",
                              description="Read SRC (a .sofa file or an IR-set folder) and write it to DST (a .sofa "
                                          "file or an IR-set folder). Names, positions, units, latency removed, zero "
                                          "lag and warnings are kept. DST is written atomically.")
    conv.add_argument("src", metavar="SRC", help="IR-set folder or .sofa file to read")
    conv.add_argument("dst", metavar="DST", help="IR-set folder or .sofa file to write")
    conv.add_argument("--force", action="store_true", help="replace DST if it exists")
    conv.set_defaults(run=run_convert)
    show = actions.add_parser("show", help="one-screen summary of an IR set",
                              description="Print rate, length, zero lag, elements, units, latency, warnings, and "
                                          "the peak level and peak delay (after zero lag) of each "
                                          "speaker/microphone pair.")
    show.add_argument("src", metavar="SRC", help="IR-set folder or .sofa file")
    show.set_defaults(run=run_show)


def _is_sofa(path: str) -> bool:
    return Path(path).suffix.lower() == ".sofa"


def run_convert(args: argparse.Namespace) -> int:
    dst = Path(args.dst)
    if dst.exists() and not args.force:
        raise InputError("already exists", source=str(dst), fix="choose another DST or add --force to replace it")
    if _is_sofa(args.dst) and dst.is_dir():
        raise InputError("is a folder, cannot be replaced by a SOFA file", source=str(dst))
    irs = read_irset(args.src)
    if _is_sofa(args.dst):
        write_irset_sofa(dst, irs, converted_from=str(args.src))
    else:
        write_irset(dst, irs, converted_from=str(args.src))
    print(f"wrote {dst}: {irs.n_spk} speakers x {irs.n_mic} microphones, {irs.n_samples} samples "
          f"at {irs.sample_rate_hz:g} Hz")
    return 0


def _names(names: list[str]) -> str:
    shown = ", ".join(names[:MAX_LISTED_NAMES])
    return shown + (f", ... ({len(names) - MAX_LISTED_NAMES} more)" if len(names) > MAX_LISTED_NAMES else "")


def _known(pos: np.ndarray | None, n: int) -> int:
    return 0 if pos is None else int(np.sum(np.all(np.isfinite(pos), axis=1)))


def peak_table(irs: IRSet) -> tuple[np.ndarray, np.ndarray]:
    """Peak level in dB re one unit and peak time after zero lag in ms, each shape (n_mic, n_spk)."""
    mag = np.abs(irs.data)
    peak = mag.max(axis=0)
    with np.errstate(divide="ignore"):
        level_db = 20.0 * np.log10(peak)
    delay_ms = (mag.argmax(axis=0) - irs.zero_lag_samples) / irs.sample_rate_hz * 1e3
    return level_db, delay_ms


def summary_lines(irs: IRSet, source: str) -> list[str]:
    """The lines ``arrayplan irset show`` prints."""
    kind = "AES69 (SOFA) file" if _is_sofa(source) else "IR-set folder"
    rows = [
        ("sample rate", f"{irs.sample_rate_hz:g} Hz"),
        ("length", f"{irs.n_samples} samples ({irs.n_samples / irs.sample_rate_hz * 1e3:.1f} ms)"),
        ("zero lag", f"sample {irs.zero_lag_samples} ({irs.zero_lag_samples / irs.sample_rate_hz * 1e3:.1f} ms "
                     "of pre-ringing kept before it)" if irs.zero_lag_samples else "sample 0"),
        (f"speakers ({irs.n_spk})", _names(irs.speaker_names)),
        (f"microphones ({irs.n_mic})", _names(irs.mic_names)),
        ("positions known", f"{_known(irs.speaker_positions, irs.n_spk)} of {irs.n_spk} speakers, "
                            f"{_known(irs.mic_positions, irs.n_mic)} of {irs.n_mic} microphones"),
        ("units", irs.units),
        ("latency removed", f"{irs.latency_removed_samples} samples"),
        ("warnings", str(len(irs.warnings) or "none")),
    ]
    label_w = max(len(label) for label, _ in rows) + 2
    lines = [f"{source} ({kind})"] + [f"  {label:<{label_w}}{value}" for label, value in rows]
    lines += [f"    - {w}" for w in irs.warnings]
    level_db, delay_ms = peak_table(irs)
    n_s, n_m = min(irs.n_spk, MAX_TABLE_SPEAKERS), min(irs.n_mic, MAX_TABLE_MICS)
    lines.append(f"peak level (dB re 1 {irs.units}) / time of the peak after zero lag (ms), microphones down, "
                 "speakers across:")
    width = 16
    mic_w = max(len(n) for n in irs.mic_names[:n_m])
    lines.append(" " * (mic_w + 2) + "".join(f"{name[:width - 1]:>{width}}" for name in irs.speaker_names[:n_s]))
    for m in range(n_m):
        cells = "".join(f"{f'{level_db[m, s]:.1f} / {delay_ms[m, s]:.2f}':>{width}}" for s in range(n_s))
        lines.append(f"  {irs.mic_names[m]:<{mic_w}}{cells}")
    if n_s < irs.n_spk or n_m < irs.n_mic:
        lines.append(f"(table shows {n_s} of {irs.n_spk} speakers and {n_m} of {irs.n_mic} microphones)")
    return lines


def run_show(args: argparse.Namespace) -> int:
    irs = read_irset(args.src)
    for line in summary_lines(irs, str(args.src)):
        print(line)
    return 0
