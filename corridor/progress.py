"""A tiny progress display for long steps, shown only on a terminal.

Under a scheduler (stderr not a terminal) nothing is drawn, so logs stay
clean. No dependencies.

Use::

    with progress.bar("respond", total=n_chunks) as bar:
        for chunk in chunks:
            ...
            bar.update()

or, at stage boundaries, ``progress.stage("couple", 2, 4)``.
"""

from __future__ import annotations

import logging
import os
import sys
import time

_WIDTH = 30


def enabled(stream=None) -> bool:
    """Whether to draw: the stream is a terminal and ``CORRIDOR_PROGRESS`` is not ``0``."""
    stream = sys.stderr if stream is None else stream
    if os.environ.get("CORRIDOR_PROGRESS", "") == "0" or _quiet[0]:
        return False
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):
        return False


_quiet = [False]
#: Streams with a progress line drawn on them now (see :func:`clear_line`).
_drawn: set[int] = set()


def clear_line(stream=None) -> None:
    """Wipe a progress line drawn on ``stream``, so that a log message starts clean.

    The bar redraws itself on its next update."""
    stream = sys.stderr if stream is None else stream
    if id(stream) in _drawn:
        _drawn.discard(id(stream))
        stream.write("\r" + " " * (_WIDTH + 40) + "\r")
        stream.flush()


class ConsoleHandler(logging.StreamHandler):
    """A log handler that first wipes a progress line on its stream."""

    def emit(self, record: logging.LogRecord) -> None:
        clear_line(self.stream)
        super().emit(record)


def set_quiet(quiet: bool) -> None:
    """Switch progress drawing off for the whole process (``--quiet``)."""
    _quiet[0] = bool(quiet)


class Bar:
    """A one-line progress bar redrawn with a carriage return, at most 10 times a second.

    Parameters
    ----------
    label : str
    total : int
        Number of steps; 0 or less draws a spinner-like counter.
    stream : file, optional
        Default ``sys.stderr``.
    """

    def __init__(self, label: str, total: int = 0, stream=None):
        self.label, self.total, self.done = label, int(total), 0
        self.stream = sys.stderr if stream is None else stream
        self.on = enabled(self.stream)
        self.t0 = time.monotonic()
        self._last = 0.0

    def update(self, n: int = 1) -> None:
        self.done += n
        if not self.on:
            return
        now = time.monotonic()
        if now - self._last < 0.1 and (self.total <= 0 or self.done < self.total):
            return
        self._last = now
        dt = now - self.t0
        if self.total > 0:
            frac = min(1.0, self.done / self.total)
            full = int(round(frac * _WIDTH))
            text = (f"\r{self.label:<10} [{'#' * full}{'.' * (_WIDTH - full)}]"
                    f" {self.done}/{self.total} {dt:5.1f} s")
        else:
            text = f"\r{self.label:<10} {self.done} {dt:5.1f} s"
        self.stream.write(text)
        self.stream.flush()
        _drawn.add(id(self.stream))

    def close(self) -> None:
        if self.on:
            _drawn.discard(id(self.stream))
            self.stream.write("\r" + " " * (_WIDTH + 40) + "\r")
            self.stream.flush()

    def __enter__(self) -> Bar:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def bar(label: str, total: int = 0, stream=None) -> Bar:
    """A :class:`Bar` for a loop of ``total`` steps."""
    return Bar(label, total, stream)


def stage(name: str, index: int, count: int, stream=None) -> None:
    """Show ``[index/count] name`` at a stage boundary (terminal only)."""
    stream = sys.stderr if stream is None else stream
    if enabled(stream):
        stream.write(f"\r[{index}/{count}] {name:<20}")
        stream.flush()
        _drawn.add(id(stream))
        if index >= count:
            clear_line(stream)
