"""What a run writes stays safe and complete: census points in a sweep, late failures, hostile
labels (mathtext, control characters, spreadsheet formulas, Markdown/HTML), damaged run folders,
Ctrl-C at start-up, and file permissions under the user's umask."""

from __future__ import annotations

import csv
import json
import os
import stat
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from conftest import Z

from samplewright.cli.main import main
from samplewright.decision.frontier import fit_curve
from samplewright.files import protect_cell, restore_cell, write_csv, write_json, write_parquet, write_text
from samplewright.simulation.scenario import scenario_from_dict

SRC = str(Path(__file__).resolve().parents[1] / "src")


def cli(argv, capsys):
    code = main([str(a) for a in argv])
    out = capsys.readouterr()
    return code, out.out, out.err


def scenario_file(tmp_path: Path, text: str) -> Path:
    p = tmp_path / "scenario.toml"
    p.write_text(text)
    return p


CENSUS = """title = "census"
replicates = 1500
seed = 11
[frame.synthetic]
units = 240
seed = 4
[[design]]
label = "simple"
method = "srs"
n = [20, 60, 240]
estimators = ["ht"]
[goal]
moe = 1e-6
"""
#: the same without the census point, for the checks that are not about it
SWEEP = CENSUS.replace("n = [20, 60, 240]", "n = [20, 60]").replace("replicates = 1500", "replicates = 40")


# ------------------------------------------------------------------ census points
def test_fit_holds_an_exact_point_as_a_constraint():
    # SRS without replacement: MSE(n) = S^2/n - S^2/N exactly (Cochran 1977, eq. 2.8); at n = N it is 0
    # with no Monte Carlo error.  Noisy points elsewhere must not pull the curve off that exact point.
    S2, N = 37.5, 240
    n = np.array([20.0, 60.0, 240.0])
    v = S2 / n - S2 / N
    noisy = v * np.array([1.03, 0.98, 1.0])
    c = fit_curve(n, noisy, [0.02 * v[0], 0.02 * v[1], 0.0])
    assert abs(c["a"] / N + c["b"]) < 1e-12  # through the census point
    exact = fit_curve(n, v, [0.01, 0.01, 0.0])
    assert exact["a"] == pytest.approx(S2, rel=1e-10)
    assert exact["b"] == pytest.approx(-S2 / N, rel=1e-10)


def test_census_point_in_a_sweep_with_a_goal_runs_and_is_recommended(tmp_path, capsys):
    sc = scenario_file(tmp_path, CENSUS)
    out = tmp_path / "out"
    code, _, err = cli(["run", sc, "--out", out, "--quiet", "--no-report"], capsys)
    assert code == 0, err
    for name in ("summary.csv", "replicates.parquet", "run.json", "frontier.csv", "recommendation.json"):
        assert (out / name).exists(), name
    summary = pd.read_csv(out / "summary.csv")
    census = summary[summary["size"] == 240].iloc[0]
    # a census interval is the total itself: it holds the truth (up to rounding) in every replicate
    assert census["coverage"] == 1.0
    rec = json.loads((out / "recommendation.json").read_text())
    # only the census meets a margin of 1e-6 (its error is rounding), and it is picked, not passed over
    assert rec["cheapest_meeting_moe"]["size"] == 240
    # the fitted curve passes through MSE(N) = 0 and its a estimates S^2 (Cochran 1977, eq. 2.8)
    front = pd.read_csv(out / "frontier.csv").sort_values("size")
    c = fit_curve(front["size"], front["rmse"] ** 2, front["mse_mcse"])
    S2 = float(scenario_from_dict({"frame": {"synthetic": {"units": 240, "seed": 4}},
                                   "design": [{"label": "s", "method": "srs", "n": 5}]}).load_frame().S2[0])
    assert abs(c["a"] / 240 + c["b"]) < 1e-9 * S2
    assert abs(c["a"] - S2) < Z * np.sqrt(c["cov"][0, 0])
    (row,) = rec["interpolated"]
    assert row["a"] == pytest.approx(c["a"], rel=1e-12)


