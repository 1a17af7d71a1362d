"""Frame diagnostics: intra-cluster correlation, stratum summaries, list-order structure."""

from __future__ import annotations

import numpy as np


def anova_icc(y, cluster) -> float:
    """ANOVA estimator of the intra-cluster correlation for clusters of unequal size.

    Notes
    -----
    rho = (MSB - MSW) / (MSB + (m0 - 1) MSW), with MSB and MSW the between- and within-
    cluster mean squares and m0 = (N - sum M_i^2 / N) / (C - 1) the adjusted mean cluster
    size (Donner 1986, Int. Stat. Review 54:67-82; for equal sizes m0 = M and this is the
    ANOVA form of Kish's roh, Kish 1965, sec. 5.6).
    """
    y = np.asarray(y, dtype=float)
    codes = np.unique(np.asarray(cluster), return_inverse=True)[1]
    C, N = int(codes.max()) + 1, len(y)
    M = np.bincount(codes, minlength=C).astype(float)
    means = np.bincount(codes, weights=y, minlength=C) / M
    grand = y.mean()
    msb = float(np.sum(M * (means - grand) ** 2) / (C - 1))
    msw = float(np.sum((y - means[codes]) ** 2) / (N - C))
    m0 = (N - np.sum(M**2) / N) / (C - 1)
    denom = msb + (m0 - 1.0) * msw
    return (msb - msw) / denom if denom > 0 else 0.0
