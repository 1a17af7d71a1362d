"""Response models in the rehearsal, checked against closed forms and reference distributions.

- Missing completely at random (MCAR): the respondents of an SRS are themselves an SRS of
  the random size n_r ~ Binomial(n, p), so the respondent mean is unbiased and
  V = E[(1/n_r - 1/N)] S^2, which to first order is the SRS variance at the expected
  respondent count, (1/(n p) - 1/N) S^2 (Cochran 1977, Sampling Techniques, ch. 13: a
  random subsample of respondents; eq. 2.8 for the SRS variance).  E[1/n_r] is summed
  exactly over scipy.stats.binom.
- Rates per stratum: the respondent mean converges to sum_h W_h r_h Ybar_h / sum_h W_h r_h,
  biased by that minus Ybar (the non-response bias, Cochran 1977, sec. 13.2: the respondent
  mean estimates the mean of the responding part of the population; from memory); the
  weighting-class estimator within strata, sum_h W_h ybar_rh, is unbiased (within each
  stratum the respondents are an SRS).  For an equal-weight sample the unadjusted
  estimator's exact expectation E[sum_h n_rh Ybar_h / sum_h n_rh] is summed here over the
  independent binomial n_rh, so the closed form is checked with its O(1/n) remainder known.
- Clustered response redrawn per replicate: the respondents of one cluster of M units are
  BetaBinomial(M, a, b) (scipy.stats.betabinom), independent across clusters.
- Non-ignorable response (logistic on the target): to first order the weighting-class
  estimator converges to sum_h W_h (sum_{k in h} p_k y_k / sum_{k in h} p_k), not Ybar.

MCSEs follow Morris, White & Crowther (2019), Table 6; tolerances are Z x MCSE (conftest).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from conftest import Z
from scipy import stats

from samplewright.api import run
from samplewright.errors import InputError
from samplewright.simulation.scenario import scenario_from_dict


def variance_tolerance(x):
    """Z x MCSE of a sample variance, from the replicates' fourth moment (Morris et al. 2019)."""
    d = x - x.mean()
    m4, v = float(np.mean(d**4)), float(np.mean(d**2))
    return Z * math.sqrt((m4 - v * v) / len(x))


def scenario(tmp_path, df, designs, frame_roles, **tables):
    path = tmp_path / "frame.csv"
    df.to_csv(path, index=False)
    doc = {"frame": {"path": "frame.csv", **frame_roles}, "design": designs, **tables}
    return scenario_from_dict(doc, base=tmp_path)


def rows(res, design, estimator="hajek"):
    s = res.summary
    return s[(s.design == design) & (s.estimator == estimator)].iloc[0]


def reps(res, design, estimator="hajek"):
    r = res.replicates
    return r[(r.design == design) & (r.estimator == estimator)]


