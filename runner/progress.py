"""Progress bars on stderr for long work: bootstrap replicates, restarts, several specs,
exact search.

A bar is drawn only when its stream is a terminal and ``--quiet`` was not given, so CI
logs and redirected output stay clean. It redraws one line in place (carriage return),
at most ten times a second, and clears that line when it closes::

    bootstrap kiln-line  |=========>          |  96/200  48%  0:07

:class:`Progress` never raises on a broken stream; a disabled one does nothing.
"""

from __future__ import annotations

import sys
import time
from dataclasses import dataclass, field
from typing import TextIO

BAR_WIDTH = 24
REDRAW_SECONDS = 0.1


def _clock(seconds: float) -> str:
    minutes, secs = divmod(int(seconds), 60)
    hours, minutes = divmod(minutes, 60)
    return f"{hours}:{minutes:02d}:{secs:02d}" if hours else f"{minutes}:{secs:02d}"


def bar_text(label: str, done: int, total: int, seconds: float, width: int = BAR_WIDTH) -> str:
    """The one-line picture of ``done`` out of ``total`` units after ``seconds``."""
    share = 1.0 if total <= 0 else min(1.0, done / total)
    filled = int(share * width)
    inner = "=" * filled + (">" if filled < width else "") + " " * (width - filled - 1)
    return (f"{label}  |{inner[:width]}|  {done}/{total}  {round(100 * share):3d}%  "
            f"{_clock(seconds)}")


@dataclass
class Progress:
    """A bar for ``total`` units of ``label``; :meth:`advance` as units finish."""

    label: str
    total: int
    stream: TextIO | None = None
    enabled: bool = True
    done: int = 0
    _started: float = field(default_factory=time.perf_counter)
    _drawn: float = -1.0
    _width: int = 0

    def advance(self, units: int = 1) -> None:
        self.done += units
        if not self.enabled:
            return
        now = time.perf_counter()
        if self.done < self.total and now - self._drawn < REDRAW_SECONDS:
            return
        self._drawn = now
        self._write("\r" + bar_text(self.label, self.done, self.total, now - self._started))

    def close(self) -> None:
        """Clear the bar's line (the work's own output follows on a clean line)."""
        if self.enabled and self._drawn >= 0:
            self._write("\r" + " " * self._width + "\r")
        self.enabled = False

    def _write(self, text: str) -> None:
        stream = self.stream if self.stream is not None else sys.stderr
        self._width = max(self._width, len(text) - 1)
        try:
            stream.write(text)
            stream.flush()
        except (OSError, ValueError):  # a closed or broken terminal: stop drawing
            self.enabled = False

    def __enter__(self) -> Progress:
        return self

    def __exit__(self, *_: object) -> None:
        self.close()


@dataclass(frozen=True)
class Reporter:
    """Makes bars for one command: all enabled when its stream is a terminal and not quiet."""

    quiet: bool = False
    stream: TextIO | None = None

    @property
    def active(self) -> bool:
        stream = self.stream if self.stream is not None else sys.stderr
        if self.quiet:
            return False
        try:
            return bool(stream.isatty())
        except (AttributeError, ValueError):
            return False

    def bar(self, label: str, total: int) -> Progress:
        return Progress(label, total, self.stream, enabled=self.active)


SILENT = Reporter(quiet=True)
