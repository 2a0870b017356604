"""Filter files for a DSP: WAV taps per channel, a JSON sidecar, the weights table, the check.

Files (channel numbers NN are 1-based, the plan's tracked numbering):

* ``channel-NN-drive.wav``: float32 WAV, one audio channel per speaker in
  rig order, ``taps`` samples at the design rate.
* ``channel-NN-combine.wav``: likewise, one audio channel per microphone.
* ``filters.json``: rate, taps, delays, band, channel strengths, skipped
  channels with reasons, element names by order, provenance and rig hash.
* ``weights.csv``: the planned weights on the in-band design bins
  (frequency_hz, channel, side, element, re, im).
* With a check: ``check.csv`` and ``crosstalk.png``.
"""

from __future__ import annotations

import csv
import io
from pathlib import Path

import numpy as np
import soundfile as sf

from ..fileio import provenance, staged_output_dir, write_json_atomic, write_text_atomic
from ..rig import Rig
from ..safety import CAUTION_NOTE
from .check import FilterCheck, plot_crosstalk
from .design import TRANSITION_MIN_BINS, TRANSITION_OCTAVES, TUKEY_ALPHA, FilterSet

__all__ = ["write_filters", "sidecar"]


def sidecar(rig: Rig, filters: FilterSet, check: FilterCheck | None = None) -> dict:
    """The content of ``filters.json``."""
    fs = filters.sample_rate_hz
    s_centre = filters.plan.singular_values[filters.plan.axis.index_of(filters.centre_hz)]
    doc = {
        "provenance": provenance(command="arrayplan filters", rig_sha256=rig.sha256, rig=rig.source),
        "sample_rate_hz": fs,
        "taps": filters.taps,
        "bulk_delay_samples": filters.bulk_delay_samples,
        "bulk_delay_s": filters.bulk_delay_samples / fs,
        "drive_alignment_samples": filters.drive_alignment_samples,
        "combine_alignment_samples": filters.combine_alignment_samples,
        "drive_filter_delay_samples": filters.drive_delay_samples,
        "combine_filter_delay_samples": filters.combine_delay_samples,
        "band_hz": list(filters.band_hz),
        "band_window": f"raised-cosine transitions outside the band, each {TRANSITION_OCTAVES:.4f} octave or "
                       f"{TRANSITION_MIN_BINS} design bins ({TRANSITION_MIN_BINS * fs / filters.taps:.6g} Hz) wide, "
                       "whichever is wider (narrower edges ring through the band); zero at DC and Nyquist",
        "time_window": f"Tukey, alpha {TUKEY_ALPHA}",
        "filter_spectrum": "H(f) = weight(f) * W(f) * exp(-j*2*pi*f*(bulk_delay - alignment)/fs), "
                           "alignment = the weights' own group delay in samples (per side)",
        "normalisation": "unit drive energy in band: on every in-band design bin, before the time window, "
                         "sum over speakers of |H(f)|^2 = 1 (same for mics), so a channel's end-to-end gain is "
                         "its singular value s there; the realised taps hold it between and on the bins within "
                         "check.drive_energy_error_db and check.combine_energy_error_db (worst over a grid "
                         "check.grid_factor times finer than the bins), when the check was run",
        "channel_numbering": "1-based, channels tracked across frequency from the lowest design bin",
        "centre_hz": filters.centre_hz,
        "channels": [
            {"channel": j + 1, "singular_value_at_centre": float(s_centre[j]),
             "level_db_at_centre": float(filters.level_db[j]) if np.isfinite(filters.level_db[j]) else None,
             "filters": j in filters.kept,
             "drive_file": f"channel-{j + 1:02d}-drive.wav" if j in filters.kept else None,
             "combine_file": f"channel-{j + 1:02d}-combine.wav" if j in filters.kept else None}
            for j in range(filters.plan.n_channels)],
        "skipped": [{"channel": j + 1, "reason": why} for j, why in filters.skipped],
        "speakers": list(rig.speakers.names),
        "microphones": list(rig.mics.names),
        "sign_convention": provenance()["sign_convention"],
        "caution": CAUTION_NOTE,
    }
    if check is not None:
        doc["check"] = {
            "limit_db": check.limit_db, "rig_ir_samples": check.ir_samples,
            "channels": [c + 1 for c in check.channels],
            "grid_factor": check.grid_factor,
            "gain_error_db": check.gain_error_db,
            "gain_error_definition": "worst in-band |20 log10(|T_jj| / g_j)| in dB over a grid grid_factor times "
                                     "finer than the design bins; g_j = |c_j^T G(f) d_j| with the planned weights of "
                                     "the nearest design bin (= the singular value s_j on the bins)",
            "gain_error_on_bins_db": check.bin_gain_error_db,
            "drive_energy_error_db": check.drive_energy_error_db,
            "combine_energy_error_db": check.combine_energy_error_db,
            "energy_error_definition": "worst in-band |10 log10(sum over elements of |H(f)|^2)| in dB over the same "
                                       "grid: the realised filters' departure from unit energy",
            "worst_crosstalk_db": [float(x) if np.isfinite(x) else None for x in check.worst_crosstalk_db()],
            "crosstalk_db": [[None if not np.isfinite(x) else float(x) for x in row] for row in check.crosstalk_db],
            "crosstalk_definition": "[i][j] = worst in-band |T_ij|/|T_ii| in dB, output i, input j",
            "latency_samples": check.latency_samples,
            "passed": [bool(p) for p in check.passed()],
        }
    return doc


