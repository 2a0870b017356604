"""The sweep block of a signal sidecar, read back and checked: what deconvolution needs of a sweep."""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from ..errors import InputError
from .sweep_formulas import SWEEP_KINDS, check_sweep_band, default_pre_roll_s, harmonic_offset_s, max_pre_roll_s
from .sweeps import SweepSettings, make_sweep

__all__ = ["SweepRecord"]


def _number(v: Any) -> float | None:
    ok = isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) and v > 0
    return float(v) if ok else None


def _conditioning(block: dict) -> dict[str, Any]:
    """Fades and high-pass of the sweep, where the block gives them sensibly (else None: not rebuilt)."""
    order = block.get("highpass_order")
    return {"fade_in_s": _number(block.get("fade_in_s")), "fade_out_s": _number(block.get("fade_out_s")),
            "highpass_hz": _number(block.get("highpass_hz")),
            "highpass_order": order if isinstance(order, int) and not isinstance(order, bool) and 1 <= order <= 8
            else None}


@dataclass(frozen=True)
class SweepRecord:
    """The sweep block of a sidecar, read back and checked (what deconvolution needs).

    Attributes are those of :meth:`SweepSignal.sidecar`; `inverse_filter_file`
    is resolved against the sidecar's folder by the caller.  Sidecars written
    before ``pre_roll_samples`` existed get the default rule's value
    (:func:`default_pre_roll_s`).

    Attributes
    ----------
    kind : str
        ``"exponential"`` or ``"linear"``.
    f1_hz, f2_hz : float
        Sweep limits (Hz).
    duration_s : float
        Sweep duration without padding (s).
    sample_rate_hz : float
        Sample rate (Hz).
    n_sweep_samples, pad_before_samples, pad_after_samples : int
        Lengths of the sweep and of the silence before and after it (samples).
    linear_lag_samples : int
        0-based index of the linear response's zero lag in
        ``fftconvolve(file, inverse)``.
    inverse_filter_file : str
        File name of the inverse filter, as written in the sidecar.
    pre_roll_samples : int
        Samples a response keeps before zero lag.
    fade_in_s, fade_out_s : float or None
        Raised-cosine fades (s); None when the sidecar does not give them.
    highpass_hz : float or None
        Cutoff of the sweep's high-pass (Hz); None for none.
    highpass_order : int or None
        Its order (1 to 8).
    """

    kind: str
    f1_hz: float
    f2_hz: float
    duration_s: float
    sample_rate_hz: float
    n_sweep_samples: int
    pad_before_samples: int
    pad_after_samples: int
    linear_lag_samples: int
    inverse_filter_file: str
    pre_roll_samples: int = 0
    fade_in_s: float | None = None
    fade_out_s: float | None = None
    highpass_hz: float | None = None
    highpass_order: int | None = None

    def clean_recording(self) -> np.ndarray | None:
        """The single-sweep file rebuilt from this record (full scale 0.9), or None if the record cannot say.

        Rebuilt with :func:`arrayplan.signals.sweeps.make_sweep` from the
        band, duration, fades, high-pass and padding; None for a record
        without its fades or whose rebuilt sweep differs in length.  Used as
        a unity wire's recording for the method's own distortion floor.

        Returns
        -------
        ndarray, shape (n_file_samples,), or None
        """
        if self.fade_in_s is None or self.fade_out_s is None or (self.highpass_hz is not None
                                                                  and self.highpass_order is None):
            return None
        fs = self.sample_rate_hz
        try:
            sw = make_sweep(SweepSettings(
                kind=self.kind, f1_hz=self.f1_hz, f2_hz=self.f2_hz, duration_s=self.duration_s, sample_rate_hz=fs,
                fade_in_s=self.fade_in_s, fade_out_s=self.fade_out_s, pad_before_s=self.pad_before_samples / fs,
                pad_after_s=self.pad_after_samples / fs, peak_dbfs=-1.0, peak_cap_dbfs=0.0, allow_above_cap=True,
                highpass_hz=self.highpass_hz, highpass_order=self.highpass_order or 2))
        except InputError:
            return None
        if sw.n_sweep != self.n_sweep_samples or sw.signal.size != self.n_file_samples:
            return None
        return sw.signal

    @property
    def max_pre_roll_samples(self) -> int:
        """Most samples a response may keep before zero lag (:func:`max_pre_roll_s`).

        Returns
        -------
        int
            Samples, rounded down.
        """
        return int(math.floor(max_pre_roll_s(self.kind, self.f1_hz, self.f2_hz, self.duration_s)
                              * self.sample_rate_hz))

    @property
    def n_file_samples(self) -> int:
        """Length of the single-sweep file.

        Returns
        -------
        int
            Padding before + sweep + padding after (samples).
        """
        return self.pad_before_samples + self.n_sweep_samples + self.pad_after_samples

    def harmonic_offsets_samples(self, max_order: int) -> dict[int, float]:
        """Offsets of harmonics 2..max_order before the linear response (exponential sweeps only).

        The same as :meth:`arrayplan.signals.sweeps.SweepSignal.harmonic_offsets_samples`
        for the sweep this record describes.

        Parameters
        ----------
        max_order : int
            Highest harmonic order (below 2: no offsets).

        Returns
        -------
        dict of int to float
            Order -> offset in samples (fractional); empty for a linear sweep.
        """
        if self.kind != "exponential":
            return {}
        return {n: harmonic_offset_s(n, self.f1_hz, self.f2_hz, self.duration_s) * self.sample_rate_hz
                for n in range(2, max_order + 1)}

    @classmethod
    def from_json(cls, block: Any, *, source: str | None = None) -> "SweepRecord":
        """Validate a sidecar's ``sweep`` block; InputError naming the field otherwise.

        Parameters
        ----------
        block : dict
            The ``sweep`` block as read from JSON.
        source : str, optional
            The sidecar file, named in messages.

        Returns
        -------
        SweepRecord
            The checked record.
        """
        if not isinstance(block, dict):
            raise InputError("no 'sweep' block: this sidecar does not describe a sweep", source=source,
                             field="sweep", fix="give the .json written beside a sweep, schedule or sweep probe")

        def get(name: str, kinds: tuple, positive: bool = True) -> Any:
            if name not in block:
                raise InputError("missing field", source=source, field=f"sweep.{name}",
                                 fix="use the sidecar exactly as arrayplan wrote it")
            v = block[name]
            if isinstance(v, bool) or not isinstance(v, kinds):
                raise InputError(f"wrong type {type(v).__name__}", source=source, field=f"sweep.{name}")
            if isinstance(v, (int, float)) and (not math.isfinite(v) or v < 0 or (positive and v == 0)):
                raise InputError(f"must be {'positive' if positive else 'non-negative'}, got {v!r}",
                                 source=source, field=f"sweep.{name}")
            return v

        kind = get("kind", (str,))
        if kind not in SWEEP_KINDS:
            raise InputError(f"unknown sweep kind {kind!r}", source=source, field="sweep.kind")
        rec = cls(
            kind=kind,
            f1_hz=float(get("f1_hz", (int, float))),
            f2_hz=float(get("f2_hz", (int, float))),
            duration_s=float(get("duration_s", (int, float))),
            sample_rate_hz=float(get("sample_rate_hz", (int, float))),
            n_sweep_samples=int(get("n_sweep_samples", (int,))),
            pad_before_samples=int(get("pad_before_samples", (int,), positive=False)),
            pad_after_samples=int(get("pad_after_samples", (int,))),
            linear_lag_samples=int(get("linear_lag_samples", (int,))),
            inverse_filter_file=str(get("inverse_filter_file", (str,))),
        )
        check_sweep_band(rec.kind, rec.f1_hz, rec.f2_hz, rec.duration_s, rec.sample_rate_hz, source=source)
        if "pre_roll_samples" in block:
            pre = int(get("pre_roll_samples", (int,), positive=False))
            if pre > rec.max_pre_roll_samples:
                raise InputError(f"{pre} samples reach past half-way to the 2nd harmonic "
                                 f"({rec.max_pre_roll_samples} samples)", source=source,
                                 field="sweep.pre_roll_samples", fix="use the sidecar exactly as arrayplan wrote it")
        else:
            pre = int(math.floor(default_pre_roll_s(rec.kind, rec.f1_hz, rec.f2_hz, rec.duration_s)
                                 * rec.sample_rate_hz))
        rec = replace(rec, pre_roll_samples=pre, **_conditioning(block))
        if rec.linear_lag_samples != rec.pad_before_samples + rec.n_sweep_samples - 1:
            raise InputError("linear_lag_samples does not equal pad_before_samples + n_sweep_samples - 1",
                             source=source, field="sweep.linear_lag_samples")
        return rec
