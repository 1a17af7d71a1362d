"""Stratum boundaries on a numeric auxiliary: the rules, and the strata a list of boundaries makes.

Pure functions of arrays.  A list of H - 1 increasing boundaries b_1 < ... < b_{H-1} cuts the
auxiliary x into H strata: stratum h holds the units with b_h < x <= b_{h+1} (b_0 = -inf,
b_H = +inf), so a unit equal to a boundary belongs to the stratum below it.

Notes
-----
- Cumulative square root of the frequency (Dalenius and Hodges 1959): cut x into J equal-width
  classes with frequencies f_j, cumulate sqrt(f_j) and place the boundaries at the class edges
  where the cumulated total is nearest to k T / H (T the grand total, k = 1..H-1).
- Geometric (Gunning and Horgan 2004): b_h = a r^h with a = min x, b = max x and r = (b/a)^(1/H),
  h = 1..H-1 (x must be positive).

The take-all top stratum for a target CV (after Lavallee and Hidiroglou 1988) needs the
planning formulas, so it lives in ``decision/take_all.py``.
"""

from __future__ import annotations

import numpy as np

from samplewright.errors import InputError


def stratum_codes(x, boundaries) -> np.ndarray:
    """The stratum (0..H-1) of each value of ``x`` for increasing ``boundaries`` (H - 1 of them).

    Examples
    --------
    >>> stratum_codes([1.0, 2.0, 3.0, 10.0], [2.0, 5.0]).tolist()
    [0, 0, 1, 2]
    """
    return np.searchsorted(np.asarray(boundaries, dtype=float), np.asarray(x, dtype=float),
                           side="left").astype(np.int64)


#: bounds on the default number of classes of the cumulative sqrt(f) rule (common practice)
MIN_CLASSES_PER_STRATUM = 10
MAX_CLASSES = 100_000


def default_classes(x, H: int) -> int:
    """The Freedman-Diaconis number of equal-width classes, range / (2 IQR N^(-1/3)) (Freedman and
    Diaconis 1981), kept between 10 H and 100,000: fine enough to resolve the bulk of a skewed column
    whose range a few very large units stretch."""
    x = np.asarray(x, dtype=float)
    q1, q3 = np.percentile(x, [25, 75])
    width = 2.0 * (q3 - q1) * x.size ** (-1.0 / 3.0)
    span = float(x.max() - x.min())
    J = int(np.ceil(span / width)) if width > 0 else 0
    return int(min(max(J, MIN_CLASSES_PER_STRATUM * H), MAX_CLASSES))


def cum_sqrt_f(x, H: int, classes: int | None = None) -> np.ndarray:
    """Dalenius-Hodges boundaries: H - 1 class edges cutting cumulative sqrt(frequency) into H equal parts.

    ``classes`` (J, the number of equal-width classes) defaults to :func:`default_classes`.  Edges
    that coincide (a class holding more than a stratum's share) are given once, so fewer than H - 1
    may come back.

    Examples
    --------
    >>> cum_sqrt_f(np.arange(1000.0), 4, classes=100).tolist()
    [249.75, 499.5, 749.25]
    """
    x = np.asarray(x, dtype=float)
    H = strata_count(H)
    lo, hi = float(x.min()), float(x.max())
    if not hi > lo:
        raise InputError("boundaries: the stratifying column holds one value only, so it cannot be cut into strata")
    J = int(classes) if classes is not None else default_classes(x, H)
    freq, edges = np.histogram(x, bins=J, range=(lo, hi))
    cum = np.cumsum(np.sqrt(freq))
    targets = cum[-1] * np.arange(1, H) / H
    # the class edge (upper edge of class j) whose cumulated total is nearest each target
    at = np.abs(cum[None, :-1] - targets[:, None]).argmin(axis=1)
    return np.unique(edges[at + 1])


def geometric(x, H: int) -> np.ndarray:
    """Gunning-Horgan boundaries a r^h, h = 1..H-1, r = (b / a)^(1/H), a = min x > 0, b = max x.

    Examples
    --------
    >>> geometric([1.0, 5.0, 1000.0], 3).round(6).tolist()
    [10.0, 100.0]
    """
    x = np.asarray(x, dtype=float)
    H = strata_count(H)
    a, b = float(x.min()), float(x.max())
    if not a > 0:
        raise InputError(f"boundaries: geometric boundaries need a stratifying column above 0 (its least "
                         f"value is {a:g})")
    if not b > a:
        raise InputError("boundaries: the stratifying column holds one value only, so it cannot be cut into strata")
    r = (b / a) ** (1.0 / H)
    return a * r ** np.arange(1, H)


def tidy(x, boundaries) -> list[float]:
    """Each boundary rounded to the fewest significant digits that keep the strata it cuts ``x`` into
    (it stays at or above the largest value below it and under the smallest value above it), so a
    proposal reads 10.5 where the rule gave 10.502518287834162.

    Examples
    --------
    >>> tidy([1.0, 2.0, 3.0, 10.0], [2.718281828, 7.389056099])
    [2.7, 7.0]
    """
    x = np.sort(np.asarray(x, dtype=float))
    out = []
    for b in np.asarray(boundaries, dtype=float):
        i = int(np.searchsorted(x, b, side="right"))  # x[:i] <= b < x[i:]
        lo = x[i - 1] if i > 0 else -np.inf
        hi = x[i] if i < x.size else np.inf
        for digits in range(1, 18):
            v = float(f"{b:.{digits}g}")
            if lo <= v < hi:
                break
        out.append(v)
    return out


def strata_count(H, least: int = 1) -> int:
    if isinstance(H, bool) or not isinstance(H, (int, np.integer)) or H < least:
        raise InputError(f"boundaries: the number of strata must be a whole number of at least {least}, got {H!r}")
    return int(H)
