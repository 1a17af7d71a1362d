"""Long runs: resume after an interruption, sequential stopping, and the dask backend.

Every check compares a run with another run of the same seed (exact equality: the numbers
of a block depend only on its SeedSequence), or a stopping decision with the Monte Carlo
error formulas of Morris, White & Crowther (2019), Statistics in Medicine 38:2074-2102,
Table 6: MCSE(coverage) = sqrt(c (1 - c) / R); MCSE(bias) = sqrt(var / R); relative
MCSE(empirical SE) = 1 / sqrt(2 (R - 1)).  No test is timed.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

from samplewright.api import run
from samplewright.cli.main import main
from samplewright.errors import InputError
from samplewright.evaluation.stopping import parse_until
from samplewright.simulation import engine
from samplewright.simulation.checkpoint import BlockStore
from samplewright.simulation.plan import RunPlan
from samplewright.simulation.scenario import load_scenario, scenario_from_dict

SCENARIO = """
title = "Toll gate hourly counts (invented, for exercising code)"
seed = 314
replicates = 600
block_size = 100

[frame.synthetic]
units = 4000
seed = 5
target = "cars"
order = "grouped"

[[frame.synthetic.strata]]
name = "weekday"
share = 0.7
mean = 120
sd = 30

[[frame.synthetic.strata]]
name = "weekend"
share = 0.3
mean = 60
sd = 25

[frame.synthetic.clusters]
mean_size = 24
icc = 0.2

[[design]]
label = "simple"
method = "srs"
n = [40, 80]

[[design]]
label = "by day type"
method = "stratified"
n = 60
allocation = "neyman"

[[design]]
label = "every k-th hour"
method = "systematic"
n = 50

