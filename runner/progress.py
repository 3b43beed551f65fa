"""A one-line progress display on stderr: trials done out of total, elapsed time and time left."""

from __future__ import annotations

import sys
import time
from typing import TextIO

__all__ = ["Progress"]


def _clock(seconds: float) -> str:
    seconds = round(seconds)
    hours, rest = divmod(seconds, 3600)
    minutes, secs = divmod(rest, 60)
    return f"{hours}:{minutes:02d}:{secs:02d}" if hours else f"{minutes}:{secs:02d}"


class Progress:
    """Redraws in place on a terminal; elsewhere prints a line about every tenth of the work."""

    def __init__(self, total: int, stream: TextIO | None = None, width: int = 24) -> None:
        self.total = total
        self.done = 0
        self.failed = 0
        self.stream = stream or sys.stderr
        self.width = width
        self.start = time.perf_counter()
        self.live = hasattr(self.stream, "isatty") and self.stream.isatty()
        self._last_tenth = -1

    def restart(self) -> None:
        """Start the clock again (after compiling), so elapsed time and time left count trial work only."""
        self.start = time.perf_counter()

    def advance(self, failed: bool = False) -> None:
        """Count one finished trial and redraw."""
        self.done += 1
        self.failed += int(failed)
        tenth = (10 * self.done) // max(self.total, 1)
        if self.live:
            self.stream.write("\r" + self.line())
            self.stream.flush()
        elif tenth != self._last_tenth:
            self._last_tenth = tenth
            self.stream.write(self.line() + "\n")

    def line(self) -> str:
        """The progress text, e.g. '[#####.....]  12/40 trials  elapsed 0:05  left ~0:12'."""
        share = self.done / self.total if self.total else 1.0
        filled = round(share * self.width)
        elapsed = time.perf_counter() - self.start
        # No estimate before a trial has finished: it would be a guess from nothing.
        left = f"  left ~{_clock(elapsed / self.done * (self.total - self.done))}" if self.done else ""
        failed = f"  {self.failed:,} failed" if self.failed else ""
        total = f"{self.total:,}"
        return (
            f"[{'#' * filled}{'.' * (self.width - filled)}] {self.done:>{len(total)},}/{total} trials"
            f"  elapsed {_clock(elapsed)}{left}{failed}"
        )

    def close(self) -> None:
        """End the live line."""
        if self.live:
            self.stream.write("\n")
            self.stream.flush()
