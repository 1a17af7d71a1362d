"""A finished run removes its blocks/ folder (unless --keep-blocks); an interrupted one keeps it for --resume.

Every numeric check is exact equality with an uninterrupted run of the same seed: a block's numbers
depend only on its SeedSequence, so tables rebuilt from kept or resumed blocks equal the originals.
The contract files are checked by the project's shared tool (tools/check-contract). The frame is
an exact small CSV made here.
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pandas as pd
from conftest import interrupt_blocks_after

from samplewright import report
from samplewright.cli.main import main
from samplewright.results import result
from samplewright.simulation import engine

#: the shared contract checker, in the shared/ folder beside the repository where there is one
CHECK_CONTRACT = Path(__file__).resolve().parents[2] / "shared" / "tools" / "check-contract"



def _run(resumable_scenario_file, out, *extra) -> int:
    return main(["run", str(resumable_scenario_file), "--out", str(out), "--quiet", "--no-report", *extra])


def _same_tables(a, b):
    pd.testing.assert_frame_equal(pd.read_parquet(a / "replicates.parquet"), pd.read_parquet(b / "replicates.parquet"))
    pd.testing.assert_frame_equal(pd.read_csv(a / "summary.csv"), pd.read_csv(b / "summary.csv"))


def _blocks_kept(out):
    return json.loads((out / "run.json").read_text())["blocks_kept"]


def test_a_finished_run_leaves_no_blocks_and_every_contract_file(resumable_scenario_file, tmp_path):
    out = tmp_path / "done"
    assert _run(resumable_scenario_file, out) == 0
    assert not (out / "blocks").exists()
    assert _blocks_kept(out) is False
    for name in ("summary.csv", "replicates.parquet", "allocation.csv", "run.json", "frontier.csv"):
        assert (out / name).is_file()
    if CHECK_CONTRACT.is_file():  # the shared contract checker (names and columns), where it is installed
        done = subprocess.run([sys.executable, str(CHECK_CONTRACT), str(out)], check=False, capture_output=True,
                              text=True)
        assert done.returncode == 0, done.stdout


def test_resume_of_a_finished_run_without_blocks_is_refused(resumable_scenario_file, tmp_path, capsys):
    out = tmp_path / "done"
    assert _run(resumable_scenario_file, out) == 0
    capsys.readouterr()
    assert main(["run", "--resume", str(out), "--quiet", "--no-report"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error:") and err.count("\n") == 1
    assert "finished" in err and "removed" in err and "--keep-blocks" in err


def test_kept_blocks_stay_and_resume_to_identical_tables(resumable_scenario_file, tmp_path, monkeypatch):
    kept, ref = tmp_path / "kept", tmp_path / "ref"
    assert _run(resumable_scenario_file, kept, "--keep-blocks") == 0
    assert _blocks_kept(kept) is True
    assert len(list((kept / "blocks").glob("*.npz"))) == 2 * 3  # 2 designs x 3 blocks of 100
    assert (kept / "blocks" / "manifest.json").is_file()
    assert _run(resumable_scenario_file, ref) == 0
    real, calls = engine.run_block, {"n": 0}

    def counted(*a, **k):
        calls["n"] += 1
        return real(*a, **k)

    monkeypatch.setattr(engine, "run_block", counted)
    assert main(["run", "--resume", str(kept), "--quiet", "--no-report", "--keep-blocks"]) == 0
    assert calls["n"] == 0  # every block read back, none drawn again
    _same_tables(kept, ref)


def test_an_interrupted_run_keeps_its_blocks_and_resumes_to_identical_tables(resumable_scenario_file, tmp_path,
                                                                                monkeypatch):
    cut, ref = tmp_path / "cut", tmp_path / "ref"
    restore = interrupt_blocks_after(monkeypatch, 3)  # Ctrl-C while the fourth block is drawn
    assert _run(resumable_scenario_file, cut) == 130
    assert len(list((cut / "blocks").glob("*.npz"))) == 3
    assert not (cut / "run.json").exists()
    restore()
    assert main(["run", "--resume", str(cut), "--quiet", "--no-report"]) == 0
    assert not (cut / "blocks").exists()  # the resumed run finished: its blocks go
    assert _run(resumable_scenario_file, ref) == 0
    _same_tables(cut, ref)


def test_a_failure_writing_the_tables_keeps_the_blocks(resumable_scenario_file, tmp_path, monkeypatch):
    def full_disk(*a, **k):
        raise OSError(28, "No space left on device")

    out = tmp_path / "full"
    monkeypatch.setattr(result, "write_csv", full_disk)
    assert _run(resumable_scenario_file, out) == 1
    assert len(list((out / "blocks").glob("*.npz"))) == 2 * 3
    assert not (out / "run.json").exists()


def test_a_failed_report_after_the_tables_removes_the_blocks(resumable_scenario_file, tmp_path, monkeypatch, capsys):
    def broken(*a, **k):
        raise RuntimeError("figure failed")

    out = tmp_path / "late"
    monkeypatch.setattr(report, "write_report", broken)
    assert main(["run", str(resumable_scenario_file), "--out", str(out), "--quiet"]) == 1
    assert "the result tables in" in capsys.readouterr().err
    assert (out / "summary.csv").is_file() and (out / "run.json").is_file()
    assert not (out / "blocks").exists()


def test_demo_removes_its_blocks_unless_kept(tmp_path):
    gone, kept = tmp_path / "gone", tmp_path / "kept"
    assert main(["demo", "--out", str(gone), "--quiet", "--no-report", "--replicates", "100"]) == 0
    assert main(["demo", "--out", str(kept), "--quiet", "--no-report", "--replicates", "100", "--keep-blocks"]) == 0
    assert not (gone / "blocks").exists()
    assert (kept / "blocks" / "manifest.json").is_file()


def test_keep_blocks_help_states_the_default(capsys):
    assert main(["run", "--help"]) == 0
    text = " ".join(capsys.readouterr().out.split())
    assert "--keep-blocks" in text and "default: off, removed once every table is written" in text
