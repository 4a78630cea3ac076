"""Progress of long work (`caseprep run`, `postproc sweep`): counts, elapsed
time and the estimated time left, rendered as a bar for a terminal or as one
plain line for logs. Formatting only: the command lines print.

The estimate (ETA) assumes the items still to do take as long, on average,
as those done so far in this run (throughput: elapsed time over items done,
so N items running side by side count N times faster); items that needed
no work (skipped, reused) neither count as done work nor remain to do.
Common practice, no source.
"""
from __future__ import annotations

import time
from typing import Callable


def format_duration(t: float | None) -> str:
    """``12.3s``, ``4m05s``, ``2h07m``; ``-`` for None."""
    if t is None:
        return "-"
    t = float(t)
    if t < 60:
        return f"{t:.1f}s"
    m, sec = divmod(int(round(t)), 60)
    return f"{m}m{sec:02d}s" if m < 60 else f"{m // 60}h{m % 60:02d}m"


class ProgressMeter:
    """Progress over ``total`` items started at ``start`` (monotonic s)."""

    def __init__(self, total: int, start: float | None = None, clock: Callable[[], float] = time.monotonic):
        self.total = max(0, int(total))
        self.clock = clock
        self.start = clock() if start is None else start
        self.done = 0       # items finished with work
        self.free = 0       # items that needed none (skipped, reused)

    def finish(self, worked: bool = True) -> None:
        """One more item finished (``worked``: it was computed, not skipped or reused)."""
        if worked:
            self.done += 1
        else:
            self.free += 1

    @property
    def finished(self) -> int:
        return self.done + self.free

    @property
    def elapsed(self) -> float:
        return self.clock() - self.start

    def eta(self) -> float | None:
        """Seconds left (None before the first worked item finished)."""
        left = self.total - self.finished
        if left <= 0:
            return 0.0
        if self.done == 0:
            return None
        return self.elapsed / self.done * left

    def _counts(self) -> str:
        pct = 100.0 * self.finished / self.total if self.total else 100.0
        return f"{self.finished}/{self.total} ({pct:.0f}%)"

    def line(self) -> str:
        """``3/12 (25%), elapsed 1m02s, ETA 3m06s`` — for logs (one line per item)."""
        return f"{self._counts()}, elapsed {format_duration(self.elapsed)}, ETA {format_duration(self.eta())}"

    def bar(self, width: int = 24, note: str = "") -> str:
        """``[######------------------] 3/12 (25%) 1m02s, ETA 3m06s  note`` — for a terminal line."""
        frac = self.finished / self.total if self.total else 1.0
        fill = int(round(width * min(1.0, frac)))
        text = (f"[{'#' * fill}{'-' * (width - fill)}] {self._counts()} {format_duration(self.elapsed)}, "
                f"ETA {format_duration(self.eta())}")
        return f"{text}  {note}" if note else text


__all__ = ["ProgressMeter", "format_duration"]
