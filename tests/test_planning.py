"""Closed-form planning against published formulas and tables, and the `plan` command.

Sources: Cochran (1977) Sampling Techniques, ch. 4 (sample size) and ch. 5 (allocation);
Krejcie & Morgan (1970), "Determining sample size for research activities", Educational and
Psychological Measurement 30:607-610, Table 1; Kish (1965) Survey Sampling, sec. 8.3;
scipy.stats / scipy.optimize as independent reference implementations.
"""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import optimize, stats

from samplewright.cli.main import main
from samplewright.decision import planning
from samplewright.errors import InputError
from samplewright.evaluation.normal import normal_quantile

Z95 = float(stats.norm.ppf(0.975))


# ------------------------------------------------------------------ one mean / proportion
def test_cochran_n0_for_a_mean():
    # Cochran 1977, sec. 4.6: n0 = (z S / E)^2; z from scipy.stats.norm (reference library)
    r = planning.sample_size(moe=2.0, sd=10.0, confidence=0.95)
    assert r["n0"] == pytest.approx(Z95**2 * 100.0 / 4.0, rel=1e-12)
    assert r["n"] == math.ceil(Z95**2 * 25.0)  # 96.04 -> 97
    assert r["n"] == 97
    r90 = planning.sample_size(moe=2.0, sd=10.0, confidence=0.90)
    assert r90["n0"] == pytest.approx(stats.norm.ppf(0.95) ** 2 * 25.0, rel=1e-12)


@pytest.mark.parametrize("N", [50, 500, 5000])
def test_fpc_for_a_mean_meets_the_margin_exactly(N):
    # the SRS-without-replacement variance of the mean, (1 - n/N) S^2 / n (Cochran 1977, sec. 2.5):
    # at the planned real-valued n the margin z * SE equals E exactly
    S, E = 12.0, 1.5
    r = planning.sample_size(moe=E, sd=S, population=N)
    n = r["n_after_fpc"]
    assert n == pytest.approx(r["n0"] / (1 + r["n0"] / N), rel=1e-12)
    assert Z95 * math.sqrt((1 - n / N) * S**2 / n) == pytest.approx(E, rel=1e-10)
    assert r["fpc_formula"] == "n2 = n1 / (1 + n1 / N)"


@pytest.mark.parametrize("N,P", [(300, 0.5), (1200, 0.3), (90, 0.15)])
def test_fpc_for_a_proportion_against_the_hypergeometric(N, P):
    # scipy.stats.hypergeom gives the exact variance of the count of "successes" in an SRS
    # without replacement; the planned whole-number n must meet the margin, n - 1 must not.
    E = 0.06
    K = round(P * N)
    p = K / N  # the proportion the population really holds
    r = planning.sample_size(moe=E, proportion=p, population=N)

    def margin(n):
        return Z95 * math.sqrt(stats.hypergeom(N, K, n).var()) / n

    assert margin(r["n"]) <= E + 1e-12
    assert margin(r["n"] - 1) > E


# Krejcie & Morgan (1970), Table 1: N -> S for P = 0.5, d = 0.05, chi-square 3.841 (1 df, 95%).
# Their formula s = X^2 N P(1-P) / (d^2 (N-1) + X^2 P(1-P)) is n0 / (1 + (n0 - 1)/N); the table
# rounds to the nearest whole number.  Rows recalled from memory (not looked up for this test).
KREJCIE_MORGAN = {10: 10, 20: 19, 30: 28, 50: 44, 80: 66, 100: 80, 150: 108, 200: 132, 300: 169, 400: 196,
                  500: 217, 750: 254, 1000: 278, 1500: 306, 2000: 322, 3000: 341, 5000: 357, 10000: 370,
                  20000: 377, 50000: 381, 1000000: 384}


@pytest.mark.parametrize("N,S", sorted(KREJCIE_MORGAN.items()))
def test_krejcie_morgan_table(N, S):
    r = planning.sample_size(moe=0.05, proportion=0.5, population=N, confidence=0.95)
    assert round(r["n_after_fpc"]) == S
    # our final n rounds up instead, so it is the table's value or one more
    assert r["n"] - S in (0, 1)


