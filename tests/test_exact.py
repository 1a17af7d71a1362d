"""Exact mode against independent enumerations, unbiasedness theorems and Monte Carlo.

Sources beside each check: Horvitz & Thompson (1952) and Cochran (1977), Sampling
Techniques (eqs. 2.10, 5.7, 9A.6-9A.8) for unbiasedness of the estimators and of their
variance estimators; Sen (1953) / Yates & Grundy (1953) for the SYG estimator; Sarndal,
Swensson & Wretman (1992) for Poisson sampling; Morris, White & Crowther (2019, Table 6)
for the Monte Carlo standard errors used in the z-bounds.  Frames are invented.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pandas as pd
import pytest
from conftest import Z

from samplewright import Frame
from samplewright.cli.main import main
from samplewright.designs import DESIGN_CLASSES
from samplewright.estimation.cost import CostModel
from samplewright.evaluation.exact import count_samples, enumerate_design, evaluate_exact
from samplewright.evaluation.measures import summarise
from samplewright.simulation.engine import make_cells, replicate_table, simulate
from samplewright.simulation.plan import RunPlan


@pytest.fixture
def frame():
    """Twelve invented claims: amount, invoice size, two bands and six pairs (clusters)."""
    rng = np.random.default_rng(21)
    x = np.round(rng.lognormal(2.0, 0.6, 12), 2)
    y = np.round(2.0 * x + rng.normal(0, 2.0, 12), 2)
    df = pd.DataFrame({"amount": y, "invoice": x, "band": np.repeat(["low", "high"], 6),
                       "pair": np.repeat(np.arange(6), 2)})
    return Frame.from_dataframe(df, target="amount", size="invoice", stratum="band", cluster="pair")


def designs():
    return [
        DESIGN_CLASSES["srs"]("srs", n=4),
        DESIGN_CLASSES["stratified"]("strat", n=5, allocation="proportional"),
        DESIGN_CLASSES["systematic"]("sys", n=5),
        DESIGN_CLASSES["cluster"]("one stage", clusters=3),
        DESIGN_CLASSES["cluster"]("two stage", clusters=3, units_per_cluster=1),
        DESIGN_CLASSES["pps"]("wr", n=3, replace=True),
        DESIGN_CLASSES["pps_systematic"]("pps sys", n=4),
        DESIGN_CLASSES["sampford"]("sampford", n=4, variance="sen_yates_grundy"),
        DESIGN_CLASSES["poisson"]("poisson", n=4),
        DESIGN_CLASSES["bernoulli"]("bernoulli", n=5),
    ]


def exact(frame, ds, estimators=("ht",)):
    for d in ds:
        d.check(frame)
    cells = make_cells(ds, [estimators] * len(ds))
    return evaluate_exact(frame, cells, 0.95, CostModel(per_unit=1.0))


# ------------------------------------------------------------------ unbiasedness, exactly
def test_ht_and_hansen_hurwitz_unbiased_exactly(frame):
    # E(t_HT) = T for every probability design with pi_i > 0 (Horvitz & Thompson 1952);
    # the Hansen-Hurwitz estimator is unbiased under PPS with replacement (Cochran 1977, 9A.6)
    summary, samples, _counts = exact(frame, designs())
    truth = float(frame.mean[0])
    assert (summary["exact"]).all()
    np.testing.assert_allclose(summary["mean_estimate"], truth, rtol=1e-12)
    assert (summary[["bias_mcse", "empirical_se_mcse", "coverage_mcse"]] == 0).all().all()
    # sample probabilities sum to 1 within each design
    tot = samples.groupby("design")["probability"].sum()
    np.testing.assert_allclose(tot, 1.0, atol=1e-12)
    # mean n: fixed-size designs exactly n; Poisson/Bernoulli sum pi_i (SSW 1992, sec. 3.5)
    mean_n = dict(zip(summary["design"], summary["mean_n"]))
    assert mean_n["srs"] == pytest.approx(4) and mean_n["poisson"] == pytest.approx(4)
    assert mean_n["bernoulli"] == pytest.approx(5) and mean_n["two stage"] == pytest.approx(3)


def test_unbiased_variance_estimators_exactly(frame):
    # E v = Var t for: SRS (Cochran 1977, eq. 2.10), stratified SRS (eq. 5.7), one-stage
    # cluster (SRS of cluster totals, ch. 9), PPS with replacement (eq. 9A.8), Sampford with
    # Sen-Yates-Grundy and exact pi_ij (Sen 1953; Yates & Grundy 1953; all pi_ij > 0), Poisson
    # and Bernoulli sampling (SSW 1992, sec. 3.5 / 3.2).  mean_se is sqrt(E se^2).
    unbiased = {"srs", "strat", "one stage", "wr", "sampford", "poisson", "bernoulli"}
    summary, _, _ = exact(frame, designs())
    rows = summary[summary["design"].isin(unbiased)]
    assert len(rows) == len(unbiased)
    np.testing.assert_allclose(rows["mean_se"], rows["empirical_se"], rtol=1e-10)
    # and the exact SRS variance is Cochran's (1 - f) S^2 / n (eq. 2.8)
    srs = summary[summary["design"] == "srs"].iloc[0]
    assert srs["empirical_se"] ** 2 == pytest.approx(frame.srs_variance_of_mean(4)[0], rel=1e-12)


# ------------------------------------------------------------------ enumeration itself
def test_sample_counts_against_closed_forms(frame):
    ds = {d.label: d for d in designs()}
    for d in ds.values():
        d.check(frame)
    assert count_samples(ds["srs"], frame)[0] == math.comb(12, 4)
    n_h = ds["strat"].n_h(frame)
    assert count_samples(ds["strat"], frame)[0] == math.comb(6, int(n_h[0])) * math.comb(6, int(n_h[1]))
    assert count_samples(ds["one stage"], frame)[0] == math.comb(6, 3)
    # two-stage: C(6, 3) cluster sets, each with 2^3 second-stage choices
    assert count_samples(ds["two stage"], frame)[0] == math.comb(6, 3) * 2 ** 3
    assert count_samples(ds["wr"], frame)[0] == 12 ** 3
    assert count_samples(ds["poisson"], frame)[0] == 2 ** 12
    for d in ds.values():  # the enumerator yields exactly that many samples
        rows = sum(len(p) for _, p in enumerate_design(d, frame))
        assert rows == count_samples(d, frame)[0], d.label


@pytest.mark.parametrize("N,n", [(12, 4), (10, 4), (11, 3)])
def test_systematic_samples_and_probabilities(N, n):
    # independent check: starts u on a fine grid of [0, k) (the breakpoints j k mod 1 are
    # multiples of 1/n, so a grid of step 1/(n * 1000) hits every segment) give each
    # distinct sample floor(u + j k) with its share of the interval
    f = Frame.from_dataframe(pd.DataFrame({"y": np.arange(N, dtype=float)}), target="y")
    d = DESIGN_CLASSES["systematic"]("sys", n=n)
    d.check(f)
    k = N / n
    G = n * 1000
    grid = (np.arange(int(k * G)) + 0.5) / G
    pos = np.floor(grid[:, None] + np.arange(n) * k).astype(int)
    brute = {}
    for row in map(tuple, pos):
        brute[row] = brute.get(row, 0) + 1.0 / len(grid)
    got = {}
    for blk, p in enumerate_design(d, f):
        for row, q in zip(map(tuple, blk.units.tolist()), p):
            got[row] = got.get(row, 0) + q
    assert set(got) == set(brute)
    for row, q in brute.items():
        assert got[row] == pytest.approx(q, abs=1e-9)
    if N % n == 0:  # whole k: k equally likely samples
        assert len(got) == N // n and all(q == pytest.approx(n / N) for q in got.values())


def test_two_stage_cluster_enumeration_matches_brute_force(frame):
    d = DESIGN_CLASSES["cluster"]("two stage", clusters=2, units_per_cluster=1)
    d.check(frame)
    got = {}
    for blk, p in enumerate_design(d, frame):
        for s, q in zip(blk.sums[..., 0].tolist(), p):
            key = tuple(sorted(s))
            got[key] = got.get(key, 0) + q
    # brute force: every pair of pairs, then one unit from each (Cochran 1977, ch. 10)
    y = frame.y[:, 0]
    brute = {}
    for a, b in itertools.combinations(range(6), 2):
        for i in (2 * a, 2 * a + 1):
            for j in (2 * b, 2 * b + 1):
                key = tuple(sorted((y[i], y[j])))
                brute[key] = brute.get(key, 0) + 1 / (15 * 4)
    assert set(got) == set(brute)
    for key, q in brute.items():
        assert got[key] == pytest.approx(q)


# ------------------------------------------------------------------ exact against Monte Carlo
def test_exact_agrees_with_monte_carlo(frame):
    ds = [d for d in designs() if d.label in ("strat", "pps sys", "sampford", "poisson", "two stage", "wr")]
    for d in ds:
        d.check(frame)
    # Hajek is undefined on an empty Poisson sample, so that design is scored by HT only
    cells = make_cells(ds, [("ht",) if d.method == "poisson" else ("ht", "hajek") for d in ds])
    ex, _, _ = evaluate_exact(frame, cells, 0.95, CostModel())
    R = 20_000
    res = simulate(RunPlan(frame=frame, cells=tuple(cells), replicates=R, seed=77, block_size=2_000))
    reps = replicate_table(res, cells, frame.layout.names)
    mc = summarise(reps, frame, {d.label: d.method for d in ds}, 0.95)
    key = ["design", "estimator", "variable"]
    both = ex.merge(mc, on=key, suffixes=("_x", "_mc"))
    assert len(both) == 11
    # z-bounds with the Monte Carlo SEs of Morris, White & Crowther (2019), Table 6
    assert (np.abs(both["mean_estimate_mc"] - both["mean_estimate_x"]) <= Z * both["bias_mcse_mc"]).all()
    assert (np.abs(both["empirical_se_mc"] - both["empirical_se_x"]) <= Z * both["empirical_se_mcse_mc"]).all()
    cov_se = np.sqrt(both["coverage_x"] * (1 - both["coverage_x"]) / R)
    assert (np.abs(both["coverage_mc"] - both["coverage_x"]) <= Z * cov_se + 1e-12).all()


# ------------------------------------------------------------------ command line
def write_scenario(tmp_path, n):
    rng = np.random.default_rng(2)
    pd.DataFrame({"amount": rng.gamma(2.0, 40.0, 60), "invoice": rng.gamma(2.0, 40.0, 60)}).to_csv(
        tmp_path / "claims.csv", index=False)
    (tmp_path / "s.toml").write_text(f"""
