"""A run without a [goal] streams its replicate table to disk cell by cell (results/replicate_file.py).

The reference is the whole-table path of the same run (the same seed without a results folder, which
builds the whole replicate table and summarises it): every table must be equal exactly, since the
streamed path must be a different way of holding the same numbers, not a different computation.
The frame is an invented CSV written here (values only exercise the code); the domain column makes
some replicates without an estimate (a domain with no sampled unit), which neither path counts.
"""

from __future__ import annotations

import pickle

import numpy as np
import pandas as pd
import pytest
from conftest import interrupt_blocks_after

from samplewright import run
from samplewright.cli.main import main
from samplewright.results.replicate_file import ReplicateFile
from samplewright.simulation import engine
from samplewright.simulation.checkpoint import FOLDER
from samplewright.simulation.scenario import scenario_from_dict

#: the replicate table's contract columns, in order (docs/outputs: replicates.parquet)
CONTRACT = ["replicate", "design", "size", "estimator", "variable", "estimate", "se", "lower", "upper", "n", "cost"]
DESIGNS = [
    {"label": "simple", "method": "srs", "n": [12, 30], "estimators": ["ht", "hajek"]},
    {"label": "by zone", "method": "stratified", "n": 24, "allocation": "proportional", "estimators": ["ht", "hajek"]},
    {"label": "villages", "method": "cluster", "clusters": [3, 5], "estimators": ["ht", "hajek"],
     "variance": ["ultimate_cluster", "two_stage"]},
]


