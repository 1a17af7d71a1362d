"""Weighting adjustments: raking, post-stratification and weighting classes against known results.

- Raking (iterative proportional fitting) of a 2 x 2 seed table to given margins converges
  to the unique table with those margins and the seed's cross-product ratio (Deming &
  Stephan 1940, Ann. Math. Statist. 11:427-444; the ratio-preserving property of the fitted
  table, solved here by hand as a quadratic).
- Post-stratification of an SRS: V(ybar_pst) ~= (1 - f)/n sum_h W_h S_h^2
  + 1/n^2 sum_h (1 - W_h) S_h^2 (Cochran 1977, Sampling Techniques, sec. 5A.9, eq. 5A.42;
  from memory).  Applied to a stratified SRS on its own strata it is the stratified
  estimator, with the stratified variance estimator (Cochran 1977, eq. 5.7).
- Under full response a weighting-class adjustment changes nothing (every factor is 1).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from conftest import Z

from samplewright.api import run
from samplewright.errors import InputError
from samplewright.estimation.weighting import ResolvedAdjustment, rake
from samplewright.simulation.scenario import scenario_from_dict


def test_raking_two_by_two_matches_deming_stephan_solution():
    seed = np.array([[40.0, 30.0], [20.0, 10.0]])
    rows_, cols_ = np.array([60.0, 40.0]), np.array([50.0, 50.0])
    r = np.array([[0, 0, 1, 1]])
    c = np.array([[0, 1, 0, 1]])
    g, it, ok = rake(seed.reshape(1, 4), [r, c], [rows_, cols_], tol=1e-12)
    t = g.reshape(2, 2)
    assert ok[0] and it[0] > 1
    np.testing.assert_allclose(t.sum(axis=1), rows_, rtol=1e-11)
    np.testing.assert_allclose(t.sum(axis=0), cols_, rtol=1e-11)
    # by hand: x11 = a, x12 = 60 - a, x21 = 50 - a, x22 = a - 10 and a (a - 10) / ((60 - a)(50 - a)) = 2/3
    # (the seed's cross-product ratio 40 x 10 / (30 x 20)), i.e. a^2 + 190 a - 6000 = 0
    a = (-190.0 + math.sqrt(190.0**2 + 4 * 6000.0)) / 2.0
    np.testing.assert_allclose(t, [[a, 60 - a], [50 - a, a - 10]], rtol=1e-10)
    assert a == pytest.approx(27.5766, abs=1e-4)


def test_raking_three_margins_converges_and_flags_impossible_margins():
    rng = np.random.default_rng(3)
    codes = [rng.integers(0, k, (5, 300)) for k in (3, 2, 4)]
    w = rng.uniform(1.0, 3.0, (5, 300))
    controls = [np.array([200.0, 300.0, 500.0]), np.array([450.0, 550.0]), np.array([100.0, 200.0, 300.0, 400.0])]
    g, _, ok = rake(w, codes, controls)
    assert ok.all()
    for c, N in zip(codes, controls):
        for b in range(5):
            np.testing.assert_allclose(np.bincount(c[b], weights=g[b], minlength=len(N)), N, rtol=1e-8)
    w2 = w.copy()
    w2[0, codes[0][0] == 2] = 0.0  # no respondent in one category: that margin can never be met
    _, _, ok2 = rake(w2, codes, controls, max_iter=50)
    assert not ok2[0] and ok2[1:].all()


@pytest.fixture(scope="module")
def population():
    """An invented frame: 900 shops in three districts (values only exercise the code)."""
    rng = np.random.default_rng(7)
    district = np.repeat(["east", "west", "north"], [450, 270, 180])
    y = np.select([district == "east", district == "west"], [20.0, 45.0], 80.0) + rng.normal(0, 8, 900)
    size = np.where(rng.random(900) < 0.4, "big", "small")
    return pd.DataFrame({"y": y, "district": district, "size_band": size})


def scenario(tmp_path, df, designs, roles, **tables):
    df.to_csv(tmp_path / "frame.csv", index=False)
    return scenario_from_dict({"frame": {"path": "frame.csv", **roles}, "design": designs, **tables},
                              base=tmp_path)


def test_full_response_class_adjustment_changes_nothing(tmp_path, population):
    plain = [{"label": "s", "method": "stratified", "n": 90, "estimators": ["ht", "hajek"]}]
    adj = [{**plain[0], "adjustment": "class"}]
    roles = {"target": "y", "stratum": "district"}
    a = run(scenario(tmp_path, population, plain, roles), replicates=500, seed=3).replicates
    b = run(scenario(tmp_path, population, adj, roles), replicates=500, seed=3).replicates
    np.testing.assert_allclose(b["estimate"], a["estimate"], rtol=1e-12)
    np.testing.assert_allclose(b["se"], a["se"], rtol=1e-9)


def test_poststratifying_a_stratified_sample_on_its_strata_is_the_stratified_estimator(tmp_path, population):
    roles = {"target": "y", "stratum": "district"}
    plain = [{"label": "s", "method": "stratified", "n": 60, "allocation": "equal", "estimators": ["ht"]}]
    post = [{**plain[0], "adjustment": "poststrat", "adjustment_classes": "district", "estimators": ["hajek"]}]
    a = run(scenario(tmp_path, population, plain, roles), replicates=400, seed=5).replicates
    b = run(scenario(tmp_path, population, post, roles), replicates=400, seed=5).replicates
    np.testing.assert_allclose(b["estimate"], a["estimate"], rtol=1e-11)
    np.testing.assert_allclose(b["se"], a["se"], rtol=1e-8)  # Cochran eq. 5.7 in both


def test_poststratified_srs_variance_matches_cochran(tmp_path, population):
    n, R = 60, 10000
    post = [{"label": "post", "method": "srs", "n": n, "adjustment": "poststrat",
             "adjustment_classes": "district", "estimators": ["hajek"]}]
    rake1 = [{"label": "post", "method": "srs", "n": n, "adjustment": "raking",
              "raking_margins": ["district"], "estimators": ["hajek"]}]  # same label: same samples
    r = run(scenario(tmp_path, population, post, {"target": "y"}), replicates=R, seed=12).replicates
    x = r["estimate"].to_numpy()
    y, d = population["y"].to_numpy(), population["district"].to_numpy()
    N = len(y)
    W = {h: np.mean(d == h) for h in ("east", "west", "north")}
    S2 = {h: y[d == h].var(ddof=1) for h in W}
    approx = (1 - n / N) / n * sum(W[h] * S2[h] for h in W) + sum((1 - W[h]) * S2[h] for h in W) / n**2
    dev = x - x.mean()
    tol = Z * math.sqrt((np.mean(dev**4) - np.mean(dev**2) ** 2) / R)
    assert abs(x.var(ddof=1) - approx) < tol
    assert abs(x.mean() - y.mean()) < Z * x.std(ddof=1) / math.sqrt(R)
    # raking on one margin is post-stratification on it
    xr = run(scenario(tmp_path, population, rake1, {"target": "y"}), replicates=R, seed=12).replicates
    np.testing.assert_allclose(xr["estimate"].to_numpy(), x, rtol=1e-9)
    np.testing.assert_allclose(xr["se"].to_numpy(), r["se"].to_numpy(), rtol=1e-6)


def test_raking_to_two_margins_removes_bias_of_response_by_one_of_them(tmp_path, population):
    """Response depends on district only, so raking to district and size margins removes its bias."""
    R = 3000
    designs = [{"label": "none", "method": "srs", "n": 150, "estimators": ["hajek"]},
               {"label": "raked", "method": "srs", "n": 150, "adjustment": "raking",
                "raking_margins": ["district", "size_band"], "estimators": ["hajek"]}]
    sc = scenario(tmp_path, population, designs, {"target": "y", "stratum": "district"},
                  response={"model": "stratum", "rates": {"east": 0.9, "west": 0.6, "north": 0.35}})
    res = run(sc, replicates=R, seed=6)
    s = res.summary.set_index("design")
    assert abs(s.loc["raked", "bias"]) < Z * s.loc["raked", "bias_mcse"]
    assert s.loc["none", "bias"] < -10 * s.loc["none", "bias_mcse"]
    assert s.loc["raked", "adjustment_failures"] == 0


@pytest.mark.parametrize("extra, words", [
    ({"adjustment": "reweight"}, "not known"),
    ({"adjustment": "poststrat"}, "needs adjustment_classes"),
    ({"adjustment": "raking"}, "needs raking_margins"),
    ({"adjustment": "none", "adjustment_classes": "district"}, "applies to"),
    ({"adjustment": "class", "raking_margins": ["district"]}, "applies to"),
])
def test_adjustment_keys_are_checked(tmp_path, population, extra, words):
    with pytest.raises(InputError, match=words):
        scenario(tmp_path, population, [{"label": "s", "method": "srs", "n": 10, **extra}], {"target": "y"})


def test_adjustment_column_must_exist(tmp_path, population):
    sc = scenario(tmp_path, population, [{"label": "s", "method": "srs", "n": 10, "adjustment": "class",
                                          "adjustment_classes": "distric"}], {"target": "y"})
    with pytest.raises(InputError, match="'distric' .* is not in the frame .*did you mean 'district'"):
        run(sc, replicates=10)


def _per_unit_raking(adjustment, units, w, y, r, share):
    """Reference: raking and the margin regression unit by unit (the estimator of Deville & Sarndal 1992)."""
    B, m, k = w.shape
    wr = (w * r).reshape(B, m * k)
    codes = [c[units].reshape(B, m * k) for c in adjustment.codes]
    g, _, ok = rake(wr, codes, adjustment.controls)
    total = adjustment.controls[0].sum()
    for b in range(B):  # a category without respondents: its count is spread over all of them
        if any(((np.bincount(c[b], weights=wr[b], minlength=len(N)) <= 0) & (N > 0)).any()
               for c, N in zip(codes, adjustment.controls)):
            g[b] *= total / g[b].sum()
    yy = y.reshape(B, m * k, -1)
    u = np.zeros((B, m, yy.shape[-1]))
    for b in range(B):
        # design matrix of every margin's indicators; lstsq's fitted values are unique even though
        # the indicators of the second margin repeat the intercept
        x = np.concatenate([np.eye(G)[c[b]] for c, G in zip(codes, adjustment.sizes)], axis=1)
        root = np.sqrt(g[b])[:, None]
        beta = np.linalg.lstsq(root * x, root * yy[b], rcond=None)[0]
        t = g[b] @ yy[b]
        u[b] = (g[b][:, None] * (yy[b] - x @ beta)).reshape(m, k, -1).sum(axis=1) + t * share[b][:, None]
    return g, codes, u, ok


def test_raking_on_cells_matches_raking_unit_by_unit():
    """Raking the cross-classified cells gives the per-unit raked estimator to rounding, margins met."""
    rng = np.random.default_rng(20261204)
    n_list, B, m, k = 40, 30, 6, 3
    first, second = rng.integers(0, 2, n_list), rng.integers(0, 3, n_list)
    first[:2], second[:3] = [0, 1], [0, 1, 2]  # every category present in the list
    controls = (np.bincount(first, minlength=2) * 5.0, np.bincount(second, minlength=3) * 5.0)
    adjustment = ResolvedAdjustment("raking", (first, second), (2, 3), controls)
    units = rng.integers(0, n_list, (B, m, k))
    w = rng.uniform(2.0, 9.0, (B, m, k))
    y = rng.normal(10.0, 3.0, (B, m, k, 2))
    e = np.ones((B, m, k))
    r = (rng.random((B, m, k)) < 0.8).astype(float)
    positions = np.ones((B, m))
    share = positions / m
    u, count, failed = adjustment.apply(units, w, y, e, r, positions)
    g, codes, u_ref, ok = _per_unit_raking(adjustment, units, w, y, r, share)
    np.testing.assert_array_equal(failed, ~ok)
    assert 0 < failed.sum() < B // 4  # both paths: raked replicates and one with an empty category
    for c, N in zip(codes, controls):  # every raked replicate meets every margin (Deming & Stephan 1940)
        totals = np.stack([np.bincount(c[b], weights=g[b], minlength=len(N)) for b in np.flatnonzero(ok)])
        np.testing.assert_allclose(totals, np.broadcast_to(N, totals.shape), rtol=1e-9)
    np.testing.assert_allclose(count, float(controls[0].sum()) * share, rtol=1e-12)
    # estimates and the between-PSU spread of u (what the SE is built from) agree to rounding
    np.testing.assert_allclose(u.sum(axis=1), u_ref.sum(axis=1), rtol=1e-10)
    np.testing.assert_allclose(u - u.mean(axis=1, keepdims=True), u_ref - u_ref.mean(axis=1, keepdims=True),
                               rtol=1e-10, atol=1e-10 * np.abs(u_ref).max())
