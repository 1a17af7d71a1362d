"""Simulated variances against published closed forms.

- SRS without replacement: V(ybar) = (1 - n/N) S^2 / n (Cochran 1977, Sampling Techniques, eq. 2.8).
- Stratified SRS: V(ybar_st) = sum_h W_h^2 (1 - f_h) S_h^2 / n_h (Cochran 1977, eq. 5.6) and
  Neyman allocation n_h = n N_h S_h / sum N_h S_h (Cochran 1977, eq. 5.26).
- One-stage cluster sampling with C clusters of equal size M, m drawn by SRS:
  V(ybar) = (1 - m/C) S_b^2 / m with S_b^2 the variance of the cluster means, equal to
  (1 - m/C)/m * (CM - 1)/(M^2 (C - 1)) * S^2 * [1 + (M - 1) rho] with rho the pairwise
  intra-cluster correlation (Cochran 1977, ch. 9, sec. 9.4; from memory of the form), so Kish's
  design effect is deff = (CM - 1)/(M (C - 1)) [1 + (M - 1) rho] ~= 1 + (M - 1) rho (Kish 1965, sec. 5.4).

Monte Carlo tolerance for a variance: the MCSE of a sample variance of R draws is
sqrt((m4 - var^2) / R), estimated from the replicates themselves (Morris et al. 2019 give the
normal-theory form var * sqrt(2 / (R - 1)); the moment form also holds for skewed estimates).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from conftest import Z

from samplewright import Frame
from samplewright.designs import SRS, Cluster, Stratified
from samplewright.designs.allocation import allocate
from samplewright.population.synth import SyntheticSpec, generate
from samplewright.simulation.engine import Cell, replicate_table, simulate
from samplewright.simulation.plan import RunPlan

R = 8000


def run_design(frame, design, estimator="ht", seed=3):
    cells = [Cell(design=design, design_index=0, size_index=0, estimators=(estimator,))]
    plan = RunPlan(frame=frame, cells=tuple(cells), replicates=R, seed=seed, block_size=1000)
    return replicate_table(simulate(plan), cells, frame.variables)


def variance_tolerance(x):
    d = x - x.mean()
    m4, v = float(np.mean(d**4)), float(np.mean(d**2))
    return Z * math.sqrt((m4 - v * v) / len(x))


@pytest.fixture(scope="module")
def strat_frame():
    spec = SyntheticSpec(units=3000, seed=5, skew="gamma", skewness=1.0, strata=(
        {"name": "low", "share": 0.5, "mean": 40, "sd": 8},
        {"name": "mid", "share": 0.3, "mean": 90, "sd": 20},
        {"name": "high", "share": 0.2, "mean": 200, "sd": 60}))
    return Frame.from_dataframe(generate(spec), target="y", stratum="stratum")


def test_srs_variance_closed_form(strat_frame):
    n = 60
    x = run_design(strat_frame, SRS("s", n=n))["estimate"].to_numpy()
    exact = float(strat_frame.srs_variance_of_mean(n)[0])
    y = strat_frame.y[:, 0]
    assert exact == pytest.approx((1 - n / len(y)) * y.var(ddof=1) / n, rel=1e-12)  # Cochran eq. 2.8
    assert abs(x.var(ddof=1) - exact) < variance_tolerance(x)


def test_neyman_allocation_formula(strat_frame):
    f = strat_frame
    S_h = np.sqrt(f.stratum_S2()[:, 0])
    n = 120
    real = n * f.N_h * S_h / np.sum(f.N_h * S_h)  # Cochran 1977, eq. 5.26
    got = allocate(n, "neyman", f.N_h, S_h)
    assert got.sum() == n
    assert np.all(np.abs(got - real) < 1.0)  # rounding moves each stratum by less than one unit


def test_stratified_variance_closed_form(strat_frame):
    f = strat_frame
    d = Stratified("st", n=120, allocation="neyman")
    n_h = d.n_h(f)
    W = f.N_h / f.N
    exact = float(np.sum(W**2 * (1 - n_h / f.N_h) * f.stratum_S2()[:, 0] / n_h))  # Cochran eq. 5.6
    reps = run_design(f, d)
    x = reps["estimate"].to_numpy()
    assert abs(x.var(ddof=1) - exact) < variance_tolerance(x)
    assert abs(x.mean() - f.mean[0]) < Z * math.sqrt(exact / len(x))  # HT unbiased
    # the variance estimator is unbiased for stratified SRS: mean of v equals the exact V
    v = reps["se"].to_numpy() ** 2
    assert abs(v.mean() - exact) < Z * v.std(ddof=1) / math.sqrt(len(v))


def equal_cluster_frame(C=120, M=8, icc=0.3, seed=9):
    rng = np.random.default_rng(seed)
    effect = np.repeat(rng.standard_normal(C), M) * math.sqrt(icc)
    y = 50 + 10 * (effect + rng.standard_normal(C * M) * math.sqrt(1 - icc))
    df = pd.DataFrame({"y": y, "c": np.repeat(np.arange(C), M)})
    return Frame.from_dataframe(df, target="y", cluster="c")


def pairwise_rho(y, codes):
    """Cochran's intra-cluster correlation from all within-cluster pairs (Cochran 1977, sec. 9.4)."""
    Y = y.mean()
    S2 = y.var(ddof=1)
    C = codes.max() + 1
    M = len(y) // C
    cross = 0.0
    for c in range(C):
        d = y[codes == c] - Y
        cross += (d.sum() ** 2 - (d**2).sum()) / 2  # sum over pairs j < k of d_j d_k
    return 2 * cross / ((M - 1) * (len(y) - 1) * S2)


def test_cluster_variance_and_kish_deff():
    f = equal_cluster_frame()
    y, codes = f.y[:, 0], f.cluster
    C, M, m = f.C, 8, 15
    means = np.array([y[codes == c].mean() for c in range(C)])
    exact = (1 - m / C) * means.var(ddof=1) / m
    rho = pairwise_rho(y, codes)
    S2 = y.var(ddof=1)
    by_rho = (1 - m / C) / m * (C * M - 1) / (M**2 * (C - 1)) * S2 * (1 + (M - 1) * rho)
    assert exact == pytest.approx(by_rho, rel=1e-10)  # Cochran 1977, ch. 9 identity
    srs = (1 - m * M / (C * M)) * S2 / (m * M)
    deff = exact / srs
    assert deff == pytest.approx((C * M - 1) / (M * (C - 1)) * (1 + (M - 1) * rho), rel=1e-10)
    reps = run_design(f, Cluster("cl", clusters=m))
    x = reps["estimate"].to_numpy()
    assert abs(x.var(ddof=1) - exact) < variance_tolerance(x)
    # the evaluator's deff is Kish's: empirical variance over the SRS variance at the same n
    sim_deff = x.var(ddof=1) / srs
    assert abs(sim_deff - deff) < variance_tolerance(x) / srs
