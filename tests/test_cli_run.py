"""End-to-end: `samplewright run` on every scenario in scenarios/ and `samplewright demo`."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pandas as pd
import pyarrow.parquet as pq
import pytest

from samplewright.cli.main import main
from samplewright.evaluation.measures import SUMMARY_COLUMNS
from samplewright.results.result import ALLOCATION_COLUMNS

ROOT = Path(__file__).resolve().parents[1]
SCENARIOS = sorted((ROOT / "scenarios").glob("*.toml"))
REPLICATE_COLUMNS = ["replicate", "design", "size", "estimator", "variable", "estimate", "se", "lower", "upper",
                     "n", "cost"]


def check_contract(out: Path, replicates: int):
    summary = pd.read_csv(out / "summary.csv")
    assert list(summary.columns[: len(SUMMARY_COLUMNS)]) == SUMMARY_COLUMNS
    info = json.loads((out / "run.json").read_text())
    # every design x size runs the replicates asked for; cells of undecided points that could change the pick
    # may run more, up to the recorded cap, and are the ones run.json's "evidence" rounds list
    settled = {(c["design"], c["size"]) for r in (info.get("evidence") or {}).get("rounds", []) for c in r}
    more = summary[summary["replicates"] != replicates]
    assert "exact" in info or all((d, s) in settled for d, s in zip(more["design"], more["size"]))
    assert "exact" in info or (more["replicates"] <= info["evidence"]["max_replicates"]).all()
    cols = pq.read_schema(out / "replicates.parquet").names
    assert all(c in cols for c in REPLICATE_COLUMNS)
    alloc = pd.read_csv(out / "allocation.csv")
    assert all(c in alloc.columns for c in ALLOCATION_COLUMNS)
    for key in ("seed", "replicates", "jobs", "versions", "elapsed_seconds", "scenario_hash", "block_size"):
        assert key in info
    assert not list(out.glob("*.tmp")) and not list(out.glob(".*.tmp"))  # no temporary files left
    return summary


@pytest.mark.slow
@pytest.mark.parametrize("scenario", SCENARIOS, ids=[s.stem for s in SCENARIOS])
def test_run_every_scenario(scenario, tmp_path, capsys):
    out = tmp_path / "res"
    code = main(["run", str(scenario), "--out", str(out), "--replicates", "120", "--quiet"])
    assert code == 0, capsys.readouterr().err
    summary = check_contract(out, 120)
    assert len(summary) > 0
    assert summary["coverage"].between(0, 1).all()


@pytest.mark.slow
def test_demo_writes_contract_files(demo_run):
    # the shared finished run (conftest.demo_run): `python -m samplewright demo` in a subprocess
    assert demo_run.returncode == 0, demo_run.stderr
    summary = check_contract(demo_run.out, demo_run.replicates)
    assert set(summary["method"]) >= {"srs", "stratified", "systematic", "cluster"}
    assert "Traceback" not in demo_run.stderr


@pytest.mark.slow
def test_run_refuses_to_overwrite_without_force(demo_run, tmp_path, capsys):
    # a finished run's folder is refused without --force and left as it was; a copy of it is
    # overwritten with --force (the shared run itself is only read)
    def digest(folder):
        return {f.relative_to(folder): f.read_bytes() for f in sorted(folder.rglob("*")) if f.is_file()}

    before = digest(demo_run.out)
    assert main(["demo", "--out", str(demo_run.out), "--replicates", "50", "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error:") and str(demo_run.out) in err and "--force" in err
    assert digest(demo_run.out) == before
    copy = tmp_path / "res"
    shutil.copytree(demo_run.out, copy)
    assert main(["demo", "--out", str(copy), "--replicates", "50", "--quiet", "--no-report", "--force"]) == 0
    assert json.loads((copy / "run.json").read_text())["replicates"] == 50


def test_synth_writes_the_frame(tmp_path, capsys):
    demo = ROOT / "src" / "samplewright" / "data" / "demo.toml"
    for name in ("frame.csv", "frame.parquet"):
        out = tmp_path / name
        assert main(["synth", str(demo), "--out", str(out)]) == 0
        df = pd.read_csv(out) if name.endswith(".csv") else pd.read_parquet(out)
        assert len(df) == 24000 and {"stratum", "cluster", "apples"} <= set(df.columns)
    assert main(["synth", str(demo), "--out", str(tmp_path / "frame.csv")]) == 2  # exists, no --force


def test_run_json_names_the_installed_joblib_without_importing_it_at_one_job(tmp_path):
    # the versions recorded are the installed packages' own (their metadata, read by importlib.metadata);
    # a run at --jobs 1 runs no worker, so it need not import joblib to name its version
    import os
    import subprocess
    import sys
    from importlib import metadata

    out = tmp_path / "res"
    code = ("import sys; from samplewright.cli.main import main; "
            f"c = main(['run', {str(ROOT / 'scenarios' / 'water_quality.toml')!r}, '--out', {str(out)!r}, "
            "'--replicates', '40', '--jobs', '1', '--no-report', '--quiet']); "
            "print('joblib' in sys.modules); sys.exit(c)")
    env = {**os.environ, "PYTHONPATH": str(ROOT / "src")}
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=300)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip().splitlines()[-1] == "False"
    versions = json.loads((out / "run.json").read_text())["versions"]
    assert versions["joblib"] == metadata.version("joblib")
    assert versions["scipy"] == metadata.version("scipy")
