"""Allocation of a total sample size to strata, and its rounding to whole units.

Pure functions of the stratum sizes N_h, standard deviations S_h and per-unit costs c_h.

Notes
-----
Cochran (1977), Sampling Techniques, ch. 5:
- proportional: n_h = n N_h / N (sec. 5.4);
- Neyman: n_h = n N_h S_h / sum(N_h S_h) (sec. 5.5, eq. 5.26);
- cost-optimal: n_h proportional to N_h S_h / sqrt(c_h) (sec. 5.5, eq. 5.24).
Equal allocation (n / H each) is common practice.
"""

from __future__ import annotations

import numpy as np

from samplewright.apportion import largest_remainder
from samplewright.errors import InputError

RULES = ("equal", "proportional", "neyman", "optimal")


def shares(rule: str, N_h, S_h=None, c_h=None, labels=None) -> np.ndarray:
    """Allocation shares (summing to 1) under ``rule``; ``labels`` name the strata in messages."""
    N_h = np.asarray(N_h, dtype=float)
    if rule == "equal":
        w = np.ones_like(N_h)
    elif rule == "proportional":
        w = N_h.copy()
    elif rule in ("neyman", "optimal"):
        if S_h is None:
            raise InputError(f"allocation {rule!r} needs stratum standard deviations")
        w = N_h * np.asarray(S_h, dtype=float)
        if rule == "optimal":
            c = np.ones_like(N_h) if c_h is None else np.asarray(c_h, dtype=float)
            if np.any(c <= 0):
                h = int(np.flatnonzero(c <= 0)[0])
                name = f"stratum {str(labels[h])!r}" if labels is not None else f"stratum {h + 1}"
                raise InputError(f"allocation 'optimal' needs a positive cost per unit in every stratum; "
                                 f"{name} has {c[h]:g}")
            w = w / np.sqrt(c)
        if w.sum() <= 0:  # every stratum constant: fall back to proportional
            w = N_h.copy()
    else:
        raise InputError(f"allocation {rule!r} is not known (use one of: {', '.join(RULES)})")
    return w / w.sum()


def real_allocation(n: float, w, N_h, minimum=None) -> np.ndarray:
    """Allocate ``n`` by shares ``w`` with caps ``N_h`` and floors ``minimum``, in real numbers.

    Strata whose share exceeds their size are set to N_h (and those below the floor to the
    floor) and the rest of n is re-spread over the others by their shares, until stable.
    """
    N_h = np.asarray(N_h, dtype=float)
    w = np.asarray(w, dtype=float)
    lo = np.zeros_like(N_h) if minimum is None else np.minimum(np.asarray(minimum, dtype=float), N_h)
    fixed = np.zeros(len(N_h), dtype=bool)
    alloc = np.zeros_like(N_h)
    for _ in range(len(N_h) + 1):
        free = ~fixed
        rest = n - alloc[fixed].sum()
        ws = w[free].sum()
        alloc[free] = rest * w[free] / ws if ws > 0 else rest / max(free.sum(), 1)
        over = free & (alloc > N_h)
        under = free & (alloc < lo)
        if not over.any() and not under.any():
            break
        alloc[over] = N_h[over]
        alloc[under] = lo[under]
        fixed |= over | under
    return alloc


def allocate(n: int, rule: str, N_h, S_h=None, c_h=None, minimum: int = 2, labels=None) -> np.ndarray:
    """Whole-number allocation of total ``n`` to strata.

    At least ``minimum`` units go to every stratum that has them (two, so a within-stratum
    variance can be estimated), no stratum gets more than N_h, and the total is n.

    Examples
    --------
    >>> allocate(10, "proportional", [50, 30, 20]).tolist()
    [5, 3, 2]
    """
    N_h = np.asarray(N_h, dtype=np.int64)
    if n > N_h.sum():
        raise InputError(f"a total of n = {n} is more than the {int(N_h.sum())} units in the strata")
    floor = np.minimum(np.full(len(N_h), minimum), N_h)
    if n < floor.sum():
        raise InputError(f"n = {n} cannot give every one of the {len(N_h)} strata {minimum} units "
                         f"(needs n >= {int(floor.sum())})")
    w = shares(rule, N_h, S_h, c_h, labels)
    real = real_allocation(n, w, N_h, floor)
    return largest_remainder(n, real, N_h, floor)
