"""Sequential stopping (--until) scores against the true population, for every output variable.

The stopping rule's Monte Carlo SEs are those of Morris, White & Crowther (2019), Statistics
in Medicine 38:2074-2102, Table 6: MCSE(coverage) = sqrt(c (1 - c) / R) with c estimated,
for the check, as (covered + 1) / (R + 2) (Laplace's rule of succession; common practice);
MCSE(bias) = sqrt(var(x) / R).  Coverage counts the intervals that hold the truth, and the
truth is the true population's value: under frame errors the listed frame's mean differs,
and summary.csv's `truth` column is the value every measure must use.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from samplewright.api import run
from samplewright.cli.main import main
from samplewright.simulation.scenario import scenario_from_dict


def _population(N=1500, seed=23):
    """Invented: two districts with very different means, a second target and a three-way region."""
    rng = np.random.default_rng(seed)
    district = np.repeat(["lowland", "upland"], [1000, 500])
    depth = np.where(district == "lowland", 12.0, 40.0) + rng.gamma(3.0, 3.0, N)
    cost = 5.0 + 0.3 * depth + rng.normal(0.0, 2.0, N)
    region = rng.choice(["n", "s", "w"], N, p=[0.5, 0.3, 0.2])
    return pd.DataFrame({"depth": depth, "cost": cost, "district": district, "region": region})


def _scenario(tmp_path, roles, designs, **tables):
    _population().to_csv(tmp_path / "frame.csv", index=False)
    return scenario_from_dict({"frame": {"path": "frame.csv", **roles}, "design": designs, **tables},
                              base=tmp_path)


def _mcse_cov(hits):
    c = (hits.sum() + 1.0) / (len(hits) + 2.0)
    return math.sqrt(c * (1.0 - c) / len(hits))


def test_until_with_frame_errors_stops_on_coverage_of_the_true_mean(tmp_path):
    # half the upland wells are missing from the list: the listed mean is about 4.7 below the true
    # one, so intervals rarely hold the true mean and the rule must count coverage against it
    sc = _scenario(tmp_path, {"target": "depth", "stratum": "district"},
                   [{"label": "s", "method": "srs", "n": 60, "estimators": ["hajek"]}],
                   frame_error={"undercoverage": 0.5, "undercoverage_stratum": "upland"})
    t, bs = 0.02, 100
    res = run(sc, replicates=100, until=f"coverage_mcse={t},bias_mcse=0.2", max_replicates=4000, block_size=bs)
    row = res.summary.iloc[0]
    truth = float(row["truth"])
    pop = _population()
    assert truth == pop["depth"].mean()  # the true population's mean, not the listed frame's
    cell = res.info["stopping"]["cells"][0]
    reps = res.replicates.sort_values("replicate")
    R = len(reps)
    hits = ((reps["lower"] <= truth) & (truth <= reps["upper"])).to_numpy()
    assert R == cell["replicates"] == row["replicates"] and cell["met"]
    assert cell["reached"]["coverage_mcse"] == _mcse_cov(hits)  # MWC 2019 Table 6, rule of succession
    assert _mcse_cov(hits) <= t and (R == 100 or _mcse_cov(hits[: R - bs]) > t)  # first block that meets it
    x = reps["estimate"].to_numpy()
    assert row["bias_mcse"] == math.sqrt(np.var(x, ddof=1) / R)
    assert cell["reached"]["bias_mcse"] == pytest.approx(row["bias_mcse"], rel=1e-12)  # blockwise merge
    assert row["coverage"] < 0.5  # the listed frame's mean would be covered about 95 % of the time
    c = (hits.sum() + 1.0) / (R + 2.0)
    assert cell["replicates_needed"] == max(math.ceil(c * (1 - c) / t**2), math.ceil(np.var(x, ddof=1) / 0.2**2))


def test_until_with_two_targets_and_a_domain_finishes(tmp_path, capsys):
    sc = tmp_path / "two.toml"
    _population().to_csv(tmp_path / "frame.csv", index=False)
    sc.write_text('block_size = 100\n\n[frame]\npath = "frame.csv"\ntarget = ["depth", "cost"]\nstratum = "district"\n'
                  'domain = "region"\n\n[[design]]\nlabel = "s"\nmethod = "srs"\nn = 40\n'
                  'estimators = ["ht", "hajek"]\n')
    out = tmp_path / "out"
    assert main(["run", str(sc), "--out", str(out), "--quiet", "--replicates", "100",
                 "--until", "coverage_mcse=0.02,bias_mcse=0.5", "--max-replicates", "3000"]) == 0
    summary = pd.read_csv(out / "summary.csv")
    assert len(summary) == 2 * (2 + 2 * 3)  # two estimators x (two targets and their three domain means)
    reps = pd.read_parquet(out / "replicates.parquet")
    import json

    cell = json.loads((out / "run.json").read_text())["stopping"]["cells"][0]
    assert cell["met"]
    # every variable's coverage MCSE, against its own truth, meets the target at the stopping count
    worst = 0.0
    for (est, var), g in reps.groupby(["estimator", "variable"]):
        truth = float(summary[(summary.estimator == est) & (summary.variable == var)]["truth"].iloc[0])
        g = g[np.isfinite(g["estimate"])]  # a replicate with no unit of the domain has no estimate
        hits = ((g["lower"] <= truth) & (truth <= g["upper"])).to_numpy()
        worst = max(worst, _mcse_cov(hits))
    assert worst <= 0.02
    assert cell["reached"]["coverage_mcse"] == worst
