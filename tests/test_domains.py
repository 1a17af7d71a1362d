"""Domain means: exact enumeration, hypergeometric coverage of a proportion, and the run's rows.

A domain is the subpopulation of units with one value of ``[frame] domain``; its output
variable is named ``"<target>[<column>=<value>]"``.  Sources beside each check:
- Cochran 1977, Sampling Techniques, sec. 2.13 (domain estimates under SRS: given the
  domain sample size n_d, the domain sample is an SRS of the domain) and ch. 5 (stratified).
- Sarndal, Swensson & Wretman 1992 (SSW), sec. 10.3: the Hajek-type domain mean
  sum w y d / sum w d and its linearised variance (residuals d_k (y_k - ybar_d)).
- scipy.stats.hypergeom for the exact law of sample counts under SRS without replacement.
- Morris, White & Crowther 2019, Table 6, for Monte Carlo standard errors.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pandas as pd
import pytest
from conftest import Z, assert_coverage_is_nominal
from scipy import stats

from samplewright import Frame
from samplewright.designs import SRS
from samplewright.designs.block import SampleBlock
from samplewright.errors import InputError
from samplewright.estimation.registry import ESTIMATORS
from samplewright.simulation.engine import Cell, replicate_table, simulate
from samplewright.simulation.plan import RunPlan
from samplewright.simulation.scenario import scenario_from_dict

# ten units, two domains (invented values for exercising code)
TINY = pd.DataFrame({
    "y": [3.0, 7.0, 1.0, 9.0, 4.0, 6.0, 12.0, 2.0, 8.0, 5.0],
    "zone": ["e", "w", "e", "e", "w", "e", "w", "w", "e", "w"],
    "band": ["a"] * 5 + ["b"] * 5,
})


def _block(frame, units, weight, psu_stratum, fpc):
    """A SampleBlock of the given samples (rows of ``units``), built by hand from the frame's values."""
    units = np.asarray(units)
    return SampleBlock(sums=frame.values[units], weight=np.asarray(weight, dtype=float),
                       psu_stratum=np.asarray(psu_stratum), fpc=np.asarray(fpc, dtype=float),
                       clusters=np.zeros(len(units)), units=units)


def _est(name, blk, f):
    return ESTIMATORS[name](blk, f.N, f.V, 0.95, f.layout)


def test_domain_names_truths_and_reference_variance():
    f = Frame.from_dataframe(TINY, target="y", domain="zone")
    assert f.layout.names == ("y", "y[zone=e]", "y[zone=w]")
    truth = TINY.groupby("zone")["y"].mean()
    np.testing.assert_allclose(f.layout.truth, [TINY["y"].mean(), truth["e"], truth["w"]])
    # SRS reference variance of a domain mean: (1 - f) S_d^2 / (n P_d) (Cochran 1977, sec. 2.13)
    share = TINY["zone"].value_counts(normalize=True)
    s2 = TINY.groupby("zone")["y"].var(ddof=1)
    np.testing.assert_allclose(f.layout.S2[1:], [s2["e"] / share["e"], s2["w"] / share["w"]])


def test_srs_domain_estimates_by_exact_enumeration():
    f = Frame.from_dataframe(TINY, target="y", domain="zone")
    N, n = 10, 4
    samples = np.array(list(itertools.combinations(range(N), n)))  # all 210, equally likely
    blk = _block(f, samples, np.full(n, N / n), np.zeros(n, dtype=int), [1 - n / N])
    y, d = TINY["y"].to_numpy(), (TINY["zone"] == "e").to_numpy()
    Yd = y[d].mean()
    # HT domain mean t_yd / N_d: exactly unbiased, and its SRS variance estimator is exactly
    # unbiased (Cochran 1977, Theorem 2.4, applied to the variable y d)
    ht = _est("ht", blk, f)
    assert ht.estimate[:, 1].mean() == pytest.approx(Yd, rel=1e-12)
    assert (ht.se[:, 1] ** 2).mean() == pytest.approx(ht.estimate[:, 1].var(), rel=1e-10)
    # Hajek-type domain mean: unbiased given n_d > 0 (Cochran 1977, sec. 2.13)
    hj = _est("hajek", blk, f)
    nd = d[samples].sum(axis=1)
    assert np.all(np.isnan(hj.estimate[nd == 0, 1]))
    assert hj.estimate[nd > 0, 1].mean() == pytest.approx(Yd, rel=1e-12)
    # its linearised SE, sample by sample, against SSW 1992 sec. 10.3 for SRS:
    # v = (1 - f) n / (n - 1) sum_{s, d} (y_k - ybar_sd)^2 / n_d^2
    for r in np.flatnonzero(nd > 0):
        ys = y[samples[r]][d[samples[r]]]
        v = (1 - n / N) * n / (n - 1) * ((ys - ys.mean()) ** 2).sum() / len(ys) ** 2
        assert hj.se[r, 1] ** 2 == pytest.approx(v, rel=1e-10, abs=1e-14)
        assert hj.estimate[r, 1] == pytest.approx(ys.mean(), rel=1e-12)


