"""Hostile inputs end in seconds with exit 2 and one short ``error:`` line (or exit 0), never a hang.

Each case runs the command line in a subprocess under a timeout, so a hang fails the test
instead of stalling the suite.  The checks are the project's own contract for bad input
(exit code 2, exactly one stderr line starting ``error:``, no traceback, a bounded line).
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

SRC = str(Path(__file__).resolve().parents[1] / "src")
#: longest error line accepted: a message names its culprit; echoed values are cut to 60 characters
MAX_LINE = 400

DESIGN = """
[[design]]
label = "simple"
method = "srs"
n = 5
"""


def sw(*args, cwd, timeout=60, stdin=subprocess.DEVNULL):
    """Run samplewright in a subprocess; a hang raises TimeoutExpired (the test fails)."""
    env = {**os.environ, "PYTHONPATH": SRC + os.pathsep + os.environ.get("PYTHONPATH", "")}
    return subprocess.run([sys.executable, "-m", "samplewright", *map(str, args)], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=timeout, stdin=stdin)


def refused(proc, *words) -> str:
    """Assert the clean refusal contract; return the error line."""
    lines = proc.stderr.splitlines()
    assert proc.returncode == 2, proc.stderr[-2000:]
    assert "Traceback" not in proc.stderr
    errors = [ln for ln in lines if ln.startswith("error:")]
    assert len(errors) == 1 and len(lines) == len(errors) + sum(ln.startswith("warning:") for ln in lines), lines
    assert len(errors[0]) <= MAX_LINE, len(errors[0])
    for w in words:
        assert w in errors[0], errors[0]
    return errors[0]


def write(path: Path, text: str) -> Path:
    path.write_text(text)
    return path


# ------------------------------------------------------------------ item 8: synthetic frames
@pytest.mark.parametrize("clusters", ["", "clusters = {mean_size = 10}\n"])
def test_synthetic_stratum_rounding_to_no_unit_is_refused(tmp_path, clusters):
    # 100 units with shares 1 : 0.001: largest-remainder rounding gives the second stratum 0 units
    sc = write(tmp_path / "s.toml", "[frame.synthetic]\nunits = 100\n"
               "strata = [{name = \"big\", share = 1.0}, {name = \"tiny\", share = 0.001}]\n" + clusters + DESIGN)
    proc = sw("run", sc, "--out", tmp_path / "out", "--replicates", 10, cwd=tmp_path)
    refused(proc, "'tiny'", "0 of the 100 units")
    assert not (tmp_path / "out").exists()
    refused(sw("synth", sc, "--out", tmp_path / "f.csv", cwd=tmp_path), "'tiny'")


def test_cluster_sizes_end_for_any_mean_size():
    # the Python API skips the scenario's mean_size >= 1 check: fewer than one unit per cluster
    # must still give clusters of at least one unit that sum to the stratum (and end)
    from samplewright.synth import SyntheticSpec, generate

    df = generate(SyntheticSpec(units=7, clusters={"mean_size": 0.25, "size_cv": 0.5}))
    assert df.groupby("cluster").size().min() >= 1 and len(df) == 7
