"""Progress bars on stderr for long work, shown only on a terminal.

A :class:`ProgressBar` draws one line, redrawn in place by tqdm (a
maintained progress-bar library) with arrayplan's own text::

    planning [##########..............]  42%  20/48  0:03 elapsed, 0:04 left

It is shown only when its stream is a terminal, never when the environment
variable ``CI`` holds a true value (``CI=true``, as CI runners set it), and
never with ``ARRAYPLAN_PROGRESS=0``; ``ARRAYPLAN_PROGRESS=1`` shows it anyway
(in a pipe, a log file or CI).  Redraws are rate-limited; the line is
finished with a newline when the work completes and erased when an exception
(or Ctrl-C) stops the work inside ``with bar:``.  Lines printed with
:meth:`ProgressBar.print_above` appear above the bar without garbling it.

The bar is also a plain callable ``bar(done, total)``, the progress
callback that :func:`arrayplan.channels.planning.plan_rig` and others accept.
"""

from __future__ import annotations

import functools
import os
import sys
import threading
import time
from contextlib import contextmanager
from typing import Callable, Iterator, TextIO


__all__ = ["ProgressBar", "progress_wanted", "format_duration", "mini_bar", "ticking",
           "PROGRESS_ENV", "CI_ENV"]

#: Environment variable that forces the bar on (1) or off (0).
PROGRESS_ENV = "ARRAYPLAN_PROGRESS"
#: Environment variable that CI runners set to "true"; a true value hides the bar.
CI_ENV = "CI"

_TRUE = frozenset({"1", "true", "yes", "on"})
_FALSE = frozenset({"0", "false", "no", "off"})


def progress_wanted(stream: TextIO | None = None) -> bool:
    """Whether progress should be drawn on `stream` (default stderr).

    ``ARRAYPLAN_PROGRESS`` decides when it is 1/true/yes/on or 0/false/no/off;
    otherwise a true ``CI`` hides progress, and else it is shown only when
    `stream` is a terminal.

    Parameters
    ----------
    stream : text stream, optional
        Where the bar would be drawn.

    Returns
    -------
    bool
        True to draw progress.
    """
    stream = sys.stderr if stream is None else stream
    force = os.environ.get(PROGRESS_ENV, "").strip().lower()
    if force in _TRUE:
        return True
    if force in _FALSE:
        return False
    if os.environ.get(CI_ENV, "").strip().lower() in _TRUE:
        return False
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError, OSError):  # no isatty, or a closed stream
        return False


def format_duration(seconds: float) -> str:
    """``"0:07"``, ``"12:34"`` or ``"1:02:03"`` for a duration in seconds (rounded down).

    Parameters
    ----------
    seconds : float
        Duration (s); negative counts as 0.

    Returns
    -------
    str
        ``m:ss``, or ``h:mm:ss`` from one hour on.
    """
    s = max(0, int(seconds))
    h, rest = divmod(s, 3600)
    m, s = divmod(rest, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m}:{s:02d}"


def mini_bar(fraction: float, width: int = 10) -> str:
    """A bracketed bar of `width` cells filled to `fraction` (clipped to 0..1).

    Parameters
    ----------
    fraction : float
        Share done.
    width : int
        Cells between the brackets.

    Returns
    -------
    str
        ``#`` for filled cells (rounded down), ``.`` for the rest.
    """
    f = min(1.0, max(0.0, float(fraction)))
    filled = int(width * f)
    return "[" + "#" * filled + "." * (width - filled) + "]"


def _columns(stream: TextIO) -> int:
    """Width of the terminal behind `stream`; else $COLUMNS; else 80 (a new pty reports 0)."""
    try:
        cols = os.get_terminal_size(stream.fileno()).columns
        if cols > 0:
            return max(20, cols)
    except (AttributeError, ValueError, OSError):
        pass
    try:
        return max(20, int(os.environ.get("COLUMNS", "")))
    except ValueError:
        return 80