def test_stratified_domain_ht_by_exact_enumeration():
    # stratified SRS, 2 of 5 in each band: HT domain mean exactly unbiased and the stratified
    # variance estimator exactly unbiased for it (Cochran 1977, Theorems 5.1 and 5.4 for y d)
    f = Frame.from_dataframe(TINY, target="y", stratum="band", domain="zone")
    a, b = list(itertools.combinations(range(5), 2)), list(itertools.combinations(range(5, 10), 2))
    samples = np.array([list(s) + list(t) for s in a for t in b])  # 100, equally likely
    blk = _block(f, samples, np.full(4, 5 / 2), [0, 0, 1, 1], [1 - 2 / 5, 1 - 2 / 5])
    ht = _est("ht", blk, f)
    for j, z in enumerate(["e", "w"]):
        truth = TINY.loc[TINY["zone"] == z, "y"].mean()
        assert ht.estimate[:, 1 + j].mean() == pytest.approx(truth, rel=1e-12)
        assert (ht.se[:, 1 + j] ** 2).mean() == pytest.approx(ht.estimate[:, 1 + j].var(), rel=1e-10)


def test_poststrat_domain_equal_to_a_poststratum_is_its_sample_mean():
    # with the domain equal to a post-stratum, the post-stratified weights N_q / N_hat_q are
    # constant within it, so its domain mean is the post-stratum's sample mean (SSW 1992, sec. 7.6)
    f = Frame.from_dataframe(TINY, target="y", poststratum="zone", domain="zone")
    blk = SRS("s", n=6).draw(f, np.random.default_rng(4), 50, keep_units=True)
    p = _est("poststrat", blk, f)
    for r in range(50):
        u = blk.units[r]
        ys = TINY["y"].to_numpy()[u][(TINY["zone"].to_numpy()[u] == "e")]
        if len(ys):
            assert p.estimate[r, 1] == pytest.approx(ys.mean(), rel=1e-12)


# ------------------------------------------------------------------ a proportion within a domain
def _binary_domain_frame(N=400, Nd=120, Md=30, M_out=70):
    y = np.zeros(N)
    zone = np.array(["in"] * Nd + ["out"] * (N - Nd))
    y[:Md] = 1.0
    y[Nd:Nd + M_out] = 1.0
    return Frame.from_dataframe(pd.DataFrame({"flag": y, "zone": zone}), target="flag", domain="zone",
                                domains=["in"])


