"""Edge cases probed on small invented frames, each checked against an outside source.

Sources beside each check: exact enumeration of every possible sample with itertools;
Cochran 1977, Sampling Techniques (sec. 2.13: given n_d > 0 the domain sample of an SRS is an
SRS of the domain); Sarndal, Swensson & Wretman 1992, sec. 10.3 (the Hajek-type domain mean and
its linearised variance); scipy.stats.t for interval quantiles; Morris, White & Crowther 2019,
Table 6 (performance measures).
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from samplewright import Frame
from samplewright.designs import DESIGN_CLASSES
from samplewright.estimation.cost import CostModel
from samplewright.evaluation.exact import evaluate_exact
from samplewright.simulation.engine import make_cells

# ten units, two domains (invented values)
TEN = pd.DataFrame({
    "y": [3.0, 7.0, 1.0, 9.0, 4.0, 6.0, 12.0, 2.0, 8.0, 5.0],
    "zone": ["e", "w", "e", "e", "w", "e", "w", "w", "e", "w"],
})


def _exact(frame, design, estimators):
    design.check(frame)
    cells = make_cells([design], [estimators])
    return evaluate_exact(frame, cells, 0.95, CostModel())[0]


def test_exact_domain_mean_counts_only_samples_that_meet_the_domain():
    # SRS of 3 from 10: 10 of the 120 samples hold no unit of zone "e"; the Hajek-type domain mean
    # has no estimate there and, as in a simulated run, the summary conditions on n_d > 0
    f = Frame.from_dataframe(TEN, target="y", domain="zone")
    N, n = 10, 3
    row = _exact(f, DESIGN_CLASSES["srs"]("srs", n=n), ("hajek",)).set_index("variable").loc["y[zone=e]"]
    y, d = TEN["y"].to_numpy(), (TEN["zone"] == "e").to_numpy()
    ests, covered = [], []
    for s in itertools.combinations(range(N), n):  # exact enumeration, every sample equally likely
        ys = y[list(s)][d[list(s)]]
        if len(ys) == 0:
            continue
        m = ys.mean()
        # SSW 1992 sec. 10.3 for SRS: v = (1 - f) n / (n - 1) sum_{s,d} (y_k - ybar_sd)^2 / n_d^2; t with n - 1 df
        v = (1 - n / N) * n / (n - 1) * ((ys - m) ** 2).sum() / len(ys) ** 2
        half = stats.t.ppf(0.975, n - 1) * np.sqrt(v)
        ests.append(m)
        covered.append(m - half - 1e-12 <= y[d].mean() <= m + half + 1e-12)
    ests = np.array(ests)
    assert row["replicates"] == len(ests) == 110
    # given n_d > 0 the domain sample is an SRS of the domain, so the mean is unbiased (Cochran 1977, 2.13)
    assert row["mean_estimate"] == pytest.approx(y[d].mean(), rel=1e-12)
    assert row["empirical_se"] == pytest.approx(ests.std(), rel=1e-12)
    assert row["coverage"] == pytest.approx(np.mean(covered), rel=1e-12)
