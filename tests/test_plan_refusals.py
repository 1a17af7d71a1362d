"""`plan`: nonsense refused, the fixed cost of a cluster budget, whole-number allocations that sum to n.

Sources: Cochran (1977) Sampling Techniques, sec. 4.4 (n0 = z^2 P Q / E^2, E a fraction) and ch. 5
(n_h = n N_h / N for proportional allocation, sec. 5.4); Kish (1965) Survey Sampling, sec. 8.3
(m_opt = sqrt((c1 / c2) (1 - rho) / rho) under the cost C = c0 + a (c1 + c2 m); from memory).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from samplewright.cli.main import main
from samplewright.decision import planning
from samplewright.errors import InputError

Z95 = float(stats.norm.ppf(0.975))


def plan(capsys, *argv):
    code = main(["plan", *argv])
    out, err = capsys.readouterr()
    return code, out, err


def refused(capsys, *argv) -> str:
    code, _, err = plan(capsys, *argv)
    assert code == 2 and "Traceback" not in err
    lines = err.splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ")
    return lines[0]


# ------------------------------------------------------------------ a proportion's margin
@pytest.mark.parametrize("moe", ["1", "3", "5.0", "50"])
def test_margin_of_one_or_more_for_a_proportion_is_refused_with_a_hint(capsys, moe):
    # a proportion lies in (0, 1), so its margin E in n0 = z^2 P Q / E^2 is a fraction (Cochran 1977, sec. 4.4)
    line = refused(capsys, "--proportion", "0.5", "--moe", moe)
    assert "--moe" in line and "fraction" in line and "0.03" in line


def test_the_hinted_fraction_gives_cochrans_size(capsys):
    # Cochran 1977, sec. 4.4: n0 = z^2 P Q / E^2 = 1.96^2 x 0.25 / 0.03^2 = 1067.07 -> 1068
    code, out, _ = plan(capsys, "--proportion", "0.5", "--moe", "0.03", "--json")
    assert code == 0
    assert json.loads(out)["n"] == math.ceil(Z95**2 * 0.25 / 0.03**2) == 1068


@pytest.mark.parametrize("argv,culprit", [
    (["--proportion", "0", "--moe", "0.03"], "--proportion"),
    (["--proportion", "1", "--moe", "0.03"], "--proportion"),
    (["--proportion", "-0.2", "--moe", "0.03"], "--proportion"),
    (["--proportion", "1.5", "--moe", "0.03"], "--proportion"),
    (["--proportion", "0.5", "--moe", "0"], "--moe"),
    (["--proportion", "0.5", "--moe", "-0.03"], "--moe"),
    (["--sd", "4", "--moe", "0"], "--moe"),
    (["--proportion", "0.5", "--moe", "0.03", "--fixed-cost", "100"], "--fixed-cost"),
])
def test_other_nonsense_is_refused(capsys, argv, culprit):
    assert culprit in refused(capsys, *argv)


def test_a_mean_keeps_margins_above_one():
    # a mean's margin is in the variable's units: E = 3 with S = 30 is n0 = (1.96 x 30 / 3)^2 (Cochran sec. 4.6)
    assert planning.sample_size(moe=3, sd=30)["n0"] == pytest.approx((Z95 * 10) ** 2, rel=1e-12)


# ------------------------------------------------------------------ fixed cost of a cluster budget
def test_cluster_budget_less_the_fixed_cost(capsys):
    # Kish 1965, sec. 8.3: c1 / c2 = 9, rho = 0.1 -> m = 9; C = c0 + a (c1 + c2 m):
    # (5000 - 1400) / (90 + 10 x 9) = 20 clusters, cost 1400 + 20 x 180 = 5000
    code, out, _ = plan(capsys, "--icc", "0.1", "--cluster-cost", "90", "--unit-cost", "10",
                        "--budget", "5000", "--fixed-cost", "1400", "--json")
    assert code == 0
    r = json.loads(out)
    assert (r["n"], r["clusters"], r["units"], r["cost"], r["fixed_cost"]) == (9, 20, 180, 5000.0, 1400.0)


@pytest.mark.parametrize("c1,c2,rho,B,c0", [(50.0, 2.0, 0.05, 3000.0, 250.0), (200.0, 15.0, 0.3, 9000.0, 4321.0),
                                           (10.0, 10.0, 0.02, 777.0, 0.0)])
def test_clusters_are_the_most_the_budget_pays_for(c1, c2, rho, B, c0):
    # the cost model C = c0 + a (c1 + c2 m) (Kish 1965, sec. 8.3): a clusters fit, a + 1 do not
    r = planning.optimal_cluster_take(c1, c2, rho, budget=B, fixed_cost=c0)
    per = c1 + c2 * r["n"]
    assert c0 + r["clusters"] * per <= B < c0 + (r["clusters"] + 1) * per
    assert r["cost"] == pytest.approx(c0 + r["clusters"] * per)


@pytest.mark.parametrize("argv,words", [
    (["--budget", "1000", "--fixed-cost", "1000"], ("--budget", "--fixed-cost")),
    (["--budget", "1000", "--fixed-cost", "1500"], ("--budget", "--fixed-cost")),
    (["--budget", "1000", "--fixed-cost", "900"], ("--budget", "one cluster")),
    (["--budget", "100"], ("--budget", "one cluster")),
    (["--fixed-cost", "100"], ("--fixed-cost", "--budget")),
    (["--budget", "1000", "--fixed-cost", "-5"], ("--fixed-cost",)),
])
def test_cluster_budget_nonsense_is_refused(capsys, argv, words):
    line = refused(capsys, "--icc", "0.1", "--cluster-cost", "90", "--unit-cost", "10", *argv)
    assert all(w in line for w in words)


# ------------------------------------------------------------------ whole-number allocations
strata = st.integers(1, 8).flatmap(lambda H: st.tuples(
    st.lists(st.integers(1, 500), min_size=H, max_size=H),
    st.lists(st.floats(0.0, 50.0, allow_nan=False), min_size=H, max_size=H),
    st.lists(st.floats(0.1, 20.0, allow_nan=False), min_size=H, max_size=H)))


@settings(max_examples=300, deadline=None, derandomize=True, database=None)
@given(s=strata, frac=st.floats(0.0, 1.0))
def test_proportional_allocation_sums_to_n_within_one_of_cochran(s, frac):
    # Cochran 1977, sec. 5.4: n_h = n N_h / N; largest-remainder rounding keeps each whole n_h within 1
    units, sd, cost = s
    N = sum(units)
    n = max(1, round(frac * N))
    r = planning.allocate_strata(units, sd, cost, rule="proportional", n=n)
    n_h = np.array([x["n"] for x in r["strata"]])
    assert r["n"] == n_h.sum() == n
    assert np.all(np.abs(n_h - np.array(units) * n / N) < 1)


@settings(max_examples=200, deadline=None, derandomize=True, database=None)
@given(s=strata, frac=st.floats(0.0, 1.0), rule=st.sampled_from(["equal", "neyman", "optimal"]))
def test_every_fixed_n_allocation_sums_to_n(s, frac, rule):
    # equal (n / H), Neyman and cost-optimal shares (Cochran 1977, sec. 5.5), capped at N_h (sec. 5.8):
    # whole n_h sum to n, never exceed N_h, and stay within 1 of the capped real allocation
    units, sd, cost = s
    n = max(1, round(frac * sum(units)))
    r = planning.allocate_strata(units, sd, cost, rule=rule, n=n)
    n_h = np.array([x["n"] for x in r["strata"]])
    real = np.array([x["n_real"] for x in r["strata"]])
    assert r["n"] == n_h.sum() == n
    assert np.all(n_h <= np.array(units)) and np.all(np.abs(n_h - real) < 1)


def test_fixed_cost_at_least_the_stratified_budget_is_refused():
    with pytest.raises(InputError, match="fixed cost"):
        planning.allocate_strata([400, 300], [10.0, 20.0], budget=500, fixed_cost=500)


def test_a_bad_stratum_value_is_shown_as_given():
    # the culprit is echoed as the user typed it (0.0), not as numpy 2's scalar repr np.float64(0.0) (NEP 51)
    with pytest.raises(InputError, match=r"cost of stratum 2 must be above 0, got 0\.0$"):
        planning.allocate_strata([10, 10], [1.0, 2.0], [1.0, 0.0], rule="optimal", n=5)
