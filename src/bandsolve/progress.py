"""Progress on long work: a callback protocol for the API and a text bar for the command line.

Library functions that take a while accept ``progress=None`` and, when given a callable, call
``progress(done, total, label)`` as work completes; they never print. The command line passes
:func:`progress_bar`'s result, which draws a bar on standard error only when standard error is
a terminal and ``--quiet`` was not given, so logs, pipes and redirected output stay clean.
"""

from __future__ import annotations

import sys
from collections.abc import Callable
from typing import TextIO

__all__ = ["ProgressBar", "ProgressCallback", "progress_bar", "step"]

#: ``progress(done, total, label)``: ``done`` of ``total`` units finished, ``label`` says what.
ProgressCallback = Callable[[int, int, str], None]


def step(progress: ProgressCallback | None, done: int, total: int, label: str = "") -> None:
    """Report progress through an optional callback (does nothing when it is None)."""
    if progress is not None:
        progress(done, total, label)


class ProgressBar:
    """A one-line text bar redrawn in place with a carriage return.

    Parameters
    ----------
    stream : text stream
        Where to draw (standard error on the command line).
    width : int
        Number of bar characters.
    """

    def __init__(self, stream: TextIO, width: int = 28):
        self.stream = stream
        self.width = width
        self._drawn = False

    def __call__(self, done: int, total: int, label: str = "") -> None:
        """Redraw the bar at ``done`` of ``total``; finish the line when complete."""
        frac = min(max(done / total, 0.0), 1.0) if total > 0 else 1.0
        filled = round(frac * self.width)
        bar = "#" * filled + "-" * (self.width - filled)
        self.stream.write(f"\r[{bar}] {done}/{total} {label[:40]:<40}")
        self._drawn = True
        if done >= total:
            self.close()
        else:
            self.stream.flush()

    def close(self) -> None:
        """End the bar's line (once), so later messages start on a fresh line."""
        if self._drawn:
            self.stream.write("\n")
            self.stream.flush()
            self._drawn = False


def progress_bar(quiet: bool = False, stream: TextIO | None = None) -> ProgressBar | None:
    """A bar on ``stream`` (standard error) when it is a terminal and not ``quiet``; else None.

    Pass the result straight to an API function's ``progress`` argument: None means silence.
    """
    stream = sys.stderr if stream is None else stream
    isatty = getattr(stream, "isatty", None)
    if quiet or isatty is None or not isatty():
        return None
    return ProgressBar(stream)
