"""Variance estimators for size-proportional designs (named in :mod:`samplewright.estimation.registry`).

Each routine takes the PSU values ``z`` (B, m, V) -- already expanded, z_i = y_i / pi_i,
or their linearised form for the Hajek mean -- and the block, and returns the estimated
variance of the total, (B, V).  The pi-ps routines act on design stratum 0 (the units
drawn by size); other strata hold certainty units, which have no sampling variance.
pi_i of a sampled unit is the inverse of its weight.

Notes
-----
With n sampled units in stratum 0 and t = sum z_i:

- ``hansen_hurwitz``: v = n / (n - 1) sum (z_i - t / n)^2, the with-replacement
  estimator applied to a without-replacement sample (conservative when the sampling
  fraction is large; Sarndal, Swensson & Wretman 1992, sec. 4.4 -- this is the shared
  ``stratified_psu_variance`` with no finite population correction).
- ``hartley_rao``: v = 1 / (n - 1) sum_{i<j} (1 - pi_i - pi_j + sum_{k in U} pi_k^2 / n)
  (z_i - z_j)^2 (Hartley & Rao 1962, Ann. Math. Statist. 33:350-374; form from memory).
  It reduces to the exact SRS estimator N^2 (1 - f) s^2 / n when pi_i = n / N.
- ``brewer``: v = n / (n - 1) sum (1 - pi_i) (z_i - t / n)^2, Brewer's approximation with
  c_i = (n - 1) / (n - pi_i) (Brewer 2002, Combined Survey Sampling Inference, ch. 9; from
  memory); also exact for SRS.
- ``sen_yates_grundy``: v = sum_{i<j} (pi_i pi_j - pi_ij) / pi_ij (z_i - z_j)^2 with exact
  joint probabilities (Sen 1953; Yates & Grundy 1953), unbiased for fixed-size designs
  with all pi_ij > 0.
- ``poisson``: v = sum (1 - pi_i) z_i^2 over the sample, the Horvitz-Thompson variance
  estimator under Poisson sampling (pi_ij = pi_i pi_j; SSW 1992, eq. 3.5.x).

The O(n^2) pair sums are computed in O(n) from
sum_{i<j} (a_i + a_j)(z_i - z_j)^2 = sum_i a_i (n z_i^2 - 2 z_i t + Q), Q = sum z_i^2.
"""

from __future__ import annotations

import numpy as np

from samplewright.designs.block import SampleBlock


def _stratum0(z: np.ndarray, block: SampleBlock):
    """z, pi and a (B, m) real-position mask restricted to design stratum 0."""
    sel = block.psu_stratum == 0
    z0 = z[:, sel, :]
    w = np.broadcast_to(block.weight, block.sums.shape[:2])[:, sel]
    pi = 1.0 / w
    real = np.ones(w.shape, dtype=bool) if block.mask is None else block.mask[:, sel]
    z0 = np.where(real[..., None], z0, 0.0)
    return z0, np.where(real, pi, 0.0), real


def hartley_rao(z: np.ndarray, block: SampleBlock) -> np.ndarray:
    """Hartley-Rao approximate variance of the total; see module notes."""
    z0, pi, real = _stratum0(z, block)
    n = real.sum(axis=1).astype(float)[:, None]  # (B, 1)
    c = 1.0 + block.design_info["sum_pi2"] / np.maximum(n, 1.0)  # n = 0: every unit a certainty unit
    t = z0.sum(axis=1)
    Q = (z0 * z0).sum(axis=1)
    pair_c = n * Q - t * t  # sum_{i<j} (z_i - z_j)^2
    pair_pi = (pi[..., None] * (n[..., None] * z0 * z0 - 2.0 * z0 * t[:, None, :] + Q[:, None, :])).sum(axis=1)
    v = (c * pair_c - pair_pi) / np.maximum(n - 1.0, 1.0)
    return np.where(n > 1, v, 0.0)


def brewer(z: np.ndarray, block: SampleBlock) -> np.ndarray:
    """Brewer's approximate variance of the total; see module notes."""
    z0, pi, real = _stratum0(z, block)
    n = real.sum(axis=1).astype(float)[:, None]
    t = z0.sum(axis=1)
    dev = np.where(real[..., None], z0 - t[:, None, :] / np.maximum(n, 1.0)[..., None], 0.0)
    v = n / np.maximum(n - 1.0, 1.0) * ((1.0 - pi)[..., None] * dev * dev).sum(axis=1)
    return np.where(n > 1, v, 0.0)


def sen_yates_grundy(z: np.ndarray, block: SampleBlock) -> np.ndarray:
    """Sen-Yates-Grundy variance of the total with exact pi_ij; see module notes."""
    sel = block.psu_stratum == 0
    z0 = z[:, sel, :]
    idx = block.design_info["free_index"][block.units[:, sel]]  # (B, n)
    pij = block.design_info["pij"]
    pi = np.diagonal(pij)[idx]
    joint = pij[idx[:, :, None], idx[:, None, :]]  # (B, n, n)
    n = idx.shape[1]
    off = ~np.eye(n, dtype=bool)
    a = np.where(off, (pi[:, :, None] * pi[:, None, :] - joint) / np.where(off, joint, 1.0), 0.0)
    d = z0[:, :, None, :] - z0[:, None, :, :]
    return 0.5 * np.einsum("bij,bijv->bv", a, d * d)


def poisson(z: np.ndarray, block: SampleBlock) -> np.ndarray:
    """Horvitz-Thompson variance of the total under Poisson sampling; see module notes."""
    w = np.broadcast_to(block.weight, block.sums.shape[:2])
    zz = z * z
    if block.mask is not None:
        zz = np.where(block.mask[..., None], zz, 0.0)
    return ((1.0 - 1.0 / w)[..., None] * zz).sum(axis=1)
