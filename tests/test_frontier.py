"""The cost-precision frontier, the fitted a/n + b curves and the recommendation logic.

External references: the exact variance of the SRS-without-replacement mean,
(1 - n/N) S^2 / n = S^2/n - S^2/N (Cochran 1977, eq. 2.8, from memory), which is exactly a/n + b
with a = S^2 and b = -S^2/N; Cochran's n0 / (1 + n0/N) (sec. 4.6); Monte Carlo standard errors
of coverage sqrt(c (1 - c) / R) (Morris, White & Crowther 2019, Table 6).  Frontier tables in
the recommendation tests are small constructed summaries (invented numbers exercising the rules).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from conftest import Z
from scipy import stats

from samplewright.api import run
from samplewright.decision import planning
from samplewright.decision.frontier import FRONTIER_COLUMNS, fit_curve, pareto, size_for_moe
from samplewright.decision.recommend import Goal, recommend
from samplewright.report import verdict as V
from samplewright.simulation.scenario import scenario_from_dict

Z95 = float(stats.norm.ppf(0.975))


# ------------------------------------------------------------------ the fitted curve
def test_fit_recovers_the_exact_srs_variance_curve():
    # noiseless points on (1 - n/N) S^2 / n are fitted exactly: a = S^2, b = -S^2 / N
    S2, N = 37.5, 1200
    n = np.array([20.0, 60.0, 150.0, 400.0])
    v = (1 - n / N) * S2 / n
    c = fit_curve(n, v, np.full(4, 0.01))
    assert c["a"] == pytest.approx(S2, rel=1e-10)
    assert c["b"] == pytest.approx(-S2 / N, rel=1e-8)


def test_size_for_moe_on_the_exact_curve_is_cochrans_fpc_size():
    # solving a/n + b = (E/z)^2 with a = S^2, b = -S^2/N gives n0 / (1 + n0/N) (Cochran 1977, sec. 4.6)
    S2, N, E = 37.5, 1200, 0.8
    curve = {"a": S2, "b": -S2 / N, "min_size": 1.0, "max_size": float(N)}
    n0 = Z95**2 * S2 / E**2
    assert size_for_moe(curve, E, Z95) == pytest.approx(planning.fpc_mean(n0, N), rel=1e-12)
    assert size_for_moe(curve, E, Z95) == pytest.approx(planning.sample_size(E, sd=np.sqrt(S2), population=N)
                                                        ["n_after_fpc"], rel=1e-12)
    # a margin so wide that (E/z)^2 overflows a float: Cochran's n0 = (z S / E)^2 is then 0 and so is the size
    # (a goal of 1e200 made the recommendation fail with an OverflowError and the run exit 1)
    huge = 1e200
    assert size_for_moe(curve, huge, Z95) == pytest.approx(planning.fpc_mean((Z95 * np.sqrt(S2) / huge) ** 2, N),
                                                           abs=1e-300)


def test_fit_on_a_simulated_srs_sweep_matches_the_exact_variance():
    # simulate SRS at four sizes, fit MSE = a/n + b by WLS, compare with the frame's exact S^2 and
    # -S^2/N within Z standard errors of the fitted coefficients (their covariance comes from the
    # per-point Monte Carlo SEs of the MSE, Morris et al. 2019)
    sc = scenario_from_dict({
        "frame": {"synthetic": {"units": 1500, "seed": 5, "mean": 50.0, "sd": 12.0}},
        "design": [{"label": "srs", "method": "srs", "n": [15, 40, 120, 500], "estimators": ["ht"]}],
    })
    res = run(sc, replicates=4000, seed=77)
    frame = sc.load_frame()
    S2, N = float(frame.S2[0]), frame.N
    f = res.frontier.sort_values("size")
    c = fit_curve(f["size"], f["rmse"] ** 2, f["mse_mcse"])
    se_a, se_b = np.sqrt(np.diag(c["cov"]))
    assert abs(c["a"] - S2) < Z * se_a
    assert abs(c["b"] - (-S2 / N)) < Z * se_b
    # the z-bound is informative: the sweep tells the exact curve from the with-replacement one,
    # whose b is 0 (S^2 / n, Cochran 1977, eq. 2.8 without the finite population correction)
    assert abs(c["b"] - 0.0) > Z * se_b


# ------------------------------------------------------------------ the frontier
def test_pareto_front_by_hand():
    cost = np.array([10.0, 20.0, 30.0, 20.0, 40.0, np.nan])
    moe = np.array([9.0, 5.0, 6.0, 4.0, 1.0, 0.1])
    # (20, 5) is dominated by (20, 4); (30, 6) by (20, 4); the NaN point is never on the front
    assert pareto(cost, moe).tolist() == [True, False, False, True, True, False]


def test_frontier_table_columns_and_p90():
    sc = scenario_from_dict({
        "frame": {"synthetic": {"units": 800, "seed": 3, "clusters": {"mean_size": 20, "icc": 0.1,
                                                                       "size_cv": 0.5}}},
        "design": [{"label": "blocks", "method": "cluster", "clusters": [5, 10], "estimators": ["ht"]},
                   {"label": "srs", "method": "srs", "n": [50, 100]}],
        "cost": {"fixed": 10.0, "per_unit": 2.0},
    })
    res = run(sc, replicates=300, seed=4)
    f = res.frontier
    assert list(f.columns) == FRONTIER_COLUMNS
    assert len(f) == len(res.summary)
    reps = res.replicates
    for _, r in f.iterrows():
        cost = reps[(reps["design"] == r["design"]) & (reps["size"] == r["size"])
                    & (reps["estimator"] == r["estimator"])]["cost"]
        assert r["p90_cost"] == pytest.approx(np.quantile(cost, 0.9))
        assert r["mean_cost"] == pytest.approx(cost.mean())
    # whole clusters of unequal size: the cost varies between samples, so p90 exceeds the mean
    blocks = f[f["design"] == "blocks"]
    assert (blocks["p90_cost"] > blocks["mean_cost"]).all()
    # SRS: fixed size, fixed cost
    srs = f[f["design"] == "srs"]
    assert (srs["p90_cost"] == srs["mean_cost"]).all()
    assert f["on_frontier"].any()
    assert f["moe"].to_numpy() == pytest.approx(Z95 * f["rmse"].to_numpy())


# ------------------------------------------------------------------ recommendation
def _front(rows):
    base = {"method": "srs", "estimator": "ht", "variance": "psu", "variable": "y", "replicates": 10_000,
            "mean_n": 0.0, "empirical_se": 1.0, "mse_mcse": 1e-6, "on_frontier": False, "truth": 10.0,
            "published_moe_mcse": 1e-6, "cost_mcse": 0.0}
    out = []
    for r in rows:
        d = {**base, **r}
        d["rmse"] = d["moe"] / Z95  # the recommendation reads the margin from the RMSE at the goal's level
        d.setdefault("moe_mcse", 1e-6)
        d.setdefault("published_moe", d["moe"])
        d.setdefault("published_moe_p90", d["published_moe"])
        d.setdefault("p90_cost", d["mean_cost"])
        d.setdefault("coverage_mcse", float(np.sqrt(d["coverage"] * (1 - d["coverage"]) / d["replicates"])))
        out.append(d)
    return pd.DataFrame(out)[FRONTIER_COLUMNS]


FRONT = [
    # a cheap design whose intervals lie: meets the margin, cheapest, but coverage 0.80
    {"design": "liar", "size": 100, "mean_cost": 500.0, "moe": 2.0, "coverage": 0.80},
    {"design": "liar", "size": 200, "mean_cost": 900.0, "moe": 1.5, "coverage": 0.81},
    {"design": "plain", "size": 100, "mean_cost": 800.0, "moe": 3.2, "coverage": 0.95},
    {"design": "plain", "size": 200, "mean_cost": 1500.0, "moe": 2.4, "coverage": 0.948},
    {"design": "plain", "size": 400, "mean_cost": 2900.0, "moe": 1.7, "coverage": 0.951},
    {"design": "strata", "size": 100, "mean_cost": 1000.0, "moe": 2.6, "coverage": 0.946},
    {"design": "strata", "size": 200, "mean_cost": 1800.0, "moe": 1.9, "coverage": 0.952},
]


def test_cheapest_meeting_moe_and_best_within_budget():
    rec = recommend(_front(FRONT), Goal(moe=2.0), nominal=0.95)
    # meeting moe <= 2.0 with good coverage: strata 200 (1800), plain 400 (2900) -> strata 200
    assert (rec["cheapest_meeting_moe"]["design"], rec["cheapest_meeting_moe"]["size"]) == ("strata", 200)
    assert rec["pick"] == "cheapest_meeting_moe"
    rec = recommend(_front(FRONT), Goal(moe=2.0, budget=1600.0), nominal=0.95)
    # with a budget the margin's pick must fit it too: strata 200 costs 1800, so none; the headline pick is none
    assert rec["cheapest_meeting_moe"] is None and rec["pick"] is None
    # within 1600 with good coverage: plain 100 (3.2), plain 200 (2.4), strata 100 (2.6) -> plain 200
    assert (rec["best_within_budget"]["design"], rec["best_within_budget"]["size"]) == ("plain", 200)
    for k in ("design", "size", "mean_cost", "moe", "empirical_se", "coverage"):
        assert k in rec["best_within_budget"]
    # the statement is written once the run's details are known (api.py, report/verdict.py)
    assert set(rec) >= {"cheapest_meeting_moe", "best_within_budget", "passed_over", "pick",
                        "undecided", "goals", "coverage_tolerance"}
    json.dumps(rec)  # serialisable as it stands


def test_a_design_whose_intervals_lie_is_never_picked_and_says_why():
    rec = recommend(_front(FRONT), Goal(moe=2.0, budget=2000.0), nominal=0.95)
    picked = {rec["cheapest_meeting_moe"]["design"], rec["best_within_budget"]["design"]}
    assert "liar" not in picked
    liar = [p for p in rec["passed_over"] if p["design"] == "liar"]
    assert {p["size"] for p in liar} == {100, 200}
    assert all("under-cover" in p["reason"] for p in liar)
    # every point not picked is accounted for
    assert len(rec["passed_over"]) == len(FRONT) - len({(p["design"], p["size"]) for p in
                                                          (rec["cheapest_meeting_moe"], rec["best_within_budget"])})


def test_interpolation_is_trusted_per_variance_formula():
    # one systematic sweep analysed two ways: the SRS formula's intervals under-cover at 400 (0.80), the
    # successive-difference ones hold everywhere; only the latter's fitted curve is offered between sizes
    rows = [{"design": "sys", "size": n, "mean_cost": 10.0 * n, "moe": 40.0 / np.sqrt(n), "variance": v,
             "coverage": c} for v, cover in (("srs", (0.95, 0.80, 0.95)), ("successive_differences", (0.95,) * 3))
            for n, c in zip((100, 400, 1600), cover)]
    rec = recommend(_front(rows), Goal(moe=2.5), nominal=0.95)
    trusted = {row["variance"]: row["coverage_acceptable_at_every_size"] for row in rec["interpolated"]}
    assert trusted == {"srs": False, "successive_differences": True}


def test_nothing_qualifies():
    rec = recommend(_front(FRONT), Goal(moe=0.5, budget=100.0), nominal=0.95)
    assert rec["cheapest_meeting_moe"] is None and rec["best_within_budget"] is None
    assert len(rec["passed_over"]) == len(FRONT)
    assert V.no_pick_sentence(rec).startswith("No rehearsed design")


def test_goal_confidence_rescales_the_margin():
    sc = scenario_from_dict({
        "frame": {"synthetic": {"units": 500, "seed": 8}},
        "design": [{"label": "srs", "method": "srs", "n": [30, 60]}],
        "goal": {"moe": 10.0, "confidence": 0.90},
    })
    res = run(sc, replicates=200, seed=2)
    assert res.frontier["moe"].to_numpy() == pytest.approx(stats.norm.ppf(0.95) * res.frontier["rmse"].to_numpy())
    assert res.recommendation["goal"]["confidence"] == 0.90


# ------------------------------------------------------------------ end to end
def test_district_scenario_pick_checks_by_hand_from_summary(tmp_path, capsys):
    # the shipped scenario, fewer replicates: the pick must be what a reader gets from frontier.csv with the
    # stated rules (three-state evidence, z = 2: coverage - 2 MCSE >= 0.95 - 0.01; achieved and published
    # margins + 2 MCSE <= goal; mean cost + 2 MCSE <= budget; cheapest first, best = smallest margin)
    import subprocess
    import sys
    import tomllib
    from pathlib import Path

    from samplewright.cli.main import main

    root = Path(__file__).resolve().parents[1]
    scen = root / "scenarios" / "district_energy.toml"
    goal = tomllib.loads(scen.read_text())["goal"]
    out = tmp_path / "run"
    code = main(["run", str(scen), "--out", str(out), "--replicates", "400", "--no-report"])
    stdout = capsys.readouterr().out
    assert code == 0
    assert "recommendation: " in stdout
    f = pd.read_csv(out / "frontier.csv")
    rec = json.loads((out / "recommendation.json").read_text())
    cover = f["coverage"] - 2 * f["coverage_mcse"] >= 0.95 - 0.01
    margin = (f["moe"] + 2 * f["moe_mcse"] <= goal["moe"]) & (f["published_moe"] + 2 * f["published_moe_mcse"]
                                                             <= goal["moe"])
    cost = f["mean_cost"] + 2 * f["cost_mcse"] <= goal["budget"]
    meet = f[cover & margin & cost].sort_values("mean_cost")
    fit = f[cover & cost].assign(m=np.fmax(f["moe"], f["published_moe"])).sort_values("m")
    c, b = rec["cheapest_meeting_moe"], rec["best_within_budget"]
    assert (c is None and len(meet) == 0) or (c["design"], c["size"]) == (meet.iloc[0]["design"], meet.iloc[0]["size"])
    assert (b["design"], b["size"]) == (fit.iloc[0]["design"], fit.iloc[0]["size"])
    assert rec["pick"] == (None if c is None else "cheapest_meeting_moe")
    # the systematic design on the periodic register under-covers and is passed over for it
    assert any(p["design"] == "every k-th listed household" and "under-cover" in p["reason"]
               for p in rec["passed_over"])
    assert rec["statement"] in stdout
    front = pd.read_csv(out / "frontier.csv")
    assert list(front.columns)[:3] == ["design", "method", "size"]
    checker = root.parent / "shared" / "tools" / "check-contract"
    if checker.exists():
        r = subprocess.run([sys.executable, str(checker), str(out)], capture_output=True, text=True, check=False)
        assert r.returncode == 0, r.stdout


def test_without_a_cost_model_the_cheapest_pick_is_the_smallest_sample_meeting_the_margin():
    # every cost is 0 when nothing is costed: the pick must not be the census point of a sweep (the most
    # precise) but the fewest units that meet the margin; SRS margins shrink with n (Cochran 1977, eq. 2.8)
    import samplewright as sw

    sc = sw.scenario_from_dict({"frame": {"synthetic": {"units": 600, "seed": 5}},
                                "design": [{"label": "simple", "method": "srs", "n": [100, 300, 600]}],
                                "goal": {"moe": 1e9}})
    rec = sw.run(sc, replicates=200, seed=3).recommendation
    assert rec["cheapest_meeting_moe"]["size"] == 100


def test_a_passed_over_point_carries_its_evidence_states_for_the_plain_words():
    # interface check: the report words a passed-over point from its evidence states (report/verdict.py,
    # passed_over_text); without them it fell back to the decision's technical reason with unrounded numbers
    rec = recommend(_front(FRONT), Goal(moe=2.0, budget=2000.0), nominal=0.95)
    liar = [p for p in rec["passed_over"] if p["design"] == "liar"]
    assert liar and all(p["evidence"]["coverage"] == "not met" for p in liar)
    assert all(set(p["evidence"]) == {"coverage", "margin", "cost"} for p in rec["passed_over"])
    assert V.passed_over_text(liar[0]).startswith("its intervals hold the true value too rarely")
    no_budget = recommend(_front(FRONT), Goal(moe=2.0), nominal=0.95)
    assert all(p["evidence"]["cost"] is None for p in no_budget["passed_over"])
