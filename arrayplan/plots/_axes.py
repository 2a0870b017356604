"""Shared axis helpers for the figures."""

from __future__ import annotations

import numpy as np
from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

__all__ = ["frequency_axis"]


def _plain(value: float, _pos: int) -> str:
    return f"{value:g}"


def frequency_axis(ax, hz: np.ndarray, log_above_ratio: float = 4.0) -> None:
    """Log-scale the x axis when `hz` spans more than `log_above_ratio`, with plain tick numbers (500, 1000, 2000)."""
    hz = np.asarray(hz, dtype=float)
    if len(hz) > 1 and hz[0] > 0 and hz[-1] / hz[0] > log_above_ratio:
        ax.set_xscale("log")
        ax.xaxis.set_major_locator(LogLocator(base=10.0, subs=(1.0, 2.0, 5.0)))
        ax.xaxis.set_major_formatter(FuncFormatter(_plain))
        ax.xaxis.set_minor_formatter(NullFormatter())
