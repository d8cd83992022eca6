"""Progress of long runs: a one-line bar on a terminal, periodic plain lines elsewhere (batch logs).

Hand-written rather than a progress library's: what it must do besides drawing (count resumed
points as done but not into the rate, print whole lines at a fixed period to a log file, never
raise on a closed stream) is most of the code, and it adds no dependency.
"""

from __future__ import annotations

import contextlib
import math
import sys
import time

__all__ = ["Progress"]


def _fmt_duration(seconds: float) -> str:
    if not math.isfinite(seconds) or seconds < 0:
        return "--:--"
    s = int(round(seconds))
    h, rem = divmod(s, 3600)
    m, s = divmod(rem, 60)
    return f"{h:d}:{m:02d}:{s:02d}" if h else f"{m:02d}:{s:02d}"


class Progress:
    """Progress of a long run: done/total points, points/s, time left.

    On a terminal (or with ``enabled=True``) a one-line bar redrawn at most every
    ``interval`` seconds.  On anything else (a log file, a pipe) with ``enabled=None``,
    one plain line every ``line_interval`` seconds and a last one at the end, so batch
    logs show that the run is alive.  ``enabled=False`` is silent.  Points finished
    in an earlier run (``skipped``) count as done but not into the rate.
    """

    def __init__(self, total: int, *, stream=None, enabled: bool | None = None, interval: float = 0.2,
                 label: str = "ionbal grid", width: int = 28, line_interval: float = 10.0):
        self.stream = sys.stderr if stream is None else stream
        self.lines = False
        if enabled is None:
            try:
                enabled = bool(self.stream.isatty())
            except (AttributeError, ValueError):
                enabled = False
            self.lines = not enabled
        self.enabled = enabled
        self.line_interval = line_interval
        self.total = max(0, int(total))
        self.done = 0
        self.skipped = 0
        self.interval = interval
        self.label = label
        self.width = width
        self._t0 = time.monotonic()
        self._last = 0.0
        self._drawn = False

    def skip(self, n: int) -> None:
        """Count ``n`` points as already done (resumed)."""
        self.skipped += int(n)
        self.done += int(n)

    def update(self, n: int) -> None:
        self.done += int(n)
        now = time.monotonic()
        if self.enabled and (now - self._last >= self.interval or self.done >= self.total):
            self._last = now
            self._draw(now)
        elif self.lines and now - max(self._last, self._t0) >= self.line_interval:
            self._last = now
            self._write_line()

    def plain_line(self) -> str:
        """The progress as one log line (no bar, no carriage return)."""
        frac = self.done / self.total if self.total else 1.0
        rate = self.rate()
        left = (self.total - self.done) / rate if rate == rate and rate > 0 else float("nan")
        rate_s = f"{rate:,.0f} pts/s" if rate == rate else "-- pts/s"
        return (f"{self.label}: {100 * frac:5.1f}% {self.done:,}/{self.total:,} pts, {rate_s}, "
                f"elapsed {_fmt_duration(time.monotonic() - self._t0)}, left {_fmt_duration(left)}")

    def _write_line(self) -> None:
        try:
            self.stream.write(self.plain_line() + "\n")
            self.stream.flush()
            self._drawn = True
        except (OSError, ValueError):
            self.lines = False

    def rate(self) -> float:
        dt = time.monotonic() - self._t0
        computed = self.done - self.skipped
        return computed / dt if dt > 0 and computed > 0 else float("nan")

    def line(self, now: float | None = None) -> str:
        frac = self.done / self.total if self.total else 1.0
        full = int(round(frac * self.width))
        bar = "#" * full + "-" * (self.width - full)
        rate = self.rate()
        left = (self.total - self.done) / rate if rate == rate and rate > 0 else float("nan")
        rate_s = f"{rate:,.0f} pts/s" if rate == rate else "-- pts/s"
        return (f"{self.label} [{bar}] {100 * frac:5.1f}% {self.done:,}/{self.total:,} pts  "
                f"{rate_s}  left {_fmt_duration(left)}")

    def _draw(self, now: float) -> None:
        try:
            self.stream.write("\r" + self.line(now) + "\x1b[K")
            self.stream.flush()
            self._drawn = True
        except (OSError, ValueError):
            self.enabled = False

    def close(self) -> None:
        if self.lines and self.done > self.skipped:
            self._write_line()
            self.lines = False
            return
        if self.enabled and self._drawn:
            with contextlib.suppress(OSError, ValueError):
                if self.done < self.total:
                    self._draw(time.monotonic())
                self.stream.write("\n")
                self.stream.flush()