[[design]]
label = "whole days"
method = "cluster"
clusters = 4
"""


@pytest.fixture
def scenario_file(tmp_path):
    p = tmp_path / "inputs" / "tollgate.toml"
    p.parent.mkdir()
    p.write_text(SCENARIO)
    return p


def _tables(out):
    return pd.read_parquet(out / "replicates.parquet"), pd.read_csv(out / "summary.csv")


def _assert_same_run(a, b):
    ra, sa = _tables(a)
    rb, sb = _tables(b)
    pd.testing.assert_frame_equal(ra, rb)  # bit-identical replicates
    pd.testing.assert_frame_equal(sa, sb)


# ---------------------------------------------------------------- resume
@pytest.mark.slow
def test_resume_after_interruption_equals_uninterrupted_run(scenario_file, tmp_path, monkeypatch, capsys):
    full, cut = tmp_path / "full", tmp_path / "cut"
    assert main(["run", str(scenario_file), "--out", str(full), "--quiet"]) == 0

    real = engine.run_block
    calls = {"n": 0}

    def flaky(*a, **k):  # the 8th block is interrupted, as by Ctrl-C
        calls["n"] += 1
        if calls["n"] == 8:
            raise KeyboardInterrupt
        return real(*a, **k)

    monkeypatch.setattr(engine, "run_block", flaky)
    assert main(["run", str(scenario_file), "--out", str(cut), "--quiet"]) == 130
    err = capsys.readouterr().err
    assert "--resume" in err and "7 finished blocks" in err
    # finished blocks kept, nothing of the summary written
    assert len(list((cut / "blocks").glob("*.npz"))) == 7
    assert not (cut / "summary.csv").exists() and not (cut / "run.json").exists()
    # running again without --resume points at it rather than discarding the blocks
    assert main(["run", str(scenario_file), "--out", str(cut), "--quiet"]) == 2
    assert "samplewright run --resume" in capsys.readouterr().err
    # a crash in the middle of writing a block leaves only a temporary file, which is ignored
    (cut / "blocks" / ".c00000000-s0-b000099.npz.x1.tmp").write_bytes(b"half a block")

    calls["n"] = 0
    monkeypatch.setattr(engine, "run_block", lambda *a, **k: (calls.__setitem__("n", calls["n"] + 1),
                                                               real(*a, **k))[1])
    assert main(["run", "--resume", str(cut), "--quiet"]) == 0  # scenario read from the saved manifest
    total = 5 * 6  # 5 design x size cells, 600 replicates in blocks of 100
    assert calls["n"] == total - 7  # only the missing blocks were drawn
    _assert_same_run(full, cut)


@pytest.mark.slow
def test_crash_in_a_parallel_worker_then_resume_equals_uninterrupted(scenario_file, tmp_path, monkeypatch):
    import threading

    if threading.active_count() > 1:  # then the blocks go to loky workers, which the patch cannot reach
        pytest.skip("other threads are running in this process, so the workers are not forked")
    full, cut = tmp_path / "full", tmp_path / "cut"
    assert main(["run", str(scenario_file), "--out", str(full), "--quiet"]) == 0
    real = engine.run_block
    calls = {"n": 0}

    def flaky(*a, **k):  # each forked worker keeps its own count and fails on its 5th block
        calls["n"] += 1
        if calls["n"] == 5:
            raise RuntimeError("worker lost")
        return real(*a, **k)

    monkeypatch.setattr(engine, "run_block", flaky)
    assert main(["run", str(scenario_file), "--out", str(cut), "--quiet", "--jobs", "2"]) == 1
    assert not (cut / "summary.csv").exists()
    monkeypatch.setattr(engine, "run_block", real)
    assert main(["run", "--resume", str(cut), "--quiet", "--jobs", "2"]) == 0
    _assert_same_run(full, cut)


@pytest.mark.slow
def test_resume_refuses_a_changed_scenario_or_seed(scenario_file, tmp_path, capsys):
    out = tmp_path / "res"
    assert main(["run", str(scenario_file), "--out", str(out), "--quiet", "--keep-blocks"]) == 0
    capsys.readouterr()
    assert main(["run", "--resume", str(out), "--seed", "9", "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error:") and "seed" in err and "differs from the saved run" in err
    scenario_file.write_text(SCENARIO.replace("seed = 314", "seed = 315"))
    assert main(["run", "--resume", str(out), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error:") and "hash" in err


def test_resume_without_saved_blocks_is_refused(tmp_path, capsys):
    (tmp_path / "empty").mkdir()
    assert main(["run", "--resume", str(tmp_path / "empty")]) == 2
    assert "nothing to resume" in capsys.readouterr().err


@pytest.mark.slow
def test_forced_rerun_starts_from_no_blocks(scenario_file, tmp_path):
    """--force over an earlier run's folder must not reuse its blocks (another seed here)."""
    out, ref = tmp_path / "again", tmp_path / "ref"
    assert main(["run", str(scenario_file), "--out", str(out), "--quiet", "--keep-blocks"]) == 0
    assert main(["run", str(scenario_file), "--out", str(out), "--quiet", "--force", "--seed", "2"]) == 0
    assert main(["run", str(scenario_file), "--out", str(ref), "--quiet", "--seed", "2"]) == 0
    _assert_same_run(out, ref)


def test_block_store_round_trip(scenario_file, tmp_path):
    sc = load_scenario(scenario_file)
    frame = sc.load_frame()
    cells = engine.make_cells(sc.designs, sc.estimators)
    store = BlockStore.create(tmp_path, {"seed": 1})
    results = engine.simulate(RunPlan(frame=frame, cells=tuple(cells[:1]), replicates=250, seed=1, block_size=100,
                                       cost=sc.cost, store=store))
    assert store.finished() == {(cells[0].key, 0, b) for b in range(3)}
    width = len(frame.layout.names)
    back = [store.load(cells[0], 0, b, s, count, width) for b, s, count in engine.block_spans(250, 100)]
    for r, s in zip(results, back):
        assert (r.block, r.start) == (s.block, s.start)
        for k in ("estimate", "se", "lower", "upper", "n", "cost"):
            np.testing.assert_array_equal(getattr(r, k), getattr(s, k))
    assert len(back[2].n) == 50  # the last, partial block


# ---------------------------------------------------------------- stopping
def _per_cell(res):
    return {(r["design"], r["size"]): r for r in res.info["stopping"]["cells"]}


