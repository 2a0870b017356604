"""Argument types shared by several commands."""

from __future__ import annotations

import argparse

__all__ = ["csv_names", "octaves", "add_measured_kernel_options", "measured_kernel_from_args"]


def csv_names(text: str) -> list[str]:
    """A comma-separated list of unique, non-empty names (argparse type)."""
    names = [v.strip() for v in text.split(",")]
    if not all(names):
        raise argparse.ArgumentTypeError(f"empty name in {text!r}")
    if len(set(names)) != len(names):
        raise argparse.ArgumentTypeError(f"names must be unique, got {text!r}")
    return names


def octaves(text: str) -> float:
    """A band width in octaves, as a number (0.333) or a fraction (1/3) (argparse type)."""
    try:
        if "/" in text:
            num, den = text.split("/", 1)
            value = float(num) / float(den)
        else:
            value = float(text)
    except (ValueError, ZeroDivisionError):
        raise argparse.ArgumentTypeError(f"expected a width in octaves like 1/3 or 0.333, got {text!r}") from None
    return value


def add_measured_kernel_options(p: argparse.ArgumentParser, prefix: str = "") -> None:
    """The options that shape coupling matrices taken from impulse responses (plan --irset, verify)."""
    p.add_argument("--window-ms", type=float, metavar="MS",
                   help=f"{prefix}keep this much of each response after zero lag (ms); the last quarter is a "
                        "half-Hann fade-out, which drops the late room response")
    p.add_argument("--latency-samples", type=int, default=0, metavar="N",
                   help=f"{prefix}common latency to remove first (samples, default 0)")
    p.add_argument("--smooth-octaves", type=octaves, metavar="B",
                   help=f"{prefix}complex-smooth each response over B octaves (e.g. 1/3) about its own direct "
                        "arrival: reflections and noise average out, the direct sound and its phase stay")


def measured_kernel_from_args(irs, args: argparse.Namespace):
    """A :class:`~arrayplan.kernels.measured.MeasuredKernel` from the options above, checked."""
    from ..errors import InputError
    from ..kernels.measured import MeasuredKernel

    if args.window_ms is not None and not args.window_ms > 0:
        raise InputError(f"must be positive, got {args.window_ms}", source="--window-ms")
    if args.smooth_octaves is not None and not (0 < args.smooth_octaves <= 2):
        raise InputError(f"must be above 0 and at most 2 octaves, got {args.smooth_octaves:g}",
                         source="--smooth-octaves", fix="use for example 1/3 or 1/6")
    return MeasuredKernel(irs, window_s=None if args.window_ms is None else args.window_ms / 1000.0,
                          latency_samples=args.latency_samples, smoothing_octaves=args.smooth_octaves)
