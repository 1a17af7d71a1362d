"""One block's results: the unit of work the engine hands back, and the fieldwork columns it may carry."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: per-replicate columns fieldwork adds to the replicate table (after the contract columns)
REPLICATE_COLUMNS = ("attempted", "eligible", "full_estimate", "full_se", "full_lower", "full_upper",
                     "full_cost", "adjustment_failed")

@dataclass(frozen=True)
class BlockTask:
    """One block to draw: its cell (by position in the plan), block index, first replicate, count and seed."""

    cell: int
    block: int
    start: int
    count: int
    seed: np.random.SeedSequence


@dataclass
class BlockResult:
    """One block's per-replicate results, tagged with the cell and block it came from."""

    cell: int
    block: int
    start: int
    estimate: np.ndarray  # (E, B, V)
    se: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    n: np.ndarray  # (B,)
    cost: np.ndarray  # (B,)
    # fieldwork only (see fieldwork.py): counts per replicate and the full-response results
    attempted: np.ndarray | None = None  # (B,)
    eligible: np.ndarray | None = None  # (B,)
    full_estimate: np.ndarray | None = None  # (E, B, V)
    full_se: np.ndarray | None = None
    full_lower: np.ndarray | None = None
    full_upper: np.ndarray | None = None
    full_cost: np.ndarray | None = None  # (B,)
    adjustment_failed: np.ndarray | None = None  # (B,)


def replicate_columns(blocks, E: int, V: int) -> dict:
    """Extra replicate-table columns for one cell's sorted blocks (empty without fieldwork)."""
    if not blocks or getattr(blocks[0], "full_estimate", None) is None:
        return {}
    out = {}
    for k in REPLICATE_COLUMNS:
        if k in ("full_estimate", "full_se", "full_lower", "full_upper"):
            a = np.concatenate([getattr(r, k) for r in blocks], axis=1)  # (E, R, V)
            out[k] = a.transpose(0, 2, 1).reshape(-1)
        else:
            a = np.concatenate([getattr(r, k) for r in blocks])
            out[k] = np.tile(a, E * V)
    return out