def test_until_coverage_stops_at_the_first_block_meeting_the_target(scenario_file):
    sc = load_scenario(scenario_file)
    t, bs = 0.012, 100
    res = run(sc, replicates=200, until=f"coverage_mcse={t}", max_replicates=5000)
    reps = res.replicates
    truth = float(res.summary["truth"].iloc[0])
    for (design, size), row in _per_cell(res).items():
        g = reps[(reps.design == design) & (reps["size"] == size)]
        hits = [((e.lower <= truth) & (truth <= e.upper)).to_numpy()  # one array per estimator
                for _, e in g.sort_values("replicate").groupby("estimator")]
        R = len(hits[0])
        assert R == row["replicates"] and R % bs == 0 and R >= 200

        def cov(h):  # (covered + 1) / (R + 2): the stopping rule's guard against c = 0 or 1
            return (h.sum() + 1) / (len(h) + 2)

        def mcse(k, hits=hits):  # the worst estimator's sqrt(c (1 - c) / k) on the first k replicates (MWC 2019)
            return max(math.sqrt(cov(h[:k]) * (1 - cov(h[:k])) / k) for h in hits)

        assert row["met"] and mcse(R) <= t
        if R > 200:  # one block fewer was not enough
            assert mcse(R - bs) > t
        need = max(math.ceil(cov(h) * (1 - cov(h)) / t**2) for h in hits)
        assert abs(row["replicates_needed"] - need) <= 1  # ceil of the same quantity, rounding aside
        assert row["reached"]["coverage_mcse"] == pytest.approx(mcse(R), rel=1e-12)


def test_until_gives_the_same_numbers_with_two_jobs(scenario_file):
    sc = load_scenario(scenario_file)
    a = run(sc, replicates=100, until="coverage_mcse=0.015,bias_mcse=0.6", max_replicates=3000, jobs=1)
    b = run(sc, replicates=100, until="coverage_mcse=0.015,bias_mcse=0.6", max_replicates=3000, jobs=2)
    pd.testing.assert_frame_equal(a.replicates, b.replicates)
    assert a.info["stopping"] == b.info["stopping"]


def test_until_bias_mcse_uses_the_sample_variance(scenario_file):
    sc = load_scenario(scenario_file)
    t = 0.8
    res = run(sc, replicates=100, until=f"bias_mcse={t}", max_replicates=4000)
    for _, row in res.summary.iterrows():
        R = int(row["replicates"])
        assert row["bias_mcse"] <= t  # sqrt(var / R), MWC 2019 Table 6
        # one block fewer would not have met it (the run stops at the first block that does)
        if R > 100:
            g = res.replicates[(res.replicates.design == row["design"]) & (res.replicates["size"] == row["size"])]
            x = g.sort_values("replicate")["estimate"].to_numpy()[: R - 100]
            assert math.sqrt(np.var(x, ddof=1) / len(x)) > t


def test_until_empirical_se_relative_mcse_matches_the_closed_form(scenario_file):
    # relative MCSE of the empirical SE is 1 / sqrt(2 (R - 1)) whatever the data (MWC 2019, Table 6),
    # so the target 0.05 needs R >= 1 + 1 / (2 * 0.05^2) = 201, i.e. three blocks of 100
    sc = load_scenario(scenario_file)
    res = run(sc, replicates=100, until="empirical_se_rel_mcse=0.05", max_replicates=1000)
    assert set(res.summary["replicates"]) == {300}
    assert all(r["replicates_needed"] == 201 for r in res.info["stopping"]["cells"])


@pytest.mark.slow
def test_until_stops_at_the_cap_and_says_so(scenario_file, tmp_path, capsys):
    out = tmp_path / "cap"
    assert main(["run", str(scenario_file), "--out", str(out), "--replicates", "100",
                 "--until", "coverage_mcse=0.0001", "--max-replicates", "300"]) == 0
    stdout = capsys.readouterr().out
    assert "NOT met (cap reached)" in stdout and "replicates needed" in stdout
    info = json.loads((out / "run.json").read_text())
    assert info["stopping"]["max_replicates"] == 300
    assert all(c["replicates"] == 300 and not c["met"] for c in info["stopping"]["cells"])
    assert set(pd.read_csv(out / "summary.csv")["replicates"]) == {300}


