"""A progress bar on stderr, per design, with replicates done and time left."""

from __future__ import annotations

import shutil
import sys
import time


class Progress:
    """Counts replicates done per design and redraws one status line on stderr.

    Silent when ``enabled`` is false (``--quiet``, or stderr is not a terminal).
    """

    def __init__(self, totals: dict[str, int], enabled: bool | None = None, stream=None):
        self.stream = stream or sys.stderr
        self.enabled = self.stream.isatty() if enabled is None else enabled
        self.totals = dict(totals)
        self.done = {k: 0 for k in totals}
        self.start = time.monotonic()
        self._last = 0.0
        self._width = 0

    def update(self, name: str, count: int) -> None:
        self.done[name] = self.done.get(name, 0) + count
        if not self.enabled:
            return
        now = time.monotonic()
        if now - self._last < 0.1 and sum(self.done.values()) < sum(self.totals.values()):
            return
        self._last = now
        self._draw(name, now)

    def line(self, name: str, now: float | None = None) -> str:
        """The status line: overall bar, this design's replicates, designs finished, time left."""
        now = time.monotonic() if now is None else now
        total, done = sum(self.totals.values()), sum(self.done.values())
        elapsed = now - self.start
        left = elapsed * max(total - done, 0) / done if done else float("nan")
        width = 16
        fill = min(width, int(width * done / total)) if total else width
        bar = "#" * fill + "-" * (width - fill)
        finished = sum(1 for k, t in self.totals.items() if self.done.get(k, 0) >= t)
        pct = 100.0 * min(done, total) / total if total else 100.0
        return (f"[{bar}] {pct:3.0f}% {clock(left):>6} left | {name[:24]} {self.done.get(name, 0):,}/"
                f"{self.totals.get(name, 0):,} | designs done {finished}/{len(self.totals)}")

    def _draw(self, name: str, now: float) -> None:
        text = self.line(name, now)
        cols = shutil.get_terminal_size((100, 24)).columns - 1
        text = text[:cols] if cols > 20 else text
        pad = max(0, self._width - len(text))
        self._width = len(text)
        self.stream.write("\r" + text + " " * pad)
        self.stream.flush()

    def close(self) -> None:
        """Finish the line (a last redraw, then a newline) when the bar was shown."""
        if self.enabled:
            self.stream.write("\r" + " " * self._width + "\r")
            self.stream.write(f"{sum(self.done.values()):,} replicates of {len(self.totals)} design(s) "
                              f"done in {clock(time.monotonic() - self.start)}\n")
            self.stream.flush()


def clock(seconds: float) -> str:
    """A duration for the status line: ``--`` (unknown), ``42s``, ``3m05s`` or ``2h07m``.

    Examples
    --------
    >>> clock(float("nan")), clock(4.2), clock(185), clock(7620)
    ('--', '4s', '3m05s', '2h07m')
    """
    if seconds != seconds or seconds == float("inf"):
        return "--"
    s = int(round(max(seconds, 0.0)))
    if s < 60:
        return f"{s}s"
    if s < 3600:
        return f"{s // 60}m{s % 60:02d}s"
    return f"{s // 3600}h{(s % 3600) // 60:02d}m"
