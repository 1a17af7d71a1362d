"""Estimators of the population mean and their design-based variance estimators.

Every estimator works on a :class:`~samplewright.designs.block.SampleBlock`, whatever design drew
it, and returns per-replicate estimates, standard errors and confidence intervals.

Notes
-----
Variance of an estimated total from PSU totals z_hi within strata (the with-replacement or
"ultimate cluster" form with first-stage finite population correction):

    v(t) = sum_h (1 - f_h) n_h / (n_h - 1) sum_i (z_hi - zbar_h)^2

It is exact (unbiased) for SRS without replacement, stratified SRS and one-stage cluster
sampling of whole clusters (Cochran 1977, eqs. 2.10, 5.7 and 9.x), and the standard
approximation for systematic samples (Wolter, Introduction to Variance Estimation, ch. 2).
Two-stage cluster samples add a within-cluster term (``two_stage_variance``).  Horvitz-Thompson mean: t / N.  Hajek mean: t / N_hat, variance by
linearisation with z_hi = sum_k w_k (y_k - ybar) (Sarndal, Swensson & Wretman 1992, sec. 5.7).
Intervals: estimate +- t_{df} * SE with df = PSUs - strata (common practice for design-based
intervals; Korn & Graubard use the same count).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from samplewright.designs.block import SampleBlock
from samplewright.population.frame import COST, COUNT


@dataclass
class Estimates:
    """Per-replicate results for one estimator, arrays of shape (B, V) (df: (B,))."""

    estimate: np.ndarray
    se: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    df: np.ndarray


def _onehot(codes: np.ndarray, H: int) -> np.ndarray:
    oh = np.zeros((codes.shape[0], H))
    oh[np.arange(codes.shape[0]), codes] = 1.0
    return oh


def psu_counts(block: SampleBlock) -> np.ndarray:
    """Number of PSUs per stratum per replicate, shape (B, H)."""
    if block.mask is None:
        counts = np.bincount(block.psu_stratum, minlength=block.H).astype(float)
        return np.broadcast_to(counts, (block.B, block.H))
    return block.mask.astype(float) @ _onehot(block.psu_stratum, block.H)


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
    return np.einsum("bmv,mh->bhv", x, _onehot(psu_stratum, H))


def stratified_psu_variance(z: np.ndarray, block: SampleBlock) -> np.ndarray:
    """Variance of the estimated total from PSU totals ``z`` (B, m, V): see module notes.

    Strata with fewer than two PSUs in a replicate add nothing (no within-stratum variance
    can be estimated from one PSU); designs keep at least two per stratum where they can.
    """
    H = block.H
    n_h = psu_counts(block)  # (B, H)
    sum_h = _by_stratum(z, block.psu_stratum, H)
    mean_h = sum_h / np.maximum(n_h, 1)[..., None]
    dev = z - (mean_h if H == 1 else mean_h[:, block.psu_stratum, :])
    if block.mask is not None:
        dev = np.where(block.mask[..., None], dev, 0.0)
    if H == 1:  # sum of squares without a (B, m, V) temporary
        ss_h = np.einsum("bmv,bmv->bv", dev, dev)[:, None, :]
    else:
        ss_h = _by_stratum(dev * dev, block.psu_stratum, H)
    factor = np.where(n_h > 1, n_h / np.maximum(n_h - 1, 1), 0.0) * block.fpc  # (B, H)
    return np.einsum("bhv,bh->bv", ss_h, factor)


#: variance estimators a design may name in ``SampleBlock.variance``
VARIANCE = {"psu": stratified_psu_variance}

# size-proportional and random-size designs (see pps_variance)
from samplewright.estimation import pps_variance as _ppsv

VARIANCE.update({
    "hansen_hurwitz": stratified_psu_variance,  # with fpc 1 in the sampled stratum: the HH form
    "hartley_rao": _ppsv.hartley_rao,
    "brewer": _ppsv.brewer,
    "sen_yates_grundy": _ppsv.sen_yates_grundy,
    "poisson": _ppsv.poisson,
})

# systematic samples (see systematic_variance): "srs" is the shared routine, units as PSUs
from samplewright.estimation import systematic_variance as _sysv

VARIANCE.update({
    "srs": stratified_psu_variance,
    "successive_differences": _sysv.successive_difference_variance,
    "between_starts": _sysv.between_start_variance,
})

# two-stage cluster samples (see two_stage_variance): the design sets each cluster's
# within-cluster factor for the option asked for, so both names share one routine
from samplewright.estimation import two_stage_variance as _tsv2

VARIANCE.update({
    "two_stage": _tsv2.two_stage_variance,
    "ultimate_cluster": _tsv2.two_stage_variance,
})


def degrees_of_freedom(block: SampleBlock) -> np.ndarray:
    """PSUs minus strata with at least one PSU, per replicate (at least 1); two-stage blocks
    count clusters (and units in take-all strata), see ``two_stage_variance``."""
    if block.psu is not None:
        return np.maximum(_tsv2.degrees_of_freedom(block), 1.0)
    n_h = psu_counts(block)
    return np.maximum(n_h.sum(axis=1) - (n_h > 0).sum(axis=1), 1.0)


def _interval(est, se, df, confidence):
    # df is the same for most replicates of a block: one quantile per distinct value
    uniq, where = np.unique(df, return_inverse=True)
    q = stats.t.ppf(0.5 + confidence / 2.0, uniq)[where.reshape(-1)][:, None]
    return est - q * se, est + q * se


def horvitz_thompson(block: SampleBlock, N: int, V: int, confidence: float, ctx=None) -> Estimates:
    """Horvitz-Thompson estimate of the mean, t_HT / N, with its design-based SE.

    ``ctx`` is the frame's :class:`~samplewright.population.layout.Layout`; when the frame has domains
    the domain means follow the targets (computed in :mod:`samplewright.estimation.auxiliary`).
    """
    if ctx is not None and ctx.D:
        from samplewright.estimation.auxiliary import estimate

        return estimate("ht", block, N, confidence, ctx)
    z = block.weighted(slice(0, V))
    t = z.sum(axis=1)
    var = VARIANCE[block.variance](z, block)
    est, se = t / N, np.sqrt(np.maximum(var, 0.0)) / N
    df = degrees_of_freedom(block)
    lo, hi = _interval(est, se, df, confidence)
    return Estimates(est, se, lo, hi, df)


def hajek(block: SampleBlock, N: int, V: int, confidence: float, ctx=None) -> Estimates:
    """Hajek (ratio) estimate of the mean, t_HT / N_hat, with its linearised SE (domains as for HT)."""
    if ctx is not None and ctx.D:
        from samplewright.estimation.auxiliary import estimate

        return estimate("hajek", block, N, confidence, ctx)
    zall = block.weighted()
    z, zc = zall[..., :V], zall[..., COUNT]
    t, nhat = z.sum(axis=1), zc.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):  # an empty sample (random-size designs): NaN
        est = t / nhat[:, None]
        lin = z - est[:, None, :] * zc[..., None]
        var = VARIANCE[block.variance](lin, block)
        se = np.sqrt(np.maximum(var, 0.0)) / nhat[:, None]
    df = degrees_of_freedom(block)
    lo, hi = _interval(est, se, df, confidence)
    return Estimates(est, se, lo, hi, df)


#: estimator name (as written in a scenario) -> function(block, N, V, confidence, ctx=None);
#: ctx is the frame's Layout (known totals, domains), passed by the engine
ESTIMATORS = {"ht": horvitz_thompson, "hajek": hajek}


def sample_units(block: SampleBlock) -> np.ndarray:
    """Units measured per replicate, shape (B,)."""
    c = block.sums[..., COUNT]
    if block.mask is not None:
        c = np.where(block.mask, c, 0.0)
    return c.sum(axis=1)


def sampled_unit_cost(block: SampleBlock) -> np.ndarray:
    """Sum of the frame's unit costs over the sampled units, shape (B,)."""
    c = block.sums[..., COST]
    if block.mask is not None:
        c = np.where(block.mask, c, 0.0)
    return c.sum(axis=1)


# ratio, GREG and post-stratified estimators register themselves (see auxiliary)
from samplewright.estimation import auxiliary as _auxiliary
