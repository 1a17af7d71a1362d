"""The names a scenario may use for estimators and variance formulas, and what each one runs.

To add an estimator: write it as a function ``(block, N, V, confidence, layout=None, *,
variance)`` returning :class:`~samplewright.estimation.intervals.Estimates` and name it in
:data:`ESTIMATORS`.  To add a variance formula: a function ``(z (B, m, V), block) -> (B, V)``,
the estimated variance of a total from the block's PSU values, named in
:data:`VARIANCE_FORMULAS`; a design asks for it by that name (``SampleBlock.variance``).
A design may list several formulas: :func:`estimate_points` scores one draw with every
estimator under every one of them.
"""

from __future__ import annotations

from functools import partial

import numpy as np

from samplewright.designs.block import SampleBlock
from samplewright.estimation import (
    auxiliary,
    estimators,
    pps_variance,
    systematic_variance,
    two_stage_variance,
)
from samplewright.estimation.variance import stratified_psu_variance

#: variance formula name (``SampleBlock.variance``) -> function(z, block)
VARIANCE_FORMULAS = {
    "psu": stratified_psu_variance,
    # with fpc 1 in the sampled stratum the shared routine is the Hansen-Hurwitz form
    "hansen_hurwitz": stratified_psu_variance,
    "hartley_rao": pps_variance.hartley_rao,
    "brewer": pps_variance.brewer,
    "sen_yates_grundy": pps_variance.sen_yates_grundy,
    "poisson": pps_variance.poisson,
    # systematic samples: "srs" is the shared routine with units as PSUs
    "srs": stratified_psu_variance,
    "successive_differences": systematic_variance.successive_difference_variance,
    "between_starts": systematic_variance.between_start_variance,
    # the design sets each cluster's within-cluster factor for the option asked for, so both
    # names share one routine
    "two_stage": two_stage_variance.two_stage_variance,
    "ultimate_cluster": two_stage_variance.two_stage_variance,
}


def block_variance(z: np.ndarray, block: SampleBlock) -> np.ndarray:
    """Estimated variance of a total from PSU values ``z``, by the formula the block's design asks for."""
    return VARIANCE_FORMULAS[block.variance](z, block)


#: estimator name (as written in a scenario) -> function(block, N, V, confidence, layout=None);
#: layout is the frame's Layout (known totals, domains), passed by the engine
ESTIMATORS = {name: partial(function, variance=block_variance) for name, function in (
    ("ht", estimators.horvitz_thompson),
    ("hajek", estimators.hajek),
    ("ratio", auxiliary.ratio),
    ("greg", auxiliary.greg),
    ("poststrat", auxiliary.poststrat),
)}


def estimate_points(block: SampleBlock, estimators, variances, N: int, V: int, confidence: float,
                    layout=None) -> list:
    """Every estimator under every variance formula in ``variances`` (formulas the design listed), from
    the block's one draw: Estimates in the order estimator, then formula.  The estimates are the same
    numbers under every formula; the SEs and intervals are each formula's."""
    views = [block.with_variance(name) for name in variances]
    return [ESTIMATORS[e](view, N, V, confidence, layout) for e in estimators for view in views]
def value_columns(estimators, layout) -> int | None:
    """How many leading value columns of a block ``estimators`` read besides the count and cost:
    the targets alone for Horvitz-Thompson and Hajek on a frame without domains, else None (all)."""
    if layout is not None and not layout.D and all(e in ("ht", "hajek") for e in estimators):
        return layout.V
    return None
