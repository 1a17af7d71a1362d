"""Two-stage cluster samples: the unbiased two-stage variance estimator and take-all clusters.

Sources: Cochran (1977), Sampling Techniques, Theorem 11.2 and its unequal-size form (sec.
11.8), and Sarndal, Swensson & Wretman (1992), Result 4.3.1: with SRS of m of C clusters and
SRS of k_i of M_i units in each, the HT total has variance
    V = C^2 (1 - f_1) S_t^2 / m + (C / m) sum_{i in U} M_i^2 (1 - f_2i) S_2i^2 / k_i
and v = C^2 (1 - f_1) s_t^2 / m + (C / m) sum_{i in s} M_i^2 (1 - f_2i) s_2i^2 / k_i is
unbiased for it.  Every sample is enumerated here with itertools, independently of the
package.  With every cluster taken (f_1 = 1) the design is stratified SRS with the clusters
as strata (Cochran 1977, eq. 5.3).  Coverage is tested with an exact binomial test
(scipy.stats.binomtest).  Frames are invented.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from samplewright import Frame, InputError
from samplewright.designs import DESIGN_CLASSES, Cluster, StratifiedCluster
from samplewright.estimation.registry import ESTIMATORS
from samplewright.evaluation.exact import enumerate_design


def unequal_frame():
    """Six clusters of 3, 4, 5, 3, 4 and 5 units (two zones of three), values with cluster effects."""
    rng = np.random.default_rng(4)
    sizes = [3, 4, 5, 3, 4, 5]
    rows = []
    for c, M in enumerate(sizes):
        mu = rng.normal(30.0, 6.0)
        for _ in range(M):
            rows.append(("a" if c < 3 else "b", c, round(float(mu + rng.normal(0.0, 4.0)), 3)))
    df = pd.DataFrame(rows, columns=["zone", "plot", "y"])
    return Frame.from_dataframe(df, target="y", stratum="zone", cluster="plot"), df


def cochran_two_stage(C, m, sample):
    """HT total and the unbiased two-stage v of one sample (Cochran 1977, Thm 11.2, unequal sizes).

    ``sample`` lists (M_i, sampled values) per cluster.  Also returns v_uc, the
    between-cluster ("ultimate cluster") term alone.
    """
    t_i = np.array([M * ys.mean() for M, ys in sample])
    within = sum(M**2 * (1 - len(ys) / M) * ys.var(ddof=1) / len(ys) for M, ys in sample if len(ys) > 1)
    v_uc = C**2 * (1 - m / C) * t_i.var(ddof=1) / m if m > 1 else 0.0
    return C / m * t_i.sum(), v_uc + C / m * within, v_uc


def independent_enumeration(df, m, k):
    """Every sample of m clusters x k units (SRS at both stages): (key, p, t, v, v_uc)."""
    plots = sorted(df["plot"].unique())
    C = len(plots)
    y = {c: df.loc[df["plot"] == c, "y"].to_numpy() for c in plots}
    out = []
    for cl in itertools.combinations(plots, m):
        inner = [list(itertools.combinations(range(len(y[c])), min(k, len(y[c])))) for c in cl]
        p = 1 / math.comb(C, m) / math.prod(len(x) for x in inner)
        for picks in itertools.product(*inner):
            sample = [(len(y[c]), y[c][list(pk)]) for c, pk in zip(cl, picks)]
            t, v, v_uc = cochran_two_stage(C, m, sample)
            key = tuple(sorted(np.concatenate([ys for _, ys in sample]).round(6)))
            out.append((key, p, t, v, v_uc))
    return out


def package_enumeration(frame, design, estimator="ht"):
    """(key, p, estimate, se^2, df) of every sample from the package's exact mode (design.enumerate)."""
    design.check(frame)
    rows = {}
    for blk, p in enumerate_design(design, frame):
        out = ESTIMATORS[estimator](blk, frame.N, frame.V, 0.95, frame.layout)
        y = blk.sums[..., 0]
        real = np.ones(y.shape, dtype=bool) if blk.mask is None else blk.mask
        for b in range(blk.B):
            key = tuple(sorted(y[b][real[b]].round(6)))
            rows[key] = (p[b], out.estimate[b, 0], out.se[b, 0] ** 2, out.df[b])
    return rows