@functools.lru_cache(maxsize=None)
def _line_class():
    """The tqdm bar class (tqdm is imported only when a bar is drawn: it costs ~0.1 s at start-up)."""
    from tqdm import tqdm

    class _Line(tqdm):
        """A tqdm bar that draws its owner's line (:meth:`ProgressBar.text`) instead of tqdm's meter.

        tqdm does the drawing in place, the rate limiting, printing above the bar,
        and ending or erasing the line; the owner supplies the text and the clock.
        """

        monitor_interval = 0  # no monitor thread: the owner decides when to redraw

        def __init__(self, owner: "ProgressBar", initial: float) -> None:
            self._owner = owner
            super().__init__(total=owner.total, initial=initial, file=owner.stream, position=0, leave=True,
                             mininterval=owner.min_interval_s, miniters=0, maxinterval=0, smoothing=0,
                             dynamic_ncols=False, ncols=_columns(owner.stream))
            self._time = owner._clock
            self.last_print_t = self.start_t = owner._clock()

        def format_meter(self, *args, **kwargs) -> str:  # type: ignore[override]
            return self._owner._fitted(self._owner._clock())

    return _Line


class ProgressBar:
    """A one-line progress bar: label, bar, percent, count, detail, elapsed and time left.

    Parameters
    ----------
    label : str
        Text before the bar (``"planning"``).
    total : int or float, optional
        Amount of work; may also be given with each update.
    stream : text stream, optional
        Where to draw (default ``sys.stderr``).
    min_interval_s : float
        Least time between redraws, s; the first and the final state are
        always drawn.
    width : int
        Cells of the bar.
    show_count : bool
        Show ``done/total`` after the percentage.
    enabled : bool, optional
        Override the decision of :func:`progress_wanted`.
    clock : callable, optional
        Monotonic clock in seconds (default ``time.monotonic``).

    Notes
    -----
    Drawn by tqdm (a maintained progress-bar library) with arrayplan's own
    line.  Call it as ``bar(done, total)`` (the callback form) or use
    :meth:`update`; ``done`` may be fractional.  Reaching ``done >= total``
    draws the final state and ends the line.  Elapsed time counts from
    construction, or from a first update with ``done == 0``, or from the
    first update after the bar finished (which starts a new run).  As a
    context manager it ends the line on normal exit and erases it when an
    exception (or Ctrl-C) leaves the block.  Updates from another thread are
    serialised by a lock.
    """

    def __init__(self, label: str, total: float | None = None, *, stream: TextIO | None = None,
                 min_interval_s: float = 0.1, width: int = 20, show_count: bool = True,
                 enabled: bool | None = None, clock: Callable[[], float] = time.monotonic) -> None:
        self.label = label
        self.total = total
        self.stream = stream if stream is not None else sys.stderr
        self.enabled = progress_wanted(self.stream) if enabled is None else bool(enabled)
        self.min_interval_s = float(min_interval_s)
        self.width = int(width)
        self.show_count = show_count
        self.detail = ""
        self.done: float = 0.0
        self._clock = clock
        self._start: float = clock()
        self._line = None   # the tqdm bar on screen, None when none is
        self._finished = False
        self._lock = threading.RLock()

    # -- updating -------------------------------------------------------------------------------
    def __call__(self, done: float, total: float | None = None) -> None:
        """Callback form: the same as ``update(done, total)``."""
        self.update(done, total)

    def update(self, done: float, total: float | None = None, *, label: str | None = None,
               detail: str | None = None, force: bool = False) -> None:
        """Set the amount done (and optionally total, label and detail text) and redraw if due.

        Parameters
        ----------
        done : float
            Amount done, in the units of `total`.
        total : float, optional
            New total; None keeps the current one.
        label, detail : str, optional
            New label and detail text; None keeps them.
        force : bool
            Redraw now, whatever the time since the last drawing.
        """
        with self._lock:
            if total is not None:
                self.total = total
            if label is not None:
                self.label = label
            if detail is not None:
                self.detail = detail
            if not self.enabled:
                self.done = done
                return
            now = self._clock()
            if self._finished:  # used again after it finished: a new run
                self._start, self._finished = now, False
            elif done == 0 and self._line is None:  # "starting now"
                self._start = now
            self.done = done
            if self._line is None:
                self._line = _line_class()(self, done)   # draws the first state
            else:
                self._line.total = self.total
                self._line.update(done - self._line.n)
                if force:
                    self._line.refresh()
            if self.total is not None and done >= self.total:
                self._close(leave=True)
                self._finished = True

    def print_above(self, text: str) -> None:
        """Print a line of text above the bar (or just print it when no bar is shown).

        Parameters
        ----------
        text : str
            One line, without its newline.
        """
        with self._lock:
            if self._line is not None:
                self._line.write(text, file=self.stream)
            else:
                self.stream.write(text + "\n")
            self.stream.flush()

    # -- ending ---------------------------------------------------------------------------------
    def finish(self) -> None:
        """Draw the last state and end the line (nothing if no bar is on screen)."""
        with self._lock:
            self._close(leave=True)
            self._finished = True

    def clear(self) -> None:
        """Erase the bar's line, leaving the cursor at its start."""
        with self._lock:
            self._close(leave=False)
            self._finished = True

    def _close(self, leave: bool) -> None:
        if self._line is not None:
            self._line.leave = leave
            self._line.close()
            self.stream.flush()
            self._line = None

    def __enter__(self) -> "ProgressBar":
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is None:
            self.finish()
        else:
            self.clear()

    # -- the line -------------------------------------------------------------------------------
    def text(self, now: float | None = None) -> str:
        """The line as it would be drawn at clock time `now`.

        Parameters
        ----------
        now : float, optional
            Clock time (s, the bar's clock); default the clock now.

        Returns
        -------
        str
            Label, bar and percentage, count, detail, elapsed and remaining time.
        """
        now = self._clock() if now is None else now
        elapsed = now - self._start
        parts = [self.label]
        total = self.total
        if total:
            frac = min(1.0, max(0.0, self.done / total))
            parts.append(mini_bar(frac, self.width) + f" {int(100 * frac):3d}%")
            if self.show_count:
                parts.append(f"{_count(self.done)}/{_count(total)}")
        elif self.show_count:
            parts.append(_count(self.done))
        if self.detail:
            parts.append(self.detail)
        timing = f"{format_duration(elapsed)} elapsed"
        if total and 0 < self.done < total and elapsed > 0:
            timing += f", {format_duration(elapsed * (total - self.done) / self.done)} left"
        parts.append(timing)
        return "  ".join(parts)

    def _fitted(self, now: float) -> str:
        """:meth:`text` cut to the terminal's width, shortening the label first."""
        room = _columns(self.stream) - 1
        line = self.text(now)
        over = len(line) - room
        if over > 0 and self.label:
            keep = max(8, len(self.label) - over - 1)
            if keep < len(self.label):
                line = self.label[:keep - 1] + "~" + line[len(self.label):]
        return line[:room]


def _count(x: float) -> str:
    return str(int(x)) if float(x).is_integer() else f"{x:.1f}"


@contextmanager
def ticking(callback: Callable[[float], None], interval_s: float = 0.2) -> Iterator[None]:
    """Call ``callback(elapsed_s)`` every `interval_s` from a helper thread while the block runs.

    For work that blocks without reporting (playing a sweep through the
    audio interface): the callback sees wall-clock seconds since the block
    began.  The thread is a daemon, stopped and joined when the block ends,
    by exception too; an exception in the callback stops the ticks only.

    Parameters
    ----------
    callback : callable
        ``callback(elapsed_s)``, elapsed wall-clock time in s.
    interval_s : float
        Time between calls (s).

    Yields
    ------
    None
        Control to the block while the ticks run.
    """
    stop = threading.Event()
    t0 = time.monotonic()

    def run() -> None:
        while not stop.wait(interval_s):
            try:
                callback(time.monotonic() - t0)
            except Exception:  # progress must never break the work it reports on
                return

    thread = threading.Thread(target=run, name="arrayplan-progress", daemon=True)
    thread.start()
    try:
        yield
    finally:
        stop.set()
        thread.join(timeout=1.0)
