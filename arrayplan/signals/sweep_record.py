"""The sweep block of a signal sidecar, read back and checked: what deconvolution needs of a sweep."""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any

from ..errors import InputError
from .sweeps import (SWEEP_KINDS, check_sweep_band, default_pre_roll_s, harmonic_offset_s, max_pre_roll_s)

__all__ = ["SweepRecord"]


@dataclass(frozen=True)
class SweepRecord:
    """The sweep block of a sidecar, read back and checked (what deconvolution needs).

    Attributes are those of :meth:`SweepSignal.sidecar`; `inverse_filter_file`
    is resolved against the sidecar's folder by the caller.  Sidecars written
    before ``pre_roll_samples`` existed get the default rule's value
    (:func:`default_pre_roll_s`).
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

    @property
    def max_pre_roll_samples(self) -> int:
        """Most samples a response may keep before zero lag (:func:`max_pre_roll_s`)."""
        return int(math.floor(max_pre_roll_s(self.kind, self.f1_hz, self.f2_hz, self.duration_s)
                              * self.sample_rate_hz))

    @property
    def n_file_samples(self) -> int:
        return self.pad_before_samples + self.n_sweep_samples + self.pad_after_samples

    def harmonic_offsets_samples(self, max_order: int) -> dict[int, float]:
        if self.kind != "exponential":
            return {}
        return {n: harmonic_offset_s(n, self.f1_hz, self.f2_hz, self.duration_s) * self.sample_rate_hz
                for n in range(2, max_order + 1)}

    @classmethod
    def from_json(cls, block: Any, *, source: str | None = None) -> "SweepRecord":
        """Validate a sidecar's ``sweep`` block; InputError naming the field otherwise."""
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
        rec = replace(rec, pre_roll_samples=pre)
        if rec.linear_lag_samples != rec.pad_before_samples + rec.n_sweep_samples - 1:
            raise InputError("linear_lag_samples does not equal pad_before_samples + n_sweep_samples - 1",
                             source=source, field="sweep.linear_lag_samples")
        return rec
