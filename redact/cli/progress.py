"""A progress line on stderr for commands that work through a video frame by frame.

The rate is measured from the first frame reported, not from the start of the command: model
loading, the first pass of the empty-scene style and the look-back delay come before any
frame is done, and counting them made the first ETA wildly high (559 s shown for a 26 s job).
No ETA is shown until at least MIN_SECONDS and MIN_FRAMES have been measured (common practice:
a rate over a handful of frames is mostly noise). stdout stays for results.
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable

import click

#: Measured time and frames needed before an ETA is shown (common practice).
MIN_SECONDS = 3.0
MIN_FRAMES = 10


class FrameProgress:
    """Call with (frames_done, frames_expected); prints at most every 0.25 s on a terminal (one
    line rewritten in place), every 5 s otherwise. `label` starts the line (e.g. "tracks")."""

    def __init__(self, quiet: bool, label: str = "", clock: Callable[[], float] = time.perf_counter,
                 tty: bool | None = None):
        self.quiet, self.label, self.clock = quiet, label, clock
        self.tty = sys.stderr.isatty() if tty is None else tty
        self.first: tuple[float, int] | None = None
        self.last = float("-inf")
        self.printed = False

    def line(self, done: int, total: int, now: float) -> str:
        """The text shown for `done` of `total` frames at clock time `now`."""
        if self.first is None:
            self.first = (now, done)
        t0, d0 = self.first
        span, frames = now - t0, done - d0
        pct = 100.0 * done / total if total else 0.0
        head = f"{self.label}: " if self.label else ""
        text = f"{head}frame {done}/{total} ({pct:5.1f} %)"
        if span >= MIN_SECONDS and frames >= MIN_FRAMES:
            fps = frames / span
            eta = max(total - done, 0) / fps
            text += f"  {fps:5.1f} frames/s  ETA {eta:5.0f} s"
        elif done < total:
            text += "  ETA: measuring"
        return text

    def __call__(self, done: int, total: int) -> None:
        if self.quiet:
            return
        now = self.clock()
        text = self.line(done, total, now)
        if now - self.last < (0.25 if self.tty else 5.0) and done != total:
            return
        self.last = now
        self.printed = True
        click.echo(("\r" + text.ljust(72)) if self.tty else text, err=True, nl=not self.tty)

    def close(self) -> None:
        """End the rewritten line on a terminal."""
        if self.tty and self.printed and not self.quiet:
            click.echo("", err=True)
