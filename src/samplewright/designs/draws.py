"""Vectorised random selection primitives shared by every design.

All functions take a ``numpy.random.Generator`` and draw many samples at once; their cost
depends on the sample sizes, not on the population size (except where a high sampling
fraction makes a random-key sort over the population the cheaper route).
"""

from __future__ import annotations

import numpy as np

#: above this many random keys per call, the random-key method is done in row chunks
_KEY_BUDGET = 4_000_000


def distinct_positions(rng: np.random.Generator, M, k: int, lead: tuple[int, ...], narrow: bool = False) -> np.ndarray:
    """Draw ``k`` distinct positions from ``range(M)`` for every cell of ``lead``.

    ``M`` is a scalar or an integer array of shape ``lead`` (one population size per cell),
    with ``k <= M`` everywhere.  Returns an int64 array of shape ``lead + (k,)`` (with
    ``narrow``, int32 where every M is below 2^31: the same numbers, for a caller that widens
    them as it copies them); every k-subset is equally likely (simple random sampling without
    replacement).

    Notes
    -----
    For a low sampling fraction, positions are drawn with replacement and repeated ones are
    redrawn until all are distinct.  The procedure treats labels symmetrically, so the
    distribution of the resulting set is invariant under permutations of ``range(M)`` and
    therefore uniform over k-subsets.  For a high fraction the first k of a random-key sort
    are taken instead (the same distribution, faster when repeats would be common).
    """
    M = np.asarray(M, dtype=np.int64)
    lead = tuple(int(x) for x in lead)
    if k == 0:
        return np.zeros(lead + (0,), dtype=np.int64)
    mmax = int(M.max()) if M.size else 0
    mmin = int(M.min()) if M.size else 0
    if k > mmin:
        raise ValueError(f"cannot draw {k} distinct units from a group of {mmin}")
    if k * 4 > mmin:
        return _by_keys(rng, M, k, lead, mmax)
    # positions fit 32 bits on any list under 2^31 units: half the memory to sort and compare
    dtype = np.int32 if mmax < 2**31 else np.int64
    Mb = np.broadcast_to(M, lead)[..., None]
    pos = _scaled_floor(rng.random(lead + (k,)), Mb, dtype)
    pos.sort(axis=-1)
    flat = pos.reshape(-1, k)  # a view: rows are the cells of lead
    Mflat = np.broadcast_to(M, lead).reshape(-1)  # M of each row
    rows, sub = None, flat  # rows still to check (None: all) and their positions; a row without repeats is final
    while True:  # redraw repeats in row order, then re-sort and re-check only the rows that had them
        same = sub[:, 1:] == sub[:, :-1]
        bad = same.any(axis=1)
        if not bad.any():
            return pos if narrow else pos.astype(np.int64, copy=False)
        rows = np.flatnonzero(bad) if rows is None else rows[bad]
        sub = sub[bad]
        dup = np.zeros(sub.shape, dtype=bool)
        dup[:, 1:] = same[bad]
        at = np.nonzero(dup)[0]  # the row (of sub) of each repeat, in row order
        sub[dup] = _scaled_floor(rng.random(at.size), Mflat[rows[at]], dtype)
        sub.sort(axis=-1)
        flat[rows] = sub


def _scaled_floor(u: np.ndarray, M, dtype) -> np.ndarray:
    """``floor(u * M)`` as integers of ``dtype``, computed in ``u`` (uniforms on [0, 1), so the product is
    not negative and truncation is the floor; the same numbers as ``np.floor(u * M).astype(int)``)."""
    u *= M
    return u.astype(dtype)


def _by_keys(rng, M, k, lead, mmax):
    rows = int(np.prod(lead)) if lead else 1
    Mflat = np.broadcast_to(M, lead).reshape(rows)
    out = np.empty((rows, k), dtype=np.int64)
    step = max(1, _KEY_BUDGET // max(mmax, 1))
    ar = np.arange(mmax)
    for s in range(0, rows, step):
        e = min(rows, s + step)
        keys = rng.random((e - s, mmax))
        keys[ar[None, :] >= Mflat[s:e, None]] = 2.0  # never chosen
        out[s:e] = np.argpartition(keys, k - 1, axis=1)[:, :k] if k < mmax else np.argsort(keys, axis=1)[:, :k]
    return out.reshape(lead + (k,))


def with_replacement(rng: np.random.Generator, M, k: int, lead: tuple[int, ...]) -> np.ndarray:
    """Draw ``k`` positions from ``range(M)`` with replacement for every cell of ``lead``."""
    Mb = np.broadcast_to(np.asarray(M, dtype=np.int64), lead)[..., None]
    return _scaled_floor(rng.random(lead + (k,)), Mb, np.int64)
