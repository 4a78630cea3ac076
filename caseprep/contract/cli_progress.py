"""Progress display of both command lines (`caseprep run`, `postproc sweep`).

On a terminal: a bar on the last line, redrawn in place (count, elapsed,
estimated time left, what runs now), with messages printed above it. Not
on a terminal (a log file, a batch job's output): one line per finished item
with the count and the estimated time left, and the messages as lines.
The numbers come from :class:`caseprep.contract.progress.ProgressMeter`.
"""
from __future__ import annotations

import shutil
import sys
from typing import TextIO

import click

from caseprep.contract.progress import ProgressMeter


class ProgressDisplay:
    """Progress of ``total`` items on ``stream`` (default stdout); ``tty``
    None: decided by ``stream.isatty()``; ``start``: when the work began
    (``time.monotonic()``; default now)."""

    def __init__(self, total: int, tty: bool | None = None, stream: TextIO | None = None,
                 start: float | None = None):
        self.stream = stream or sys.stdout
        self.tty = self.stream.isatty() if tty is None else tty
        self.meter = ProgressMeter(total, start=start)
        self.note = ""
        self._drawn = False

    def _width(self) -> int:
        return shutil.get_terminal_size((100, 24)).columns

    def _clear(self) -> None:
        if self.tty and self._drawn:
            self.stream.write("\r\x1b[2K")
            self._drawn = False

    def draw(self, note: str | None = None) -> None:
        """Redraw the bar (terminal only) with ``note`` (what runs now)."""
        if note is not None:
            self.note = note
        if not self.tty:
            return
        self._clear()
        text = self.meter.bar(note=self.note)
        self.stream.write(text[: max(10, self._width() - 1)])
        self.stream.flush()
        self._drawn = True

    def message(self, text: str) -> None:
        """A line of its own (above the bar on a terminal)."""
        self._clear()
        click.echo(text, file=self.stream)
        self.draw()

    def item_done(self, text: str, worked: bool = True) -> None:
        """One item finished: its line, with the count and ETA when not on a terminal."""
        self.meter.finish(worked)
        if self.tty:
            self.message(text)
        else:
            click.echo(f"{text}  [{self.meter.line()}]", file=self.stream)

    def close(self) -> None:
        """End the bar's line (terminal)."""
        if self.tty and self._drawn:
            self._clear()
            self.stream.flush()


__all__ = ["ProgressDisplay"]