def test_design_effect_and_response_rate_inflate_in_order():
    # Kish 1965, sec. 8.2: effective size times deff; non-response inflation n / R (common practice)
    r = planning.sample_size(moe=2.0, sd=10.0, population=1000, deff=1.5, response_rate=0.7)
    n1 = 1.5 * Z95**2 * 25.0
    n2 = n1 / (1 + n1 / 1000)
    assert r["n_after_deff"] == pytest.approx(n1, rel=1e-12)
    assert r["n_after_fpc"] == pytest.approx(n2, rel=1e-12)
    assert r["n_after_response"] == pytest.approx(n2 / 0.7, rel=1e-12)
    assert r["n"] == math.ceil(n2 / 0.7) == 180


def test_more_units_than_the_population_is_flagged():
    r = planning.sample_size(moe=0.05, proportion=0.5, population=100, response_rate=0.5)
    assert r["n"] > 100 and not r["feasible"] and r["notes"]


@pytest.mark.parametrize("kw", [dict(moe=0, sd=1), dict(moe=1, sd=-1), dict(moe=1, proportion=0),
                                dict(moe=1, proportion=1), dict(moe=1, sd=1, proportion=0.5), dict(moe=1),
                                dict(moe=1, sd=1, deff=0), dict(moe=1, sd=1, response_rate=1.2),
                                dict(moe=1, sd=1, confidence=1.0), dict(moe=1, sd=1, population=0),
                                dict(moe=1, sd=1, population=10.5), dict(moe=float("nan"), sd=1)])
def test_bad_arguments_are_refused(kw):
    with pytest.raises(InputError):
        planning.sample_size(**kw)


# ------------------------------------------------------------------ stratified allocation
# A hand-worked example (numbers invented; the arithmetic is Cochran 1977, ch. 5):
# N_h = 400, 300, 300; S_h = 10, 20, 40; c_h = 1, 4, 16.
#   N_h S_h = 4000, 6000, 12000 (sum 22000) -> Neyman n = 100 gives 18.18, 27.27, 54.55
#   N_h S_h / sqrt(c_h) = 4000, 3000, 3000 (sum 10000) -> optimal n = 100 gives 40, 30, 30
#   budget C - c0 = 500: n = 500 * 10000 / sum(N_h S_h sqrt c_h) = 500 * 10000 / 64000 = 78.125
#   target V = 1: sum W S sqrt c = 64, sum W S / sqrt c = 10, sum W S^2 / N = 0.64 ->
#   n = 64 * 10 / (1 + 0.64) = 390.2439
UNITS, SD, COST = [400, 300, 300], [10.0, 20.0, 40.0], [1.0, 4.0, 16.0]


def test_neyman_hand_example():
    r = planning.allocate_strata(UNITS, SD, rule="neyman", n=100)
    assert [s["n_real"] for s in r["strata"]] == pytest.approx([400 / 22, 600 / 22, 1200 / 22], rel=1e-12)
    assert [s["n"] for s in r["strata"]] == [18, 27, 55]
    assert r["n"] == 100


def test_cost_optimal_hand_example_fixed_n():
    r = planning.allocate_strata(UNITS, SD, COST, rule="optimal", n=100)
    assert [s["n_real"] for s in r["strata"]] == pytest.approx([40.0, 30.0, 30.0], rel=1e-12)
    assert r["cost"] == pytest.approx(40 * 1 + 30 * 4 + 30 * 16)


def test_cost_optimal_hand_example_budget():
    r = planning.allocate_strata(UNITS, SD, COST, rule="optimal", budget=600.0, fixed_cost=100.0)
    assert r["n0"] == pytest.approx(78.125, rel=1e-12)
    assert [s["n_real"] for s in r["strata"]] == pytest.approx([31.25, 23.4375, 23.4375], rel=1e-12)
    assert r["cost"] <= 600.0
    # whole numbers: nothing more fits (every stratum's cost exceeds what is left, or it is full)
    left = 600.0 - r["cost"]
    assert left < min(COST) or all(s["n"] == s["units"] for s in r["strata"] if s["cost"] <= left)


