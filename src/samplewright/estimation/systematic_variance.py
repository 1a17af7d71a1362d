"""Variance estimators for systematic samples (named in :mod:`samplewright.estimation.registry`).

Each takes the PSU values ``z`` (B, m, V) -- expanded totals z_i = w_i y_i, or their
linearised form for the Hajek mean -- and the block, and returns the estimated variance of
the estimated total, (B, V).  The systematic design lays its PSUs out as each routine needs:
units in list order for successive differences, one PSU per random start for the
between-start estimator.

Notes
-----
- ``successive_differences``: Wolter's v3 (Wolter, *Introduction to Variance Estimation*,
  2nd ed. 2007, sec. 8.2; form from memory), for the mean of n units in list order
  ``v3 = (1 - f) / n * sum_{i=2}^{n} (y_i - y_{i-1})^2 / (2 (n - 1))``; for the total with
  z_i = (N / n) y_i this is ``(1 - f) n / (2 (n - 1)) sum_{i=2}^{n} (z_i - z_{i-1})^2``.  Each
  squared difference estimates twice the local variance, so a smooth trend or a slow
  cycle along the list (which inflates the SRS formula) largely cancels.  With design
  strata the differences are taken within each stratum (consecutive positions of the same
  stratum) with that stratum's n_h and 1 - f_h.  Where the block's positions are not in list
  order (circular or several starts) it carries ``list_order``, and the values are taken in
  that order first (one-stratum blocks).
- ``between_starts``: with r independent random starts, each start's sample gives its own
  estimate t_s = r z_s of the total, and ``v = sum_s (t_s - tbar)^2 / (r (r - 1))
  = r / (r - 1) sum_s (z_s - zbar)^2``: the random-group estimator, unbiased when the groups
  are independent replicates of the same design (Wolter 2007, ch. 2, sec. 2.2; from
  memory).  It is the shared between-PSU routine with the starts as PSUs and no finite
  population correction (the starts are drawn independently): the block groups its units by
  start as a two-stage block groups them by cluster (``psu``), and only that first stage counts.

Examples
--------
>>> import numpy as np
>>> from samplewright.designs.block import SampleBlock
>>> y = np.array([3.0, 7.0, 4.0, 9.0, 5.0])  # a sample of 5 from N = 50, in list order
>>> blk = SampleBlock(sums=y[None, :, None], weight=np.full(5, 10.0), psu_stratum=np.zeros(5, int),
...                   fpc=np.array([0.9]), clusters=np.zeros(1), variance="successive_differences")
>>> z = blk.weighted()
>>> float(successive_difference_variance(z, blk)[0, 0]) / 50**2  # v3 of the mean: 0.9/5 * 66/8
1.485
"""

from __future__ import annotations

import numpy as np

from samplewright.designs.block import SampleBlock
from samplewright.estimation.two_stage_variance import first_stage_variance


def successive_difference_variance(z: np.ndarray, block: SampleBlock) -> np.ndarray:
    """Wolter's v3 (overlapping successive differences) of the estimated total; see module notes."""
    if block.mask is not None:
        raise ValueError("successive differences need every PSU position filled (a block without a mask)")
    B, m, V = z.shape
    H = block.H
    if m < 2:
        return np.zeros((B, V))
    if block.list_order is not None:
        if H > 1:
            raise ValueError("successive differences take a list order only in a one-stratum block")
        z = np.take_along_axis(z, block.list_order[..., None], axis=1)
    strat = block.psu_stratum
    d = np.diff(z, axis=1)  # (B, m - 1, V)
    d2 = d * d
    n_h = np.bincount(strat, minlength=H).astype(float)
    if H == 1:
        ss_h = d2.sum(axis=1)[:, None, :]
    else:
        same = strat[1:] == strat[:-1]
        oh = np.zeros((m - 1, H))
        oh[np.flatnonzero(same), strat[1:][same]] = 1.0
        ss_h = np.einsum("bmv,mh->bhv", d2, oh)
    factor = np.where(n_h > 1, n_h / (2.0 * np.maximum(n_h - 1.0, 1.0)), 0.0) * block.fpc  # (H,)
    return np.einsum("bhv,h->bv", ss_h, factor)


def between_start_variance(z: np.ndarray, block: SampleBlock) -> np.ndarray:
    """Random-group (between-start) variance of the estimated total; see module notes."""
    return first_stage_variance(z, block)
