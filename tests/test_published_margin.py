"""The published margin (mean half-width of the intervals a survey would print) and its spread.

Checks against an independent enumeration of every SRS-without-replacement sample of a small
invented frame: the interval is mean +- t_{n-1} sqrt((1 - n/N) s^2 / n) (Cochran 1977, eqs. 2.8
and 2.19, from memory; t quantile from scipy.stats.t), each sample has probability 1 / C(N, n).
The Monte Carlo columns are checked against that exact value within Z Monte Carlo SEs
(Morris, White & Crowther 2019, Table 6: MCSE of a mean = sd / sqrt(R)).
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from conftest import Z
from scipy import stats

from samplewright import Frame
from samplewright.designs import DESIGN_CLASSES
from samplewright.estimation.cost import CostModel
from samplewright.evaluation.exact import evaluate_exact
from samplewright.evaluation.measures import PUBLISHED_COLUMNS, SUMMARY_COLUMNS, summarise
from samplewright.simulation.engine import make_cells, replicate_table, simulate
from samplewright.simulation.plan import RunPlan

Y = np.array([3.0, 7.0, 1.0, 9.0, 4.0, 4.0, 12.0, 2.0, 8.0, 5.0])
N, n = len(Y), 4


def enumerated_half_widths():
    """Half-width of the 95% t interval of every SRS sample (Cochran 1977, eq. 2.19, from memory)."""
    t = stats.t.ppf(0.975, n - 1)
    out = []
    for s in itertools.combinations(range(N), n):
        y = Y[list(s)]
        out.append(t * np.sqrt((1 - n / N) * y.var(ddof=1) / n))
    return np.array(out)


@pytest.fixture
def frame():
    return Frame.from_dataframe(pd.DataFrame({"y": Y}), target="y")


def cells(frame):
    d = DESIGN_CLASSES["srs"]("srs", n=n)
    d.check(frame)
    return make_cells([d], [("ht",)])


def test_exact_published_margin_is_the_enumerated_mean_and_90th_percentile(frame):
    h = enumerated_half_widths()
    summary, _, _ = evaluate_exact(frame, cells(frame), 0.95, CostModel())
    row = summary.iloc[0]
    # every sample equally likely: the mean half-width, and the smallest h with share(H <= h) >= 0.9
    assert row["published_moe"] == pytest.approx(h.mean(), rel=1e-12)
    assert row["published_moe"] == pytest.approx(row["mean_ci_width"] / 2, rel=1e-15)
    hs = np.sort(h)
    assert row["published_moe_p90"] == pytest.approx(hs[int(np.ceil(0.9 * len(hs))) - 1], rel=1e-12)
    assert row["published_moe_mcse"] == 0.0
    assert list(summary.columns) == SUMMARY_COLUMNS + ["exact"] + PUBLISHED_COLUMNS + ["variance"]


def test_simulated_published_margin_within_mcse_of_the_exact_value(frame):
    h = enumerated_half_widths()
    plan = RunPlan(frame=frame, cells=tuple(cells(frame)), replicates=4000, seed=3, block_size=500)
    reps = replicate_table(simulate(plan), plan.cells, frame.layout.names)
    s = summarise(reps, frame, {"srs": "srs"}, 0.95)
    row = s.iloc[0]
    assert list(s.columns) == SUMMARY_COLUMNS + PUBLISHED_COLUMNS + ["variance"]
    # Morris et al. 2019 Table 6: mean of replicate values, MCSE = sd / sqrt(R)
    assert row["published_moe_mcse"] == pytest.approx(h.std() / np.sqrt(4000), rel=0.1)
    assert abs(row["published_moe"] - h.mean()) < Z * row["published_moe_mcse"]
    # the 90th percentile of the replicate half-widths: exact share of samples at or below it is near 0.9
    share = (h <= row["published_moe_p90"] + 1e-12).mean()
    assert abs(share - 0.9) < Z * np.sqrt(0.9 * 0.1 / 4000) + 1 / len(h)
