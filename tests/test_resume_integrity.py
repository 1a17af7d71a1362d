"""Resume refuses a changed frame and never trusts a damaged block or a malformed manifest.

Every numeric check is exact equality with an uninterrupted run of the same seed: a block's
numbers depend only on its SeedSequence, so a block drawn again equals the block it replaces.
The frame is an exact small CSV made here.
"""

from __future__ import annotations

import json
import os

import numpy as np
import pandas as pd
import pytest
from conftest import interrupt_blocks_after

from samplewright.cli.main import main
from samplewright.simulation import engine
from samplewright.simulation.checkpoint import checksum


def _same_run(a, b):
    pd.testing.assert_frame_equal(pd.read_parquet(a / "replicates.parquet"), pd.read_parquet(b / "replicates.parquet"))
    pd.testing.assert_frame_equal(pd.read_csv(a / "summary.csv"), pd.read_csv(b / "summary.csv"))


def _interrupted(resumable_scenario_file, out, monkeypatch, after=3):
    """Run until the block after ``after`` finished blocks, interrupted as by Ctrl-C."""
    restore = interrupt_blocks_after(monkeypatch, after)
    assert main(["run", str(resumable_scenario_file), "--out", str(out), "--quiet", "--no-report"]) == 130
    restore()


def _full(resumable_scenario_file, out):
    assert main(["run", str(resumable_scenario_file), "--out", str(out), "--quiet", "--no-report"]) == 0


def test_resume_refuses_a_frame_changed_since_the_interruption(resumable_scenario_file, tmp_path, monkeypatch, capsys):
    out = tmp_path / "cut"
    _interrupted(resumable_scenario_file, out, monkeypatch)
    capsys.readouterr()
    csv = resumable_scenario_file.parent / "frame.csv"
    df = pd.read_csv(csv)
    df.loc[0, "y"] += 1.0  # one unit's value changed: another population
    df.to_csv(csv, index=False)
    assert main(["run", "--resume", str(out), "--quiet", "--no-report"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error:") and err.count("\n") == 1
    assert str(csv) in err and "changed" in err
    assert not (out / "summary.csv").exists()


def _blocks(out):
    return sorted((out / "blocks").glob("*.npz"))


@pytest.mark.parametrize("damage", ["truncated", "flipped value", "another block's file", "not a zip",
                                    "mis-shaped with a matching checksum"])
def test_a_damaged_block_is_drawn_again_with_a_warning(resumable_scenario_file, tmp_path, monkeypatch, capsys, damage):
    full, cut = tmp_path / "full", tmp_path / "cut"
    _full(resumable_scenario_file, full)
    _interrupted(resumable_scenario_file, cut, monkeypatch)
    first, second = _blocks(cut)[:2]
    if damage == "truncated":
        data = first.read_bytes()
        first.write_bytes(data[: len(data) // 2])
    elif damage == "flipped value":  # still a valid npz, with every entry it had
        with np.load(first) as z:
            content = {k: z[k] for k in z.files}
        content["r_estimate"].flat[0] += 1.0
        with open(first, "wb") as fh:
            np.savez(fh, **content)
    elif damage == "mis-shaped with a matching checksum":  # one replicate short, checksum recomputed
        with np.load(first) as z:
            content = {k: z[k] for k in z.files if k != "checksum"}
        content["r_n"] = content["r_n"][:-1]
        with open(first, "wb") as fh:
            np.savez(fh, checksum=checksum(content), **content)
    elif damage == "another block's file":
        first.write_bytes(second.read_bytes())
    else:
        first.write_bytes(b"\x00" * 64)
    capsys.readouterr()
    real, calls = engine.run_block, {"n": 0}
    monkeypatch.setattr(engine, "run_block", lambda *a, **k: (calls.__setitem__("n", calls["n"] + 1),
                                                               real(*a, **k))[1])
    assert main(["run", "--resume", str(cut), "--quiet", "--no-report"]) == 0
    err = capsys.readouterr().err
    warned = [line for line in err.splitlines() if line.startswith("warning:") and first.name in line]
    assert len(warned) == 1 and "drawn again" in warned[0]
    assert calls["n"] == 2 * 3 - 3 + 1  # the missing blocks and the damaged one
    _same_run(full, cut)
    assert warned[0].removeprefix("warning: ") in json.loads((cut / "run.json").read_text())["warnings"]


@pytest.mark.parametrize("key, value", [("replicates", "x"), ("seed", [1]), ("block_size", 0), ("cells", 3),
                                        ("frame_hash", None), ("confidence", True)])
def test_a_manifest_with_a_wrong_type_is_refused_naming_the_key(resumable_scenario_file, tmp_path, monkeypatch, capsys,
                                                                key, value):
    out = tmp_path / "cut"
    _interrupted(resumable_scenario_file, out, monkeypatch)
    path = out / "blocks" / "manifest.json"
    manifest = json.loads(path.read_text())
    manifest[key] = value
    path.write_text(json.dumps(manifest))
    capsys.readouterr()
    assert main(["run", "--resume", str(out), "--quiet", "--no-report"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error:") and err.count("\n") == 1 and repr(key) in err and "manifest.json" in err


def test_a_manifest_that_is_not_a_regular_file_is_refused(resumable_scenario_file, tmp_path, monkeypatch, capsys):
    out = tmp_path / "cut"
    _interrupted(resumable_scenario_file, out, monkeypatch)
    path = out / "blocks" / "manifest.json"
    path.unlink()
    os.mkfifo(path)  # reading it would block for ever
    capsys.readouterr()
    assert main(["run", "--resume", str(out), "--quiet", "--no-report"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error:") and "manifest.json" in err and "not a regular file" in err
