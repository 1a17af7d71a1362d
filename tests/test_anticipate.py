"""Anticipated variances (proposal/anticipate.py) against exact enumeration of every possible sample."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from samplewright import Frame
from samplewright.designs import SRS, Cluster, PPSWithReplacement, Stratified
from samplewright.proposal.anticipate import anticipated_variance


def small_frame() -> Frame:
    """10 units in 4 clusters of unequal size, with a size measure; values invented."""
    df = pd.DataFrame({"y": [3.0, 5, 4, 9, 10, 14, 13, 22, 25, 40],
                       "x": [1.0, 2, 2, 3, 4, 5, 6, 8, 9, 12],
                       "c": ["a", "a", "a", "b", "b", "c", "c", "c", "c", "d"]})
    return Frame.from_dataframe(df, target="y", size="x", cluster="c")


def enumerated_variance(design, frame) -> float:
    """Variance of the HT mean over every possible sample, each with its probability (exact)."""
    design.check(frame)
    est, prob = [], []
    for block, p in design.enumerate(frame):
        w = np.broadcast_to(block.weight, block.sums.shape[:2])
        t = w * block.sums[..., 0]
        if block.mask is not None:
            t = np.where(block.mask, t, 0.0)
        est.append(t.reshape(len(p), -1).sum(axis=1) / frame.N)
        prob.append(p)
    est, prob = np.concatenate(est), np.concatenate(prob)
    mean = float(prob @ est)
    assert mean == pytest.approx(float(frame.mean[0]), rel=1e-12)  # HT unbiased: the enumeration is complete
    return float(prob @ (est - mean) ** 2)


@pytest.mark.parametrize("design", [
    SRS("s", n=4),
    Stratified("b", n=6, boundaries=[2.5, 6.0], allocation="neyman"),
    Stratified("t", n=6, boundaries=[3.5, 8.5], allocation="proportional", take_all=True),
    Cluster("one", clusters=2),
    Cluster("two", clusters=2, units_per_cluster=2, cap_units=True),
    PPSWithReplacement("p", n=2, replace=True),
], ids=lambda d: d.label)
def test_anticipated_variance_is_the_exact_design_variance(design):
    # SRS: Cochran (1977) eq. 2.8; stratified: eq. 5.6; cluster: Sarndal, Swensson and Wretman (1992)
    # Result 4.3.1; pps with replacement: Hansen-Hurwitz, Cochran (1977) eq. 9A.5 -- each checked here by
    # enumerating every possible sample.
    frame = small_frame()
    assert anticipated_variance(design, frame, frame.y[:, 0]) == pytest.approx(
        enumerated_variance(design, frame), rel=1e-10)
