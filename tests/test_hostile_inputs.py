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
    assert len(errors) == 1, lines
    assert all(ln.startswith(("error:", "warning:")) for ln in lines), lines
    assert len(errors[0]) <= MAX_LINE, len(errors[0])
    for w in words:
        assert w in errors[0], errors[0]
    return errors[0]


def run_in(tmp_path: Path, sc: Path | None = None):
    """``samplewright run`` of scenario ``sc`` (default: tmp_path/s.toml, written by ``scenario``)."""
    return sw("run", scenario(tmp_path) if sc is None else sc, "--out", tmp_path / "out", cwd=tmp_path)


def write(path: Path, text: str) -> Path:
    path.write_text(text)
    return path


# ------------------------------------------------------------------ synthetic frames
@pytest.mark.parametrize("clusters", ["", "clusters = {mean_size = 10}\n"])
def test_synthetic_stratum_rounding_to_no_unit_is_refused(tmp_path, clusters):
    # 100 units with shares 1 : 0.001: largest-remainder rounding gives the second stratum 0 units
    strata = 'strata = [{name = "big", share = 1.0}, {name = "tiny", share = 0.001}]\n'
    sc = write(tmp_path / "s.toml", "[frame.synthetic]\nunits = 100\n" + strata + clusters + DESIGN)
    proc = sw("run", sc, "--out", tmp_path / "out", "--replicates", 10, cwd=tmp_path)
    refused(proc, "'tiny'", "0 of the 100 units")
    assert not (tmp_path / "out").exists()
    refused(sw("synth", sc, "--out", tmp_path / "f.csv", cwd=tmp_path), "'tiny'")


def test_cluster_sizes_end_for_any_mean_size(tmp_path):
    # the Python API skips the scenario's mean_size >= 1 check: fewer than one unit per cluster
    # must still give clusters of at least one unit that sum to the stratum, and end (in a
    # subprocess under a timeout, so a hang fails the test)
    code = ("from samplewright.population.synth import SyntheticSpec, generate\n"
            "df = generate(SyntheticSpec(units=7, clusters={'mean_size': 0.25, 'size_cv': 0.5}))\n"
            "print(len(df), df.groupby('cluster').size().min())\n")
    env = {**os.environ, "PYTHONPATH": SRC}
    proc = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=60)
    assert proc.stdout.split() == ["7", "1"], proc.stderr[-2000:]


# ------------------------------------------------------------------ paths, TOML, sizes, memory
def small_frame(tmp_path: Path, **extra) -> Path:
    df = pd.DataFrame({"y": np.arange(1.0, 101.0), "x": np.arange(1.0, 101.0), **extra})
    df.to_csv(tmp_path / "f.csv", index=False)
    return tmp_path / "f.csv"


def scenario(tmp_path: Path, path: str = "f.csv", body: str = DESIGN, frame_extra: str = "") -> Path:
    text = f"[frame]\npath = \"{path}\"\ntarget = \"y\"\n{frame_extra}\n{body}"
    return write(tmp_path / "s.toml", text)


def not_regular_paths(tmp_path: Path) -> list[str]:
    loop = tmp_path / "loop_a"
    os.symlink(tmp_path / "loop_b", loop)
    os.symlink(loop, tmp_path / "loop_b")
    paths = ["/dev/zero", str(loop)]
    if hasattr(os, "mkfifo"):
        os.mkfifo(tmp_path / "pipe.csv")  # reading it would wait for a writer forever
        paths.append(str(tmp_path / "pipe.csv"))
    return paths


def test_frame_path_that_is_no_regular_file_is_refused(tmp_path):
    for path in not_regular_paths(tmp_path) + ["/dev/stdin"]:
        sc = scenario(tmp_path, path=path)
        refused(sw("run", sc, "--out", tmp_path / "out", cwd=tmp_path), path)
        assert not (tmp_path / "out").exists()


def test_scenario_path_that_is_no_regular_file_is_refused(tmp_path):
    for path in not_regular_paths(tmp_path):
        refused(sw("run", path, "--out", tmp_path / "out", cwd=tmp_path), "scenario file", path)


def test_nul_byte_in_frame_path(tmp_path):
    sc = write(tmp_path / "s.toml", '[frame]\npath = "a\\u0000b.csv"\ntarget = "y"\n' + DESIGN)
    refused(sw("run", sc, "--out", tmp_path / "out", cwd=tmp_path), "NUL byte")


