"""A progress line for long runs on a terminal: draws done, rate and time left.

:class:`TerminalProgress` is a callable ``progress(done, total)``, the form the
Monte Carlo hands to a forward model (``evaluate_draws(..., progress=...)``),
which calls it as chunks of draws finish. It rewrites one line of the terminal
(carriage return), at most a few times a second, and ends the line when
``done == total``. It writes only to a terminal: output piped into a file or
another program stays clean. :func:`terminal_progress` gives one for stderr, or
None when there is nothing to show (stderr is not a terminal, or ``quiet``).
"""

from __future__ import annotations

import math
import sys
import time
from collections.abc import Callable

__all__ = ["MIN_INTERVAL_S", "TerminalProgress", "format_duration", "terminal_progress"]

#: Least time between two updates of the line [s]: a few a second, so that the line is readable and writing
#: it costs nothing next to the work it reports.
MIN_INTERVAL_S = 0.25


def format_duration(seconds: float) -> str:
    """A duration for people: ``"8 s"``, ``"2 min 05 s"``, ``"1 h 04 min"``."""
    s = max(0, round(seconds))
    if s < 60:
        return f"{s} s"
    if s < 3600:
        return f"{s // 60} min {s % 60:02d} s"
    return f"{s // 3600} h {s % 3600 // 60:02d} min"


def _is_terminal(stream) -> bool:
    isatty = getattr(stream, "isatty", None)
    return bool(isatty is not None and isatty())


class TerminalProgress:
    r"""``progress(done, total)``: one self-rewriting line on a terminal, silent elsewhere.

    Parameters
    ----------
    stream : file-like
        Where to write (the command line uses ``sys.stderr``, so results on
        stdout are never mixed with it). Nothing is written unless
        ``stream.isatty()`` is true.
    label : str
        What is counted, e.g. ``"draws"``.
    interval : float
        Least time between two updates [s] (:data:`MIN_INTERVAL_S`); the last
        update, ``done == total``, is always written and ends the line.
    clock : callable
        Seconds as a float (``time.monotonic``; tests pass their own).

    Notes
    -----
    The rate is counted from the first call of a pass; a pass starts anew
    when ``total`` changes or ``done`` goes back (the adaptive Monte Carlo
    evaluates every draw again in each round), so each pass gets its own
    line.

    Examples
    --------
    >>> import io
    >>> class Terminal(io.StringIO):
    ...     def isatty(self):
    ...         return True
    >>> ticks = iter([0.0, 2.0])
    >>> out = Terminal()
    >>> progress = TerminalProgress(out, clock=lambda: next(ticks))
    >>> progress(0, 1000); progress(1000, 1000)
    >>> print(out.getvalue().split("\r")[-1].strip())
    perierr: 1,000 / 1,000 draws (100 %), 500 draws/s, done in 2 s
    """

    def __init__(self, stream, *, label: str = "draws", interval: float = MIN_INTERVAL_S,
                 clock: Callable[[], float] = time.monotonic):  # fmt: skip
        self.stream = stream
        self.label = label
        self.interval = float(interval)
        self.clock = clock
        self.enabled = _is_terminal(stream)
        self._total = None
        self._start = self._first = self._done = 0
        self._last_write = -math.inf
        self._width = 0

    def __call__(self, done: int, total: int) -> None:
        """Report that ``done`` of ``total`` items are finished."""
        if not self.enabled:
            return
        now = self.clock()
        if total != self._total or done < self._done:  # a new pass
            self._total, self._start, self._first, self._last_write = total, now, done, -math.inf
        self._done = done
        finished = done >= total
        if not finished and now - self._last_write < self.interval:
            return
        self._last_write = now
        self._write(self._line(done, total, now - self._start), end="\n" if finished else "")

    def _line(self, done: int, total: int, elapsed: float) -> str:
        share = f" ({100.0 * done / total:.0f} %)" if total > 0 else ""
        text = f"perierr: {done:,} / {total:,} {self.label}{share}"
        counted = done - self._first
        if elapsed > 0 and counted > 0:
            rate = counted / elapsed
            text += f", {rate:,.0f} {self.label}/s"
            if done >= total:
                text += f", done in {format_duration(elapsed)}"
            else:
                text += f", about {format_duration((total - done) / rate)} left"
        return text

    def _write(self, text: str, end: str) -> None:
        pad = " " * max(0, self._width - len(text))  # wipe what is left of a longer previous line
        self.stream.write(f"\r{text}{pad}{end}")
        self.stream.flush()
        self._width = 0 if end else len(text)


def terminal_progress(stream=None, *, quiet: bool = False, label: str = "draws") -> TerminalProgress | None:
    """A progress reporter on ``stream`` (default: stderr), or None when it would show nothing.

    Parameters
    ----------
    stream : file-like, optional
        Default ``sys.stderr``.
    quiet : bool
        True: no progress at all (the command line's ``--quiet``).
    label : str
        What is counted.

    Returns
    -------
    TerminalProgress or None
        None when ``quiet`` or when ``stream`` is not a terminal, so callers skip the calls entirely.
    """
    stream = sys.stderr if stream is None else stream
    if quiet or not _is_terminal(stream):
        return None
    return TerminalProgress(stream, label=label)