@pytest.mark.parametrize("variance", ["two_stage", "ultimate_cluster"])
def test_cluster_variance_matches_cochran_sample_by_sample(variance):
    frame, df = unequal_frame()
    N = frame.N
    mine = independent_enumeration(df, 3, 2)
    got = package_enumeration(frame, Cluster("c", clusters=3, units_per_cluster=2, variance=variance))
    assert len(got) == len(mine)
    for key, p, t, v, v_uc in mine:
        q, est, se2, _ = got[key]
        assert q == pytest.approx(p, rel=1e-12)
        assert est == pytest.approx(t / N, rel=1e-12)
        # Cochran 1977, Thm 11.2 (unequal sizes) per sample; ultimate cluster: its first term alone
        assert se2 == pytest.approx((v if variance == "two_stage" else v_uc) / N**2, rel=1e-10)


def test_default_two_stage_estimator_is_unbiased_by_enumeration():
    frame, df = unequal_frame()
    mine = independent_enumeration(df, 3, 2)
    p = np.array([r[1] for r in mine])
    t = np.array([r[2] for r in mine])
    v = np.array([r[3] for r in mine])
    v_uc = np.array([r[4] for r in mine])
    assert p.sum() == pytest.approx(1.0, abs=1e-12)
    T = float(df["y"].sum())
    assert p @ t == pytest.approx(T, rel=1e-12)  # HT unbiased (Horvitz & Thompson 1952)
    V = p @ (t - T) ** 2
    # closed form of V (Cochran 1977, Thm 11.2 unequal sizes; SSW 1992, Result 4.3.1)
    C, m, k = 6, 3, 2
    tot = df.groupby("plot")["y"].sum().to_numpy()
    S2 = df.groupby("plot")["y"].var(ddof=1).to_numpy()
    M = df.groupby("plot")["y"].size().to_numpy()
    second = (M**2 * (1 - k / M) * S2 / k).sum()
    assert V == pytest.approx(C**2 * (1 - m / C) * tot.var(ddof=1) / m + C / m * second, rel=1e-10)
    assert p @ v == pytest.approx(V, rel=1e-10)  # the two-stage estimator is unbiased
    # the ultimate-cluster form falls short by the whole second-stage term sum_U M^2 (1 - f2) S2^2 / k
    assert p @ v_uc == pytest.approx(V - second, rel=1e-10)
    assert V - second < V * (1 - 1e-3)  # (a real shortfall on this frame)
    # the package's default, in exact mode, is the same unbiased estimator
    got = package_enumeration(frame, Cluster("c", clusters=3, units_per_cluster=2))
    q = np.array([r[0] for r in got.values()])
    se2 = np.array([r[2] for r in got.values()])
    assert q @ se2 == pytest.approx(V / frame.N**2, rel=1e-10)


def test_take_all_clusters_keep_their_second_stage_variance():
    frame, df = unequal_frame()
    N = frame.N
    mine = independent_enumeration(df, 6, 2)
    p = np.array([r[1] for r in mine])
    t = np.array([r[2] for r in mine])
    T = float(df["y"].sum())
    V = p @ (t - T) ** 2
    # every cluster taken: stratified SRS with the clusters as strata (Cochran 1977, eq. 5.3)
    S2 = df.groupby("plot")["y"].var(ddof=1).to_numpy()
    M = df.groupby("plot")["y"].size().to_numpy()
    assert V == pytest.approx((M**2 * (1 - 2 / M) * S2 / 2).sum(), rel=1e-10)
    assert V > 0
    for variance in ("two_stage", "ultimate_cluster"):
        got = package_enumeration(frame, Cluster("all", clusters=6, units_per_cluster=2, variance=variance))
        q = np.array([r[0] for r in got.values()])
        se2 = np.array([r[2] for r in got.values()])
        assert q @ se2 == pytest.approx(V / N**2, rel=1e-10)  # E v = V exactly
        for key, _, _, v, _ in mine:  # and sample by sample the stratified SRS estimator (eq. 5.7)
            assert got[key][2] == pytest.approx(v / N**2, rel=1e-10)
        # degrees of freedom: the units act as PSUs within the clusters, sum (k_i - 1) (common practice)
        assert {r[3] for r in got.values()} == {6.0}