# ------------------------------------------------------------------ late failures keep the tables
def test_a_failing_frontier_keeps_the_tables_and_the_report_can_be_rebuilt(tmp_path, capsys, monkeypatch):
    from samplewright.decision import frontier

    def broken(*a, **k):
        raise RuntimeError("fit exploded")

    monkeypatch.setattr(frontier, "frontier_table", broken)
    sc = scenario_file(tmp_path, SWEEP)
    out = tmp_path / "out"
    code, _, err = cli(["run", sc, "--out", out, "--quiet"], capsys)
    assert code == 1, err
    errors = [ln for ln in err.splitlines() if ln.startswith("error:")]
    assert len(errors) == 1 and "fit exploded" in errors[0] and "samplewright report" in errors[0]
    assert "Traceback" not in err
    for name in ("summary.csv", "replicates.parquet", "run.json"):
        assert (out / name).exists(), name
    monkeypatch.undo()
    code, _, err = cli(["report", out, "--quiet"], capsys)
    assert code == 0, err
    assert (out / "report.html").exists()


def test_a_failing_figure_leaves_the_tables_and_the_rest_of_the_report(tmp_path, capsys, monkeypatch):
    from matplotlib.figure import Figure

    def broken(self, *a, **k):
        raise ValueError("cannot lay out text")

    monkeypatch.setattr(Figure, "savefig", broken)
    sc = scenario_file(tmp_path, SWEEP)
    out = tmp_path / "out"
    code, _, err = cli(["run", sc, "--out", out, "--quiet"], capsys)
    assert code == 0, err
    assert (out / "summary.csv").exists() and (out / "run.json").exists()
    assert "could not be drawn (ValueError: cannot lay out text)" in (out / "report.html").read_text()


def test_a_failing_report_is_an_error_line_after_the_tables(tmp_path, capsys, monkeypatch):
    from samplewright import report

    def broken(*a, **k):
        raise RuntimeError("template exploded")

    monkeypatch.setattr(report, "write_report", broken)
    sc = scenario_file(tmp_path, SWEEP)
    out = tmp_path / "out"
    code, _, err = cli(["run", sc, "--out", out, "--quiet"], capsys)
    assert code == 1
    assert next(ln for ln in err.splitlines() if ln.startswith("error:")).startswith(
        "error: the report (figures/, report.html, brief.md) failed (RuntimeError: template exploded)")
    assert (out / "summary.csv").exists() and (out / "replicates.parquet").exists() and (out / "run.json").exists()


# ------------------------------------------------------------------ hostile labels (items 11, 13)
def test_mathtext_characters_in_labels_and_names_draw_every_figure(tmp_path):
    from samplewright import run

    sc = scenario_from_dict({
        "frame": {"synthetic": {"units": 300, "seed": 3, "target": "$y^$",
                                "strata": [{"name": "$a^$", "share": 0.5, "mean": 10, "sd": 2},
                                           {"name": "b", "share": 0.5, "mean": 20, "sd": 3}]}},
        "design": [{"label": "$x^$", "method": "srs", "n": [20, 40], "estimators": ["ht", "hajek"]},
                   {"label": "st $", "method": "stratified", "allocation": "proportional", "n": 30}],
    })
    res = run(sc, replicates=60, seed=1)
    out = res.write(tmp_path / "out", report=True)
    page = (out / "report.html").read_text()
    assert "could not be drawn" not in page
    assert sorted(p.stem for p in (out / "figures").glob("*.png")) == sorted(res.figure_names())
    # the label is shown literally: matplotlib's "\$" is a plain dollar sign
    ax = res.figure("coverage").axes[0]
    assert next(t.get_text() for t in ax.get_yticklabels()).startswith(r"\$x^\$")


