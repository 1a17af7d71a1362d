"""Ratio, GREG and post-stratified estimators against published closed forms and identities.

Sources, beside each check:
- Cochran 1977, Sampling Techniques, ch. 6 (ratio estimator) and ch. 7 (regression
  estimator): the large-sample variances of the estimated mean under SRS without replacement.
- Sarndal, Swensson & Wretman 1992 (SSW), Model Assisted Survey Sampling, ch. 6-7: GREG,
  its g-weights and their calibration property, post-stratification (sec. 7.6).
- Morris, White & Crowther 2019, Statistics in Medicine 38:2074-2102, Table 6: Monte Carlo
  standard errors of simulated means and variances.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from conftest import Z, assert_coverage_is_nominal

from samplewright import Frame
from samplewright.designs import DESIGN_CLASSES, SRS, Stratified
from samplewright.errors import InputError
from samplewright.estimation.registry import ESTIMATORS
from samplewright.simulation.scenario import scenario_from_dict

AUX = ("ratio", "greg", "poststrat")


# ------------------------------------------------------------------ frames (invented, for exercising code)
def _linear_frame(N=4000, seed=7):
    """y roughly proportional to x with a positive intercept, x gamma-distributed (CV 0.35)."""
    rng = np.random.default_rng(seed)
    x = rng.gamma(8.0, 10.0, N)
    y = 20.0 + 2.5 * x + rng.normal(0.0, 12.0, N) * np.sqrt(x / 80.0)
    return Frame.from_dataframe(pd.DataFrame({"y": y, "x": x}), target="y", auxiliary=["x"])


def _structured_df(N=600, seed=5):
    """Strata, clusters nested in strata, a size measure, two auxiliaries, a 0/1 target."""
    rng = np.random.default_rng(seed)
    cl = np.arange(N) // 10
    band = np.array(["a", "b", "c"])[cl % 3]
    size = rng.gamma(3.0, 10.0, N)
    x2 = rng.normal(5.0, 2.0, N)
    y = 4.0 + 2.0 * size + 3.0 * x2 + rng.normal(0.0, 8.0, N)
    flag = (rng.random(N) < 0.2 + 0.01 * size).astype(float)
    return pd.DataFrame({"y": y, "flag": flag, "size": size, "x2": x2, "band": band, "cl": cl,
                         "const": 5.0, "reg": rng.choice(["n", "s", "w"], N), "in_a": (band == "a") * 1.0})


def _all_designs():
    """One instance of every registered design, at a modest size."""
    out = []
    for method, cls in DESIGN_CLASSES.items():
        key = cls.size_key
        extra = {"replace": True} if method == "pps" else {}  # pps is the with-replacement method
        out.append(cls(method, **{key: 8 if key == "clusters" else 40}, **extra))
    out.append(DESIGN_CLASSES["cluster"]("two-stage", clusters=8, units_per_cluster=4))
    return out


def _draw(design, frame, B=40, seed=3):
    design.check(frame)
    return design.draw(frame, np.random.default_rng(seed), B)


def _run(name, block, frame, conf=0.95):
    return ESTIMATORS[name](block, frame.N, frame.V, conf, frame.layout)


# ------------------------------------------------------------------ closed forms under SRS
R_MC = 20_000
N_SRS = 400  # n large enough that the neglected terms (relative order 1/n) are below the MCSE


def _simulate(frame, name, n=N_SRS, R=R_MC, seed=11):
    design = SRS("s", n=n)
    est, var = [], []
    for b in range(R // 1000):
        blk = design.draw(frame, np.random.default_rng([seed, b]), 1000)
        o = _run(name, blk, frame)
        est.append(o.estimate[:, 0])
        var.append(o.se[:, 0] ** 2)
    return np.concatenate(est), np.concatenate(var)


def _variance_mcse(x):
    """MCSE of the sample variance of x: sqrt((m4 - s^4) / R) (large-R form; Morris et al. 2019
    give the normal-theory special case empSE / sqrt(2 (R - 1)) for the SE)."""
    d = x - x.mean()
    return np.sqrt((np.mean(d**4) - np.mean(d**2) ** 2) / len(x))


def _check_variance(est, var, closed):
    # The closed forms are first order (Cochran 1977, sec. 6.3 and 7.2: large-sample forms whose
    # neglected terms are of relative order 1/n).  On this near-proportional frame at n = 400 those
    # terms are below the Monte Carlo resolution, so both checks are plain z-bounds on the
    # replicates' own MCSEs (Morris, White & Crowther 2019, Table 6): the empirical variance with
    # the fourth-moment MCSE, the mean estimated variance with SD / sqrt(R).
    emp = est.var(ddof=1)
    assert abs(emp - closed) < Z * _variance_mcse(est), (emp, closed)
    mean_v = var.mean()
    assert abs(mean_v - closed) < Z * var.std(ddof=1) / np.sqrt(len(var)), (mean_v, closed)


def test_ratio_variance_matches_cochran_closed_form():
    # Cochran 1977, ch. 6: V(ybar_R) ~ (1 - f) / n (S_y^2 - 2 R S_yx + R^2 S_x^2), R = Ybar / Xbar
    f = _linear_frame()
    y, x = f.y[:, 0], f.aux[:, 0]
    R = y.mean() / x.mean()
    S = np.cov(y, x, ddof=1)
    closed = (1 - N_SRS / f.N) / N_SRS * (S[0, 0] - 2 * R * S[0, 1] + R**2 * S[1, 1])
    est, var = _simulate(f, "ratio")
    _check_variance(est, var, closed)
    # and the ratio estimator's bias is O(1/n): within MCSE plus |B| <= sd / sqrt(n) x CV(xbar)
    # (Cochran 1977, sec. 6.8, the bound |bias| / sigma <= CV of xbar)
    cv_xbar = np.sqrt((1 - N_SRS / f.N) / N_SRS) * x.std(ddof=1) / x.mean()
    assert abs(est.mean() - y.mean()) < Z * est.std() / np.sqrt(len(est)) + cv_xbar * est.std()


def test_regression_variance_matches_cochran_closed_form():
    # Cochran 1977, ch. 7: V(ybar_lr) ~ (1 - f) / n S_y^2 (1 - rho^2); GREG with an intercept and
    # one auxiliary under SRS is the classical regression estimator ybar + b (Xbar - xbar)
    f = _linear_frame()
    y, x = f.y[:, 0], f.aux[:, 0]
    rho = np.corrcoef(y, x)[0, 1]
    closed = (1 - N_SRS / f.N) / N_SRS * y.var(ddof=1) * (1 - rho**2)
    est, var = _simulate(f, "greg")
    _check_variance(est, var, closed)


def test_greg_one_auxiliary_is_the_classical_regression_estimator():
    # Cochran 1977, sec. 7.1: ybar_lr = ybar + b (Xbar - xbar), b the least-squares slope
    f = _linear_frame(N=500)
    d = SRS("s", n=50)
    blk = d.draw(f, np.random.default_rng(2), 5, keep_units=True)
    o = _run("greg", blk, f)
    for r in range(5):
        ys, xs = f.y[blk.units[r], 0], f.aux[blk.units[r], 0]
        b = np.polyfit(xs, ys, 1)[0]
        assert o.estimate[r, 0] == pytest.approx(ys.mean() + b * (f.aux[:, 0].mean() - xs.mean()), rel=1e-10)


# ------------------------------------------------------------------ exact identities, every design
@pytest.fixture(scope="module")
def structured():
    return _structured_df()


@pytest.mark.parametrize("design", _all_designs(), ids=lambda d: d.label)
def test_greg_with_intercept_only_equals_hajek(design, structured):
    # SSW 1992, sec. 7.4 (from memory): with x_k = 1 the GREG estimator is N times the Hajek mean,
    # and the g-weighted residual variance (g_k = N / N_hat) is the Hajek linearised variance
    f = Frame.from_dataframe(structured, target=["y", "flag"], stratum="band", cluster="cl", size="size")
    blk = _draw(design, f)
    g, h = _run("greg", blk, f), _run("hajek", blk, f)
    np.testing.assert_allclose(g.estimate, h.estimate, rtol=1e-10)
    np.testing.assert_allclose(g.se, h.se, rtol=1e-8, atol=1e-12)


@pytest.mark.parametrize("design", _all_designs(), ids=lambda d: d.label)
def test_ratio_with_constant_auxiliary(design, structured):
    # with x constant, R_hat x = the Hajek mean; where the weights sum to N in every sample
    # (SRS, stratified SRS, systematic) it is also the HT estimator, SE included (Cochran 1977,
    # sec. 6.2: the ratio estimate reduces to the sample mean when x does not vary)
    f = Frame.from_dataframe(structured, target=["y", "flag"], stratum="band", cluster="cl", size="size",
                             auxiliary=["const"])
    blk = _draw(design, f)
    r = _run("ratio", blk, f)
    np.testing.assert_allclose(r.estimate, _run("hajek", blk, f).estimate, rtol=1e-10)
    if design.method in ("srs", "stratified", "systematic") and not getattr(design, "replace", False):
        ht = _run("ht", blk, f)
        np.testing.assert_allclose(r.estimate, ht.estimate, rtol=1e-10)
        np.testing.assert_allclose(r.se, ht.se, rtol=1e-8)


@pytest.mark.parametrize("allocation", ["proportional", "neyman", "equal"])
def test_poststratification_on_design_strata_is_the_stratified_estimator(allocation, structured):
    # Cochran 1977, sec. 5A.9, and SSW 1992, sec. 7.6: post-strata that are the design strata
    # give N_h / N_hat_h = 1 and residuals from the stratum means, i.e. the stratified estimator
    f = Frame.from_dataframe(structured, target=["y", "flag"], stratum="band", poststratum="band")
    blk = _draw(Stratified("st", n=60, allocation=allocation), f, B=200)
    p, ht = _run("poststrat", blk, f), _run("ht", blk, f)
    np.testing.assert_allclose(p.estimate, ht.estimate, rtol=1e-12)
    np.testing.assert_allclose(p.se, ht.se, rtol=1e-9)
    np.testing.assert_allclose(p.lower, ht.lower, rtol=1e-9)


@pytest.mark.parametrize("design", _all_designs(), ids=lambda d: d.label)
def test_calibration_reproduces_known_totals(design, structured):
    # SSW 1992, sec. 6.5 (calibration property of the g-weights, from memory):
    # sum_s w_k g_k x_k = X exactly, so GREG estimates each auxiliary's mean without error;
    # post-stratified weights reproduce every post-stratum's count (SSW sec. 7.6)
    f = Frame.from_dataframe(structured, target=["y", "size", "x2", "in_a"], stratum="band", cluster="cl",
                             size="size", auxiliary=["size", "x2"], poststratum="band")
    blk = _draw(design, f)
    g = _run("greg", blk, f)
    np.testing.assert_allclose(g.estimate[:, 1], structured["size"].mean(), rtol=1e-9)
    np.testing.assert_allclose(g.estimate[:, 2], structured["x2"].mean(), rtol=1e-9)
    assert np.all(g.se[:, 1:3] <= 1e-6 * np.abs(g.estimate[:, 1:3]))
    p = _run("poststrat", blk, f)
    # replicates that reached every post-stratum (an empty one falls back to the sample mean);
    # the systematic design's interval lines up with the band pattern and may miss a band always
    sums = np.where(blk.mask[..., None], blk.sums, 0.0) if blk.mask is not None else blk.sums
    full = (sums[..., f.layout.post].sum(axis=1) > 0).all(axis=1)
    assert full.any() or design.method == "systematic"
    np.testing.assert_allclose(p.estimate[full, 3], structured["in_a"].mean(), rtol=1e-9)
    assert np.all(p.se[full, 3] < 1e-9)


@pytest.mark.parametrize("design", _all_designs(), ids=lambda d: d.label)
@pytest.mark.parametrize("name", ["ht", "hajek", *AUX])
def test_several_targets_match_one_at_a_time(design, name, structured):
    # V > 1: every estimator treats the targets column by column (same draws, same numbers)
    targets = ["y", "flag", "x2"]
    kw = {"stratum": "band", "cluster": "cl", "size": "size", "auxiliary": ["size"], "poststratum": "band"}
    f = Frame.from_dataframe(structured, target=targets, **kw)
    many = _run(name, _draw(design, f), f)
    assert many.estimate.shape == (40, 3)
    for v, t in enumerate(targets):
        f1 = Frame.from_dataframe(structured, target=t, **kw)
        one = _run(name, _draw(design, f1), f1)
        np.testing.assert_allclose(many.estimate[:, v], one.estimate[:, 0], rtol=1e-9)
        np.testing.assert_allclose(many.se[:, v], one.se[:, 0], rtol=1e-8, atol=1e-12)
        np.testing.assert_allclose(many.upper[:, v], one.upper[:, 0], rtol=1e-9)


def test_a_binary_target_is_labelled_a_proportion(structured):
    f = Frame.from_dataframe(structured, target=["y", "flag"], domain="reg")
    assert f.layout.proportions == ("flag", "flag[reg=n]", "flag[reg=s]", "flag[reg=w]")


def test_coverage_of_aux_estimators_under_srs():
    # each interval's coverage against the nominal 95%: exact two-sided binomial test at
    # alpha = 1e-3 (scipy.stats.binomtest; Morris et al. 2019, coverage as a binomial proportion)
    f = _linear_frame()
    for name in AUX[:2]:
        blk = SRS("s", n=N_SRS).draw(f, np.random.default_rng(5), 4000)
        o = _run(name, blk, f)
        hits = np.sum((o.lower[:, 0] <= f.mean[0]) & (f.mean[0] <= o.upper[:, 0]))
        assert_coverage_is_nominal(hits, 4000, 0.95, name)


# ------------------------------------------------------------------ scenario keys
def _doc(frame_extra=None, estimators=("ht", "ratio")):
    return {"frame": {"synthetic": {"units": 300, "seed": 3, "size_correlation": 0.8}, **(frame_extra or {})},
            "design": [{"label": "simple", "method": "srs", "n": 30, "estimators": list(estimators)}]}


def test_scenario_refuses_ratio_without_auxiliary():
    with pytest.raises(InputError, match=r"design 'simple': estimator 'ratio' needs auxiliary"):
        scenario_from_dict(_doc())


def test_scenario_refuses_poststrat_without_poststratum():
    with pytest.raises(InputError, match=r"estimator 'poststrat' needs poststratum"):
        scenario_from_dict(_doc({"auxiliary": ["size"]}, estimators=("poststrat",)))


def test_unknown_auxiliary_column_is_named():
    sc = scenario_from_dict(_doc({"auxiliary": ["sise"]}))
    with pytest.raises(InputError, match=r"auxiliary column 'sise' is not in the frame \(did you mean 'size'"):
        sc.load_frame()


def test_missing_auxiliary_value_is_refused_with_its_row():
    df = pd.DataFrame({"y": [1.0, 2.0, 3.0], "x": [1.0, np.nan, 2.0]})
    with pytest.raises(InputError, match=r"auxiliary column 'x' has missing .* row\(s\) 3"):
        Frame.from_dataframe(df, target="y", auxiliary="x")


def test_auxiliary_key_type_is_checked():
    with pytest.raises(InputError, match=r"auxiliary must be a column name or a non-empty list"):
        scenario_from_dict(_doc({"auxiliary": []}))


def test_run_with_every_estimator_end_to_end():
    from samplewright.api import run

    sc = scenario_from_dict({
        "frame": {"synthetic": {"units": 400, "seed": 2, "size_correlation": 0.9}, "auxiliary": ["size"]},
        "design": [{"label": "simple", "method": "srs", "n": 60, "estimators": ["ht", "hajek", "ratio", "greg"]},
                   {"label": "every k-th", "method": "systematic", "n": 60, "estimators": ["greg"]}]})
    res = run(sc, replicates=300, seed=1)
    s = res.summary
    assert list(s["estimator"]) == ["ht", "hajek", "ratio", "greg", "greg"]
    assert s["replicates"].eq(300).all() and s["truth"].nunique() == 1
    # the auxiliary is strongly correlated with y: GREG beats HT (Cochran 1977, sec. 7.3:
    # V_lr / V_srs = 1 - rho^2), here by far more than the MCSE of the two empirical SEs
    ht, gr = s.iloc[0], s.iloc[3]
    assert gr["empirical_se"] + Z * gr["empirical_se_mcse"] < ht["empirical_se"] - Z * ht["empirical_se_mcse"]


@pytest.mark.parametrize("method", ["pps_systematic", "sampford", "pps", "pareto"])
def test_ratio_on_the_size_measure_equals_ht_under_pips(method, structured):
    # with pi_k proportional to x_k (certainty units at pi = 1), the HT (or Hansen-Hurwitz)
    # estimate of X is exact in every sample, so R_hat X = t_y: the ratio estimator on the size
    # measure is the HT estimator (SSW 1992, sec. 3.6 and 7.3; Cochran 1977, sec. 9A.3)
    f = Frame.from_dataframe(structured, target=["y", "flag"], size="size", auxiliary=["size"])
    blk = _draw(DESIGN_CLASSES[method](method, n=40, **({"replace": True} if method == "pps" else {})), f)
    np.testing.assert_allclose(_run("ratio", blk, f).estimate, _run("ht", blk, f).estimate, rtol=1e-10)


def test_expense_audit_scenario_runs():
    from pathlib import Path

    from samplewright.api import run
    from samplewright.simulation.scenario import load_scenario

    sc = load_scenario(Path(__file__).parents[1] / "scenarios" / "expense_audit_pps.toml")
    res = run(sc, replicates=40, seed=3)
    s = res.summary
    assert set(s["method"]) == {"srs", "stratified", "pps_systematic", "sampford"}
    assert set(s["estimator"]) == {"ht", "hajek", "ratio", "greg"}
    assert "overpayment[region=east]" in set(s["variable"]) and len(set(s["variable"])) == 9
    assert res.info["frame"]["proportions"][0] == "overpaid"
    ratio_vs_ht = s[s["method"] == "sampford"].pivot_table(index=["size", "variable"], columns="estimator",
                                                           values="mean_estimate")
    # the PPS designs select on the ratio's auxiliary: ratio == HT for the targets (see above)
    targets = ratio_vs_ht.index.get_level_values("variable").isin(["approved", "overpayment", "overpaid"])
    np.testing.assert_allclose(ratio_vs_ht.loc[targets, "ratio"], ratio_vs_ht.loc[targets, "ht"], rtol=1e-10)


# ------------------------------------------------------------------ per-sample formulas, computed by hand
def _srs_samples(f, n=30, B=8, seed=6):
    blk = SRS("s", n=n).draw(f, np.random.default_rng(seed), B, keep_units=True)
    return blk, blk.units


def test_ratio_se_is_cochrans_formula_sample_by_sample():
    # Cochran 1977, sec. 6.4 (from memory): v(ybar_R) = (1 - f) / n * sum (y - R_hat x)^2 / (n - 1)
    f = _linear_frame(N=600)
    n = 30
    blk, units = _srs_samples(f, n)
    o = _run("ratio", blk, f)
    X = f.aux[:, 0].mean()
    for r, u in enumerate(units):
        y, x = f.y[u, 0], f.aux[u, 0]
        R = y.mean() / x.mean()
        assert o.estimate[r, 0] == pytest.approx(R * X, rel=1e-12)
        v = (1 - n / f.N) / n * ((y - R * x) ** 2).sum() / (n - 1)
        assert o.se[r, 0] ** 2 == pytest.approx(v, rel=1e-10)


def test_greg_se_and_domain_mean_from_hand_computed_g_weights():
    # SSW 1992, sec. 6.5-6.6 (from memory): g_k = 1 + (X~ - X~_hat)' (sum_s w x~ x~')^-1 x~_k,
    # e_k = y_k - x~_k' B_hat; under SRS v = N^2 (1 - f) / n s^2(g e) and the domain mean with
    # the calibrated weights is sum_s w g y d / sum_s w g d (SSW sec. 10.5 style)
    df = _structured_df()
    f = Frame.from_dataframe(df, target="y", auxiliary=["size", "x2"], domain="reg", domains=["s"])
    n = 40
    blk, units = _srs_samples(f, n)
    o = _run("greg", blk, f)
    Xt = np.array([f.N, df["size"].sum(), df["x2"].sum()])
    w = f.N / n
    for r, u in enumerate(units):
        xs = np.column_stack([np.ones(n), df["size"].to_numpy()[u], df["x2"].to_numpy()[u]])
        ys = df["y"].to_numpy()[u]
        M = w * xs.T @ xs
        B = np.linalg.solve(M, w * xs.T @ ys)
        g = 1 + xs @ np.linalg.solve(M, Xt - w * xs.sum(axis=0))
        np.testing.assert_allclose(w * (g[:, None] * xs).sum(axis=0), Xt, rtol=1e-10)  # calibration
        e = ys - xs @ B
        assert o.estimate[r, 0] == pytest.approx((w * g * ys).sum() / f.N, rel=1e-10)
        v = (1 - n / f.N) / n * np.var(g * e, ddof=1)
        assert o.se[r, 0] ** 2 == pytest.approx(v, rel=1e-8)
        d = (df["reg"].to_numpy()[u] == "s")
        assert o.estimate[r, 1] == pytest.approx((g * ys * d).sum() / (g * d).sum(), rel=1e-10)


def test_poststrat_se_from_hand_computed_residuals():
    # SSW 1992, sec. 7.6 (from memory): g_k = N_q / N_hat_q, e_k = y_k - ybar_sq; under SRS
    # v = N^2 (1 - f) / n s^2(g e), divided by N^2 for the mean
    df = _structured_df()
    f = Frame.from_dataframe(df, target="y", poststratum="band")
    n = 45
    blk, units = _srs_samples(f, n)
    o = _run("poststrat", blk, f)
    Nq = df["band"].value_counts()
    for r, u in enumerate(units):
        s = df.iloc[u]
        nq = s["band"].value_counts()
        if len(nq) < 3:
            continue
        g = (Nq[s["band"]].to_numpy() / (f.N / n)) / nq[s["band"]].to_numpy()
        e = s["y"].to_numpy() - s.groupby("band")["y"].transform("mean").to_numpy()
        est = sum(Nq[q] * s.loc[s["band"] == q, "y"].mean() for q in Nq.index) / f.N
        assert o.estimate[r, 0] == pytest.approx(est, rel=1e-12)
        assert o.se[r, 0] ** 2 == pytest.approx((1 - n / f.N) / n * np.var(g * e, ddof=1), rel=1e-9)
