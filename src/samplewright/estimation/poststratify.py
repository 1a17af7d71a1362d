"""Post-stratification's two pieces, shared by the post-stratified estimator and the weighting adjustments.

With cells q (post-strata, weighting classes), estimated cell totals t_q and counts N^_q from
the sample's weights, and known (or estimated) cell counts N_q:

- the cell means ybar_q = t_q / N^_q, where a cell with no sampled weight takes a fallback
  mean (the whole sample's: the empty cell is collapsed with the rest, common practice);
- the cell factors g_q = N_q / N^_q that scale the weights of the cell's units to its count,
  0 in an empty cell (SSW 1992, sec. 7.6).
"""

from __future__ import annotations

import numpy as np


def cell_means(totals: np.ndarray, counts: np.ndarray, fallback: np.ndarray) -> np.ndarray:
    """Cell means totals / counts, (B, Q, E) from (B, Q, E) and (B, Q); ``fallback`` (B, E) where a count is 0."""
    filled = counts > 0
    return np.where(filled[..., None], totals / np.where(filled, counts, 1.0)[..., None], fallback[:, None, :])


def cell_factors(controls: np.ndarray, counts: np.ndarray) -> np.ndarray:
    """Weight factors controls / counts (B, Q), 0 in a cell whose count is 0."""
    filled = counts > 0
    return np.where(filled, controls / np.where(filled, counts, 1.0), 0.0)
