"""The deconvolution summary: ``deconvolution.csv`` of an IR set made from recordings.

``arrayplan deconvolve`` writes, beside the IR set's ``irset.json``, a table
with one row per speaker and microphone (speakers outer, microphones inner,
rig order)::

    speaker, mic, peak_db, peak_delay_ms, peak_to_noise_db, clipped_samples,
    harmonic<N>_db, harmonic<N>_floor_db, harmonic<N>_status   (N = 2, 3, ...; exponential sweeps)
    thd_db, thd_status                                          (when there are harmonic columns)

``peak_db`` is the peak of the linear response in dB re 1 (recorded full
scale per played full scale); ``peak_delay_ms`` the time of its largest
sample after zero lag, ms; ``peak_to_noise_db`` the peak over the RMS of the
response's last 10 %, dB; ``harmonic<N>_db`` an order's energy relative to
the linear response, dB, empty where it is below the floors, with
``harmonic<N>_status`` saying which ("measured", "below the method's floor",
"below the noise floor"); ``thd_db`` the measured orders together.  Empty
cells are values that are not finite.

A CSV has no room for a version, so the table is versioned by the IR set's
manifest: its ``extra`` holds :func:`summary_record` (the same figures per
pair as JSON, their definitions, and ``summary`` = {``format``:
``"arrayplan-deconvolution-summary"``, ``format_version``: 1, ``file``:
``"deconvolution.csv"``}).  :func:`read_deconvolution_summary` reads both.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

from ..errors import InputError
from ._versioning import check, stamp
from .atomic_files import write_text_atomic

__all__ = ["SUMMARY_FORMAT", "SUMMARY_FORMAT_VERSION", "SUMMARY_FILE", "DeconvolutionSummary", "summarise",
           "summary_record", "write_deconvolution_summary", "read_deconvolution_summary"]

SUMMARY_FORMAT = "arrayplan-deconvolution-summary"
SUMMARY_FORMAT_VERSION = 1
SUMMARY_FILE = "deconvolution.csv"

#: Decimals kept of every level in dB (the table's resolution).
DB_DECIMALS = 3
#: Decimals kept of the peak delay in ms (0.1 microsecond).
DELAY_MS_DECIMALS = 4

_DEFINITIONS = {
    "peak_delay_definition": "time of the largest sample after zero lag",
    "harmonic_level_definition": "10 log10 of the product's energy over the linear response's energy",
    "peak_to_noise_definition": "20 log10 of the peak over the RMS of the last 10 % of the response",
}
_FLOOR_DEFINITIONS = {
    "method_floor_definition": "harmonic levels of the clean sweep file deconvolved as its own recording (a unity "
                               "wire): the method's own artefacts",
    "noise_floor_definition": "the response tail's noise power (last 10 %) times each harmonic window's length, "
                              "over the linear response's energy",
    "rule": "a harmonic level is reported only when it exceeds the energy sum of both floors by the margin; "
            "otherwise harmonic_db is null and harmonic_status says which floor it is below; thd_db sums the "
            "reported products only",
}


@dataclass(frozen=True)
class DeconvolutionSummary:
    """Quality figures of every speaker-microphone pair of a deconvolution.

    Arrays have shape (n_mic, n_spk); levels are dB, rounded to
    :data:`DB_DECIMALS`; NaN where a value is not finite (a harmonic below
    its floors, no THD).

    Attributes
    ----------
    speaker_names, mic_names : tuple of str
        Names of the speakers (columns) and microphones (rows), rig order.
    peak_db : ndarray
        Peak of each linear response, dB re 1 (full scale per full scale).
    peak_delay_ms : ndarray
        Time of that peak after zero lag, ms (rounded to 0.1 microsecond).
    peak_to_noise_db : ndarray
        Peak over the RMS of the response's last 10 %, dB.
    clipped_samples : ndarray of int
        Recorded samples at or above the clip threshold.
    harmonic_db, harmonic_floor_db : dict of int -> ndarray
        By order (2, 3, ...): the level where measured, and the floor (the
        method's and the noise's together), dB.
    harmonic_status : dict of int -> ndarray of str
        By order: ``"measured"``, ``"below the method's floor"`` or
        ``"below the noise floor"``.
    thd_db : ndarray or None
        The measured orders together, dB; None without harmonic orders.
    method_floor_db : dict of int -> float, or None
        The method's own floor per order (JSON only), dB.
    margin_db : float or None
        Margin above the floors for a level to count as measured, dB (JSON only).
    """

    speaker_names: tuple[str, ...]
    mic_names: tuple[str, ...]
    peak_db: np.ndarray
    peak_delay_ms: np.ndarray
    peak_to_noise_db: np.ndarray
    clipped_samples: np.ndarray
    harmonic_db: dict[int, np.ndarray]
    harmonic_floor_db: dict[int, np.ndarray]
    harmonic_status: dict[int, np.ndarray]
    thd_db: np.ndarray | None
    method_floor_db: dict[int, float] | None = None
    margin_db: float | None = None

    @property
    def orders(self) -> list[int]:
        """Harmonic orders in the summary, ascending.

        Returns
        -------
        list of int
            For example ``[2, 3]``; empty for a sweep without harmonic orders.
        """
        return sorted(self.harmonic_db)

    def thd_status(self, m: int, s: int) -> str | None:
        """Whether one pair's THD was measured.

        Parameters
        ----------
        m, s : int
            Microphone and speaker index (0-based, rig order).

        Returns
        -------
        str or None
            ``"measured"`` or ``"below the floors"``; None without harmonic orders.
        """
        if self.thd_db is None:
            return None
        return "measured" if math.isfinite(self.thd_db[m, s]) else "below the floors"

    def worst_harmonic_text(self, order: int, s: int) -> str:
        """One speaker's harmonic `order` in words, over all microphones.

        Parameters
        ----------
        order : int
            Harmonic order (2, 3, ...), one of :attr:`orders`.
        s : int
            Speaker index (0-based, rig order).

        Returns
        -------
        str
            ``H2 -44.1 dB`` (the worst microphone's measured level, dB) or, when
            no microphone measured it, ``H2 below the noise floor (-66.1 dB)``
            (the status and floor of the microphone with the highest floor).
        """
        levels = self.harmonic_db[order][:, s]
        if np.any(np.isfinite(levels)):
            return f"H{order} {np.nanmax(levels):.1f} dB"
        m = int(np.argmax(np.nan_to_num(self.harmonic_floor_db[order][:, s], nan=-np.inf)))
        return f"H{order} {self.harmonic_status[order][m, s]} ({self.harmonic_floor_db[order][m, s]:.1f} dB)"

    def per_pair(self) -> dict[str, dict[str, dict[str, Any]]]:
        """The figures as JSON-ready nested dicts.

        Returns
        -------
        dict
            ``[speaker][mic]`` -> {``peak_db``, ``peak_delay_s`` (s),
            ``peak_to_noise_db``, ``clipped_samples``, ``harmonic_db``,
            ``harmonic_status``, ``harmonic_floor_db`` (by order as a string),
            ``thd_db``, ``thd_status``}; None where a value is not finite.
        """
        out: dict[str, dict[str, dict[str, Any]]] = {}
        for s, spk in enumerate(self.speaker_names):
            out[spk] = {}
            for m, mic in enumerate(self.mic_names):
                out[spk][mic] = {
                    "peak_db": _json(self.peak_db[m, s]), "peak_delay_s": float(self.peak_delay_ms[m, s]) / 1e3,
                    "peak_to_noise_db": _json(self.peak_to_noise_db[m, s]),
                    "clipped_samples": int(self.clipped_samples[m, s]),
                    "harmonic_db": {str(n): _json(self.harmonic_db[n][m, s]) for n in self.orders},
                    "harmonic_status": {str(n): str(self.harmonic_status[n][m, s]) for n in self.orders},
                    "harmonic_floor_db": {str(n): _json(self.harmonic_floor_db[n][m, s]) for n in self.orders},
                    "thd_db": None if self.thd_db is None else _json(self.thd_db[m, s]),
                    "thd_status": self.thd_status(m, s)}
        return out


def _json(v: float) -> float | None:
    return float(v) if math.isfinite(v) else None


def _rounded(x: Any, decimals: int) -> np.ndarray:
    """`x` rounded (correctly, as Python's round) to `decimals`; NaN where not finite."""
    a = np.asarray(x, dtype=float)
    return np.array([round(float(v), decimals) if math.isfinite(v) else math.nan for v in a.ravel()],
                    dtype=float).reshape(a.shape)


def _round_db(x: Any) -> np.ndarray:
    return _rounded(x, DB_DECIMALS)


def summarise(result: Any, speaker_names: Sequence[str], mic_names: Sequence[str], *, pre_roll_samples: int,
              sample_rate_hz: float) -> DeconvolutionSummary:
    """The summary of a deconvolution (:class:`arrayplan.signals.deconvolve.OfflineResult`).

    Parameters
    ----------
    result : OfflineResult
        Peak levels and indices, peak-to-noise, clipping, harmonic levels and
        statuses, the method's floor.
    speaker_names, mic_names : sequence of str
        Names in rig order, matching the result's speaker and microphone axes.
    pre_roll_samples : int
        Samples before zero lag in the responses (the peak delay counts from zero lag).
    sample_rate_hz : float
        Sample rate of the responses, Hz.

    Returns
    -------
    DeconvolutionSummary
        Levels rounded to :data:`DB_DECIMALS`, delays to :data:`DELAY_MS_DECIMALS`.
    """
    from ..signals.distortion_floor import DISTORTION_MARGIN_DB, combined_floor_db

    orders = sorted(result.harmonic_db)
    method = result.method_floor_db
    floors = {n: _round_db(combined_floor_db(None if method is None else method[n], result.noise_floor_db[n]))
              for n in orders}
    delay_ms = _rounded(1e3 * (np.asarray(result.peak_index, dtype=float) - pre_roll_samples) / sample_rate_hz,
                        DELAY_MS_DECIMALS)
    return DeconvolutionSummary(
        tuple(speaker_names), tuple(mic_names), _round_db(result.peak_dbfs), delay_ms,
        _round_db(result.peak_to_noise_db), np.asarray(result.clipped_samples, dtype=int),
        {n: _round_db(result.reported_harmonic_db(n)) for n in orders}, floors,
        {n: np.asarray(result.harmonic_status[n], dtype=str) for n in orders},
        _round_db(result.thd_db) if orders else None,
        None if method is None else {n: float(v) for n, v in method.items()}, DISTORTION_MARGIN_DB)


def summary_record(summary: DeconvolutionSummary) -> dict[str, Any]:
    """The summary's block of the IR set's manifest (``extra``): version, definitions, figures per pair.

    Parameters
    ----------
    summary : DeconvolutionSummary
        The figures, as :func:`summarise` gives them.

    Returns
    -------
    dict
        ``summary`` ({``format``, ``format_version``, ``file``}), the
        definitions, ``harmonic_floor`` and ``per_pair``.
    """
    floors = summary.method_floor_db
    return {"summary": stamp({"file": SUMMARY_FILE}, SUMMARY_FORMAT, SUMMARY_FORMAT_VERSION),
            **_DEFINITIONS,
            "harmonic_floor": {"method_floor_db": None if floors is None else
                               {str(n): _json(round(v, DB_DECIMALS)) for n, v in floors.items()},
                               "margin_db": summary.margin_db, **_FLOOR_DEFINITIONS},
            "per_pair": summary.per_pair()}


def _cell(v: float) -> str:
    return repr(float(v)) if math.isfinite(v) else ""


def _table(summary: DeconvolutionSummary) -> str:
    orders = summary.orders
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["speaker", "mic", "peak_db", "peak_delay_ms", "peak_to_noise_db", "clipped_samples"]
               + [f"harmonic{n}_{c}" for n in orders for c in ("db", "floor_db", "status")]
               + (["thd_db", "thd_status"] if orders else []))
    for s, spk in enumerate(summary.speaker_names):
        for m, mic in enumerate(summary.mic_names):
            harmonic = []
            for n in orders:
                harmonic += [_cell(summary.harmonic_db[n][m, s]), _cell(summary.harmonic_floor_db[n][m, s]),
                             str(summary.harmonic_status[n][m, s])]
            w.writerow([spk, mic, _cell(summary.peak_db[m, s]), _cell(summary.peak_delay_ms[m, s]),
                        _cell(summary.peak_to_noise_db[m, s]), int(summary.clipped_samples[m, s])] + harmonic
                       + ([_cell(summary.thd_db[m, s]), summary.thd_status(m, s)] if orders else []))
    return buf.getvalue()


def write_deconvolution_summary(folder: str | os.PathLike, summary: DeconvolutionSummary) -> Path:
    """Write ``deconvolution.csv`` into `folder`, atomically (its version goes in the IR set: :func:`summary_record`).

    Parameters
    ----------
    folder : path
        The IR set folder (the table goes beside its ``irset.json``).
    summary : DeconvolutionSummary
        The figures to write, one row per speaker and microphone.

    Returns
    -------
    Path
        The file written, ``folder / SUMMARY_FILE``.
    """
    return write_text_atomic(Path(folder) / SUMMARY_FILE, _table(summary))


def _number(text: str, src: str, field: str) -> float:
    if text == "":
        return math.nan
    try:
        v = float(text)
    except ValueError:
        raise InputError(f"not a number: {text!r}", source=src, field=field) from None
    if not math.isfinite(v):
        raise InputError(f"not finite: {text!r}", source=src, field=field)
    return v


def _manifest_block(folder: Path) -> Mapping[str, Any]:
    """The summary block of the IR set's manifest beside the table ({} when the set predates it)."""
    path = folder / "irset.json"
    if not path.is_file():
        raise InputError("no irset.json beside the summary", source=str(path),
                         fix="read the summary inside the IR set folder 'arrayplan deconvolve' wrote")
    try:
        manifest = json.loads(path.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InputError(f"not valid JSON ({' '.join(str(exc).split())})", source=str(path)) from None
    extra = manifest.get("extra") if isinstance(manifest, dict) else None
    extra = extra if isinstance(extra, dict) else {}
    block = extra.get("summary")
    if block is None:
        return extra
    check(block, SUMMARY_FORMAT, SUMMARY_FORMAT_VERSION, str(path), field_prefix="extra.summary.")
    return extra


def read_deconvolution_summary(folder: str | os.PathLike) -> DeconvolutionSummary:
    """Read ``deconvolution.csv`` of an IR set folder, checked against its manifest's version.

    Parameters
    ----------
    folder : path
        An IR set written by ``arrayplan deconvolve``.

    Returns
    -------
    DeconvolutionSummary

    Raises
    ------
    InputError
        Naming the file and column (or manifest field) of any problem.
    """
    folder = Path(folder)
    extra = _manifest_block(folder)
    path = folder / SUMMARY_FILE
    src = str(path)
    try:
        rows = list(csv.DictReader(io.StringIO(path.read_text(encoding="utf-8"))))
    except FileNotFoundError:
        raise InputError("missing", source=src, fix="read a folder written by 'arrayplan deconvolve'") from None
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise InputError(f"cannot read ({exc})", source=src) from None
    if not rows:
        raise InputError("has no rows", source=src)
    columns = list(rows[0])
    for c in ("speaker", "mic", "peak_db", "peak_delay_ms", "peak_to_noise_db", "clipped_samples"):
        if c not in columns:
            raise InputError("missing column", source=src, field=c)
    orders = sorted(int(c[len("harmonic"):-len("_db")]) for c in columns
                    if c.startswith("harmonic") and c.endswith("_db") and not c.endswith("_floor_db"))
    speakers = list(dict.fromkeys(r["speaker"] for r in rows))
    mics = list(dict.fromkeys(r["mic"] for r in rows))
    if len(rows) != len(speakers) * len(mics) or len({(r["speaker"], r["mic"]) for r in rows}) != len(rows):
        raise InputError(f"{len(rows)} rows for {len(speakers)} speakers x {len(mics)} microphones", source=src,
                         fix="one row per speaker and microphone, as 'arrayplan deconvolve' wrote it")
    shape = (len(mics), len(speakers))
    num = {c: np.full(shape, np.nan) for c in ("peak_db", "peak_delay_ms", "peak_to_noise_db", "thd_db")}
    clipped = np.zeros(shape, dtype=int)
    h_db = {n: np.full(shape, np.nan) for n in orders}
    h_floor = {n: np.full(shape, np.nan) for n in orders}
    h_status = {n: np.empty(shape, dtype=object) for n in orders}
    for k, r in enumerate(rows, start=2):
        m, s = mics.index(r["mic"]), speakers.index(r["speaker"])
        for c in num:
            if c in r:
                num[c][m, s] = _number(r[c] or "", src, f"{c} (line {k})")
        try:
            clipped[m, s] = int(r["clipped_samples"])
        except (TypeError, ValueError):
            raise InputError(f"not a whole number: {r['clipped_samples']!r}", source=src,
                             field=f"clipped_samples (line {k})") from None
        for n in orders:
            h_db[n][m, s] = _number(r.get(f"harmonic{n}_db") or "", src, f"harmonic{n}_db (line {k})")
            h_floor[n][m, s] = _number(r.get(f"harmonic{n}_floor_db") or "", src, f"harmonic{n}_floor_db (line {k})")
            h_status[n][m, s] = r.get(f"harmonic{n}_status") or ""
    floor_block = extra.get("harmonic_floor") if isinstance(extra.get("harmonic_floor"), dict) else {}
    method = floor_block.get("method_floor_db")
    margin = floor_block.get("margin_db")
    return DeconvolutionSummary(
        tuple(speakers), tuple(mics), num["peak_db"], num["peak_delay_ms"], num["peak_to_noise_db"], clipped,
        h_db, h_floor, {n: h_status[n].astype(str) for n in orders}, num["thd_db"] if orders else None,
        {int(n): math.nan if v is None else float(v) for n, v in method.items()} if isinstance(method, dict)
        else None, float(margin) if isinstance(margin, (int, float)) and not isinstance(margin, bool) else None)
