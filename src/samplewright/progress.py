"""A progress bar on stderr, per design, with replicates done and time left."""

from __future__ import annotations

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

    def update(self, name: str, count: int) -> None:
        self.done[name] += count
        if not self.enabled:
            return
        now = time.monotonic()
        if now - self._last < 0.1 and sum(self.done.values()) < sum(self.totals.values()):
            return
        self._last = now
        total, done = sum(self.totals.values()), sum(self.done.values())
        elapsed = now - self.start
        left = elapsed * (total - done) / done if done else float("nan")
        width = 24
        fill = int(width * done / total) if total else width
        bar = "#" * fill + "-" * (width - fill)
        self.stream.write(f"\r[{bar}] {name[:24]:<24} {self.done[name]:>8}/{self.totals[name]:<8} "
                          f"all {done}/{total}  {left:5.0f}s left ")
        self.stream.flush()

    def close(self) -> None:
        if self.enabled:
            self.stream.write("\n")
            self.stream.flush()