title = "claims check"
[frame]
path = "claims.csv"
target = "amount"
size = "invoice"
[[design]]
label = "simple"
method = "srs"
n = {n}
[[design]]
label = "by size"
method = "sampford"
n = {n}
""")
    return tmp_path / "s.toml"


def test_exact_refused_when_too_many_samples(tmp_path, capsys):
    s = write_scenario(tmp_path, 8)
    code = main(["run", str(s), "--out", str(tmp_path / "out"), "--exact", "--quiet", "--no-report"])
    err = capsys.readouterr().err
    assert code == 2
    line = [x for x in err.splitlines() if x.startswith("error:")]
    assert line == [line[0]] and line[0].startswith(
        "error: --exact: design 'simple' at size 8 has C(N, n) = C(60, 8) = "
        f"{math.comb(60, 8):,} possible samples, more than the limit of 2,000,000")
    assert not (tmp_path / "out" / "summary.csv").exists()


@pytest.mark.slow
def test_exact_run_writes_contract_files(tmp_path):
    s = write_scenario(tmp_path, 3)
    out = tmp_path / "out"
    assert main(["run", str(s), "--out", str(out), "--exact", "--quiet", "--no-report"]) == 0
    summary = pd.read_csv(out / "summary.csv")
    assert summary["exact"].all()
    assert (summary["replicates"] == math.comb(60, 3)).all()
    import json

    info = json.loads((out / "run.json").read_text())
    assert info["exact"] is True and info["samples"]["simple@3"] == math.comb(60, 3)
    assert {d["label"]: d["variance"] for d in info["designs"]} == {"simple": "psu", "by size": "hansen_hurwitz"}
    reps = pd.read_parquet(out / "replicates.parquet")
    assert reps.groupby(["design", "estimator"])["probability"].sum().round(12).eq(1.0).all()


def test_every_design_exposes_enumeration(frame):
    # the classic designs reach exact.py through Design.enumerate / count_samples
    srs = DESIGN_CLASSES["srs"]("srs", n=4)
    assert srs.count_samples(frame) == math.comb(12, 4)
    rows = sum(len(p) for _, p in srs.enumerate(frame, chunk=100))
    assert rows == math.comb(12, 4)
    from samplewright import InputError

    pareto = DESIGN_CLASSES["pareto"]("p", n=3)
    with pytest.raises(InputError, match="exact mode is not available for method 'pareto'"):
        pareto.enumerate(frame)