def test_stratified_take_all_stratum_exact_mode():
    """Zone a fully taken (3 of 3 plots), zone b 2 of 3, 2 units per plot; summary from run --exact's engine."""
    from samplewright.estimation.cost import CostModel
    from samplewright.evaluation.exact import evaluate_exact
    from samplewright.simulation.engine import make_cells

    frame, df = unequal_frame()
    d = StratifiedCluster("zones", clusters=5, cluster_allocation="equal", units_per_cluster=2)
    d.check(frame)
    assert d.cluster_allocation_of(frame).tolist() == [3, 2]
    summary, _, _ = evaluate_exact(frame, make_cells([d], [("ht",)]), 0.95, CostModel())
    row = summary.iloc[0]
    # closed form: zone a as strata of units (Cochran 1977, eq. 5.3), zone b two-stage (Thm 11.2)
    g = df.groupby("plot")["y"]
    S2, M, tot = g.var(ddof=1).to_numpy(), g.size().to_numpy(), g.sum().to_numpy()
    second = M**2 * (1 - 2 / M) * S2 / 2
    V = second[:3].sum() + 3**2 * (1 - 2 / 3) * tot[3:].var(ddof=1) / 2 + 3 / 2 * second[3:].sum()
    assert row["empirical_se"] ** 2 == pytest.approx(V / frame.N**2, rel=1e-10)
    assert row["mean_se"] ** 2 == pytest.approx(V / frame.N**2, rel=1e-10)  # E v = V (unbiased)


def test_hajek_gets_the_second_stage_term_of_its_linearised_values():
    """Hajek SE = the two-stage formula applied to y - ybar_w, over N_hat (SSW 1992, sec. 5.7 and Result 4.3.1)."""
    frame, _ = unequal_frame()
    d = Cluster("c", clusters=3, units_per_cluster=2)
    d.check(frame)
    C, m = 6, 3
    blk, _ = next(iter(enumerate_design(d, frame)))
    out = ESTIMATORS["hajek"](blk, frame.N, frame.V, 0.95, frame.layout)
    y = frame.y[:, 0]
    members = [y[frame.cluster_units[frame.cluster_offsets[c]:frame.cluster_offsets[c + 1]]] for c in range(C)]
    for b in range(blk.B):
        vals = blk.sums[b, :, 0]
        # which clusters and units this sample holds, from its (distinct) y values
        sample = [(len(yc), yc[np.isin(yc, vals)]) for yc in members if np.isin(yc, vals).any()]
        assert len(sample) == m and sum(len(ys) for _, ys in sample) == 2 * m
        nhat = C / m * sum(M for M, _ in sample)
        ybar = cochran_two_stage(C, m, sample)[0] / nhat
        _, v, _ = cochran_two_stage(C, m, [(M, ys - ybar) for M, ys in sample])  # on the residuals
        assert out.estimate[b, 0] == pytest.approx(ybar, rel=1e-12)
        assert out.se[b, 0] ** 2 == pytest.approx(v / nhat**2, rel=1e-10)


def test_take_all_coverage_binomial():
    """Every cluster taken, 10 of 30 units in each: 95% intervals must cover at 95% (exact binomial test)."""
    rng = np.random.default_rng(12)
    C, M = 20, 30
    df = pd.DataFrame({"plot": np.repeat(np.arange(C), M),
                       "y": np.repeat(rng.normal(50, 10, C), M) + rng.normal(0, 5, C * M)})
    frame = Frame.from_dataframe(df, target="y", cluster="plot")
    d = Cluster("all plots", clusters=C, units_per_cluster=10)
    d.check(frame)
    R = 4_000
    blk = d.draw(frame, np.random.default_rng(3), R)
    out = ESTIMATORS["ht"](blk, frame.N, frame.V, 0.95, frame.layout)
    truth = float(frame.mean[0])
    hits = int(((out.lower[:, 0] <= truth) & (truth <= out.upper[:, 0])).sum())
    # two-sided exact binomial test of coverage = 0.95 (scipy.stats.binomtest), fixed seed
    assert stats.binomtest(hits, R, 0.95).pvalue > 1e-3
    assert (out.se[:, 0] > 0).all()


