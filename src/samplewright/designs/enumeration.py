"""Every possible sample of a design, in chunks: the building blocks of exact mode.

Pure generators of index arrays; the designs (and ``exact``) turn them into sample blocks.
"""

from __future__ import annotations

from itertools import combinations, islice

import numpy as np


def combination_chunks(N: int, n: int, chunk: int = 20_000):
    """Every n-subset of range(N), lexicographic, as (rows, n) int arrays of up to ``chunk`` rows.

    Examples
    --------
    >>> [c.tolist() for c in combination_chunks(4, 2, chunk=4)]
    [[[0, 1], [0, 2], [0, 3], [1, 2]], [[1, 3], [2, 3]]]
    """
    if n == 0:
        yield np.zeros((1, 0), dtype=np.int64)
        return
    it = combinations(range(N), n)
    while True:
        flat = np.fromiter((i for c in islice(it, chunk) for i in c), dtype=np.int64)
        if flat.size == 0:
            return
        yield flat.reshape(-1, n)
        if flat.size < chunk * n:
            return


def all_combinations(N: int, n: int) -> np.ndarray:
    """Every n-subset of range(N) as one (C(N, n), n) array."""
    parts = list(combination_chunks(N, n, 100_000))
    return np.concatenate(parts) if parts else np.zeros((0, n), dtype=np.int64)


def product_chunks(sizes, chunk: int = 20_000):
    """Every index tuple of a Cartesian product with factor ``sizes``, as (rows, len(sizes)) arrays.

    The last factor varies fastest (mixed-radix counting).

    Examples
    --------
    >>> next(product_chunks([2, 3])).tolist()
    [[0, 0], [0, 1], [0, 2], [1, 0], [1, 1], [1, 2]]
    """
    sizes = [int(s) for s in sizes]
    total = int(np.prod(sizes, dtype=object)) if sizes else 1
    for a in range(0, total, chunk):
        code = np.arange(a, min(total, a + chunk), dtype=np.int64)
        digits = np.empty((code.size, len(sizes)), dtype=np.int64)
        for j in range(len(sizes) - 1, -1, -1):
            digits[:, j] = code % sizes[j]
            code = code // sizes[j]
        yield digits


def subset_positions(subsets, takes, digits: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """Positions within m clusters of one second-stage subset each, padded to ``k``.

    ``subsets[j]`` holds every ``takes[j]``-subset of cluster j (from :func:`all_combinations`) and
    ``digits`` (R, m) picks one per cluster (from :func:`product_chunks`); returns the positions
    (R, m, k) and the mask of the real ones.
    """
    R, m = len(digits), len(subsets)
    pos = np.zeros((R, m, k), dtype=np.int64)
    valid = np.zeros((R, m, k), dtype=bool)
    for j in range(m):
        t = int(takes[j])
        pos[:, j, :t] = subsets[j][digits[:, j]]
        valid[:, j, :t] = True
    return pos, valid


def elementary_symmetric(a, m: int) -> int:
    """Elementary symmetric polynomial e_m(a) of whole numbers, exactly (Python integers).

    The number of two-stage samples: choosing m clusters, each with a_c second-stage
    samples, gives e_m(a) samples in all.

    Examples
    --------
    >>> elementary_symmetric([1, 2, 3], 2)
    11
    """
    e = [1] + [0] * m
    for x in a:
        for j in range(m, 0, -1):
            e[j] += e[j - 1] * int(x)
    return e[m]