def test_cost_optimal_hand_example_target_variance():
    r = planning.allocate_strata(UNITS, SD, COST, rule="optimal", variance=1.0)
    assert r["n_real"] == pytest.approx(640 / 1.64, rel=1e-12)
    assert r["n0"] == pytest.approx(640.0, rel=1e-12)  # n0 = sum W S sqrt c * sum W S / sqrt c / V
    real = np.array([s["n_real"] for s in r["strata"]])
    # at the real-valued allocation the variance of the stratified mean (Cochran eq. 5.6) is the target
    assert planning.stratum_variance(real, UNITS, SD) == pytest.approx(1.0, rel=1e-10)
    assert r["variance"] <= 1.0
    # and one unit fewer anywhere misses it (the whole-number allocation is not padded)
    whole = np.array([s["n"] for s in r["strata"]])
    assert all(planning.stratum_variance(whole - np.eye(3, dtype=int)[h], UNITS, SD) > 1.0 for h in range(3))


def test_target_moe_is_target_variance_z_squared():
    a = planning.allocate_strata(UNITS, SD, COST, rule="neyman", moe=1.0)
    b = planning.allocate_strata(UNITS, SD, COST, rule="neyman", variance=(1.0 / Z95) ** 2)
    assert a["n_real"] == pytest.approx(b["n_real"], rel=1e-12)
    # Neyman for a target variance: n = (sum W S)^2 / (V + sum W S^2 / N) (Cochran 1977, sec. 5.5)
    W = np.array(UNITS) / 1000
    V = (1.0 / Z95) ** 2
    assert a["n_real"] == pytest.approx((W @ SD) ** 2 / (V + W @ np.square(SD) / 1000), rel=1e-12)


def test_neyman_minimises_variance_for_fixed_n_against_scipy():
    # reference: scipy.optimize minimises V(n_h) over real n_h with sum n_h = n (no fpc terms matter:
    # they are constant given n); Neyman's closed form must match the numeric minimiser
    N_h, S_h = np.array([250.0, 600.0, 150.0]), np.array([3.0, 1.0, 7.0])
    W = N_h / N_h.sum()
    n = 120.0
    res = optimize.minimize(lambda x: np.sum(W**2 * S_h**2 / x), x0=np.full(3, n / 3),
                            constraints=[{"type": "eq", "fun": lambda x: x.sum() - n}],
                            bounds=[(1e-6, None)] * 3, method="SLSQP", options={"ftol": 1e-14})
    r = planning.allocate_strata(N_h, S_h, rule="neyman", n=n)
    assert [s["n_real"] for s in r["strata"]] == pytest.approx(res.x, rel=1e-4)


def test_cost_optimal_minimises_variance_for_fixed_cost_against_scipy():
    N_h, S_h, c_h = np.array([250.0, 600.0, 150.0]), np.array([3.0, 1.0, 7.0]), np.array([2.0, 1.0, 9.0])
    W = N_h / N_h.sum()
    C = 500.0
    res = optimize.minimize(lambda x: np.sum(W**2 * S_h**2 / x), x0=np.full(3, 20.0),
                            constraints=[{"type": "eq", "fun": lambda x: c_h @ x - C}],
                            bounds=[(1e-6, None)] * 3, method="SLSQP", options={"ftol": 1e-14})
    r = planning.allocate_strata(N_h, S_h, c_h, rule="optimal", budget=C)
    assert [s["n_real"] for s in r["strata"]] == pytest.approx(res.x, rel=1e-4)


def test_over_allocated_stratum_is_taken_whole():
    # Cochran 1977, sec. 5.8: a Neyman n_h above N_h is set to N_h and the rest re-allocated
    r = planning.allocate_strata([40, 300, 300], [300.0, 20.0, 4.0], rule="neyman", n=100)  # share 62.5 > 40
    assert r["strata"][0]["n"] == 40 and r["strata"][0]["taken_whole"]
    rest = np.array([300 * 20.0, 300 * 4.0])
    assert [s["n_real"] for s in r["strata"][1:]] == pytest.approx(60 * rest / rest.sum(), rel=1e-12)
    assert r["n"] == 100


