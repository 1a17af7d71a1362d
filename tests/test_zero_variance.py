"""A target without variance in the frame: documented design effects, one warning, no numpy noise.

Kish's design effect (Kish 1965, sec. 8.2) divides the design's variance by the variance of
the SRS-without-replacement mean, (1 - f) S^2 / n (Cochran 1977, eq. 2.8), which is 0 when
every unit has the same value.  The documented values (evaluation/measures.py): deff and se_ratio are
empty only where they are 0 / 0, infinite where only the denominator is 0.  The HT mean
under Poisson sampling does vary for a constant target (its sample size is random), with
exact variance sum_k (1 - pi_k) y_k^2 / pi_k / N^2 (the HT variance with pi_kl = pi_k pi_l;
Sarndal, Swensson & Wretman 1992, ch. 3; from memory), so its deff is infinite; the Hajek mean and
every fixed-size SRS estimate the constant exactly (to rounding), so theirs is 0 / 0.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from samplewright.cli.main import main

SCENARIO = """
[frame]
path = "frame.csv"
target = ["y", "flat"]
size = "sz"

[[design]]
label = "simple"
method = "srs"
n = 3
estimators = ["ht", "hajek"]

[[design]]
label = "coin"
method = "poisson"
n = 4
estimators = ["ht"]
"""

# eight units (invented values); 'flat' is 0.3 everywhere, a value binary floating point cannot hold
FRAME = pd.DataFrame({"y": [3.0, 7.0, 1.0, 9.0, 4.0, 4.0, 12.0, 2.0], "flat": [0.3] * 8,
                      "sz": [1.0, 2.0, 3.0, 1.0, 2.0, 3.0, 1.0, 2.0]})


def _run(tmp_path, capsys, *extra):
    FRAME.to_csv(tmp_path / "frame.csv", index=False)
    (tmp_path / "s.toml").write_text(SCENARIO)
    out = tmp_path / "out"
    code = main(["run", str(tmp_path / "s.toml"), "--out", str(out), "--quiet", *extra])
    err = capsys.readouterr().err
    return code, err, pd.read_csv(out / "summary.csv").set_index(["design", "estimator", "variable"]), out


def _check(s, err):
    flat_lines = [ln for ln in err.splitlines() if "'flat'" in ln]
    assert len(flat_lines) == 1 and flat_lines[0].startswith("warning: target 'flat' has no variance")
    assert "RuntimeWarning" not in err and "skewed" not in flat_lines[0]
    for key in [("simple", "ht", "flat"), ("simple", "hajek", "flat")]:
        row = s.loc[key]
        assert math.isnan(row["deff"]) and math.isnan(row["se_ratio"])  # 0 / 0
        assert abs(row["coverage"] - 1.0) < 1e-12  # the estimate is the truth (to rounding): every interval holds it
    coin = s.loc[("coin", "ht", "flat")]
    assert coin["empirical_se"] > 0 and coin["deff"] == math.inf and np.isfinite(coin["se_ratio"])
    for key in [("simple", "ht", "y"), ("coin", "ht", "y")]:  # a target that varies keeps finite values
        assert np.isfinite(s.loc[key, "deff"]) and np.isfinite(s.loc[key, "se_ratio"])


def test_exact_mode_gives_the_documented_values(tmp_path, capsys):
    code, err, s, _ = _run(tmp_path, capsys, "--exact")
    assert code == 0
    _check(s, err)
    # exact variance of the Poisson HT mean of a constant c: c^2 sum (1 - pi) / pi / N^2 (SSW 1992, from memory)
    sz = FRAME["sz"].to_numpy()
    pi = 4 * sz / sz.sum()
    var = 0.3**2 * np.sum((1 - pi) / pi) / 8**2
    assert abs(s.loc[("coin", "ht", "flat"), "empirical_se"] - math.sqrt(var)) < 1e-12


def test_simulation_and_report_give_the_documented_values(tmp_path, capsys):
    code, err, s, out = _run(tmp_path, capsys, "--replicates", "300")
    assert code == 0
    _check(s, err)
    assert main(["report", str(out)]) == 0
    assert "infinite" in (out / "report.html").read_text()