@pytest.mark.slow
def test_resume_of_a_stopping_run_equals_the_uninterrupted_one(scenario_file, tmp_path, monkeypatch):
    full, cut = tmp_path / "full", tmp_path / "cut"
    opts = ["--quiet", "--replicates", "100", "--until", "coverage_mcse=0.015", "--max-replicates", "2000"]
    assert main(["run", str(scenario_file), "--out", str(full), *opts]) == 0
    real = engine.run_block
    calls = {"n": 0}

    def flaky(*a, **k):
        calls["n"] += 1
        if calls["n"] == 9:
            raise RuntimeError("worker lost")  # a crash rather than Ctrl-C
        return real(*a, **k)

    monkeypatch.setattr(engine, "run_block", flaky)
    assert main(["run", str(scenario_file), "--out", str(cut), *opts]) == 1
    monkeypatch.setattr(engine, "run_block", real)
    assert main(["run", "--resume", str(cut), "--quiet"]) == 0  # the rule is read from the manifest
    _assert_same_run(full, cut)


@pytest.mark.parametrize("text, fragment", [
    ("coverage=0.01", "did you mean 'coverage_mcse'"),
    ("coverage_mcse", "NAME=VALUE"),
    ("bias_mcse=-1", "above 0"),
    ("bias_mcse=abc", "above 0"),
])
def test_until_refuses_bad_rules(text, fragment):
    with pytest.raises(InputError, match=fragment):
        parse_until(text, max_replicates=1000)


def test_max_replicates_with_nothing_to_cap_is_refused(scenario_file):
    # the cap bounds --until or the settling of a [goal]; a scenario with neither has nothing to cap
    sc = load_scenario(scenario_file)
    assert not sc.goals
    with pytest.raises(InputError, match="--until or a \\[goal\\]"):
        run(sc, max_replicates=1000)


# ---------------------------------------------------------------- determinism and dask
DOC = {
    "seed": 8, "replicates": 400, "block_size": 100,
    "frame": {"synthetic": {"units": 3000, "seed": 2, "strata": [
        {"name": "a", "share": 0.5, "mean": 10, "sd": 3}, {"name": "b", "share": 0.5, "mean": 20, "sd": 6}],
        "clusters": {"mean_size": 20, "icc": 0.1}}},
    "design": [
        {"label": "srs", "method": "srs", "n": 60},
        {"label": "strat", "method": "stratified", "n": 60, "allocation": "neyman"},
        {"label": "two-stage", "method": "cluster", "clusters": 8, "units_per_cluster": 5},
    ],
}


def test_same_block_size_same_numbers_and_jobs_do_not_matter():
    sc = scenario_from_dict(DOC)
    a, b, c = run(sc, jobs=1), run(sc, jobs=1), run(sc, jobs=2)
    pd.testing.assert_frame_equal(a.replicates, b.replicates)
    pd.testing.assert_frame_equal(a.replicates, c.replicates)
    pd.testing.assert_frame_equal(a.summary, c.summary)


def test_unknown_backend_and_missing_scheduler_are_refused():
    sc = scenario_from_dict(DOC)
    with pytest.raises(InputError, match="did you mean 'dask'"):
        run(sc, backend="dusk")
    with pytest.raises(InputError, match="--scheduler"):
        run(sc, backend="dask")


@pytest.mark.slow
def test_dask_cluster_gives_the_local_numbers(tmp_path):
    distributed = pytest.importorskip("distributed")
    sc = scenario_from_dict(DOC)
    local = run(sc, jobs=1)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=":0") as cluster:
        remote = run(sc, backend="dask", scheduler=cluster.scheduler_address, out=tmp_path / "d")
        stopped_local = run(sc, until="coverage_mcse=0.02", max_replicates=1500)
        stopped_remote = run(sc, until="coverage_mcse=0.02", max_replicates=1500, backend="dask",
                             scheduler=cluster.scheduler_address)
    pd.testing.assert_frame_equal(local.replicates, remote.replicates)
    pd.testing.assert_frame_equal(local.summary, remote.summary)
    pd.testing.assert_frame_equal(stopped_local.replicates, stopped_remote.replicates)
    assert remote.info["backend"] == "dask"
    assert len(list((tmp_path / "d" / "blocks").glob("*.npz"))) == 3 * 4


