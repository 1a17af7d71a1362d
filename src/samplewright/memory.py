"""Handing freed memory back to the system, and reading this process's memory use.

A run frees large pieces of memory at a few known points (the frame file's columns once the frame is
built, a cell's block arrays once its tables are written); the allocators keep such pages for reuse
unless asked, and they would then count against the run's peak memory for the rest of the run.
"""

from __future__ import annotations

import sys


def release_freed_memory() -> None:
    """Ask the C allocator (glibc only; else nothing) and pyarrow's memory pool (when pyarrow is loaded)
    to return the pages they keep after frees to the system.  Numbers are unaffected."""
    if "pyarrow" in sys.modules:  # never imported just for this
        sys.modules["pyarrow"].default_memory_pool().release_unused()
    try:
        import ctypes

        ctypes.CDLL("libc.so.6").malloc_trim(0)
    except (OSError, AttributeError):
        pass


def rss_mib() -> tuple[float, float]:
    """(resident, peak resident) memory of this process in MiB, from /proc (Linux); (nan, nan) elsewhere."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            fields = dict(line.split(":", 1) for line in fh if ":" in line)
        return int(fields["VmRSS"].split()[0]) / 1024, int(fields["VmHWM"].split()[0]) / 1024
    except (OSError, KeyError, ValueError):
        return float("nan"), float("nan")