@pytest.mark.parametrize("rule", ["equal", "proportional"])
def test_simple_rules(rule):
    r = planning.allocate_strata(UNITS, SD, rule=rule, n=90)
    want = [30, 30, 30] if rule == "equal" else [36, 27, 27]
    assert [s["n"] for s in r["strata"]] == want


def test_allocation_needs_exactly_one_target():
    with pytest.raises(InputError, match="exactly one"):
        planning.allocate_strata(UNITS, SD, n=10, budget=100)
    with pytest.raises(InputError, match="sd of stratum 2"):
        planning.allocate_strata(UNITS, [1.0, -1.0, 2.0], n=10)


# ------------------------------------------------------------------ cluster take
def test_kish_optimal_cluster_size_hand_value():
    # Kish 1965, sec. 8.3: m_opt = sqrt((c1/c2)(1 - rho)/rho); c1/c2 = 9, rho = 0.1 -> sqrt(81) = 9
    r = planning.optimal_cluster_take(90.0, 10.0, 0.1)
    assert r["m_opt"] == pytest.approx(9.0, rel=1e-12)
    assert r["n"] == 9 and r["deff"] == pytest.approx(1.8)


@pytest.mark.parametrize("c1,c2,rho", [(50.0, 2.0, 0.05), (200.0, 15.0, 0.3), (10.0, 10.0, 0.02)])
def test_kish_optimum_against_a_numeric_minimum(c1, c2, rho):
    # reference: scipy.optimize minimises variance x cost, (1 + (m - 1) rho) / m * (c1 + c2 m)
    res = optimize.minimize_scalar(lambda m: (1 + (m - 1) * rho) / m * (c1 + c2 * m), bounds=(0.01, 1e4),
                                   method="bounded", options={"xatol": 1e-9})
    assert planning.optimal_cluster_take(c1, c2, rho)["m_opt"] == pytest.approx(res.x, rel=1e-5)


def test_cluster_take_with_budget():
    r = planning.optimal_cluster_take(90.0, 10.0, 0.1, budget=5000.0)
    assert r["clusters"] == 27 and r["cost"] == 27 * 180.0 <= 5000.0