# a right-to-left override makes a table or terminal line read in another order than it is stored (Unicode
# Standard Annex 9, explicit directional formatting characters): refused like control characters, never echoed
@pytest.mark.parametrize("key, text, words", [("label", "a\rb", "control character"),
                                              ("label", "a\nb", "control character"),
                                              ("title", "t\x00", "control character"),
                                              ("label", "abc\u202edcba", "text-direction"),
                                              ("title", "\u2067census\u2069", "text-direction")])
def test_control_characters_in_labels_and_titles_are_refused(tmp_path, capsys, key, text, words):
    body = SWEEP
    line = 'title = "census"' if key == "title" else 'label = "simple"'
    body = body.replace(line, f"{key} = {json.dumps(text)}")
    code, _, err = cli(["run", scenario_file(tmp_path, body), "--out", tmp_path / "o", "--quiet"], capsys)
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error:") and key in lines[0] and words in lines[0]
    if words == "text-direction":
        assert text not in err  # named by its code point


def test_csv_text_with_a_carriage_return_stays_in_its_row(tmp_path):
    df = pd.DataFrame({"stratum": ["a\rb", "c\nd", "plain"], "units": [1, -2, 3]})
    write_csv(df, tmp_path / "t.csv")
    with open(tmp_path / "t.csv", newline="") as fh:  # the csv module, as RFC 4180 reads it
        rows = list(csv.reader(fh))
    assert rows == [["stratum", "units"], ["a\rb", "1"], ["c\nd", "-2"], ["plain", "3"]]


