"""Stratified multistage design: allocation of clusters, unbiasedness, variance, inclusion frequencies.

Sources: Cochran (1977), Sampling Techniques, eq. 5.7 (stratified SRS variance estimator,
here applied to cluster totals, ch. 9-10) checked by exact enumeration written here with
itertools; Sampford (1967) for pi_c of the PPS selection; Morris, White & Crowther (2019)
for the Monte Carlo SEs in the z-bounds.  Frames are invented.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pandas as pd
import pytest
from conftest import Z

from samplewright import Frame, InputError
from samplewright.designs import DESIGN_CLASSES, StratifiedCluster
from samplewright.estimation.registry import ESTIMATORS


def zone_frame(big: bool = False):
    """Two zones; zone n has 4 plots, zone s has 6; plot sizes 2-5 (one of 30 units when ``big``)."""
    rng = np.random.default_rng(31)
    rows = []
    for zone, plots in (("n", 4), ("s", 6)):
        for c in range(plots):
            M = 30 if (big and zone == "s" and c == 0) else int(rng.integers(2, 6))
            mu = rng.normal(20.0 if zone == "n" else 35.0, 4.0)
            for _ in range(M):
                rows.append((zone, f"{zone}{c}", round(mu + rng.normal(0, 3.0), 2), round(rng.gamma(2.0, 1.0), 2)))
    df = pd.DataFrame(rows, columns=["zone", "plot", "y", "acres"])
    return Frame.from_dataframe(df, target="y", stratum="zone", cluster="plot", size="acres")


def test_cluster_allocation_rules_by_hand():
    f = zone_frame()
    N_h = f.N_h
    # equal: 6 clusters over 2 strata -> 3 and 3; proportional to clusters (4, 6): 2.4 / 3.6 -> 2 and 4
    # (largest remainder); proportional to units: 6 N_h / N rounded the same way (Cochran 1977, 5.4)
    assert StratifiedCluster("a", clusters=6, cluster_allocation="equal").cluster_allocation_of(f).tolist() == [3, 3]
    assert StratifiedCluster("a", clusters=6).cluster_allocation_of(f).tolist() == [2, 4]
    real = 6 * N_h / N_h.sum()
    want = np.floor(real).astype(int)
    want[np.argmax(real - want)] += 6 - want.sum()
    got = StratifiedCluster("a", clusters=6, cluster_allocation="units").cluster_allocation_of(f)
    assert got.tolist() == want.tolist()


def test_refusals():
    f = zone_frame()
    with pytest.raises(InputError, match="cannot give each of the 2 strata 2 clusters"):
        StratifiedCluster("a", clusters=3).check(f)
    with pytest.raises(InputError, match="clusters = 11 is more than the 10 clusters"):
        StratifiedCluster("a", clusters=11).check(f)
    with pytest.raises(InputError, match="selection = 'ppps' is not known.*pps"):
        StratifiedCluster("a", clusters=4, selection="ppps").check(f)
    flat = Frame.from_dataframe(pd.DataFrame({"y": [1.0, 2, 3, 4], "c": [1, 1, 2, 2]}), target="y", cluster="c")
    with pytest.raises(InputError, match="needs a stratum column"):
        StratifiedCluster("a", clusters=2).check(flat)


def test_one_stage_srs_of_clusters_exact_moments_and_monte_carlo():
    f = zone_frame()
    d = DESIGN_CLASSES["stratified_cluster"]("zones", clusters=5, cluster_allocation="proportional")
    d.check(f)
    m_h = d.cluster_allocation_of(f)
    # exact enumeration: independent SRS of m_h plots in each zone; HT total and its
    # stratified between-cluster variance estimator (Cochran 1977, eq. 5.7 on cluster totals)
    y = f.y[:, 0]
    tot = np.bincount(f.cluster, weights=y)
    zone_of = f.cluster_stratum
    per = [np.flatnonzero(zone_of == h) for h in range(2)]
    ests, vs = [], []
    for a in itertools.combinations(per[0], int(m_h[0])):
        for b in itertools.combinations(per[1], int(m_h[1])):
            t, v = 0.0, 0.0
            for h, s in enumerate((a, b)):
                C, m = per[h].size, len(s)
                z = tot[list(s)] * C / m
                t += z.sum()
                v += (1 - m / C) * m / (m - 1) * ((z - z.mean()) ** 2).sum()
            ests.append(t / f.N)
            vs.append(v / f.N**2)
    ests, vs = np.array(ests), np.array(vs)
    assert ests.mean() == pytest.approx(f.mean[0], rel=1e-12)  # HT unbiased
    exact_var = ests.var()
    assert vs.mean() == pytest.approx(exact_var, rel=1e-10)  # the variance estimator is unbiased
    R = 40_000
    blk = d.draw(f, np.random.default_rng(5), R)
    e = ESTIMATORS["ht"](blk, f.N, f.V, 0.95, f.layout)
    x, se2 = e.estimate[:, 0], e.se[:, 0] ** 2
    assert abs(x.mean() - f.mean[0]) <= Z * np.sqrt(exact_var / R)
    assert abs(se2.mean() - exact_var) <= Z * se2.std() / np.sqrt(R)
    # empirical SE within its MCSE, empSE / sqrt(2 (R - 1)) (Morris et al. 2019, Table 6)
    assert abs(x.std(ddof=1) - np.sqrt(exact_var)) <= Z * np.sqrt(exact_var) / np.sqrt(2 * (R - 1))


@pytest.mark.parametrize("kw", [
    {"selection": "pps", "units_per_cluster": 2},
    {"selection": "pps", "cluster_size": "size"},
    {"selection": "srs", "units_per_cluster": 3, "cap_units": True, "cluster_allocation": "equal"},
])
@pytest.mark.parametrize("big", [False, True])
def test_inclusion_frequencies_and_unbiasedness(kw, big):
    f = zone_frame(big)
    d = StratifiedCluster("zones", clusters=5, **kw)
    d.check(f)
    pi = d.inclusion_probabilities(f)
    # pi_c summed over the clusters of a stratum is m_h (fixed-size PPS within strata)
    pi_c = d.setup(f)["pi_c"]
    np.testing.assert_allclose(np.bincount(f.cluster_stratum, weights=pi_c), d.cluster_allocation_of(f))
    R = 30_000
    blk = d.draw(f, np.random.default_rng(8), R, keep_units=True)
    u = blk.units
    freq = np.bincount(u[u >= 0], minlength=f.N) / R
    assert (np.abs(freq - pi) <= Z * np.sqrt(pi * (1 - pi) / R) + 1e-12).all()
    e = ESTIMATORS["ht"](blk, f.N, f.V, 0.95, f.layout)
    x = e.estimate[:, 0]
    assert abs(x.mean() - f.mean[0]) <= Z * x.std() / np.sqrt(R)  # HT unbiased (Horvitz & Thompson 1952)
    if big and kw["selection"] == "pps":
        assert any("with certainty" in note for note in d.notes(f))


# ------------------------------------------------------------------ exact mode
def exact_summary(frame, design, estimators=("ht",)):
    from samplewright.estimation.cost import CostModel
    from samplewright.evaluation.exact import evaluate_exact
    from samplewright.simulation.engine import make_cells

    design.check(frame)
    cells = make_cells([design], [estimators])
    return evaluate_exact(frame, cells, 0.95, CostModel())


@pytest.mark.parametrize("kw,big", [
    ({"selection": "srs"}, False),
    ({"selection": "srs", "units_per_cluster": 1}, False),
    ({"selection": "pps", "units_per_cluster": 1}, False),
    ({"selection": "pps"}, True),  # a certainty plot in zone s
])
def test_exact_mode_unbiased_and_counts(kw, big):
    # HT unbiased exactly (Horvitz & Thompson 1952); probabilities sum to 1; the number of
    # samples matches the product over strata (for two stages: e_m of the second-stage counts)
    f = zone_frame(big)
    d = StratifiedCluster("zones", clusters=5, **kw)
    summary, samples, counts = exact_summary(f, d)
    assert summary["mean_estimate"].iloc[0] == pytest.approx(f.mean[0], rel=1e-12)
    assert samples["probability"].sum() == pytest.approx(1.0, abs=1e-12)
    assert counts["zones@5"] == len(samples) == d.count_samples(f)
    if kw == {"selection": "srs"}:
        # one stage, SRS of clusters: the stratified estimator of cluster totals is unbiased
        # for its variance too (Cochran 1977, eq. 5.7): E v = Var exactly
        assert summary["mean_se"].iloc[0] == pytest.approx(summary["empirical_se"].iloc[0], rel=1e-10)
        m_h = d.cluster_allocation_of(f)
        assert len(samples) == math.comb(4, int(m_h[0])) * math.comb(6, int(m_h[1]))


def test_exact_mode_agrees_with_monte_carlo_two_stage_pps():
    from samplewright.evaluation.measures import summarise
    from samplewright.simulation.engine import make_cells, replicate_table, simulate
    from samplewright.simulation.plan import RunPlan

    f = zone_frame()
    d = StratifiedCluster("zones", clusters=5, selection="pps", units_per_cluster=1)
    ex, _, _ = exact_summary(f, d, ("ht", "hajek"))
    cells = make_cells([d], [("ht", "hajek")])
    R = 20_000
    plan = RunPlan(frame=f, cells=tuple(cells), replicates=R, seed=99, block_size=2_000)
    reps = replicate_table(simulate(plan), cells, f.layout.names)
    mc = summarise(reps, f, {"zones": d.method}, 0.95)
    both = ex.merge(mc, on=["design", "estimator", "variable"], suffixes=("_x", "_mc"))
    assert len(both) == 2
    # z-bounds from the Monte Carlo SEs (Morris, White & Crowther 2019, Table 6)
    assert (np.abs(both["mean_estimate_mc"] - both["mean_estimate_x"]) <= Z * both["bias_mcse_mc"]).all()
    assert (np.abs(both["empirical_se_mc"] - both["empirical_se_x"]) <= Z * both["empirical_se_mcse_mc"]).all()
    cov_se = np.sqrt(both["coverage_x"] * (1 - both["coverage_x"]) / R)
    assert (np.abs(both["coverage_mc"] - both["coverage_x"]) <= Z * cov_se).all()