def test_variance_option_is_checked():
    frame, _ = unequal_frame()
    with pytest.raises(InputError, match="variance = 'psu' is not available"):
        Cluster("c", clusters=3, units_per_cluster=2, variance="psu").check(frame)
    with pytest.raises(InputError, match="two_stage"):
        StratifiedCluster("z", clusters=4, variance="two-stage").check(frame)
    assert DESIGN_CLASSES["cluster"].variances[0] == "two_stage"
    assert StratifiedCluster("z", clusters=4).variance_name == "two_stage"


def test_stratified_cluster_size_is_said_in_clusters_with_expected_units():
    """The size of a cluster design counts clusters; the expected units sum the pi_k (SSW 1992, sec. 2.6)."""
    from samplewright.report.figures import cell_label
    from samplewright.report.verdict import size_text, verdict_sentence

    frame, _ = unequal_frame()
    d = StratifiedCluster("zones", clusters=4, units_per_cluster=2)
    d.check(frame)
    expected = d.expected_n(frame)
    assert expected == pytest.approx(4 * 2)  # every plot has at least 2 units: 2 per drawn plot
    note = d.notes(frame)[0]
    assert "clusters = 4" in note and "about 8 units expected" in note
    pick = {"design": "zones", "method": "stratified_cluster", "size": 4, "estimator": "ht", "mean_n": expected,
            "mean_cost": 10.0, "p90_cost": 10.0, "moe": 1.0, "moe_mcse": 0.1, "coverage": 0.95, "published_moe": 1.1}
    assert size_text("stratified_cluster", 4, expected) == "4 clusters (about 8 units)"
    text = verdict_sentence({"pick": "cheapest_meeting_moe", "cheapest_meeting_moe": pick})
    assert ": 4 clusters (about 8 units)" in text and "4 units" not in text
    assert cell_label("zones", "stratified_cluster", 4, expected) == "zones, 4 clusters (about 8 units expected)"
    assert cell_label("simple", "srs", 40) == "simple, n = 40"


def test_take_all_with_one_unit_per_cluster_is_noted():
    """One unit per certainty cluster: no within-cluster variance can be estimated (s_2i^2 needs k_i >= 2)."""
    frame, _ = unequal_frame()
    assert any("cannot be estimated" in n for n in Cluster("all", clusters=6, units_per_cluster=1).notes(frame))
    assert not Cluster("all", clusters=6, units_per_cluster=2).notes(frame)
    assert not Cluster("some", clusters=3, units_per_cluster=1).notes(frame)
    d = StratifiedCluster("zones", clusters=5, cluster_allocation="equal", units_per_cluster=1)
    d.check(frame)
    assert any("3 cluster(s) are taken with certainty and one unit" in n for n in d.notes(frame))


def test_a_replicate_constant_spread_by_slot_shares_adds_no_variance():
    """Non-response adjustments spread a replicate constant over the positions; with two stages and
    unequal takes (capped clusters) it must add nothing to the two-stage v (both of its terms are
    sums of squared deviations, Cochran 1977, Thm 11.2)."""
    from samplewright.estimation.two_stage_variance import slot_shares, two_stage_variance

    frame, _ = unequal_frame()
    d = Cluster("capped", clusters=3, units_per_cluster=4, cap_units=True)
    d.check(frame)
    blk = d.draw(frame, np.random.default_rng(2), 50)
    assert blk.mask is not None  # some chosen clusters have 3 units: unequal takes
    share = slot_shares(blk)
    np.testing.assert_allclose(share.sum(axis=1), 3.0)  # one per cluster
    v = two_stage_variance(7.5 * share[..., None], blk)
    np.testing.assert_allclose(v, 0.0, atol=1e-9)
