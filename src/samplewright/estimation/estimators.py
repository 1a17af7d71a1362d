"""Horvitz-Thompson and Hajek estimators of the population mean, with their design-based SEs.

Every estimator works on a :class:`~samplewright.designs.block.SampleBlock`, whatever design drew
it, and returns per-replicate estimates, standard errors and confidence intervals.  The
variance of the estimated total comes from the formula the design asks for
(``SampleBlock.variance``), handed in as ``variance`` by the registry
(:mod:`samplewright.estimation.registry`); the shared one is
:func:`samplewright.estimation.variance.stratified_psu_variance`.

Notes
-----
Horvitz-Thompson mean: t / N.  Hajek mean: t / N_hat, variance by linearisation with
z_hi = sum_k w_k (y_k - ybar) (Sarndal, Swensson & Wretman 1992, sec. 5.7).  Intervals: see
:mod:`samplewright.estimation.intervals`.
"""

from __future__ import annotations

import numpy as np

from samplewright.designs.block import SampleBlock
from samplewright.estimation.auxiliary import estimate
from samplewright.estimation.intervals import Estimates, finish
from samplewright.population.frame import COST, COUNT


def horvitz_thompson(block: SampleBlock, N: int, V: int, confidence: float, layout=None, *,
                     variance) -> Estimates:
    """Horvitz-Thompson estimate of the mean, t_HT / N, with its design-based SE.

    ``layout`` is the frame's :class:`~samplewright.population.layout.Layout`; when the frame has
    domains the domain means follow the targets (computed in :mod:`samplewright.estimation.auxiliary`).
    """
    if layout is not None and layout.D:
        return estimate("ht", block, N, confidence, layout, variance=variance)
    z = block.weighted(slice(0, V))
    t = z.sum(axis=1)
    var = variance(z, block)
    est, se = t / N, np.sqrt(np.maximum(var, 0.0)) / N
    return finish(est, se, block, confidence)


def hajek(block: SampleBlock, N: int, V: int, confidence: float, layout=None, *, variance) -> Estimates:
    """Hajek (ratio) estimate of the mean, t_HT / N_hat, with its linearised SE (domains as for HT)."""
    if layout is not None and layout.D:
        return estimate("hajek", block, N, confidence, layout, variance=variance)
    weighted = block.weighted()
    z, count = weighted[..., :V], weighted[..., COUNT]
    t, nhat = z.sum(axis=1), count.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):  # an empty sample (random-size designs): NaN
        est = t / nhat[:, None]
        lin = z - est[:, None, :] * count[..., None]
        var = variance(lin, block)
        se = np.sqrt(np.maximum(var, 0.0)) / nhat[:, None]
    return finish(est, se, block, confidence)


def sample_units(block: SampleBlock) -> np.ndarray:
    """Units measured per replicate, shape (B,)."""
    return _sampled_total(block, COUNT)


def sampled_unit_cost(block: SampleBlock) -> np.ndarray:
    """Sum of the frame's unit costs over the sampled units, shape (B,)."""
    return _sampled_total(block, COST)


def _sampled_total(block: SampleBlock, column: int) -> np.ndarray:
    """Unweighted sum of one value column over each replicate's sampled units, shape (B,)."""
    return block.column_total(column)
