"""Largest-remainder apportionment: real shares of a whole number rounded to whole numbers that add up to it.

Used by the designs (sample sizes per stratum, clusters per stratum) and the synthetic frames
(units per stratum); it sits below every layer.
"""

from __future__ import annotations

import numpy as np


def largest_remainder(n: int, real, N_h, minimum=None) -> np.ndarray:
    """Whole numbers summing to n, never above the caps ``N_h`` nor below ``minimum``, from ``real`` shares of n.

    Largest-remainder rounding (Hamilton's method) on the capped real allocation.

    Examples
    --------
    >>> largest_remainder(10, [3.4, 3.3, 3.3], [10, 10, 10]).tolist()
    [4, 3, 3]
    """
    N_h = np.asarray(N_h, dtype=np.int64)
    lo = np.zeros_like(N_h) if minimum is None else np.minimum(np.asarray(minimum, dtype=np.int64), N_h)
    real = np.clip(np.asarray(real, dtype=float), lo, N_h)
    base = np.clip(np.floor(real).astype(np.int64), lo, N_h)
    short = int(n - base.sum())
    frac = real - base
    while short != 0:
        if short > 0:
            room = base < N_h
            cand = np.where(room, frac, -np.inf)
            i = int(np.argmax(cand))
            if not np.isfinite(cand[i]):
                break
            base[i] += 1
            frac[i] -= 1.0
            short -= 1
        else:
            room = base > lo
            cand = np.where(room, frac, np.inf)
            i = int(np.argmin(cand))
            if not np.isfinite(cand[i]):
                break
            base[i] -= 1
            frac[i] += 1.0
            short += 1
    return base
