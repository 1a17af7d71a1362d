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
from samplewright.evaluation.measures import summarise
from samplewright.simulation.engine import make_cells, replicate_table, simulate
from samplewright.simulation.plan import RunPlan

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


def test_hajek_mean_of_a_random_size_design_counts_only_nonempty_samples():
    # Bernoulli sampling with expected size 1 from 6 units: P(empty) = (5/6)^6 = 0.33, where the Hajek mean
    # (the sample mean) has no estimate.  As for a domain, and as the --until rule already counts, the summary
    # is conditional on a nonempty sample, in exact mode and in a simulated run alike.
    y = np.array([3.0, 7.0, 1.0, 9.0, 4.0, 6.0])
    f = Frame.from_dataframe(pd.DataFrame({"y": y}), target="y")
    N, pi = 6, 1 / 6
    # exact enumeration of the 2^6 subsets, P(s) = pi^|s| (1 - pi)^(N - |s|) (SSW 1992, sec. 3.2)
    p, m = [], []
    for k in range(1, N + 1):
        for s in itertools.combinations(range(N), k):
            p.append(pi**k * (1 - pi) ** (N - k))
            m.append(y[list(s)].mean())
    p, m = np.array(p) / np.sum(p), np.array(m)
    mean = p @ m
    sd = np.sqrt(p @ (m - mean) ** 2)
    design = DESIGN_CLASSES["bernoulli"]("bern", n=1)
    ex = _exact(f, design, ("hajek",)).iloc[0]
    assert ex["replicates"] == 2**N - 1
    assert ex["mean_estimate"] == pytest.approx(mean, rel=1e-12)
    assert ex["empirical_se"] == pytest.approx(sd, rel=1e-12)
    assert np.isfinite(ex[["bias", "rmse", "mean_se", "moe", "mean_ci_width"]].astype(float)).all()
    # a simulated run agrees within 4 Monte Carlo SEs (Morris, White & Crowther 2019, Table 6)
    R = 4000
    cells = make_cells([design], [("hajek",)])
    res = simulate(RunPlan(frame=f, cells=tuple(cells), replicates=R, seed=9, block_size=1000))
    mc = summarise(replicate_table(res, cells, f.layout.names), f, {"bern": "bernoulli"}, 0.95).iloc[0]
    assert mc["replicates"] == pytest.approx(R * (1 - (1 - pi) ** N), abs=4 * np.sqrt(R * 0.33 * 0.67))
    assert abs(mc["mean_estimate"] - mean) < 4 * mc["bias_mcse"]
    assert abs(mc["coverage"] - ex["coverage"]) < 4 * mc["coverage_mcse"]


TWELVE = pd.DataFrame({
    "y": [3.0, 7.0, 1.0, 9.0, 4.0, 4.0, 12.0, 2.0, 8.0, 5.0, 6.0, 10.0],
    "x": [2.0, 3.0, 1.0, 4.0, 2.0, 2.0, 6.0, 1.0, 4.0, 2.0, 3.0, 40.0],
    "blk": [1, 1, 2, 2, 3, 3, 4, 4, 5, 5, 6, 6],
})


@pytest.mark.parametrize("design", [
    DESIGN_CLASSES["srs"]("one unit", n=1),
    DESIGN_CLASSES["systematic"]("one step", n=1),
    DESIGN_CLASSES["cluster"]("one cluster", clusters=1),
    # n x_i / X = 2 x 40 / 70 >= 1: unit 12 is taken with certainty and one unit is drawn from the rest
    DESIGN_CLASSES["sampford"]("one draw", n=2),
], ids=lambda d: d.label)
def test_a_single_sampled_psu_is_warned_about(design):
    # With one PSU in a sampled stratum the between-PSU variance has n - 1 = 0 degrees of freedom and cannot be
    # estimated (Cochran 1977, sec. 5A.12: at least two units per stratum); exact enumeration shows the cost:
    # the estimates vary, the SEs are all 0, and no interval holds the truth
    f = Frame.from_dataframe(TWELVE, target="y", size="x", cluster="blk")
    row = _exact(f, design, ("ht",)).iloc[0]
    assert row["empirical_se"] > 0 and row["mean_se"] == 0 and row["coverage"] == 0
    from samplewright.diagnostics.checks import design_warnings
    said = [w for w in design_warnings(f, make_cells([design], [("ht",)]), None) if "single" in w]
    assert len(said) == 1 and repr(design.label) in said[0]


def test_two_sampled_psus_per_stratum_are_not_warned_about():
    f = Frame.from_dataframe(TWELVE, target="y", size="x", cluster="blk")
    from samplewright.diagnostics.checks import design_warnings
    ds = [DESIGN_CLASSES["srs"]("two", n=2), DESIGN_CLASSES["cluster"]("two clusters", clusters=2),
          DESIGN_CLASSES["sampford"]("two draws", n=3), DESIGN_CLASSES["bernoulli"]("random size", n=1)]
    assert not [w for w in design_warnings(f, make_cells(ds, [("ht",)] * len(ds)), None) if "single" in w]