@pytest.mark.slow
def test_loky_workers_give_the_same_numbers(monkeypatch):
    """Where processes cannot fork, joblib's loky workers read a memory-mapped frame instead."""
    import multiprocessing

    sc = scenario_from_dict(DOC)
    local = run(sc, jobs=1)
    monkeypatch.setattr(multiprocessing, "get_all_start_methods", lambda: ["spawn"])
    spawned = run(sc, jobs=2)
    pd.testing.assert_frame_equal(local.replicates, spawned.replicates)


FAULTS = """
import json, resource
import numpy as np
from samplewright.api import RunOptions
from samplewright.simulation import engine
from samplewright.simulation.plan import build_plan
from samplewright.simulation.scenario import scenario_from_dict
doc = {"seed": 5, "replicates": 2000, "block_size": 500, "frame": {"synthetic": {"units": 200000, "seed": 1}},
       "design": [{"label": "srs", "method": "srs", "n": 1000}]}
plan = build_plan(scenario_from_dict(doc), RunOptions())
cells = list(plan.cells)
tasks = [engine.BlockTask(0, b, b * 500, 500, engine.block_seed(plan.seed, cells[0], b)) for b in range(4)]
def faults(fn):
    fn(tasks[0])  # the first block grows the heap either way
    before = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
    out = [fn(t) for t in tasks[1:]]
    return resource.getrusage(resource.RUSAGE_SELF).ru_minflt - before, out
plain, a = faults(lambda t: engine.run_task(plan.frame, cells, t, plan.confidence, plan.cost))
roomy, b = faults(lambda t: engine.run_dask_task(plan.frame, cells, t, plan.confidence, plan.cost))
same = all(np.array_equal(x.estimate, y.estimate) and np.array_equal(x.se, y.se) for x, y in zip(a, b))
print(json.dumps({"plain": plain, "roomy": roomy, "same": same}))
"""


def test_dask_task_keeps_its_freed_memory_under_the_dask_worker_allocator_setting():
    """A dask worker runs with MALLOC_TRIM_THRESHOLD_=65536 (dask's default environment for its
    workers), which fixes glibc's mmap threshold at 128 KiB: each megabyte array of a block is then
    mapped afresh and its pages fault in again.  run_dask_task keeps freed memory during a block:
    far fewer page faults (the kernel's own count, ru_minflt), the same numbers.

    The heap a child starts with depends on whether its modules' bytecode is cached: the child compiles
    everything from source (-B and an empty pycache prefix), so the count never depends on what the
    checkout or the machine has cached.  With samplewright's bytecode cached the heap starts smaller and
    the dask path faults more (about 4,700 against 28,500 over three blocks, measured 2026-12-05): still
    six times fewer, not ten."""
    import os
    import subprocess
    import sys
    import tempfile

    env = {**os.environ, "MALLOC_TRIM_THRESHOLD_": "65536"}
    env.pop("MALLOC_MMAP_THRESHOLD_", None)
    with tempfile.TemporaryDirectory() as empty:
        out = subprocess.run([sys.executable, "-B", "-X", f"pycache_prefix={empty}", "-c", FAULTS], env=env,
                             capture_output=True, text=True, check=True)
    got = json.loads(out.stdout.strip().splitlines()[-1])
    assert got["same"]
    assert got["plain"] > 1000  # three blocks of 500 x 1000 positions: thousands of pages mapped afresh
    assert got["roomy"] < got["plain"] / 10, got


@pytest.mark.parametrize("with_cost", [False, True])
def test_gather_equals_plain_indexing(with_cost):
    """Frame.gather (one-column or padded-row path) gives exactly numpy's values[units]."""
    from samplewright import Frame

    rng = np.random.default_rng(3)
    df = pd.DataFrame({"y": rng.normal(size=5000), "band": rng.integers(0, 4, 5000), "fee": rng.random(5000)})
    f = Frame.from_dataframe(df, target="y", stratum="band", unit_cost="fee" if with_cost else None)
    assert (f.column is None) == with_cost  # a unit cost column varies: the padded-row path
    units = rng.integers(0, 5000, (7, 30, 2))
    got = f.gather(units)
    assert got.shape == units.shape + (f.values.shape[1],)
    np.testing.assert_array_equal(got, f.values[units])
    # positions in the stratum-grouped order read the same rows as their units
    np.testing.assert_array_equal(f.gather_in_strata(units), f.values[f.strata_units[units]])


