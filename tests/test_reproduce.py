"""run.json ``reproduce``: the command line of a finished run, pasted as it is, gives the same summary.csv.

The reference is the first run's own bytes: a run's numbers depend only on its scenario, its root
seed, its replicate counts and its stopping rule (one SeedSequence per run, children keyed by
design, size and block), so the recorded command must carry every one of them.  The replicate
counts a report states are checked against the counts summary.csv records for each design.
"""

from __future__ import annotations

import html
import json
import re
import shlex
from pathlib import Path

import pandas as pd
import pytest

from samplewright import run, scenario_from_dict
from samplewright.cli.main import main

SCENARIO = """
title = "Reproduce check (invented)"
seed = 11
replicates = 200
block_size = 100

[frame.synthetic]
units = 600
seed = 3
target = "y"

[[design]]
label = "simple"
method = "srs"
n = [20, 60]

[[design]]
label = "tiny"
method = "srs"
n = 8

[goal]
moe = 5.0
"""

UNTIL = ["--until", "coverage_mcse=0.012", "--max-replicates", "3000"]


@pytest.fixture
def scenario_file(tmp_path):
    path = tmp_path / "my scenario.toml"  # a space: the command must quote it
    path.write_text(SCENARIO)
    return path


def _reproduce(out: Path) -> list[str]:
    """run.json's reproduce, split as a shell would; its --out is the run's folder + '-again'."""
    text = json.loads((out / "run.json").read_text())["reproduce"]
    argv = shlex.split(text)
    assert argv[0] == "samplewright"
    assert argv[argv.index("--out") + 1] == f"{out}-again"
    return argv


def _run_again(argv: list[str], folder: Path) -> Path:
    """The reproduce command run into ``folder`` instead of OUT-again (quiet, no report)."""
    argv = list(argv)
    argv[argv.index("--out") + 1] = str(folder)
    assert main([*argv[1:], "--quiet", "--no-report"]) == 0
    return folder


def test_an_until_run_is_reproduced_byte_for_byte(scenario_file, tmp_path):
    out = tmp_path / "first"
    assert main(["run", str(scenario_file), "--out", str(out), "--quiet", "--jobs", "2", *UNTIL]) == 0
    argv = _reproduce(out)
    assert argv[1:3] == ["run", str(scenario_file)]
    assert argv[argv.index("--until") + 1] == "coverage_mcse=0.012"
    assert argv[argv.index("--max-replicates") + 1] == "3000"
    assert argv[argv.index("--seed") + 1] == "11" and argv[argv.index("--replicates") + 1] == "200"
    assert "--jobs" not in argv  # results do not depend on it
    again = _run_again(argv, tmp_path / "again")
    assert (again / "summary.csv").read_bytes() == (out / "summary.csv").read_bytes()
    counts = pd.read_csv(out / "summary.csv").groupby("design")["replicates"]
    assert counts.max().max() > 200  # the rule added blocks: without --until the copy would stop at 200


def test_the_brief_states_the_replicates_each_design_used(scenario_file, tmp_path):
    out = tmp_path / "first"
    assert main(["run", str(scenario_file), "--out", str(out), "--quiet", *UNTIL]) == 0
    summary = pd.read_csv(out / "summary.csv")
    used = summary.groupby("design")["replicates"].agg(["min", "max"])
    assert summary["replicates"].nunique() > 1  # the designs stopped at different counts
    brief = (out / "brief.md").read_text()
    evidence = re.search(r"\*\*Evidence\*\* \((.*?) simulated samples", brief).group(1)
    # every count the sentence states is one a design used, and each design's lowest and highest are stated
    stated = {int(n.replace(",", "")) for n in re.findall(r"\d[\d,]*", evidence)}
    assert stated == set(used["min"]) | set(used["max"])
    for design, row in used.iterrows():
        want = f"{row['min']:,}" if row["min"] == row["max"] else f"{row['min']:,} to {row['max']:,}"
        assert f"'{design}' {want}" in evidence
    page = (out / "report.html").read_text()
    assert evidence in html.unescape(page)  # the run details state the same counts
    assert re.search(r"<pre>samplewright run .*--until coverage_mcse=0\.012", page)


def test_an_exact_run_is_reproduced_byte_for_byte(tmp_path):
    path = tmp_path / "tiny.toml"
    path.write_text(SCENARIO.replace("units = 600", "units = 12").replace("[20, 60]", "[3, 4]")
                    .replace("n = 8", "n = 2"))
    out = tmp_path / "exact"
    assert main(["run", str(path), "--out", str(out), "--exact", "--quiet"]) == 0
    text = json.loads((out / "run.json").read_text())["reproduce"]
    assert "None" not in text and "--seed" not in text and "--replicates" not in text
    argv = _reproduce(out)
    assert argv[-1] == "--exact"
    again = _run_again(argv, tmp_path / "again")
    assert (again / "summary.csv").read_bytes() == (out / "summary.csv").read_bytes()
    assert f"`{text}`" in (out / "brief.md").read_text()


def test_a_resumed_run_records_the_whole_run(scenario_file, tmp_path):
    out = tmp_path / "kept"
    assert main(["run", str(scenario_file), "--out", str(out), "--quiet", "--no-report", "--keep-blocks",
                 *UNTIL]) == 0
    whole = _reproduce(out)
    assert main(["run", "--resume", str(out), "--quiet", "--no-report"]) == 0  # the saved scenario, rule and seed
    resumed = _reproduce(out)
    assert "--resume" not in resumed
    assert Path(resumed[2]).resolve() == Path(whole[2]).resolve() and resumed[3:] == whole[3:]


def test_a_python_run_names_the_call_that_repeats_it():
    sc = scenario_from_dict({"frame": {"synthetic": {"units": 300, "seed": 2}},
                             "design": [{"label": "simple", "method": "srs", "n": [10, 30]}]})
    res = run(sc, replicates=100, seed=4, block_size=50, until="coverage_mcse=0.02", max_replicates=600)
    assert res.info["reproduce"] is None
    call = re.search(r"samplewright\.run\((scenario, .*?)\)", res.info["reproduce_note"]).group(1)
    again = eval(f"run({call})", {"run": run, "scenario": sc})  # noqa: S307 -- our own note, as a user would paste it
    pd.testing.assert_frame_equal(again.summary, res.summary)


@pytest.mark.slow
def test_the_demo_is_reproduced_byte_for_byte(demo_run, tmp_path):
    argv = _reproduce(demo_run.out)
    assert argv[1] == "demo" and "--exact" not in argv
    again = _run_again(argv, tmp_path / "again")
    assert (again / "summary.csv").read_bytes() == (demo_run.out / "summary.csv").read_bytes()


def test_a_settling_cap_given_is_in_the_command(tmp_path):
    # a run with a [goal] given --max-replicates without --until: the cap bounds the replicates added to undecided
    # points, so it changes numbers and must be repeated; the default cap (10 x replicates) is left out
    path = tmp_path / "goal.toml"
    path.write_text(SCENARIO)
    out = tmp_path / "capped"
    assert main(["run", str(path), "--out", str(out), "--quiet", "--no-report", "--max-replicates", "600"]) == 0
    argv = _reproduce(out)
    assert argv[argv.index("--max-replicates") + 1] == "600"
    again = _run_again(argv, tmp_path / "again")
    assert (again / "summary.csv").read_bytes() == (out / "summary.csv").read_bytes()
    plain = tmp_path / "plain"
    assert main(["run", str(path), "--out", str(plain), "--quiet", "--no-report"]) == 0
    assert "--max-replicates" not in _reproduce(plain)
