"""The one between-PSU variance routine: PSU totals within strata, first-stage correction.

Variance of an estimated total from PSU totals z_hi within strata (the with-replacement or
"ultimate cluster" form with first-stage finite population correction):

    v(t) = sum_h (1 - f_h) n_h / (n_h - 1) sum_i (z_hi - zbar_h)^2

It is exact (unbiased) for SRS without replacement, stratified SRS and one-stage cluster
sampling of whole clusters (Cochran 1977, eqs. 2.10, 5.7 and 9.x), and the standard
approximation for systematic samples (Wolter, Introduction to Variance Estimation, ch. 2).
The other variance formulas (size-proportional, systematic, two-stage) build on it; the
registry (:mod:`samplewright.estimation.registry`) names them all.
"""

from __future__ import annotations

import numpy as np

from samplewright.designs.block import SampleBlock
from samplewright.population.layout import indicators


def psu_counts(block: SampleBlock) -> np.ndarray:
    """Number of PSUs per stratum per replicate, shape (B, H)."""
    if block.mask is None:
        counts = np.bincount(block.psu_stratum, minlength=block.H).astype(float)
        return np.broadcast_to(counts, (block.B, block.H))
    return block.mask.astype(float) @ indicators(block.psu_stratum, block.H)


def _by_stratum(x: np.ndarray, psu_stratum: np.ndarray, H: int) -> np.ndarray:
    """Sums of ``x`` (B, m, V) over the PSU positions of each stratum, shape (B, H, V).

    One reduction when there is one stratum, segment sums when the positions are grouped by
    stratum (as the designs lay them out), a one-hot product otherwise: the same sums.
    """
    if H == 1:
        return x.sum(axis=1, keepdims=True)
    m = psu_stratum.shape[0]
    if m and np.all(psu_stratum[1:] >= psu_stratum[:-1]):
        present, starts = np.unique(psu_stratum, return_index=True)
        out = np.zeros((x.shape[0], H, x.shape[2]))
        out[:, present, :] = np.add.reduceat(x, starts, axis=1)
        return out
    return np.einsum("bmv,mh->bhv", x, indicators(psu_stratum, H))


def _per_psu(x: np.ndarray, psu_stratum: np.ndarray) -> np.ndarray:
    """``x[:, psu_stratum, :]`` for per-stratum values ``x`` (B, H, V): a run-length repeat when the positions
    are grouped by stratum (as the designs lay them out), an index otherwise; the same numbers."""
    m = psu_stratum.shape[0]
    if m and np.all(psu_stratum[1:] >= psu_stratum[:-1]):
        return np.repeat(x, np.bincount(psu_stratum, minlength=x.shape[1]), axis=1)
    return x[:, psu_stratum, :]


def stratified_psu_variance(z: np.ndarray, block: SampleBlock) -> np.ndarray:
    """Variance of the estimated total from PSU totals ``z`` (B, m, V): see module notes.

    Strata with fewer than two PSUs in a replicate add nothing (no within-stratum variance
    can be estimated from one PSU); designs keep at least two per stratum where they can.
    """
    H = block.H
    n_h = psu_counts(block)  # (B, H)
    sum_h = _by_stratum(z, block.psu_stratum, H)
    mean_h = sum_h / np.maximum(n_h, 1)[..., None]
    if H == 1:
        dev = z - mean_h
    else:  # each PSU's stratum mean, then the deviation written over it (one (B, m, V) array)
        dev = _per_psu(mean_h, block.psu_stratum)
        np.subtract(z, dev, out=dev)
    if block.mask is not None:
        dev = np.where(block.mask[..., None], dev, 0.0)
    if H == 1:  # sum of squares without a (B, m, V) temporary
        ss_h = np.einsum("bmv,bmv->bv", dev, dev)[:, None, :]
    else:
        ss_h = _by_stratum(np.multiply(dev, dev, out=dev), block.psu_stratum, H)
    factor = np.where(n_h > 1, n_h / np.maximum(n_h - 1, 1), 0.0) * block.fpc  # (B, H)
    return np.einsum("bhv,bh->bv", ss_h, factor)
