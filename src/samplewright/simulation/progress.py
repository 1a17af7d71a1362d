"""A progress bar on stderr, per design, with replicates done and time left."""

from __future__ import annotations

import shutil
import sys
import time

#: half-life, in seconds, of the weights of the replicate rate behind the time-left estimate
HALF_LIFE = 30.0


class Progress:
    """Counts replicates done per design and redraws one status line on stderr.

    Silent when ``enabled`` is false (``--quiet``, or stderr is not a terminal).

    The time left is the replicates still to run divided by a smoothed rate: an exponentially
    weighted rate, replicates done over time spent, in which each finished block's count and
    the time it took weigh half as much for every ``HALF_LIFE`` (30) seconds since it finished.
    A start-up pause or a burst of blocks finishing together (``--jobs``) so fades out in a
    minute or two instead of pulling the estimate for the rest of the run, and one slow or
    quick block moves it little.  ``timer`` (seconds, default ``time.monotonic``) is for tests.
    """

    def __init__(self, totals: dict[str, int], enabled: bool | None = None, stream=None, timer=time.monotonic):
        self.stream = stream or sys.stderr
        self.enabled = self.stream.isatty() if enabled is None else enabled
        self.totals = dict(totals)
        self.done = {k: 0 for k in totals}
        self.timer = timer
        self.start = timer()
        self._last = 0.0
        self._width = 0
        self._seen = self.start  # time of the last update, and the weighted replicates and seconds
        self._reps = 0.0
        self._secs = 0.0

    def update(self, name: str, count: int) -> None:
        self.done[name] = self.done.get(name, 0) + count
        now = self.timer()
        decay = 0.5 ** ((now - self._seen) / HALF_LIFE)
        self._reps = self._reps * decay + count
        self._secs = self._secs * decay + (now - self._seen)
        self._seen = now
        if not self.enabled:
            return
        if now - self._last < 0.1 and sum(self.done.values()) < sum(self.totals.values()):
            return
        self._last = now
        self._draw(name)

    def time_left(self) -> float:
        """Seconds left at the smoothed rate (see the class notes); NaN before the first replicate."""
        left = max(sum(self.totals.values()) - sum(self.done.values()), 0)
        if not left:
            return 0.0
        return left * self._secs / self._reps if self._reps > 0 else float("nan")

    def break_line(self) -> None:
        """End the bar's line, so a message printed next (Ctrl-C, a warning) starts on its own line."""
        if self.enabled and self._width:
            self.stream.write("\n")
            self.stream.flush()
            self._width = 0

    def line(self, name: str) -> str:
        """The status line: overall bar, this design's replicates, designs finished, time left."""
        total, done = sum(self.totals.values()), sum(self.done.values())
        left = self.time_left()
        width = 16
        fill = min(width, int(width * done / total)) if total else width
        bar = "#" * fill + "-" * (width - fill)
        finished = sum(1 for k, t in self.totals.items() if self.done.get(k, 0) >= t)
        pct = 100.0 * min(done, total) / total if total else 100.0
        return (f"[{bar}] {pct:3.0f}% {clock(left):>6} left | {name[:24]} {self.done.get(name, 0):,}/"
                f"{self.totals.get(name, 0):,} | designs done {finished}/{len(self.totals)}")

    def _draw(self, name: str) -> None:
        text = self.line(name)
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
                              f"done in {clock(self.timer() - self.start)}\n")
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