@pytest.mark.parametrize("nest", ["[", "{a = "])
def test_toml_nested_100000_deep(tmp_path, nest):
    close = "]" if nest == "[" else "}"
    inner = "" if nest == "[" else "1"
    sc = write(tmp_path / "s.toml", "x = " + nest * 100_000 + inner + close * 100_000 + "\n")
    refused(sw("run", sc, "--out", tmp_path / "out", cwd=tmp_path), "nested too deeply")


def test_size_list_of_50_million_entries_gives_a_short_error(tmp_path):
    small_frame(tmp_path)
    sc = scenario(tmp_path, body=DESIGN.replace("n = 5", "n = [" + ",".join(["1"] * 50_000_000) + "]"))
    refused(sw("run", sc, "--out", tmp_path / "out", cwd=tmp_path), "scenario file", "bytes")


def test_long_size_list_echo_is_cut(tmp_path):
    small_frame(tmp_path)  # 400,000 entries fit the 1 MiB a scenario may have: the value is cut
    sc = scenario(tmp_path, body=DESIGN.replace("n = 5", "n = [" + ",".join(["1"] * 400_000) + "]"))
    line = refused(sw("run", sc, "--out", tmp_path / "out", cwd=tmp_path), "lists a size twice")
    assert len(line) < 150


@pytest.mark.parametrize("args", [
    ["--replicates", 10**12],
    ["--replicates", 100, "--until", "coverage_mcse=0.01", "--max-replicates", 10**12]])
def test_absurd_replicates_refused_before_any_folder_or_manifest(tmp_path, args):
    small_frame(tmp_path)
    sc = scenario(tmp_path)
    refused(sw("run", sc, "--out", tmp_path / "out", *args, cwd=tmp_path), "GiB", "memory")
    assert not (tmp_path / "out").exists()  # no results folder, so no blocks/manifest.json


def test_pps_with_replacement_far_beyond_memory_is_refused_with_the_estimate(tmp_path):
    from samplewright.simulation.limits import physical_memory

    if physical_memory() > 200 << 30:  # 500 x 10^7 selections x 48 bytes = 223.5 GiB
        pytest.skip("this machine could hold the blocks")
    small_frame(tmp_path)
    body = DESIGN.replace("\"srs\"", "\"pps\"\nreplace = true").replace("n = 5", "n = 10000000")
    sc = scenario(tmp_path, body=body, frame_extra='size = "x"')
    line = refused(run_in(tmp_path, sc), "'simple'", "223.5 GiB")
    assert "memory" in line and not (tmp_path / "out").exists()


def test_memory_bound_is_the_documented_formula():
    # limits.py: a block needs block_size x selections x 8 (K + 3) bytes; here K = 3 value columns
    # (y, the count column, the cost column), so 500 x 100 x 48 = 2,400,000 bytes exactly;
    # the table needs 160 bytes a row and 2048 a block
    from samplewright import Frame
    from samplewright.designs import DESIGN_CLASSES
    from samplewright.errors import InputError
    from samplewright.simulation.engine import make_cells
    from samplewright.simulation.limits import check_run_memory

    frame = Frame.from_dataframe(pd.DataFrame({"y": np.arange(1.0, 101.0), "x": np.arange(1.0, 101.0)}),
                                 target="y", size="x")
    cells = make_cells([DESIGN_CLASSES["pps"]("w", n=100, replace=True)], [("ht",)])
    check_run_memory(frame, cells, 10, 500, memory=2_400_000)
    with pytest.raises(InputError, match="'w' at size 100"):
        check_run_memory(frame, cells, 10, 500, memory=2_399_999)
    one = make_cells([DESIGN_CLASSES["pps"]("w", n=1, replace=True)], [("ht",)])  # block: 500 x 1 x 48 = 24,000 bytes
    need = 10**4 * 1 * 1 * 160 + 20 * 2048  # 10^4 replicates x 1 estimator x 1 variable; 20 blocks of 500
    check_run_memory(frame, one, 10**4, 500, memory=need)
    with pytest.raises(InputError, match="replicate table"):
        check_run_memory(frame, one, 10**4, 500, memory=need - 1)


# ------------------------------------------------------------------ files that are not tables
def test_binary_file_is_not_echoed(tmp_path):
    (tmp_path / "f.csv").write_bytes(b"y,\x00\x01secret\xff\xfe\n" + bytes(range(256)) * 20)
    line = refused(run_in(tmp_path), "does not look like a table")
    assert "secret" not in line