# ------------------------------------------------------------------ command line
def _run(capsys, *argv):
    code = main(["plan", *argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_plan_json_mean(capsys):
    code, out, _ = _run(capsys, "--sd", "10", "--moe", "2", "--population", "1000", "--deff", "1.5",
                        "--response-rate", "0.7", "--json")
    assert code == 0
    doc = json.loads(out)
    for key in ("n", "n0", "formula", "n_after_deff", "n_after_fpc", "n_after_response", "z"):
        assert key in doc
    assert doc["n"] == 180 and isinstance(doc["n"], int)


def test_plan_json_proportion_matches_krejcie_morgan_row(capsys):
    code, out, _ = _run(capsys, "--proportion", "0.5", "--moe", "0.05", "--population", "1000", "--json")
    assert code == 0
    assert round(json.loads(out)["n_after_fpc"]) == KREJCIE_MORGAN[1000]


def test_plan_text_output(capsys):
    code, out, _ = _run(capsys, "--sd", "10", "--moe", "2")
    assert code == 0 and "n = 97" in out


def test_plan_strata_csv(capsys, tmp_path):
    f = tmp_path / "strata.csv"
    f.write_text("stratum,units,sd,cost\nnorth,400,10,1\nsouth,300,20,4\nhills,300,40,16\n")
    code, out, _ = _run(capsys, "--strata", str(f), "--allocation", "optimal", "--n", "100", "--json")
    assert code == 0
    doc = json.loads(out)
    assert [s["n"] for s in doc["strata"]] == [40, 30, 30]
    assert [s["stratum"] for s in doc["strata"]] == ["north", "south", "hills"]
    assert {"n", "n0", "formula"} <= set(doc)


def test_plan_strata_lists_and_cluster(capsys):
    code, out, _ = _run(capsys, "--stratum-units", "400,300,300", "--stratum-sd", "10,20,40", "--stratum-cost",
                        "1,4,16", "--allocation", "optimal", "--budget", "500", "--json")
    assert code == 0 and json.loads(out)["n0"] == pytest.approx(78.125)
    code, out, _ = _run(capsys, "--icc", "0.1", "--cluster-cost", "90", "--unit-cost", "10", "--json")
    assert code == 0 and json.loads(out)["n"] == 9


@pytest.mark.parametrize("argv,word", [
    (["--sd", "10"], "--moe"),
    (["--sd", "-3", "--moe", "1"], "--sd"),
    (["--proportion", "1.4", "--moe", "0.05"], "--proportion"),
    (["--sd", "3", "--proportion", "0.5", "--moe", "1"], "exactly one"),
    (["--sd", "3", "--moe", "1", "--response-rate", "0"], "--response-rate"),
    (["--sd", "3", "--moe", "1", "--confidence", "95"], "--confidence"),
    (["--sd", "abc", "--moe", "1"], "--sd"),
    (["--stratum-units", "10,20", "--stratum-sd", "1,x", "--n", "5"], "--stratum-sd"),
    (["--stratum-units", "10,20", "--stratum-sd", "1,2", "--n", "5", "--allocation", "best"], "allocation"),
    (["--stratum-units", "10,20", "--stratum-sd", "1,2"], "exactly one"),
    (["--icc", "1.5", "--cluster-cost", "9", "--unit-cost", "1"], "--icc"),
    (["--icc", "0.1", "--cluster-cost", "9"], "--unit-cost"),
    (["--icc", "0.1", "--cluster-cost", "9", "--unit-cost", "1", "--sd", "3"], "--sd"),
])
def test_plan_bad_input_exits_2(capsys, argv, word):
    code, out, err = _run(capsys, *argv)
    assert code == 2
    assert err.startswith("error: ") and word in err
    assert "Traceback" not in err


def test_plan_bad_strata_file(capsys, tmp_path):
    f = tmp_path / "s.csv"
    f.write_text("units,sdev\n10,1\n")
    code, _, err = _run(capsys, "--strata", str(f), "--n", "4")
    assert code == 2 and "sdev" in err and "did you mean 'sd'" in err
    code, _, err = _run(capsys, "--strata", str(tmp_path / "none.csv"), "--n", "4")
    assert code == 2 and "does not exist" in err


@pytest.mark.parametrize("confidence", [0.5, 0.8, 0.9, 0.95, 0.975, 0.99, 0.999, 0.999999])
def test_normal_quantile_matches_scipy(confidence):
    # the standard library's inverse normal against scipy.stats.norm.ppf: equal to a few units in the last place
    expected = stats.norm.ppf(0.5 + confidence / 2.0)
    assert normal_quantile(confidence) == pytest.approx(expected, rel=8 * np.finfo(float).eps, abs=0.0)


@pytest.mark.parametrize("command", [["plan", "--sd", "10", "--moe", "1"], ["--help"]])
def test_plan_and_help_import_no_heavy_library(command):
    # start-up cost: `plan` and `--help` must not import pandas, scipy or matplotlib (read from -X importtime)
    src = str(Path(planning.__file__).resolve().parents[2])
    env = {**os.environ, "PYTHONPATH": src + os.pathsep + os.environ.get("PYTHONPATH", "")}
    done = subprocess.run([sys.executable, "-X", "importtime", "-m", "samplewright", *command],
                          capture_output=True, text=True, env=env, timeout=60, check=False)
    assert done.returncode == 0, done.stderr[-500:]
    imported = {line.split("|")[-1].strip().split(".")[0] for line in done.stderr.splitlines()
                if line.startswith("import time:")}
    assert "samplewright" in imported
    assert not imported & {"pandas", "scipy", "matplotlib"}
