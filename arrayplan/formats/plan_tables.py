"""The plan folder's tables: ``channels.csv``, ``summary.csv`` and the long ``weights.csv``.

Each table is streamed to its file a frequency at a time (never held whole
in memory) and costs time in proportion to its size.  Numbers carry ten
significant digits (weights twelve); a non-finite value is written empty
(levels: ``-inf``).  Column meanings: :mod:`arrayplan.formats.plan_folder`.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path
from typing import Callable

import numpy as np

from ..channels.planning import Plan
from .fileio import atomic_path

__all__ = ["LONG_TABLE_MAX_ROWS", "long_table_rows", "write_channels_csv", "write_summary_csv", "write_weights_csv"]

#: Below this many rows ``weights.csv`` (the long weight table) is written by default; above it only
#: on request, since its text is about 20 times the size of the same weights in ``weights.npz``.
LONG_TABLE_MAX_ROWS = 500_000

_CHANNEL_HEADER = "frequency_hz,channel,singular_value,power_coupling,share_of_sum_rule,level_db\n"
_SUMMARY_HEADER = ["frequency_hz", "sum_rule", "strong_channels", "usable_channels", "effective_channels",
                   "heuristic_channels"]
_TRUNCATED_HEADER = ["channels_computed", "share_not_computed"]


def _fmt(x: float) -> str:
    """Ten significant digits; empty for NaN or infinity.  Takes Python floats (fast) or numpy scalars."""
    x = float(x)
    return f"{x:.10g}" if math.isfinite(x) else ""


def _fmt_level(x: float) -> str:
    return f"{x:.10g}" if math.isfinite(x) else "-inf"


def long_table_rows(plan: Plan) -> int:
    """Rows of the long weight table ``weights.csv``: one per computed channel, side and element.

    Parameters
    ----------
    plan : Plan
        The plan (its computed channels and element counts).

    Returns
    -------
    int
        Sum over frequencies of channels computed, times (n_spk + n_mic).
    """
    ch = plan.channels
    return int(np.sum(ch.channels_computed())) * (len(ch.speaker_names) + len(ch.mic_names))


def write_channels_csv(plan: Plan, path: Path, each_frequency: Callable[[int], None]) -> None:
    """Write ``channels.csv``, streamed a frequency at a time; every derived column computed once.

    Parameters
    ----------
    plan : Plan
    path : Path
        The file to write (atomically).
    each_frequency : callable
        Called as ``each_frequency(f)`` after frequency index f (0-based) is written.
    """
    ch = plan.channels
    hz, s, power = ch.axis.hz, ch.singular_values, ch.power_coupling
    share, level, computed = ch.share_of_sum_rule(), ch.level_db(), ch.channels_computed()
    with atomic_path(path) as tmp, open(tmp, "w", encoding="utf-8", newline="") as fh:
        fh.write(_CHANNEL_HEADER)
        for f in range(len(hz)):
            f_text, n = _fmt(hz[f]), int(computed[f])
            rows = zip(range(1, n + 1), s[f, :n].tolist(), power[f, :n].tolist(), share[f, :n].tolist(),
                       level[f, :n].tolist())
            if np.all(np.isfinite(share[f, :n])) and np.all(np.isfinite(power[f, :n])) \
                    and not np.any(np.isnan(level[f, :n])):
                # all finite (level may be -inf, which %g writes as -inf): one format per row
                line = f_text + ",%d,%.10g,%.10g,%.10g,%.10g\n"
                fh.write("".join([line % row for row in rows]))
            else:
                fh.write("".join(f"{f_text},{j},{_fmt(a)},{_fmt(b)},{_fmt(c)},{_fmt_level(d)}\n"
                                 for j, a, b, c, d in rows))
            each_frequency(f)


def write_summary_csv(plan: Plan, path: Path) -> None:
    """Write ``summary.csv``: one row per frequency (counts, sum rule, paraxial estimate).

    Parameters
    ----------
    plan, path
        As for :func:`write_channels_csv`.
    """
    ch = plan.channels
    hz = ch.axis.hz
    strong, usable, eff = plan.strong_channels, plan.usable_channels, ch.effective_channels()
    header = _SUMMARY_HEADER + (_TRUNCATED_HEADER if ch.truncated else [])
    computed, left = ch.channels_computed(), ch.share_not_computed()
    with atomic_path(path) as tmp, open(tmp, "w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(header)
        for f in range(len(hz)):
            row = [_fmt(hz[f]), _fmt(ch.sum_rule[f]), int(strong[f]), int(usable[f]), _fmt(eff[f]),
                   _fmt(plan.estimate.counts[f])]
            w.writerow(row + ([int(computed[f]), _fmt(left[f])] if ch.truncated else []))


def write_weights_csv(plan: Plan, path: Path, each_frequency: Callable[[int], None]) -> None:
    """Write the long weight table ``weights.csv``, streamed a frequency and channel at a time.

    Parameters
    ----------
    plan, path, each_frequency
        As for :func:`write_channels_csv`.
    """
    ch = plan.channels
    computed = ch.channels_computed()
    sides = (("drive", ch.speaker_names, ch.drive), ("combine", ch.mic_names, ch.combine))
    with atomic_path(path) as tmp, open(tmp, "w", encoding="utf-8", newline="") as fh:
        fh.write("frequency_hz,channel,side,element,re,im\n")
        for f, hz in enumerate(ch.axis.hz):
            for j in range(int(computed[f])):
                for side, names, w in sides:
                    head = f"{hz:.10g},{j + 1},{side},"
                    col = w[f, :, j]
                    fh.write("".join(f"{head}{name},{z.real:.12g},{z.imag:.12g}\n"
                                     for name, z in zip(names, col.tolist())))
            each_frequency(f)