def test_prose_file_is_not_echoed(tmp_path):
    write(tmp_path / "f.csv", "Dear board, the quarterly figures, as promised, are attached below.\n"
          "Kind regards from the audit team.\n")
    line = refused(run_in(tmp_path), "does not look like a table")
    assert "Dear" not in line and "regards" not in line


def test_missing_column_lists_at_most_20_cut_header_names(tmp_path):
    names = [f"c{i:02d}_" + "z" * 50 for i in range(30)]
    pd.DataFrame({n: [1.0, 2.0] for n in names}).to_csv(tmp_path / "f.csv", index=False)
    line = refused(run_in(tmp_path), "'y'", "30 in all")
    assert "c00_" in line and "c20_" not in line and "z" * 20 not in line


# ------------------------------------------------------------------ column names and types
def test_duplicate_csv_column_is_refused(tmp_path):
    write(tmp_path / "f.csv", "y,g,y\n1,a,5\n2,b,6\n3,c,7\n")
    refused(run_in(tmp_path), "'y'", "twice")


def test_duplicate_parquet_column_is_refused(tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    pq.write_table(pa.table([pa.array([1.0, 2.0, 3.0]), pa.array([4.0, 5.0, 6.0])], names=["y", "y"]),
                   tmp_path / "f.parquet")
    refused(sw("run", scenario(tmp_path, path="f.parquet"), "--out", tmp_path / "out", cwd=tmp_path),
            "'y'", "twice")


@pytest.mark.parametrize("role", ["target", "size", "unit_cost"])
@pytest.mark.parametrize("kind", ["bool", "timestamp"])
def test_bool_and_timestamp_columns_are_no_amounts(tmp_path, role, kind):
    n = 40
    col = (np.arange(n) % 2 == 0) if kind == "bool" else pd.date_range("2024-01-01", periods=n, freq="D")
    df = pd.DataFrame({"y": np.arange(1.0, n + 1), "x": np.arange(1.0, n + 1), "c": np.ones(n), "bad": col})
    df.to_parquet(tmp_path / "f.parquet")
    roles = {"target": 'size = "x"\nunit_cost = "c"', "size": 'size = "bad"\nunit_cost = "c"',
             "unit_cost": 'size = "x"\nunit_cost = "bad"'}[role]
    target = "bad" if role == "target" else "y"
    text = f"[frame]\npath = \"f.parquet\"\ntarget = \"{target}\"\n{roles}\n" + DESIGN
    sc = write(tmp_path / "s.toml", text)
    word = "true/false" if kind == "bool" else "date/time"
    refused(sw("run", sc, "--out", tmp_path / "out", cwd=tmp_path), f"{role} column 'bad'", word)


def test_csv_true_false_target_is_refused(tmp_path):
    write(tmp_path / "f.csv", "y\n" + "true\nfalse\n" * 20)
    refused(run_in(tmp_path), "'y'", "true/false")


def test_target_whose_total_overflows_is_refused(tmp_path):
    # 40 x 1e308 is beyond the largest double (about 1.8e308): the frame total would be inf
    pd.DataFrame({"y": [1e308] * 40}).to_csv(tmp_path / "f.csv", index=False)
    refused(run_in(tmp_path), "'y'", "overflow")


def test_target_whose_square_overflows_is_refused(tmp_path):
    # 40 x 1e200 = 4e201 is a finite double, but its square (1.6e403) is beyond the largest double
    # (about 1.8e308, IEEE 754): a variance of the column would be inf, so it is refused, not a crash
    pd.DataFrame({"y": [1e200] * 20 + [1.0] * 20}).to_csv(tmp_path / "f.csv", index=False)
    refused(run_in(tmp_path), "'y'", "overflow")


def test_repeated_id_is_named_as_the_file_shows_it(tmp_path):
    # the culprit is echoed as the user wrote it ("7"), not as numpy 2's scalar repr ("np.int64(7)", NEP 51)
    write(tmp_path / "f.csv", "y,code\n" + "".join(f"{i},{i}\n" for i in range(1, 8)) + "8,7\n")
    line = refused(run_in(tmp_path, scenario(tmp_path, frame_extra='id = "code"')), "'code'", "first 7 ")
    assert "np." not in line


def test_a_first_line_longer_than_the_sniffed_start_is_not_called_empty(tmp_path):
    # a file whose first line never ends within the part read to detect the format is not a table; it was
    # refused as "empty", which names the wrong fault (the file holds 5 MB)
    write(tmp_path / "f.csv", "y," + "a" * 5_000_000 + "\n1,2\n")
    line = refused(run_in(tmp_path), "f.csv", "does not look like a table")
    assert "empty" not in line
