"""Terminal progress for long work: a one-line bar on stderr.

Library functions take a ``progress(stage, done, total)`` callback; this is the command line's.  On a
terminal the bar is redrawn in place; in a log file one line is written each time the bar grows.
"""

from __future__ import annotations

import sys
import time


class ProgressBar:
    """Callable progress reporter: ``bar(stage, done, total)`` shows ``stage [#####     ] done/total  t s``."""

    def __init__(self, stream=None, width: int = 30):
        self.stream = stream or sys.stderr
        self.width = width
        self.start = time.monotonic()
        self.interactive = hasattr(self.stream, "isatty") and self.stream.isatty()
        self._shown = None

    def __call__(self, label: str, done: int, total: int) -> None:
        filled = int(self.width * done / total) if total else self.width
        elapsed = time.monotonic() - self.start
        line = f"{label} [{'#' * filled}{' ' * (self.width - filled)}] {done}/{total} {elapsed:7.1f} s"
        if self.interactive:
            self.stream.write("\r" + line + ("\n" if done >= total else ""))
        elif (label, filled) != self._shown:
            self.stream.write(line + "\n")
        self._shown = (label, filled)
        self.stream.flush()