def test_domain_proportion_coverage_is_nested_hypergeometric():
    f = _binary_domain_frame()
    N, Nd, Md, n = 400, 120, 30, 80
    P = Md / Nd
    q = stats.t.ppf(0.975, n - 1)
    fpc = 1 - n / N
    # Hajek-type domain proportion: n_d ~ Hypergeom(N, N_d, n), then k | n_d ~ Hypergeom(N_d, M_d, n_d);
    # interval phat +- t_{n-1} sqrt(fpc n / (n - 1) phat (1 - phat) / n_d) (SSW 1992, sec. 10.3, for SRS)
    exact_hajek = 0.0
    for nd in range(1, n + 1):
        p_nd = stats.hypergeom.pmf(nd, N, Nd, n)
        k = np.arange(0, nd + 1)
        ph = k / nd
        se = np.sqrt(fpc * n / (n - 1) * ph * (1 - ph) / nd)
        cover = (ph - q * se <= P) & (P <= ph + q * se)
        exact_hajek += p_nd * stats.hypergeom.pmf(k, Nd, Md, nd)[cover].sum()
    # HT domain proportion t_yd / N_d: the count k of (y d = 1) in the sample ~ Hypergeom(N, M_d, n);
    # estimate N k / (n N_d), SE from the SRS variance of y d (Cochran 1977, eq. 2.10)
    k = np.arange(0, n + 1)
    est = N * k / (n * Nd)
    s2 = (k - k**2 / n) / (n - 1)
    se = N / Nd * np.sqrt(fpc * s2 / n)
    exact_ht = stats.hypergeom.pmf(k, N, Md, n)[(est - q * se <= P) & (P <= est + q * se)].sum()

    cells = [Cell(design=SRS("s", n=n), design_index=0, size_index=0, estimators=("ht", "hajek"))]
    R = 20_000
    plan = RunPlan(frame=f, cells=tuple(cells), replicates=R, seed=23, block_size=1000)
    reps = replicate_table(simulate(plan), cells, f.layout.names)
    for name, exact in (("hajek", exact_hajek), ("ht", exact_ht)):
        g = reps[(reps["estimator"] == name) & (reps["variable"] == "flag[zone=in]")]
        assert len(g) == R
        sim = float(((g["lower"] <= P) & (P <= g["upper"])).mean())
        assert abs(sim - exact) < Z * math.sqrt(exact * (1 - exact) / R), (name, sim, exact)


# ------------------------------------------------------------------ the run's summary rows
def _domain_scenario(extra=None, replicates=None):
    doc = {
        "title": "domain check", "seed": 5, "replicates": 10_000,
        "frame": {"synthetic": {"units": 3000, "seed": 9, "mean": 50.0, "sd": 10.0,
                                "strata": [{"name": "north", "share": 0.3, "mean": 40.0, "sd": 8.0},
                                           {"name": "south", "share": 0.7, "mean": 60.0, "sd": 12.0}]},
                  "domain": "stratum", **(extra or {})},
        "design": [{"label": "simple", "method": "srs", "n": 300, "estimators": ["ht", "hajek"]}],
    }
    return scenario_from_dict(doc)


@pytest.mark.slow
def test_domain_rows_in_summary_unbiased_and_covering():
    from samplewright.api import run

    sc = _domain_scenario()
    frame = sc.load_frame()
    res = run(sc, frame=frame)
    s = res.summary.set_index(["estimator", "variable"])
    df = sc.frame.dataframe()
    assert set(s.index.get_level_values("variable")) == {"y", "y[stratum=north]", "y[stratum=south]"}
    assert res.info["frame"]["domain_variables"] == ["y[stratum=north]", "y[stratum=south]"]
    for zone in ("north", "south"):
        row = s.loc[("hajek", f"y[stratum={zone}]")]
        # truth is the exact domain mean
        assert row["truth"] == pytest.approx(df.loc[df["stratum"] == zone, "y"].mean(), rel=1e-12)
        # the Hajek-type domain mean is unbiased under SRS given n_d > 0 (Cochran 1977, sec. 2.13)
        assert abs(row["bias"]) < Z * row["bias_mcse"]
        # coverage of the t interval against the nominal level: exact two-sided binomial test at
        # alpha = 1e-3 (scipy.stats.binomtest; Morris et al. 2019, coverage as a binomial proportion)
        hits = round(row["coverage"] * row["replicates"])
        assert hits == pytest.approx(row["coverage"] * row["replicates"], abs=1e-6)  # a count of intervals
        assert_coverage_is_nominal(hits, row["replicates"], 0.95, zone)
        # design effect against (1 - f) S_d^2 / (n P_d), recomputed from the replicate table
        g = res.replicates[(res.replicates["estimator"] == "hajek")
                           & (res.replicates["variable"] == f"y[stratum={zone}]")]
        yd = df.loc[df["stratum"] == zone, "y"]
        ref = (1 - 300 / 3000) * yd.var(ddof=1) / (300 * len(yd) / 3000)
        assert row["deff"] == pytest.approx(g["estimate"].var(ddof=1) / ref, rel=1e-9)
        # under SRS the domain mean's variance is (1 - f) S_d^2 E[1 / n_d] ~ the reference times
        # 1 + (1 - P_d) / (n P_d) (delta method on n_d ~ hypergeometric; Cochran 1977, sec. 2.13):
        # deff near that, within the MCSE of a variance ratio, sqrt(2 / (R - 1)) (normal theory)
        P = len(yd) / 3000
        expected = 1.0 + (1 - P) / (300 * P)
        assert abs(row["deff"] - expected) < Z * math.sqrt(2.0 / (row["replicates"] - 1))