def test_formula_like_text_cells_are_quoted_and_numbers_are_not(tmp_path, capsys):
    body = SWEEP.replace(
        'label = "simple"', 'label = "=HYPERLINK(\\"x\\")"')
    out = tmp_path / "out"
    code, _, err = cli(["run", scenario_file(tmp_path, body), "--out", out, "--quiet"], capsys)
    assert code == 0, err
    with open(out / "summary.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert {r["design"] for r in rows} == {"'=HYPERLINK(\"x\")"}
    assert any(r["bias"].startswith("-") for r in rows)  # negative numbers are written as numbers
    assert all(not r["bias"].startswith("'") for r in rows)
    # reading back undoes the guard: the report shows the original label
    from samplewright import read_run

    back = read_run(out)
    assert set(back.summary["design"]) == {'=HYPERLINK("x")'}
    assert set(back.frontier["design"]) == {'=HYPERLINK("x")'}
    assert '| =HYPERLINK("x") | 20 |' in (out / "brief.md").read_text()


@pytest.mark.parametrize("text", ["=1+2", "+x", "-x", "@sum", "\tx", "\rx", "'=x", "''-y", "'", "'a",
                                  "-1.5", "+2", "a=b", ""])
def test_formula_guard_round_trips_every_text(text):
    written = protect_cell(text)
    assert restore_cell(written) == text
    # what a spreadsheet sees never starts a formula (common practice: a leading quote makes it text)
    assert not written.startswith(("=", "+", "@", "\t", "\r")) or written in ("+2",)
    assert not written.startswith("-") or written == "-1.5"


def test_brief_escapes_markdown_and_html_in_title_and_labels(tmp_path, capsys):
    body = SWEEP.replace(
        'title = "census"', 'title = "<script>**x**|y"').replace('label = "simple"', 'label = "a|b_c"')
    out = tmp_path / "out"
    code, _, err = cli(["run", scenario_file(tmp_path, body), "--out", out, "--quiet"], capsys)
    assert code == 0, err
    brief = (out / "brief.md").read_text()
    assert "# &lt;script&gt;\\*\\*x\\*\\*\\|y: design brief" in brief
    assert "<script>" not in brief
    table = [ln for ln in brief.splitlines() if ln.startswith("| a")]
    assert table and all(ln.startswith("| a\\|b\\_c | ") for ln in table)  # one cell, not two


# ------------------------------------------------------------------ damaged run folders
def _damage(folder: Path, how: str) -> str:
    if how == "truncated summary":
        text = (folder / "summary.csv").read_text()
        (folder / "summary.csv").write_text(text[:-10])  # cut inside the last row
        return "summary.csv"
    if how == "summary without coverage":
        df = pd.read_csv(folder / "summary.csv").drop(columns=["coverage"])
        df.to_csv(folder / "summary.csv", index=False)
        return "summary.csv"
    if how == "text in a numeric column":
        df = pd.read_csv(folder / "summary.csv")
        df["coverage"] = "high"
        df.to_csv(folder / "summary.csv", index=False)
        return "summary.csv"
    info = json.loads((folder / "run.json").read_text())
    if how == "malformed run.json":
        (folder / "run.json").write_text('{"title": "x",')
    elif how == "run.json with wrong types":
        info["designs"] = "srs"
        (folder / "run.json").write_text(json.dumps(info))
    elif how == "run.json confidence as text":
        info["confidence"] = "95%"
        (folder / "run.json").write_text(json.dumps(info))
    return "run.json"


@pytest.mark.parametrize("how", ["truncated summary", "summary without coverage", "text in a numeric column",
                                 "malformed run.json", "run.json with wrong types", "run.json confidence as text"])
def test_report_on_a_damaged_folder_is_one_error_line_naming_the_file(tmp_path, capsys, how):
    sc = scenario_file(tmp_path, SWEEP)
    out = tmp_path / "out"
    assert cli(["run", sc, "--out", out, "--quiet", "--no-report"], capsys)[0] == 0
    name = _damage(out, how)
    code, _, err = cli(["report", out, "--quiet"], capsys)
    assert code == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error:") and name in lines[0], err


# ------------------------------------------------------------------ Ctrl-C at start-up
def test_ctrl_c_while_parsing_is_one_line_and_130(capsys, monkeypatch):
    import samplewright.cli.main as cli_module

    def interrupted():
        raise KeyboardInterrupt

    monkeypatch.setattr(cli_module, "build_parser", interrupted)
    code = main(["run", "x.toml"])
    err = capsys.readouterr().err
    assert code == 130
    assert err.strip().splitlines() == [err.strip()] and "interrupted" in err and "Traceback" not in err


def test_ctrl_c_during_the_imports_of_start_up_is_one_line_and_130():
    # the interrupt lands while `python -m samplewright` imports its command line
    code = ("import builtins, runpy\n"
            "real = builtins.__import__\n"
            "def imp(name, *a, **k):\n"
            "    if name == 'argparse':\n"
            "        raise KeyboardInterrupt\n"
            "    return real(name, *a, **k)\n"
            "builtins.__import__ = imp\n"
            "runpy.run_module('samplewright', run_name='__main__')\n")
    env = {**os.environ, "PYTHONPATH": SRC}
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=120,
                          check=False)
    assert done.returncode == 130
    assert len(done.stderr.strip().splitlines()) == 1 and "interrupted" in done.stderr
    assert "Traceback" not in done.stderr


# ------------------------------------------------------------------ permissions follow the umask
@pytest.mark.parametrize("mask, mode", [(0o022, 0o644), (0o077, 0o600)])
def test_output_files_follow_the_umask(tmp_path, capsys, mask, mode):
    old = os.umask(mask)
    try:
        write_csv(pd.DataFrame({"a": [1]}), tmp_path / "a.csv")
        write_json({"a": 1}, tmp_path / "a.json")
        write_text("x", tmp_path / "a.txt")
        write_parquet(pd.DataFrame({"a": [1]}), tmp_path / "a.parquet")
        sc = scenario_file(tmp_path, SWEEP)
        out = tmp_path / "out"
        assert cli(["run", sc, "--out", out, "--quiet"], capsys)[0] == 0
    finally:
        os.umask(old)
    files = [p for p in tmp_path.rglob("*") if p.is_file() and p.name != "scenario.toml"]
    assert len(files) > 10
    assert {p.relative_to(tmp_path).as_posix(): oct(stat.S_IMODE(p.stat().st_mode)) for p in files} == {
        p.relative_to(tmp_path).as_posix(): oct(mode) for p in files}

