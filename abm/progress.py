"""Progress of a long stage: a bar on a terminal, plain lines in a log.

On a terminal tqdm draws a bar. When standard error is not a terminal (a log
file, CI, a pipe) a bar would be noise or nothing, so a line is written at
most every 10 s and at least at every tenth of the work:
``12/60 runs, 40 s elapsed, about 2 min left``.
"""

from __future__ import annotations

import sys
import time
from types import TracebackType
from typing import Any, TextIO

LINE_SECONDS = 10.0  # a log hears from a stage at least this often while it moves


def _duration(seconds: float) -> str:
    if seconds < 90:
        return f"{seconds:.0f} s"
    if seconds < 90 * 60:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.1f} h"


class LineProgress:
    """Progress as lines: at each tenth of ``total`` and, between them, at most every :data:`LINE_SECONDS`."""

    def __init__(self, total: int, unit: str, label: str = "", initial: int = 0, stream: TextIO | None = None) -> None:
        self.total, self.unit, self.label = total, unit, label
        self.done = initial
        self.stream = stream if stream is not None else sys.stderr
        self.started = time.monotonic()
        self.last_line = self.started
        self.first = initial
        self.next_tenth = self._tenth_after(initial)
        self.postfix = ""

    def _tenth_after(self, done: int) -> int:
        step = max(self.total // 10, 1)
        return (done // step + 1) * step

    def update(self, n: int = 1) -> None:
        """Count ``n`` more units done; write a line when a tenth is passed or enough time has gone by."""
        self.done += n
        now = time.monotonic()
        if self.done >= self.next_tenth or self.done >= self.total or now - self.last_line >= LINE_SECONDS:
            self.next_tenth = self._tenth_after(self.done)
            self.last_line = now
            self.write(now)

    def set_postfix_str(self, text: str) -> None:
        """A note carried on every later line (e.g. "2 failed")."""
        self.postfix = text

    def write(self, now: float | None = None) -> None:
        now = time.monotonic() if now is None else now
        elapsed = now - self.started
        line = f"{self.label + ': ' if self.label else ''}{self.done}/{self.total} {self.unit}, {_duration(elapsed)} elapsed"
        fresh = self.done - self.first
        if 0 < fresh and self.done < self.total:
            line += f", about {_duration(elapsed / fresh * (self.total - self.done))} left"
        if self.postfix:
            line += f" ({self.postfix})"
        print(line, file=self.stream, flush=True)

    def __enter__(self) -> "LineProgress":
        return self

    def __exit__(self, kind: type[BaseException] | None, value: BaseException | None, tb: TracebackType | None) -> None:
        return None


def progress(total: int, unit: str, label: str = "", initial: int = 0, show: bool | None = None) -> Any:
    """A tqdm bar when standard error is a terminal (or ``show`` is True), else a :class:`LineProgress`.

    ``show`` False shows nothing at all (tests and nested stages).
    """
    from tqdm import tqdm

    if show is False:
        return tqdm(total=total, disable=True)
    if show or sys.stderr.isatty():
        return tqdm(total=total, initial=initial, desc=label, unit=unit.rstrip("s"), dynamic_ncols=True, leave=False)
    return LineProgress(total, unit, label, initial)