def _weights_csv(rig: Rig, filters: FilterSet) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["frequency_hz", "channel", "side", "element", "re", "im"])
    mask = filters.in_band()
    hz = filters.plan.axis.hz[mask]
    for side, names, weights in (("drive", rig.speakers.names, filters.plan.drive[mask]),
                                 ("combine", rig.mics.names, filters.plan.combine[mask])):
        for fi, f in enumerate(hz):
            for j in filters.kept:
                for e, name in enumerate(names):
                    z = weights[fi, e, j]
                    w.writerow([f"{f:.6g}", j + 1, side, name, f"{z.real:.9g}", f"{z.imag:.9g}"])
    return buf.getvalue()


def _check_csv(check: FilterCheck) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["channel", "gain_error_db", "gain_error_on_bins_db", "drive_energy_error_db",
                "combine_energy_error_db", "worst_crosstalk_db", "worst_from_channel", "latency_samples", "verdict"])
    worst = check.worst_crosstalk_db()
    for k, c in enumerate(check.channels):
        row = check.crosstalk_db[k]
        src = check.channels[int(np.nanargmax(row))] + 1 if len(check.channels) > 1 else ""
        w.writerow([c + 1, f"{check.gain_error_db[k]:.3f}", f"{check.bin_gain_error_db[k]:.3f}",
                    f"{check.drive_energy_error_db[k]:.3f}", f"{check.combine_energy_error_db[k]:.3f}",
                    f"{worst[k]:.1f}", src,
                    int(check.latency_samples[k]), "pass" if check.passed()[k] else "fail"])
    return buf.getvalue()


def write_filters(rig: Rig, filters: FilterSet, out_dir: str | Path, check: FilterCheck | None = None
                  ) -> list[Path]:
    """Write every filter file (and the check, if given) to `out_dir` atomically; return the paths."""
    import matplotlib.pyplot as plt

    out_dir = Path(out_dir)
    names: list[str] = []
    with staged_output_dir(out_dir) as stage:
        fs = int(round(filters.sample_rate_hz))
        for k, j in enumerate(filters.kept):
            for side, taps in (("drive", filters.drive[:, :, k]), ("combine", filters.combine[:, :, k])):
                name = f"channel-{j + 1:02d}-{side}.wav"
                sf.write(stage / name, taps.astype(np.float32), fs, subtype="FLOAT")
                names.append(name)
        write_json_atomic(stage / "filters.json", sidecar(rig, filters, check))
        write_text_atomic(stage / "weights.csv", _weights_csv(rig, filters))
        names += ["filters.json", "weights.csv"]
        if check is not None:
            write_text_atomic(stage / "check.csv", _check_csv(check))
            ax = plot_crosstalk(check)
            ax.figure.savefig(stage / "crosstalk.png", dpi=120, bbox_inches="tight")
            plt.close(ax.figure)
            names += ["check.csv", "crosstalk.png"]
    return [out_dir / n for n in names]
