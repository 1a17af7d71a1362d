"""What every estimator returns: estimates, standard errors and t intervals, with their degrees of freedom.

Intervals: estimate +- t_{df} * SE with df = PSUs - strata (common practice for design-based
intervals; Korn & Graubard use the same count); two-stage blocks count clusters, and units in
take-all strata (:func:`samplewright.estimation.two_stage_variance.degrees_of_freedom`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import stdtrit

from samplewright.designs.block import SampleBlock
from samplewright.estimation import two_stage_variance
from samplewright.estimation.variance import psu_counts


@dataclass
class Estimates:
    """Per-replicate results for one estimator, arrays of shape (B, V) (df: (B,))."""

    estimate: np.ndarray
    se: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    df: np.ndarray


def degrees_of_freedom(block: SampleBlock) -> np.ndarray:
    """PSUs minus strata with at least one PSU, per replicate (at least 1); two-stage blocks
    count clusters (and units in take-all strata), see ``two_stage_variance``."""
    if block.psu is not None:
        return np.maximum(two_stage_variance.degrees_of_freedom(block), 1.0)
    n_h = psu_counts(block)
    return np.maximum(n_h.sum(axis=1) - (n_h > 0).sum(axis=1), 1.0)


def t_interval(estimate, se, df, confidence):
    """Lower and upper ends of estimate +- t_{df} se, arrays like ``estimate``."""
    # df is the same for most replicates of a block: one quantile per distinct value
    distinct, where = np.unique(df, return_inverse=True)
    # scipy.stats.t.ppf(p, df) is stdtrit(df, p); scipy.special alone spares a run the start-up of scipy.stats
    q = stdtrit(distinct, 0.5 + confidence / 2.0)[where.reshape(-1)][:, None]
    return estimate - q * se, estimate + q * se


def finish(estimate, se, block: SampleBlock, confidence: float) -> Estimates:
    """The estimates with their degrees of freedom and t intervals."""
    df = degrees_of_freedom(block)
    lower, upper = t_interval(estimate, se, df, confidence)
    return Estimates(estimate, se, lower, upper, df)
