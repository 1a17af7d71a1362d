"""Three-state evidence (decision/evidence.py): each state boundary, and the exact binomial bound.

Limits are binary fractions so each boundary is hit exactly in floating point.  The exact bound is
checked against scipy.stats.binomtest(...).proportion_ci(method="exact") (the Clopper-Pearson
interval); Monte Carlo SEs of coverage are sqrt(c (1 - c) / R) (Morris, White & Crowther 2019, Table 6).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from samplewright.decision import evidence as ev
from samplewright.evaluation.measures import coverage_mcse

LEVEL = 2 * stats.norm.cdf(2.0) - 1  # the level +-2 SE stands for (normal, scipy.stats)
NOMINAL, TOL = 0.75, 0.125  # limit 0.625
S = 0.03125


@pytest.mark.parametrize("c, want", [
    (0.6875, "met"),  # c - 2 s = 0.625 = limit: met at the boundary
    (0.6875 - 1e-9, "undecided"),
    (0.5625, "undecided"),  # c + 2 s = 0.625 = limit: not below it
    (0.5625 - 1e-9, "not met"),
    (float("nan"), "not met"),  # no intervals to judge
])
def test_coverage_boundaries(c, want):
    assert ev.state(ev.coverage_code(c, S, 1000, NOMINAL, TOL)) == want


@pytest.mark.parametrize("moe, pub, want", [
    (1.5, 1.5, "met"),  # both + 2 x 0.25 = 2.0 = goal
    (1.5 + 1e-9, 1.5, "undecided"),
    (1.5, 1.5 + 1e-9, "undecided"),
    (1.0, 2.5, "undecided"),  # published - 2 MCSE = 2.0: not above the goal
    (1.0, 2.5 + 1e-9, "not met"),  # the published margin alone sinks it
    (2.5 + 1e-9, 1.0, "not met"),  # the achieved margin alone sinks it
    (float("nan"), 1.0, "not met"),
])
def test_margin_needs_both_margins(moe, pub, want):
    assert ev.state(ev.margin_code(moe, 0.25, pub, 0.25, 2.0)) == want


@pytest.mark.parametrize("cost, want", [(750.0, "met"), (750.5, "undecided"), (1250.0, "undecided"),
                                        (1250.5, "not met")])
def test_cost_boundaries(cost, want):
    assert ev.state(ev.cost_code(cost, 125.0, 1000.0)) == want


def test_exact_mode_decides_as_it_stands():
    assert ev.state(ev.coverage_code(0.625, 0.0, 8, NOMINAL, TOL, exact=True)) == "met"
    assert ev.state(ev.coverage_code(1.0, 0.0, 8, NOMINAL, TOL, exact=True)) == "met"
    assert ev.state(ev.coverage_code(1.0, 0.0, 8, NOMINAL, TOL)) == "undecided"  # 8 of 8 simulated


@pytest.mark.parametrize("hits, R", [(0, 50), (50, 50), (3, 40), (1990, 2000), (2000, 2000), (0, 7)])
def test_clopper_pearson_matches_scipy_binomtest(hits, R):
    lo, hi = ev.clopper_pearson(hits, R)
    ci = stats.binomtest(hits, R).proportion_ci(confidence_level=LEVEL, method="exact")  # scipy.stats
    assert float(lo) == pytest.approx(ci.low, abs=1e-12)
    assert float(hi) == pytest.approx(ci.high, abs=1e-12)


def test_full_coverage_is_evidence_not_certainty():
    # 50 of 50 intervals hold: the formula MCSE is 0, yet the Clopper-Pearson lower bound
    # (alpha/2)^(1/50) = 0.927 (scipy.stats.binomtest) is below 0.95 - 0.01: undecided, not met
    assert ev.state(ev.coverage_code(1.0, 0.0, 50, 0.95, 0.01)) == "undecided"
    low = stats.binomtest(2000, 2000).proportion_ci(confidence_level=LEVEL, method="exact").low
    assert low > 0.94
    assert ev.state(ev.coverage_code(1.0, 0.0, 2000, 0.95, 0.01)) == "met"
    assert ev.state(ev.coverage_code(0.0, 0.0, 2000, 0.95, 0.01)) == "not met"


def test_replicates_to_decide_is_the_count_that_decides():
    # coverage 0.93 against 0.94 at R = 1000: undecided; at the count returned (with the MCSE of
    # sqrt(c (1 - c) / R), Morris et al. 2019) it is decided, one replicate fewer it is not
    c, limit, R = 0.93, 0.94, 1000
    assert ev.state(ev.coverage_code(c, coverage_mcse(c, R), R, 0.95, 0.01)) == "undecided"
    need = ev.coverage_replicates_to_decide(c, float(coverage_mcse(c, R)), limit, R)
    assert need == math.ceil(4 * c * (1 - c) / (c - limit) ** 2)
    assert ev.state(ev.coverage_code(c, coverage_mcse(c, need), need, 0.95, 0.01)) == "not met"
    assert ev.state(ev.coverage_code(c, coverage_mcse(c, need - 1), need - 1, 0.95, 0.01)) == "undecided"
    # all 50 hold: the Clopper-Pearson lower bound (alpha/2)^(1/R) reaches 0.94 at R = ln(alpha/2) / ln(0.94)
    need = ev.coverage_replicates_to_decide(1.0, 0.0, 0.94, 50)
    assert ev.state(ev.coverage_code(1.0, 0.0, need, 0.95, 0.01)) == "met"
    assert ev.state(ev.coverage_code(1.0, 0.0, need - 1, 0.95, 0.01)) == "undecided"
    # a mean-type MCSE sd / sqrt(R): margin 1.9 (MCSE 0.1 at R = 400) against 2.0 decides at 1600
    assert ev.replicates_to_decide(1.9, 0.1, 2.0, 400) == 1600
    assert ev.replicates_to_decide(2.0, 0.1, 2.0, 400) is None


def test_worst_combines_criteria():
    assert ev.worst(np.array([ev.MET, ev.UNDECIDED, ev.MET])) == ev.UNDECIDED
    assert ev.worst(np.array([ev.MET, ev.UNDECIDED, ev.NOT_MET])) == ev.NOT_MET
