"""Anticipated variances of the Horvitz-Thompson mean: closed forms computed on the frame.

``anticipated_variance(design, frame, y)`` is the design variance of the estimated mean of ``y``
(the study variable, known in a rehearsal, or an auxiliary standing in for it) under ``design``
at its one size, from the population values alone, with no draw.

Notes
-----
- SRS without replacement: (1 - n/N) S^2 / n (Cochran 1977, eq. 2.8).
- Stratified SRS (the design's own allocation n_h): sum_h W_h^2 S_h^2 (1 - n_h/N_h) / n_h
  (Cochran 1977, eq. 5.6), through ``planning.stratum_variance``.
- Cluster sampling, a clusters of C by SRS, all units or an SRS of m_i = min(M_i, m) in each:
  V(Y_hat) = C^2 (1 - a/C) S_t^2 / a + (C / a) sum_i M_i^2 (1 - m_i/M_i) S_2i^2 / m_i, with S_t^2 the
  variance of the cluster totals and S_2i^2 the variance within cluster i (Cochran 1977, eq. 11.25 for
  unequal clusters, from memory; Sarndal, Swensson and Wretman 1992, Result 4.3.1); the mean's variance
  is V(Y_hat) / N^2.
- pps with replacement (Hansen-Hurwitz): V(Y_hat) = (1/n) sum_i p_i (y_i / p_i - Y)^2 (Cochran 1977,
  eq. 9A.5), p_i = x_i / X.

All four are exact for the HT estimator of these designs (the Monte Carlo check in the tests holds
them to the rehearsal within a z-bound).
"""

from __future__ import annotations

import numpy as np

from samplewright.decision.planning import stratum_variance
from samplewright.population.frame import srs_variance_of_mean

#: the design methods with a closed form here
METHODS = ("srs", "stratified", "cluster", "pps")


def group_variance(y: np.ndarray, codes: np.ndarray, k: int) -> np.ndarray:
    """Variance (divisor size - 1; 0 for a group of one) of ``y`` within each of ``k`` groups."""
    n = np.bincount(codes, minlength=k).astype(float)
    s = np.bincount(codes, weights=y, minlength=k)
    ss = np.bincount(codes, weights=y * y, minlength=k)
    m = s / np.maximum(n, 1)
    return np.where(n > 1, np.maximum(ss - n * m * m, 0.0) / np.maximum(n - 1, 1), 0.0)


def anticipated_variance(design, frame, y) -> float:
    """Design variance of the HT mean of ``y`` (N,) under ``design`` (one size); see the module notes."""
    y = np.asarray(y, dtype=float)
    N = y.size
    method = design.method
    if method == "srs":
        return float(srs_variance_of_mean(float(design.n), N, y.var(ddof=1)))
    if method == "stratified":
        cut = design.strata_frame(frame)
        S_h = np.sqrt(group_variance(y, cut.stratum, cut.H))
        return stratum_variance(design.n_h(frame), cut.N_h, S_h)
    if method == "cluster":
        a, C = int(design.clusters), frame.C
        M = frame.cluster_sizes.astype(float)
        totals = np.bincount(frame.cluster, weights=y, minlength=C)
        v = C * C * (1.0 - a / C) * totals.var(ddof=1) / a
        k = design.take(frame)
        if k is not None:
            m = np.minimum(M, k)
            v += C / a * float(np.sum(M * M * (1.0 - m / M) * group_variance(y, frame.cluster, C) / m))
        return float(v) / N**2
    if method == "pps":
        p = frame.size / frame.size.sum()
        return float(np.sum(p * (y / p - y.sum()) ** 2)) / int(design.n) / N**2
    raise ValueError(f"no anticipated variance for method {method!r}")