@pytest.mark.parametrize("unit_cost", [None, 3.0, 2.5])
@pytest.mark.parametrize("masked", [False, True])
def test_block_with_unwritten_constant_columns_reads_as_plain_indexing(unit_cost, masked):
    """A block whose constant columns were left unwritten (``gather(fill=False)`` then ``deferring``) reads
    as numpy's plain ``values[units]``: its count and cost totals equal numpy's sums of the plain rows (a
    whole-number constant without reading the unwritten memory, here poisoned with NaN), its weighted target
    column equals the plain product, and ``sums`` itself equals the plain rows."""
    from samplewright import Frame
    from samplewright.designs.block import SampleBlock
    from samplewright.population.frame import COST, COUNT

    rng = np.random.default_rng(8)
    df = pd.DataFrame({"y": rng.normal(size=3000)})
    if unit_cost is not None:
        df["fee"] = unit_cost
    f = Frame.from_dataframe(df, target="y", unit_cost=None if unit_cost is None else "fee")
    assert f.column is not None and sorted(f.unfilled) == [1, 2]  # only y varies: count and cost pending
    units = rng.integers(0, 3000, (6, 40))
    raw = f.gather(units, fill=False)
    for j in f.unfilled:
        raw[..., j] = np.nan  # what unwritten memory may hold
    mask = rng.random((6, 40)) < 0.7 if masked else None
    w = rng.random(40) + 1.0
    blk = SampleBlock(sums=raw, weight=w, psu_stratum=np.zeros(40, dtype=np.int64), fpc=np.ones(1),
                      clusters=np.zeros(6), mask=mask).deferring(f.unfilled)
    plain = f.values[units]
    keep = np.ones(units.shape, dtype=bool) if mask is None else mask
    for column in (COUNT, COST):
        np.testing.assert_array_equal(blk.column_total(column), np.where(keep, plain[..., column], 0.0).sum(axis=1))
    z = blk.replaced(variance="psu").weighted(slice(0, 1))
    np.testing.assert_array_equal(z, np.where(keep[..., None], plain[..., :1] * w[:, None], 0.0))
    if unit_cost != 2.5:  # whole-number constants were totalled without being written
        assert np.isnan(raw[..., COUNT]).all()
    np.testing.assert_array_equal(blk.sums, plain)
    np.testing.assert_array_equal(blk.replaced(variance="psu").sums, plain)


@pytest.mark.parametrize("with_cost", [False, True])
def test_gathers_read_plain_indexing_whatever_the_storage_order(with_cost):
    """Every gather (plain, through the stratum order, constant columns left pending) equals numpy's
    values[units] when the frame's table is stored column by column and its one varying column is a view of
    it, as well as when stored row by row."""
    from samplewright import Frame
    from samplewright.designs.block import SampleBlock
    from samplewright.population.frame import _padded_rows

    rng = np.random.default_rng(4)
    df = pd.DataFrame({"y": rng.normal(size=4000), "band": rng.integers(0, 3, 4000), "fee": rng.random(4000)})
    f = Frame.from_dataframe(df, target="y", stratum="band", unit_cost="fee" if with_cost else None)
    values = np.asfortranarray(f.values)
    object.__setattr__(f, "values", values)
    if f.column is not None:
        object.__setattr__(f, "column", values[:, 0])  # a view, contiguous in a column-ordered table
    else:
        object.__setattr__(f, "rows", _padded_rows(values))
    units = rng.integers(0, 4000, (5, 60))
    plain = f.values[units]
    np.testing.assert_array_equal(f.gather(units), plain)
    np.testing.assert_array_equal(f.gather_in_strata(units), f.values[f.strata_units[units]])
    blk = SampleBlock(sums=f.gather(units, fill=False), weight=np.ones(60), psu_stratum=np.zeros(60, dtype=np.int64),
                      fpc=np.ones(1), clusters=np.zeros(5)).deferring(f.unfilled)
    np.testing.assert_array_equal(blk.sums, plain)
