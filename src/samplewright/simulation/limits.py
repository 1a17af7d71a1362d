"""Memory a run will need, estimated before anything is allocated; refused when it cannot fit.

Two amounts are compared with the machine's physical memory (``os.sysconf``; where the
platform does not say, a documented cap of 64 GiB):

- the replicate table: one row per design x size x estimator x variance formula x variable x
  replicate, about :data:`ROW_BYTES` each at the run's peak (the table's 12 columns, the block
  results it is built from, the summaries), plus :data:`BLOCK_BYTES` of bookkeeping per block.
  A streamed run (no ``[goal]``: the table goes to disk cell by cell, see
  :mod:`samplewright.results.replicate_file`) holds instead at most two cells' arrays, the largest
  two (one filling while the one before it is written), :data:`CELL_VALUE_BYTES` a replicate value,
  and one piece of the table being written;
- the blocks being drawn: block_size x selections per sample x 8 (K + 3) bytes for a block,
  K the frame's value columns (the selected unit indices, the gathered rows, weights and
  random numbers, 8 bytes each), for each worker drawing a block at the same time.

The constants are measured peaks of runs of this code (not a published source): a run of
4 million rows rose 644 MB above a 10 000-replicate run (161 bytes a row); 100 000 blocks of
one replicate added about 1.2 kB each beyond their rows; blocks of 500 x 20 000 and
500 x 40 000 ``pps`` (with replacement) selections on a frame with K = 3 used 45-46 bytes a selection.
"""

from __future__ import annotations

import os

from samplewright.errors import InputError

ROW_BYTES = 160
BLOCK_BYTES = 2048
#: a streamed run: bytes per replicate per estimator x formula x variable of a cell's arrays (estimate, SE,
#: interval and their full-response twins, 8 bytes each), and per replicate (replicate, n, cost, counts)
CELL_VALUE_BYTES = 8 * 8
CELL_REPLICATE_BYTES = 8 * 8
#: rows of the replicate table a streamed run converts and writes at a time (one Parquet row group)
PIECE_ROWS = 1 << 17
#: memory assumed where os.sysconf cannot tell the machine's physical memory
FALLBACK_MEMORY = 64 << 30


def physical_memory() -> int:
    """Bytes of physical memory of this machine (:data:`FALLBACK_MEMORY` where unknown)."""
    try:
        return int(os.sysconf("SC_PAGE_SIZE")) * int(os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):
        return FALLBACK_MEMORY


def gib(n: float) -> str:
    return f"{n / (1 << 30):,.1f} GiB"


def check_run_memory(frame, cells, replicates: int, block_size: int, jobs: int = 1,
                     max_replicates: int | None = None, memory: int | None = None, streamed: bool = False) -> None:
    """Refuse (InputError) a run whose replicate table or blocks cannot fit in memory.

    ``replicates`` sizes the table; with a stopping rule the blocks are counted up to
    ``max_replicates`` (the most a cell may draw).  ``streamed``: the table goes to disk and only
    the cells being filled are held (module notes).  Nothing is allocated here.
    """
    memory = physical_memory() if memory is None else memory
    V = len(frame.layout.names)
    per_rep = sum(len(c.points) for c in cells) * V
    rows = per_rep * replicates
    blocks = len(cells) * -(-max(replicates, max_replicates or 0) // block_size)
    if streamed:
        held = sorted((len(c.points) * V * CELL_VALUE_BYTES + CELL_REPLICATE_BYTES) * replicates for c in cells)
        need = sum(held[-2:]) + min(rows, PIECE_ROWS) * ROW_BYTES
        what = (f"its two largest design x size cells ({replicates:,} replicates of every estimator, variance "
                f"formula and variable, held while the replicate table streams to disk)")
    else:
        need = rows * ROW_BYTES + blocks * BLOCK_BYTES
        what = (f"the replicate table ({rows:,} rows, one per design x size x estimator x variance formula x "
                f"variable x replicate, and {blocks:,} blocks)")
    if need > memory:
        cap = f" (blocks up to --max-replicates {max_replicates:,})" if max_replicates else ""
        raise InputError(
            f"replicates = {replicates:,}{cap}: {what} would need about {gib(need)}, more than this machine's "
            f"{gib(memory)} of memory; lower replicates or --max-replicates")
    per_sel = 8 * (frame.values.shape[1] + 3)
    for c in cells:
        sel = c.design.expected_n(frame)
        need = block_size * sel * per_sel * jobs
        if need > memory:
            workers = f" x {jobs} workers" if jobs > 1 else ""
            raise InputError(
                f"design {c.design.label!r} at size {c.design.size}: drawing a block of {block_size} samples "
                f"of {sel:,.0f} selections needs about {gib(need)} ({per_sel} bytes a selection{workers}), "
                f"more than this machine's {gib(memory)} of memory; lower the size, block_size or --jobs")