def test_domains_key_limits_the_domains_reported():
    sc = _domain_scenario({"domains": ["south"]})
    assert sc.load_frame().layout.names == ("y", "y[stratum=south]")


def test_unknown_domain_value_is_refused():
    sc = _domain_scenario({"domains": ["sooth"]})
    with pytest.raises(InputError, match=r"domain value 'sooth' does not occur in domain column 'stratum' "
                                         r"\(did you mean 'south'"):
        sc.load_frame()


def test_domains_without_domain_column_is_refused():
    doc = {"frame": {"synthetic": {"units": 50}, "domains": ["a"]},
           "design": [{"label": "s", "method": "srs", "n": 5}]}
    with pytest.raises(InputError, match=r"domains is given but domain"):
        scenario_from_dict(doc)


def test_exact_mode_domain_and_calibration_moments():
    # exact design moments (run --exact, every possible sample): under SRS the HT domain mean is
    # unbiased with an unbiased variance estimator (Cochran 1977, Theorem 2.4 for y d), the
    # Hajek-type domain mean is unbiased when every sample meets the domain (sec. 2.13), and the
    # GREG estimate of an auxiliary's mean has no variance at all (calibration; SSW 1992, sec. 6.5)
    from samplewright.api import run

    rng = np.random.default_rng(12)
    x = np.round(rng.gamma(3.0, 4.0, 16), 1)
    df = pd.DataFrame({"y": np.round(2 * x + rng.normal(0, 3, 16), 1), "x": x,
                       "zone": ["e"] * 8 + ["w"] * 8})
    frame = Frame.from_dataframe(df, target=["y", "x"], auxiliary=["x"], domain="zone", domains=["e"])
    sc = scenario_from_dict({"frame": {"path": "in-memory.csv", "target": ["y", "x"], "auxiliary": ["x"],
                                       "domain": "zone", "domains": ["e"]},
                             "design": [{"label": "simple", "method": "srs", "n": 9,
                                         "estimators": ["ht", "hajek", "greg"]}]})
    s = run(sc, frame=frame, exact=True).summary.set_index(["estimator", "variable"])
    assert (s["replicates"] == 11440).all()  # C(16, 9)
    for v in ("y[zone=e]", "x[zone=e]"):
        assert abs(s.loc[("ht", v), "bias"]) < 1e-10
        assert s.loc[("ht", v), "mean_se"] == pytest.approx(s.loc[("ht", v), "empirical_se"], rel=1e-10)
        assert abs(s.loc[("hajek", v), "bias"]) < 1e-10
    assert s.loc[("greg", "x"), "empirical_se"] < 1e-9
    assert s.loc[("greg", "x"), "mean_se"] < 1e-9


def test_replicates_without_domain_units_are_not_counted():
    # a rare domain (6 of 400 units) is missed by some samples of 20: P(n_d = 0) is the
    # hypergeometric pmf at 0; those replicates have no estimate and the row counts the others
    from samplewright.api import run

    zone = np.array(["rare"] * 6 + ["common"] * 394)
    df = pd.DataFrame({"y": np.arange(400.0) % 7, "zone": zone})
    frame = Frame.from_dataframe(df, target="y", domain="zone", domains=["rare"])
    sc = scenario_from_dict({"frame": {"path": "in-memory.csv", "target": "y", "domain": "zone",
                                       "domains": ["rare"]},
                             "design": [{"label": "simple", "method": "srs", "n": 20, "estimators": ["hajek"]}]})
    R = 4000
    res = run(sc, frame=frame, replicates=R, seed=4)
    row = res.summary.set_index("variable").loc["y[zone=rare]"]
    p0 = stats.hypergeom.pmf(0, 400, 6, 20)
    missed = R - row["replicates"]
    assert abs(missed - R * p0) < Z * math.sqrt(R * p0 * (1 - p0))  # binomial count of empty samples
    assert np.isfinite(row["bias"]) and np.isfinite(row["coverage"])