@pytest.fixture(scope="module")
def population():
    """An invented frame of 1,000 homes in two strata (values only exercise the code)."""
    rng = np.random.default_rng(11)
    zone = np.repeat(["near", "far"], [600, 400])
    y = np.where(zone == "near", 30.0, 55.0) + rng.gamma(2.0, 6.0, 1000)
    return pd.DataFrame({"y": y, "zone": zone, "village": np.arange(1000) // 20})


def test_mcar_respondent_mean_unbiased_with_srs_variance(tmp_path, population):
    n, p, N, R = 60, 0.6, 1000, 20000
    sc = scenario(tmp_path, population, [{"label": "simple", "method": "srs", "n": n, "estimators": ["hajek"]}],
                  {"target": "y"}, response={"model": "constant", "rate": p})
    res = run(sc, replicates=R, seed=5)
    x = reps(res, "simple")["estimate"].to_numpy()
    y = population["y"].to_numpy()
    Ybar, S2 = y.mean(), y.var(ddof=1)
    assert abs(x.mean() - Ybar) < Z * x.std(ddof=1) / math.sqrt(R)
    k = np.arange(1, n + 1)
    pmf = stats.binom.pmf(k, n, p)
    exact = float(np.sum(pmf * (1.0 / k - 1.0 / N)) / pmf.sum()) * S2  # Cochran ch. 13, SRS of size n_r
    assert abs(x.var(ddof=1) - exact) < variance_tolerance(x)
    first_order = (1.0 / (n * p) - 1.0 / N) * S2  # the SRS formula at the expected respondent count
    assert abs(x.var(ddof=1) - first_order) < variance_tolerance(x)  # its 2nd-order gap is below the MC error
    completed = reps(res, "simple")["n"].to_numpy()
    assert abs(completed.mean() - n * p) < Z * math.sqrt(n * p * (1 - p) / R)  # binomial mean
    row = rows(res, "simple")
    assert abs(row["response_rate"] - p) < Z * math.sqrt(p * (1 - p) / (n * R))


def test_same_replicate_draws_with_and_without_nonresponse(tmp_path, population):
    designs = [{"label": "simple", "method": "srs", "n": 50, "estimators": ["ht", "hajek"]},
               {"label": "villages", "method": "cluster", "clusters": 6, "estimators": ["hajek"]},
               {"label": "two-stage", "method": "cluster", "clusters": 6, "units_per_cluster": 5,
                "estimators": ["hajek"]},
               {"label": "zones", "method": "stratified", "n": 40, "estimators": ["ht"]}]
    roles = {"target": "y", "cluster": "village", "stratum": "zone"}
    population = population.assign(zone=np.where(population["village"] < 30, "near", "far"))
    full = run(scenario(tmp_path, population, designs, roles), replicates=700, seed=9, block_size=300)
    sub = tmp_path / "b"
    sub.mkdir()
    nr = run(scenario(sub, population, designs, roles, response={"model": "constant", "rate": 0.5}),
             replicates=700, seed=9, block_size=300)
    for design, est in (("simple", "ht"), ("simple", "hajek"), ("villages", "hajek"), ("two-stage", "hajek"),
                        ("zones", "ht")):
        a, b = reps(full, design, est), reps(nr, design, est)
        np.testing.assert_allclose(b["full_estimate"].to_numpy(), a["estimate"].to_numpy(), rtol=1e-12)
        np.testing.assert_allclose(b["full_se"].to_numpy(), a["se"].to_numpy(), rtol=1e-9)
        assert not np.allclose(b["estimate"].to_numpy(), a["estimate"].to_numpy())
    row = rows(nr, "simple")
    total = row["sampling_bias"] + row["frame_bias"] + row["nonresponse_bias"]
    assert abs(total - row["bias"]) < 1e-9  # the split adds up exactly
    assert row["frame_bias"] == pytest.approx(0.0, abs=1e-9)  # no frame errors: a census is exact


def test_stratum_rates_class_adjustment_unbiased_unadjusted_biased_by_closed_form(tmp_path, population):
    rates = {"near": 0.85, "far": 0.45}
    R = 6000
    designs = [
        {"label": "unadjusted", "method": "stratified", "n": 100, "allocation": "proportional",
         "estimators": ["hajek"]},
        {"label": "class", "method": "stratified", "n": 100, "allocation": "proportional",
         "adjustment": "class", "estimators": ["hajek"]},
    ]
    sc = scenario(tmp_path, population, designs, {"target": "y", "stratum": "zone"},
                  response={"model": "stratum", "rates": rates})
    res = run(sc, replicates=R, seed=21)
    y, zone = population["y"].to_numpy(), population["zone"].to_numpy()
    Ybar = y.mean()
    W = {h: np.mean(zone == h) for h in rates}
    Yh = {h: y[zone == h].mean() for h in rates}
    closed = sum(W[h] * rates[h] * Yh[h] for h in rates) / sum(W[h] * rates[h] for h in rates) - Ybar
    # exact expectation of sum n_rh Ybar_h / sum n_rh with n_near = 60, n_far = 40 (equal weights 10)
    k1, k2 = np.arange(61), np.arange(41)
    p1, p2 = stats.binom.pmf(k1, 60, rates["near"]), stats.binom.pmf(k2, 40, rates["far"])
    K1, K2 = np.meshgrid(k1, k2, indexing="ij")
    P = np.outer(p1, p2)
    ok = (K1 + K2) > 0
    exact = float(np.sum(P[ok] * (K1[ok] * Yh["near"] + K2[ok] * Yh["far"]) / (K1[ok] + K2[ok])) / P[ok].sum())
    x = reps(res, "unadjusted")["estimate"].to_numpy()
    mcse = x.std(ddof=1) / math.sqrt(R)
    assert abs(x.mean() - exact) < Z * mcse
    assert abs(x.mean() - Ybar - closed) < Z * mcse + abs(exact - Ybar - closed)
    assert abs(closed) > 20 * mcse  # the bias is there to be seen
    xc = reps(res, "class")["estimate"].to_numpy()
    assert abs(xc.mean() - Ybar) < Z * xc.std(ddof=1) / math.sqrt(R)
    row = rows(res, "unadjusted")
    assert abs(row["nonresponse_bias"] - closed) < Z * row["nonresponse_bias_mcse"] + abs(exact - Ybar - closed) \
        + Z * row["sampling_bias_mcse"]


def test_clustered_response_per_replicate_is_beta_binomial(tmp_path, population):
    a, b, M, m, R = 2.0, 3.0, 20, 8, 6000
    sc = scenario(tmp_path, population, [{"label": "villages", "method": "cluster", "clusters": m,
                                          "estimators": ["hajek"]}], {"target": "y", "cluster": "village"},
                  response={"model": "cluster", "a": a, "b": b, "cluster_draw": "replicate"})
    res = run(sc, replicates=R, seed=4)
    done = reps(res, "villages")["n"].to_numpy()
    bb = stats.betabinom(M, a, b)
    assert abs(done.mean() - m * bb.mean()) < Z * math.sqrt(m * bb.var() / R)
    assert abs(done.var(ddof=1) - m * bb.var()) < variance_tolerance(done)


def test_clustered_response_fixed_per_population(tmp_path, population):
    """Frame-level Beta rates are the same in every replicate: a village's respondents vary only binomially."""
    sc = scenario(tmp_path, population, [{"label": "villages", "method": "cluster", "clusters": 50,
                                          "estimators": ["hajek"]}], {"target": "y", "cluster": "village"},
                  response={"model": "cluster", "cluster_mean": 0.6, "cluster_concentration": 4.0})
    res = run(sc, replicates=400, seed=4)
    # all 50 villages every time: completed counts are sums of 1,000 independent Bernoulli(p_k)
    from samplewright.simulation.response import resolve

    p = resolve(sc.response, sc.load_frame(), {}, 4).unit  # the run's seed
    done = reps(res, "villages")["n"].to_numpy()
    assert abs(done.mean() - p.sum()) < Z * math.sqrt(np.sum(p * (1 - p)) / len(done))
    assert abs(done.var(ddof=1) - np.sum(p * (1 - p))) < variance_tolerance(done)
    beta = stats.beta(2.4, 1.6)  # 50 village rates from Beta(mean 0.6, concentration 4)
    rates = p.reshape(50, 20)[:, 0]
    assert np.all(p.reshape(50, 20) == rates[:, None])
    assert abs(rates.mean() - beta.mean()) < Z * beta.std() / math.sqrt(50)


def test_nonignorable_response_is_not_repaired_by_class_adjustment(tmp_path, population):
    R = 4000
    coef = {"y": -0.06}
    sc = scenario(tmp_path, population, [{"label": "class", "method": "stratified", "n": 300,
                                          "adjustment": "class", "estimators": ["hajek"]}],
                  {"target": "y", "stratum": "zone"},
                  response={"model": "logistic", "intercept": 3.0, "coefficients": coef})
    res = run(sc, replicates=R, seed=8)
    y, zone = population["y"].to_numpy(), population["zone"].to_numpy()
    p = 1.0 / (1.0 + np.exp(-(3.0 - 0.06 * y)))
    first_order = sum(np.mean(zone == h) * np.sum((p * y)[zone == h]) / np.sum(p[zone == h])
                      for h in ("near", "far")) - y.mean()
    x = reps(res, "class")["estimate"].to_numpy()
    mcse = x.std(ddof=1) / math.sqrt(R)
    assert first_order < -20 * mcse  # heavily contaminated homes answer less: a real downward bias
    # the stratum respondent means are ratio estimators: |bias| <= SE x CV(denominator) (Cochran 1977,
    # sec. 6.8, from memory); the denominator is the stratum response share, CV^2 <= (1 - pbar)/(n_h pbar)
    n_h = {"near": 180, "far": 120}  # proportional allocation of 300
    bound = 0.0
    for h in ("near", "far"):
        ph = p[zone == h].mean()
        se_h = math.sqrt(y[zone == h].var(ddof=1) / (n_h[h] * ph))
        bound += np.mean(zone == h) * se_h * math.sqrt((1 - ph) / (n_h[h] * ph))
    assert abs(x.mean() - y.mean() - first_order) < Z * mcse + bound


def test_attempts_and_completes_are_costed_separately(tmp_path, population):
    sc = scenario(tmp_path, population, [{"label": "simple", "method": "srs", "n": 40, "estimators": ["hajek"]}],
                  {"target": "y"}, response={"model": "constant", "rate": 0.7},
                  cost={"fixed": 500.0, "per_attempt": 3.0, "per_complete": 11.0})
    res = run(sc, replicates=300, seed=2)
    r = reps(res, "simple")
    np.testing.assert_allclose(r["cost"], 500.0 + 3.0 * r["attempted"] + 11.0 * r["n"])
    np.testing.assert_allclose(r["full_cost"], 500.0 + 3.0 * 40 + 11.0 * 40)
    row = rows(res, "simple")
    assert row["cost_per_complete"] == pytest.approx(r["cost"].mean() / r["n"].mean())
    assert row["full_response_cost_per_complete"] == pytest.approx((500.0 + 14.0 * 40) / 40)


@pytest.mark.parametrize("table, words", [
    ({"model": "sometimes"}, "not known"),
    ({"model": "constant"}, "needs rate"),
    ({"model": "constant", "rate": 0.0}, "above 0"),
    ({"model": "constant", "rate": 1.5}, "at most 1"),
    ({"model": "constant", "rate": 0.5, "rates": {"a": 1}}, "does not apply"),
    ({"model": "cluster", "a": 1.0}, "missing 'b'"),
    ({"model": "cluster", "cluster_mean": 0.5, "cluster_concentration": 2.0, "cluster_draw": "daily"},
     "cluster_draw"),
    ({"model": "logistic", "coefficients": {"y": "big"}}, "must be a number"),
])
def test_response_table_refusals(table, words):
    from samplewright.simulation.response import response_from_dict

    with pytest.raises(InputError, match=words):
        response_from_dict(table)


def test_stratum_rates_must_cover_the_frame(tmp_path, population):
    sc = scenario(tmp_path, population, [{"label": "simple", "method": "srs", "n": 40}],
                  {"target": "y", "stratum": "zone"}, response={"model": "stratum", "rates": {"near": 0.5}})
    with pytest.raises(InputError, match="no value for stratum .far."):
        run(sc, replicates=10)
    sc = scenario(tmp_path, population, [{"label": "simple", "method": "srs", "n": 40}],
                  {"target": "y", "stratum": "zone"},
                  response={"model": "stratum", "rates": {"near": 0.5, "far": 0.5, "farr": 0.2}})
    with pytest.raises(InputError, match="'farr' is not in the frame"):
        run(sc, replicates=10)


def test_results_do_not_depend_on_jobs(tmp_path, population):
    designs = [{"label": "villages", "method": "cluster", "clusters": 8, "units_per_cluster": 6,
                "estimators": ["hajek"], "adjustment": "class"}]
    sc = scenario(tmp_path, population, designs, {"target": "y", "cluster": "village", "stratum": "zone"},
                  response={"model": "cluster", "cluster_concentration": 3.0, "cluster_draw": "replicate",
                            "cluster_means": {"near": 0.8, "far": 0.4}})
    a = run(sc, replicates=600, seed=3, block_size=150).replicates
    b = run(sc, replicates=600, seed=3, block_size=150, jobs=2).replicates
    pd.testing.assert_frame_equal(a, b)


def test_cluster_means_by_stratum(tmp_path, population):
    """Village rates drawn once from Beta(mean_h c, (1 - mean_h) c): their zone means against scipy's Beta."""
    from samplewright.simulation.response import resolve

    sc = scenario(tmp_path, population.assign(zone=np.where(population["village"] < 30, "near", "far")),
                  [{"label": "v", "method": "cluster", "clusters": 5}], {"target": "y", "cluster": "village",
                                                                        "stratum": "zone"},
                  response={"model": "cluster", "cluster_concentration": 5.0,
                            "cluster_means": {"near": 0.8, "far": 0.3}})
    frame = sc.load_frame()
    rates = resolve(sc.response, frame, {}, seed=1).unit.reshape(50, 20)[:, 0]
    for lo, hi, mean in ((0, 30, 0.8), (30, 50, 0.3)):
        beta = stats.beta(mean * 5.0, (1 - mean) * 5.0)
        r = rates[lo:hi]
        assert abs(r.mean() - beta.mean()) < Z * beta.std() / math.sqrt(hi - lo)


def test_resumed_fieldwork_run_matches(tmp_path, population):
    """Finished blocks keep the fieldwork arrays: a resumed run gives the same tables."""
    import os

    sc = scenario(tmp_path, population, [{"label": "simple", "method": "srs", "n": 40, "estimators": ["hajek"],
                                          "adjustment": "class"}], {"target": "y", "stratum": "zone"},
                  response={"model": "stratum", "rates": {"near": 0.9, "far": 0.5}})
    out = tmp_path / "out"
    a = run(sc, replicates=300, seed=2, block_size=100, out=out)
    blocks = sorted(p for p in os.listdir(out / "blocks") if p.endswith(".npz"))
    os.remove(out / "blocks" / blocks[0])
    b = run(sc, out=out, resume=True)
    pd.testing.assert_frame_equal(a.replicates, b.replicates)
    pd.testing.assert_frame_equal(a.summary, b.summary)