def test_greg_of_an_empty_sample_has_no_estimate():
    # GREG with an intercept needs N^ = sum_s w > 0 (its model matrix M = sum_s w x~ x~' must be invertible;
    # SSW 1992, sec. 6.5): an empty Bernoulli sample has no GREG estimate, as it has no Hajek one; it was 0
    y = np.array([3.0, 7.0, 1.0, 9.0, 4.0, 6.0])
    f = Frame.from_dataframe(pd.DataFrame({"y": y, "x": y + 1.0}), target="y", auxiliary=["x"])
    row = _exact(f, DESIGN_CLASSES["bernoulli"]("bern", n=1), ("greg",)).iloc[0]
    assert row["replicates"] == 2**6 - 1  # every subset but the empty one (exact enumeration)
    # y = x - 1 exactly: a sample of two or more units fits the line and its GREG estimate is the truth
    # (SSW 1992, sec. 6.5); one unit cannot separate x from the intercept, so its GREG is its Hajek mean y_k
    N, pi = 6, 1 / 6
    p = np.array([pi**k * (1 - pi) ** (N - k) for k in range(1, N + 1) for _ in itertools.combinations(y, k)])
    est = np.array([s[0] if k == 1 else y.mean() for k in range(1, N + 1) for s in itertools.combinations(y, k)])
    p = p / p.sum()
    assert row["mean_estimate"] == pytest.approx(p @ est, rel=1e-12)


def test_optimal_allocation_names_the_stratum_without_a_cost(tmp_path):
    # the culprit is named (project rule for bad input): stratum 'c' has unit cost 0, and n_h ∝ N_h S_h / sqrt(c_h)
    # (Cochran 1977, eq. 5.24) is undefined there
    df = pd.DataFrame({"y": [1.0, 2, 1, 3, 2, 5, 9, 3, 7, 8, 6, 7], "band": list("aaaabbbbcccc"),
                       "uc": [1.0] * 4 + [4.0] * 4 + [0.0] * 4})
    f = Frame.from_dataframe(df, target="y", stratum="band", unit_cost="uc")
    from samplewright.errors import InputError
    with pytest.raises(InputError, match=r"design 'opt'.*stratum 'c'"):
        DESIGN_CLASSES["stratified"]("opt", n=7, allocation="optimal").check(f)


SIXTEEN = pd.DataFrame({
    "y": [3.0, 7, 1, 9, 4, 4, 12, 2, 8, 5, 6, 10, 11, 2, 6, 7],
    "band": list("aaaaaabbbbcccccc"),
    "blk": [1, 1, 2, 2, 3, 3, 4, 4, 5, 5, 6, 6, 7, 7, 8, 8],
})


@pytest.mark.parametrize("design", [
    DESIGN_CLASSES["cluster"]("one per cluster", clusters=4, units_per_cluster=1),
    DESIGN_CLASSES["stratified_cluster"]("one per cluster", clusters=6, units_per_cluster=1),
], ids=lambda d: d.method)
def test_one_unit_per_sampled_cluster_is_warned_about(design):
    # the unbiased two-stage variance estimator needs s_2i^2 within each sampled cluster (Cochran 1977,
    # Theorem 11.2); exact enumeration shows E[v] < V when one unit is drawn per cluster
    f = Frame.from_dataframe(SIXTEEN, target="y", stratum="band", cluster="blk")
    row = _exact(f, design, ("ht",)).iloc[0]
    assert row["mean_se"] ** 2 < 0.9 * row["empirical_se"] ** 2
    from samplewright.diagnostics.checks import design_warnings
    said = [w for w in design_warnings(f, make_cells([design], [("ht",)]), None) if "within-cluster" in w]
    assert len(said) == 1


def test_two_units_per_cluster_or_one_stage_are_not_warned_about():
    f = Frame.from_dataframe(SIXTEEN, target="y", stratum="band", cluster="blk")
    ds = [DESIGN_CLASSES["cluster"]("two", clusters=4, units_per_cluster=2),
          DESIGN_CLASSES["cluster"]("whole", clusters=4),
          DESIGN_CLASSES["cluster"]("ultimate", clusters=4, units_per_cluster=1, variance="ultimate_cluster")]
    from samplewright.diagnostics.checks import design_warnings
    # a two-unit take is unbiased (Cochran 1977, Theorem 11.2), checked by exact enumeration
    row = _exact(f, ds[0], ("ht",)).iloc[0]
    assert row["mean_se"] ** 2 == pytest.approx(row["empirical_se"] ** 2, rel=1e-10)
    assert not [w for w in design_warnings(f, make_cells(ds, [("ht",)] * 3), None) if "within-cluster" in w]


def test_skewness_of_huge_values_is_scale_free():
    # Fisher's G1 does not change with the scale of y (a ratio of central moments m3 / m2^1.5): values near
    # 1e150 pass the overflow check (their total squared is finite) but their third moment overflowed, printing
    # numpy warnings on stderr and losing the Cochran n > 25 G1^2 warning; checked against scipy.stats.skew
    from samplewright.diagnostics.checks import skewness
    base = TWELVE["y"].to_numpy()
    f = Frame.from_dataframe(pd.DataFrame({"y": base * 1e150}), target="y")
    assert skewness(f)[0] == pytest.approx(stats.skew(base, bias=False), rel=1e-12)


def test_mcse_of_a_mean_of_huge_values_is_finite():
    # the MCSE of a mean is sd / sqrt(R) (Morris, White & Crowther 2019, Table 6), homogeneous of degree 1 in
    # the values: squared errors near 1e300 (estimates near 1e150, which the frame check lets through) must
    # not overflow on the way (the frontier's MSE MCSE was inf, with a numpy warning)
    from samplewright.evaluation.measures import mean_mcse
    base = TWELVE["y"].to_numpy()
    assert mean_mcse(base * 1e300) == pytest.approx(1e300 * np.std(base, ddof=1) / np.sqrt(len(base)), rel=1e-12)
