"""Raking and GREG when their cross-product matrix is singular or badly scaled.

Sources, beside each check:
- Deming & Stephan (1940), Ann. Math. Statist. 11:427-444: raked weights reproduce every
  margin; Deville & Sarndal (1992), JASA 87:376-382: the raking estimator is linearised by
  the residuals of the g-weighted regression on all margin indicators, and least-squares
  residuals are orthogonal to every regressor (the normal equations).
- Sarndal, Swensson & Wretman 1992 (SSW), Model Assisted Survey Sampling, secs. 6.4-6.5 and
  7.4 (from memory): the GREG estimator depends on the auxiliaries only through the space
  they span with the intercept (so a duplicated or rescaled auxiliary changes nothing, and a
  constant one, being the intercept again, leaves the Hajek estimator).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from samplewright import Frame
from samplewright.api import run
from samplewright.designs import SRS, Stratified
from samplewright.estimation.auxiliary import estimate
from samplewright.estimation.gram import gram_pinv, independent_columns
from samplewright.estimation.registry import block_variance
from samplewright.estimation.weighting import ResolvedAdjustment, group_sums
from samplewright.simulation.scenario import scenario_from_dict


# ------------------------------------------------------------------ raking
def _margins(rng, N):
    """Three invented margins with unequal shares (codes 0..G-1)."""
    return [rng.choice(3, N, p=[0.5, 0.3, 0.2]), rng.choice(2, N, p=[0.6, 0.4]),
            rng.choice(4, N, p=[0.4, 0.3, 0.2, 0.1])]


def test_raked_estimates_of_margin_indicators_equal_the_population_shares_in_every_replicate(tmp_path):
    # Deming & Stephan 1940: the raked weights reproduce every margin; a margin's indicator is fitted
    # exactly by the regression on the margin indicators (Deville & Sarndal 1992), so its raked mean
    # is the population share N_c / N in every replicate, to the raking tolerance
    rng = np.random.default_rng(11)
    N = 2400
    a, b, c = _margins(rng, N)
    band = rng.choice(["s1", "s2", "s3"], N, p=[0.6, 0.25, 0.15])
    df = pd.DataFrame({"y": rng.normal(50.0, 10.0, N) + 5.0 * a, "a": a, "b": b, "c": c, "band": band})
    targets = ["y"]
    for col, G in (("a", 3), ("b", 2), ("c", 4)):
        for k in range(G - 1):
            df[f"{col}{k}"] = (df[col] == k).astype(float)
            targets.append(f"{col}{k}")
    df.to_csv(tmp_path / "frame.csv", index=False)
    sc = scenario_from_dict({
        "frame": {"path": "frame.csv", "target": targets, "stratum": "band"},
        "design": [{"label": "raked", "method": "stratified", "n": 300, "allocation": "equal",
                    "adjustment": "raking", "raking_margins": ["a", "b", "c"], "estimators": ["ht", "hajek"]}],
        "response": {"model": "stratum", "rates": {"s1": 0.9, "s2": 0.6, "s3": 0.45}}}, base=tmp_path)
    reps = run(sc, replicates=3000, seed=4).replicates
    assert (reps["adjustment_failed"] == 0).all()
    for v in targets[1:]:
        share = df[v].mean()
        x = reps.loc[reps["variable"] == v, "estimate"].to_numpy()
        assert len(x) == 2 * 3000
        assert np.max(np.abs(x - share) / share) <= 1e-9


def _raking_block(rng, B, m, sizes=(3, 2, 4)):
    Npop = 3000
    pc = _margins(rng, Npop)
    controls = tuple(np.bincount(x, minlength=G).astype(float) for x, G in zip(pc, sizes))
    adj = ResolvedAdjustment("raking", codes=tuple(pc), sizes=sizes, controls=controls)
    units = np.stack([rng.choice(Npop, m, replace=False) for _ in range(B)])[..., None]  # (B, m, 1)
    w = np.full(units.shape, Npop / m) * rng.uniform(0.5, 2.0, units.shape)
    y = (rng.normal(50.0, 10.0, Npop) + 4.0 * pc[0])[units][..., None]
    e = np.ones(units.shape, dtype=bool)
    r = rng.random(units.shape) < 0.7
    return adj, pc, units, w, y, e, r


def test_raking_residuals_are_orthogonal_to_every_margin_indicator_in_every_replicate():
    # Deville & Sarndal 1992: u_k = g_k e_k + t / m with e the residual of the g-weighted least-squares
    # fit on all margin indicators; the normal equations say sum_{k in c} g_k e_k = 0 for every category c
    # of every margin, hence sum_{k in c} (u_k - T / m) = 0 with T = sum_k u_k.  Small samples give
    # replicates with an empty category or a sample-confounded margin, where the matrix is singular
    # beyond the repeated intercept; the identity must hold there too.
    rng = np.random.default_rng(5)
    B, m = 3000, 36
    adj, pc, units, w, y, e, r = _raking_block(rng, B, m)
    u, _, failed = adj.apply(units, w, y, e, r, np.ones((B, m), dtype=bool))
    assert failed.any()  # the block does reach the singular cases
    u = u[..., 0]
    T = u.sum(axis=1, keepdims=True)
    d = u - T / m
    for codes, G in zip(pc, adj.sizes):
        per_cat = group_sums(codes[units[..., 0]], d, G)
        assert np.max(np.abs(per_cat) / np.abs(T)) < 1e-12


def test_the_repeated_intercept_of_each_margin_is_dropped():
    # a margin's indicators sum to the intercept: with three margins the matrix of their cross-products
    # has rank G1 + (G2 - 1) + (G3 - 1) (Golub & Van Loan 2013, sec. 5.4; from memory), and the kept
    # columns are all of the first margin and all but the last category of each later one
    rng = np.random.default_rng(2)
    sizes = (3, 2, 4)
    X = np.column_stack([np.eye(G)[rng.integers(0, G, 500)] for G in sizes])
    M = (X.T * rng.uniform(1.0, 5.0, 500)) @ X
    keep = independent_columns(M[None])[0]
    assert keep.tolist() == [True, True, True, True, False, True, True, True, False]
    assert keep.sum() == np.linalg.matrix_rank(M)
    Minv, plain = gram_pinv(M[None])
    assert not plain[0]
    K = np.flatnonzero(keep)
    np.testing.assert_allclose(Minv[0][np.ix_(K, K)], np.linalg.inv(M[np.ix_(K, K)]), rtol=1e-10)


# ------------------------------------------------------------------ GREG
def _aux_frame(N=3000, seed=9):
    rng = np.random.default_rng(seed)
    x = rng.gamma(6.0, 10.0, N)
    x2 = rng.normal(5.0, 2.0, N)
    y = 10.0 + 2.0 * x + 3.0 * x2 + rng.normal(0.0, 15.0, N)
    band = rng.choice(["a", "b", "c"], N, p=[0.5, 0.3, 0.2])
    return pd.DataFrame({"y": y, "x": x, "x_copy": x, "x2": x2, "const": 7.0, "x_big": x * 1e8, "band": band})


def _greg(df, aux, design):
    f = Frame.from_dataframe(df, target="y", stratum="band", auxiliary=aux)
    blk = design.draw(f, np.random.default_rng(21), B=2000)
    return estimate("greg", blk, f.N, 0.95, f.layout, variance=block_variance)


def test_greg_with_a_duplicated_auxiliary_equals_greg_with_one_copy():
    # SSW 1992, secs. 6.4-6.5: GREG depends on x only through the space spanned by the intercept and x
    df = _aux_frame()
    for design in (SRS("s", n=30), Stratified("st", n=30, allocation="equal")):
        one, two = _greg(df, ["x", "x2"], design), _greg(df, ["x", "x_copy", "x2"], design)
        np.testing.assert_allclose(two.estimate, one.estimate, rtol=1e-10)
        np.testing.assert_allclose(two.se, one.se, rtol=1e-8)


def test_greg_with_a_constant_auxiliary_equals_greg_without_it():
    # a constant x is the intercept again (SSW 1992, sec. 7.4 for the intercept-only GREG = Hajek)
    df = _aux_frame()
    design = SRS("s", n=30)
    np.testing.assert_allclose(_greg(df, ["x", "const"], design).estimate, _greg(df, ["x"], design).estimate,
                               rtol=1e-10)
    f = Frame.from_dataframe(df, target="y", auxiliary=["const"])
    blk = design.draw(f, np.random.default_rng(21), B=2000)
    g = estimate("greg", blk, f.N, 0.95, f.layout, variance=block_variance)
    h = estimate("hajek", blk, f.N, 0.95, f.layout, variance=block_variance)
    np.testing.assert_allclose(g.estimate, h.estimate, rtol=1e-10)
    np.testing.assert_allclose(g.se, h.se, rtol=1e-8)


def test_greg_does_not_depend_on_the_units_of_an_auxiliary():
    # SSW 1992, sec. 6.5: rescaling x rescales its coefficient and leaves the fitted values, the
    # estimate and the g-weights unchanged; an auxiliary in the hundreds of millions next to the
    # intercept must not lose the intercept (a pseudo-inverse cut-off relative to the largest
    # eigenvalue drops it, turning GREG into the ratio estimator)
    df = _aux_frame()
    design = SRS("s", n=40)
    small, big = _greg(df, ["x"], design), _greg(df, ["x_big"], design)
    np.testing.assert_allclose(big.estimate, small.estimate, rtol=1e-10)
    np.testing.assert_allclose(big.se, small.se, rtol=1e-8)