@pytest.fixture(scope="module")
def frame_folder(tmp_path_factory):
    """An invented frame of 300 units: two zones, 30 villages of 10, a rare domain 'r'."""
    rng = np.random.default_rng(17)
    folder = tmp_path_factory.mktemp("frame")
    zone = np.repeat(["near", "far"], [180, 120])
    y = np.where(zone == "near", 20.0, 35.0) + rng.gamma(2.0, 4.0, 300).round(3)
    kind = np.where(rng.random(300) < 0.04, "r", "c")
    pd.DataFrame({"y": y, "zone": zone, "village": np.arange(300) // 10, "kind": kind}).to_csv(
        folder / "frame.csv", index=False)
    return folder


def _scenario(folder, response: bool):
    doc = {"seed": 9, "replicates": 230, "block_size": 50,
           "frame": {"path": "frame.csv", "target": "y", "stratum": "zone", "cluster": "village", "domain": "kind"},
           "design": DESIGNS}
    if response:
        doc["response"] = {"model": "constant", "rate": 0.7}
    return scenario_from_dict(doc, base=folder)


@pytest.mark.parametrize("response", [False, True], ids=["full response", "non-response"])
def test_streamed_tables_equal_the_whole_table_path(frame_folder, tmp_path, response):
    sc = _scenario(frame_folder, response)
    whole = run(sc)  # no results folder: the whole replicate table is built and summarised
    streamed = run(sc, out=tmp_path / "out")
    assert isinstance(streamed.__dict__["replicates"], ReplicateFile)  # the streamed path was taken
    assert not isinstance(whole.__dict__["replicates"], ReplicateFile)
    reps = whole.replicates
    assert reps["estimate"].isna().any()  # the rare domain: replicates without an estimate were met
    assert len(set(zip(reps["design"], reps["size"]))) == 5 and reps["variance"].nunique() >= 3
    if response:
        assert "full_estimate" in reps.columns and "nonresponse_bias" in whole.summary.columns
    assert streamed.summary.equals(whole.summary)
    assert streamed.frontier.equals(whole.frontier)
    assert streamed.allocation.equals(whole.allocation)
    assert streamed.replicates.equals(reps)
    assert list(streamed.replicates.dtypes) == list(reps.dtypes)
    if not response:  # two workers: blocks arrive in any order
        parallel = run(sc, out=tmp_path / "parallel", jobs=2)
        assert parallel.summary.equals(whole.summary) and parallel.replicates.equals(reps)


def test_cells_finished_out_of_order_are_written_in_order(frame_folder, tmp_path, monkeypatch):
    sc = _scenario(frame_folder, False)
    whole = run(sc)
    real = engine._complete

    def backwards(plan, tasks, progress):  # every block arrives in the reverse of its order
        return reversed(list(real(plan, tasks, progress)))

    monkeypatch.setattr(engine, "_complete", backwards)
    streamed = run(sc, out=tmp_path / "out")
    assert streamed.summary.equals(whole.summary) and streamed.frontier.equals(whole.frontier)
    assert streamed.replicates.equals(whole.replicates)


def _cli_run(scenario, out, *extra):
    return main(["run", str(scenario), "--out", str(out), "--quiet", "--no-report", *extra])


def _temp_files(folder):
    return [p for p in folder.rglob("*") if p.name.startswith(".") and p.name.endswith(".tmp")]


def test_replicates_parquet_has_the_contract_columns_and_no_temporary_file_remains(
        resumable_scenario_file, tmp_path):
    out = tmp_path / "out"
    assert _cli_run(resumable_scenario_file, out) == 0
    table = pd.read_parquet(out / "replicates.parquet")
    assert list(table.columns[:len(CONTRACT)]) == CONTRACT
    assert len(table) == 2 * 2 * 300 and table.groupby(["design", "estimator"])["replicate"].nunique().eq(300).all()
    assert not (out / FOLDER).exists() and _temp_files(out) == []
    kept = tmp_path / "kept"  # with --keep-blocks the blocks stay, the temporary table does not
    assert _cli_run(resumable_scenario_file, kept, "--keep-blocks") == 0
    assert any((kept / FOLDER).glob("*.npz")) and _temp_files(kept) == []
    pd.testing.assert_frame_equal(pd.read_parquet(kept / "replicates.parquet"), table)


def test_an_interrupted_run_keeps_its_blocks_and_resumes_to_the_same_tables(resumable_scenario_file, tmp_path,
                                                                             monkeypatch):
    full, cut = tmp_path / "full", tmp_path / "cut"
    assert _cli_run(resumable_scenario_file, full) == 0
    restore = interrupt_blocks_after(monkeypatch, 4)  # Ctrl-C after four blocks: the first cell done, the second begun
    assert _cli_run(resumable_scenario_file, cut) == 130
    restore()
    assert len(list((cut / FOLDER).glob("*.npz"))) == 4 and (cut / FOLDER / "manifest.json").is_file()
    assert _temp_files(cut) == [] and not (cut / "replicates.parquet").exists()
    assert main(["run", "--resume", str(cut), "--quiet", "--no-report"]) == 0
    pd.testing.assert_frame_equal(pd.read_parquet(cut / "replicates.parquet"),
                                  pd.read_parquet(full / "replicates.parquet"), check_exact=True)
    for name in ("summary.csv", "frontier.csv", "allocation.csv"):
        assert (cut / name).read_bytes() == (full / name).read_bytes(), name
    assert not (cut / FOLDER).exists() and _temp_files(cut) == []


def test_a_pickled_streamed_result_carries_its_table(frame_folder, tmp_path):
    res = run(_scenario(frame_folder, False), out=tmp_path / "out")
    table = res.replicates
    back = pickle.loads(pickle.dumps(res))
    written = res.write(tmp_path / "written")  # the temporary file is moved into place
    assert (written / "replicates.parquet").is_file() and _temp_files(tmp_path) == []
    (written / "replicates.parquet").unlink()  # the unpickled result needs no file
    assert back.replicates.equals(table) and back.summary.equals(res.summary)
    again = back.write(tmp_path / "again")
    assert pd.read_parquet(again / "replicates.parquet").equals(table)


def test_an_unwritten_streamed_result_leaves_no_temporary_file(frame_folder, tmp_path):
    import gc

    res = run(_scenario(frame_folder, False), out=tmp_path / "out")
    temp = res.__dict__["replicates"].path
    assert temp.is_file() and temp.parent == tmp_path / "out" / FOLDER
    del res
    gc.collect()
    assert not temp.exists()


def test_the_memory_check_sizes_what_a_streamed_run_holds():
    # limits.py: a streamed run holds its two largest cells' arrays, 64 bytes a replicate per estimator x
    # formula x variable plus 64 a replicate, and one piece of at most PIECE_ROWS rows at 160 bytes a row;
    # here 3 cells of 2 estimators x 1 formula x 1 variable at 10^6 replicates: 2 x (2 x 64 + 64) x 10^6
    # + 131,072 x 160 bytes, where the whole table would need 6 x 10^6 rows x 160 + 6,000 blocks x 2048
    from samplewright import Frame
    from samplewright.designs import DESIGN_CLASSES
    from samplewright.errors import InputError
    from samplewright.simulation.engine import make_cells
    from samplewright.simulation.limits import check_run_memory

    frame = Frame.from_dataframe(pd.DataFrame({"y": np.arange(1.0, 101.0)}), target="y")
    cells = make_cells([DESIGN_CLASSES["srs"]("s", n=[5, 10, 20])], [("ht", "hajek")])
    R, need = 10**6, 2 * (2 * 64 + 64) * 10**6 + 131_072 * 160
    check_run_memory(frame, cells, R, 500, memory=need, streamed=True)
    with pytest.raises(InputError, match="two largest design x size cells"):
        check_run_memory(frame, cells, R, 500, memory=need - 1, streamed=True)
    with pytest.raises(InputError, match="replicate table"):
        check_run_memory(frame, cells, R, 500, memory=6 * 10**6 * 160 + 6000 * 2048 - 1)


def test_peak_memory_is_the_one_the_kernel_reports():
    # rss_mib reads /proc/self/status (VmHWM); getrusage's ru_maxrss is the kernel's own peak in KiB (Linux
    # getrusage(2)); both are read back to back, so they agree to within what was allocated in between
    import resource
    import sys

    from samplewright.memory import rss_mib

    if not sys.platform.startswith("linux"):
        pytest.skip("/proc/self/status is Linux's")
    rss, peak = rss_mib()
    kernel = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    assert 0 < rss <= peak and abs(peak - kernel) < 1.0
