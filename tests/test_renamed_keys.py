"""Renamed scenario values and command-line names: the new spelling works, the old one is refused.

- ``method = "pps"`` with ``replace = true`` is the with-replacement size-proportional method
  (formerly ``pps_wr``); ``pps`` without ``replace = true`` is refused naming the fixed-size
  without-replacement methods.
- ``--until empirical_se_rel_mcse=...`` (formerly ``empse_rel_mcse``).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from samplewright.cli.main import main
from samplewright.errors import InputError
from samplewright.evaluation.stopping import parse_until

# an exact small frame: y and a size measure x (x not proportional to y)
Y = [3.0, 8.0, 1.0, 12.0, 5.0, 9.0]
X = [2.0, 5.0, 1.0, 6.0, 4.0, 3.0]


def scenario(tmp_path, design_lines: str) -> str:
    pd.DataFrame({"y": Y, "x": X}).to_csv(tmp_path / "f.csv", index=False)
    p = tmp_path / "s.toml"
    p.write_text(f'[frame]\npath = "f.csv"\ntarget = "y"\nsize = "x"\n\n[[design]]\nlabel = "by size"\n'
                 f"{design_lines}\n", encoding="utf-8")
    return str(p)


def refused(capsys, argv) -> str:
    code = main(argv)
    err = capsys.readouterr().err
    assert code == 2
    lines = [x for x in err.splitlines() if x.startswith("error:")]
    assert len(lines) == 1 and "Traceback" not in err
    return lines[0]


def test_old_method_name_is_refused_naming_the_new_one(tmp_path, capsys):
    s = scenario(tmp_path, 'method = "pps_wr"\nn = 2')
    line = refused(capsys, ["run", s, "--out", str(tmp_path / "out"), "--quiet", "--no-report"])
    assert "design 'by size'" in line and "'pps_wr'" in line
    assert 'use method = "pps" with replace = true' in line
    assert not (tmp_path / "out" / "summary.csv").exists()


@pytest.mark.parametrize("extra", ["", "replace = false"])
def test_pps_without_replacement_is_refused_naming_the_fixed_size_methods(tmp_path, capsys, extra):
    s = scenario(tmp_path, f'method = "pps"\nn = 2\n{extra}')
    line = refused(capsys, ["run", s, "--out", str(tmp_path / "out"), "--quiet", "--no-report"])
    assert "design 'by size'" in line and "replace = true" in line
    for name in ("sampford", "pareto", "pps_systematic"):
        assert f'"{name}"' in line


def test_pps_with_replacement_runs_exactly_and_is_labelled_pps(tmp_path):
    s = scenario(tmp_path, 'method = "pps"\nreplace = true\nn = 3\nestimators = ["ht"]')
    out = tmp_path / "out"
    assert main(["run", s, "--out", str(out), "--exact", "--quiet", "--no-report"]) == 0
    summary = pd.read_csv(out / "summary.csv")
    assert set(summary["method"]) == {"pps"}
    # every ordered sequence of 3 draws from 6 units (N^n = 216 samples)
    assert (summary["replicates"] == 6**3).all()
    # the Hansen-Hurwitz estimator is unbiased for the mean (Cochran 1977, sec. 9A.3), and its
    # exact variance is sum p_i (y_i / p_i - Y)^2 / n, here divided by N^2 for the mean (eq. 9A.5)
    y, p = np.array(Y), np.array(X) / sum(X)
    row = summary.iloc[0]
    assert row["bias"] == pytest.approx(0.0, abs=1e-12)
    v = float((p * (y / p - y.sum()) ** 2).sum()) / 3 / len(Y) ** 2
    assert row["empirical_se"] == pytest.approx(math.sqrt(v), rel=1e-10)


def test_new_stopping_target_name_is_accepted():
    assert parse_until("empirical_se_rel_mcse=0.05", max_replicates=1000).targets == {
        "empirical_se_rel_mcse": 0.05}


def test_old_stopping_target_name_is_refused_naming_the_new_one(tmp_path, capsys):
    with pytest.raises(InputError, match="empirical_se_rel_mcse"):
        parse_until("coverage_mcse=0.01,empse_rel_mcse=0.05", max_replicates=1000)
    s = scenario(tmp_path, 'method = "pps"\nreplace = true\nn = 2')
    line = refused(capsys, ["run", s, "--out", str(tmp_path / "out"), "--quiet", "--no-report",
                            "--until", "empse_rel_mcse=0.05"])
    assert "--until" in line and "'empse_rel_mcse'" in line and "empirical_se_rel_mcse=0.05" in line


def test_simulated_pps_run_labels_summary_and_frontier_pps(tmp_path):
    s = scenario(tmp_path, 'method = "pps"\nreplace = true\nn = [2, 3]')
    out = tmp_path / "out"
    assert main(["run", s, "--out", str(out), "--replicates", "40", "--quiet", "--no-report"]) == 0
    assert set(pd.read_csv(out / "summary.csv")["method"]) == {"pps"}
    assert set(pd.read_csv(out / "frontier.csv")["method"]) == {"pps"}
