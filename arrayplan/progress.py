"""A minimal progress bar on stderr, shown only when stderr is a terminal."""

from __future__ import annotations

import sys
import time
from typing import TextIO

__all__ = ["ProgressBar"]


class ProgressBar:
    """Call with ``(done, total)``; prints a bar on a terminal, nothing in pipes or CI."""

    def __init__(self, label: str, stream: TextIO | None = None, min_interval_s: float = 0.1) -> None:
        self.label = label
        self.stream = stream if stream is not None else sys.stderr
        self.enabled = bool(getattr(self.stream, "isatty", lambda: False)())
        self._last = 0.0
        self._min = min_interval_s

    def __call__(self, done: int, total: int) -> None:
        if not self.enabled:
            return
        now = time.monotonic()
        if done < total and now - self._last < self._min:
            return
        self._last = now
        width = 30
        filled = int(width * done / max(total, 1))
        self.stream.write(f"\r{self.label} [{'#' * filled}{'.' * (width - filled)}] {done}/{total}")
        if done >= total:
            self.stream.write("\n")
        self.stream.flush()
