"""A design's ``variance`` may list several formulas: every listed formula is scored on the same draws.

Checks against things outside the code under test: exact enumeration of every random start of a
small systematic frame with both variance estimators computed by hand here (the SRS formula,
Cochran 1977 eq. 2.10 with units as PSUs; successive differences, Wolter, Introduction to Variance
Estimation, 2nd ed., ch. 8, v3, from memory); and exact equality with runs of one formula from the
same seed (a block's numbers depend only on its seed, so an added formula must not move them).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

import samplewright as sw
from samplewright.cli.main import main
from samplewright.evaluation.measures import PUBLISHED_COLUMNS, SUMMARY_COLUMNS
from samplewright.results.load import read_run
from samplewright.simulation import engine

CONTRACT = ["replicate", "design", "size", "estimator", "variable", "estimate", "se", "lower", "upper", "n", "cost"]
UNITS = 240


def _frame(tmp_path):
    """A frame with a trend along the list (successive differences and the SRS formula then differ), a
    second target, clusters of 12 listed units and a size measure."""
    rng = np.random.default_rng(3)
    i = np.arange(UNITS)
    df = pd.DataFrame({"y": (20 + 0.2 * i + rng.normal(0, 2, UNITS)).round(3),
                       "z": rng.gamma(2.0, 3.0, UNITS).round(3),
                       "block": i // 12, "size": rng.integers(1, 9, UNITS)})
    path = tmp_path / "frame.csv"
    df.to_csv(path, index=False)
    return path


def _scenario(tmp_path, designs, **top):
    frame = _frame(tmp_path)
    doc = {"seed": 8, "replicates": 200, "block_size": 50, **top,
           "frame": {"path": str(frame), "target": ["y", "z"], "cluster": "block", "size": "size"},
           "design": designs}
    return sw.scenario_from_dict(doc, base=tmp_path)


SYSTEMATIC = {"label": "sys", "method": "systematic", "n": 24}
DESIGNS = {  # design table -> (one formula, the list adding another)
    "systematic": ({**SYSTEMATIC, "variance": "srs"}, {**SYSTEMATIC, "variance": ["srs", "successive_differences"]}),
    "circular, 3 starts": (
        {**SYSTEMATIC, "kind": "circular", "starts": 3, "variance": "between_starts"},
        {**SYSTEMATIC, "kind": "circular", "starts": 3,
         "variance": ["between_starts", "srs", "successive_differences"]}),
    "two-stage cluster": (
        {"label": "two", "method": "cluster", "clusters": 6, "units_per_cluster": 4},
        {"label": "two", "method": "cluster", "clusters": 6, "units_per_cluster": 4,
         "variance": ["two_stage", "ultimate_cluster"]}),
    "sampford": (
        {"label": "pps", "method": "sampford", "n": 2, "variance": "hartley_rao"},
        {"label": "pps", "method": "sampford", "n": 2, "variance": ["hartley_rao", "brewer", "sen_yates_grundy"]}),
}


@pytest.mark.parametrize("case", sorted(DESIGNS))
def test_an_added_formula_leaves_the_draws_and_the_first_formula_unchanged(tmp_path, case):
    """Same seed: the one-formula rows reappear bit for bit, and every formula's estimates are those numbers."""
    one, listed = DESIGNS[case]
    a = sw.run(_scenario(tmp_path, [one]), seed=4)
    b = sw.run(_scenario(tmp_path, [listed]), seed=4)
    first = listed["variance"][0]
    ra, rb = a.replicates, b.replicates
    pd.testing.assert_frame_equal(ra.reset_index(drop=True), rb[rb["variance"] == first].reset_index(drop=True))
    pd.testing.assert_frame_equal(a.summary, b.summary[b.summary["variance"] == first].reset_index(drop=True))
    keys = ["design", "size", "estimator", "variable", "replicate"]
    for formula in listed["variance"][1:]:
        other = rb[rb["variance"] == formula].reset_index(drop=True)
        pd.testing.assert_frame_equal(other[keys + ["estimate", "n", "cost"]], ra[keys + ["estimate", "n", "cost"]])
        assert not np.array_equal(other["se"].to_numpy(), ra["se"].to_numpy())  # another formula, other SEs


def test_columns_and_row_order(tmp_path):
    """variance follows the contract columns; rows run design, size, estimator, variance, variable."""
    sys_design = {**SYSTEMATIC, "n": [12, 24], "variance": ["successive_differences", "srs"]}
    res = sw.run(_scenario(tmp_path, [{"label": "simple", "method": "srs", "n": 24}, sys_design]), seed=1)
    assert list(res.replicates.columns) == CONTRACT + ["variance"]
    assert list(res.summary.columns) == SUMMARY_COLUMNS + PUBLISHED_COLUMNS + ["variance"]
    assert res.frontier.columns[-1] == "variance"
    order = list(res.summary[["design", "size", "estimator", "variance", "variable"]].itertuples(index=False,
                                                                                                name=None))
    want = [("simple", 24, e, "psu", v) for e in ("ht", "hajek") for v in ("y", "z")]
    want += [("sys", n, e, f, v) for n in (12, 24) for e in ("ht", "hajek")
             for f in ("successive_differences", "srs") for v in ("y", "z")]
    assert order == want
    reps = res.replicates
    firsts = reps.drop_duplicates(["design", "size", "estimator", "variance", "variable"])
    assert list(firsts[["design", "size", "estimator", "variance", "variable"]].itertuples(index=False,
                                                                                          name=None)) == want


def test_fieldwork_columns_come_before_variance(tmp_path):
    sc = _scenario(tmp_path, [{**SYSTEMATIC, "variance": ["srs", "successive_differences"]}],
                   response={"model": "constant", "rate": 0.8})
    res = sw.run(sc, seed=2)
    assert res.summary.columns[-1] == "variance" and "nonresponse_bias" in res.summary.columns
    assert list(res.summary["variance"]) == ["srs", "srs", "successive_differences", "successive_differences"] * 2


@pytest.mark.parametrize("value, words", [
    ("[]", "non-empty list"),
    ('["srs", "srs"]', "names a formula twice"),
    ('["srs", "two_stage"]', "'two_stage' is not available"),
    ("[1]", "non-empty list"),
    ('"succesive_differences"', "did you mean 'successive_differences'"),
    ('["srs", "between_starts"]', "starts = 2 or more"),
])
def test_bad_variance_values_are_refused_in_one_line(tmp_path, capsys, value, words):
    _frame(tmp_path)
    (tmp_path / "s.toml").write_text(
        f'replicates = 20\n[frame]\npath = "frame.csv"\ntarget = "y"\n'
        f'[[design]]\nlabel = "walk"\nmethod = "systematic"\nn = 24\nvariance = {value}\n')
    assert main(["run", str(tmp_path / "s.toml"), "--out", str(tmp_path / "out"), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error:") and err.count("\n") == 1 and "Traceback" not in err
    assert "'walk'" in err and "variance" in err and words in err


def test_jobs_do_not_change_a_listed_run(tmp_path):
    sc = _scenario(tmp_path, [DESIGNS["circular, 3 starts"][1], DESIGNS["two-stage cluster"][1]])
    a, b = sw.run(sc, seed=6, jobs=1), sw.run(sc, seed=6, jobs=2)
    pd.testing.assert_frame_equal(a.replicates, b.replicates)
    pd.testing.assert_frame_equal(a.summary, b.summary)


def test_exact_mode_gives_each_formula_its_expected_variance(tmp_path):
    """Linear systematic, N = 12, n = 3 (k = 4): the four starts, each with probability 1/4.

    By hand for start s the sample is y_s, y_{s+4}, y_{s+8}; with f = n / N:
    v_srs = (1 - f) s^2 / n (Cochran 1977, eq. 2.10) and
    v_sd = (1 - f) / n * sum_{i=2}^{n} (y_i - y_{i-1})^2 / (2 (n - 1)) (Wolter 2007, ch. 8, v3; from
    memory).  The tool's exact mean_se is sqrt(E v): its square must be the mean of the four v's.
    """
    y = np.array([3.0, 5.0, 4.0, 8.0, 9.0, 7.0, 12.0, 10.0, 14.0, 13.0, 17.0, 15.0])
    pd.DataFrame({"y": y}).to_csv(tmp_path / "f.csv", index=False)
    sc = sw.scenario_from_dict({"frame": {"path": "f.csv", "target": "y"},
                                "design": [{"label": "walk", "method": "systematic", "n": 3,
                                            "variance": ["srs", "successive_differences"],
                                            "estimators": ["ht"]}]}, base=tmp_path)
    N, n = 12, 3
    f = n / N
    v_srs, v_sd, means = [], [], []
    for s in range(4):
        ys = y[[s, s + 4, s + 8]]
        means.append(ys.mean())
        v_srs.append((1 - f) * ys.var(ddof=1) / n)
        v_sd.append((1 - f) / n * float(np.sum(np.diff(ys) ** 2)) / (2 * (n - 1)))
    res = sw.run(sc, exact=True)
    rows = res.summary.set_index("variance")
    assert list(rows.index) == ["srs", "successive_differences"]
    for formula, v in (("srs", v_srs), ("successive_differences", v_sd)):
        assert math.isclose(rows.loc[formula, "mean_se"] ** 2, float(np.mean(v)), rel_tol=1e-12)
        assert math.isclose(rows.loc[formula, "mean_estimate"], float(np.mean(means)), rel_tol=1e-12)
    assert rows.loc["srs", "empirical_se"] == rows.loc["successive_differences", "empirical_se"]
    assert np.mean(v_sd) < np.mean(v_srs)  # the trend inflates the SRS formula, not the differences
    assert set(res.replicates["variance"]) == {"srs", "successive_differences"}


def _interrupted_then_resumed(sc_path, out, monkeypatch):
    real, calls = engine.run_block, {"n": 0}

    def flaky(*a, **k):
        calls["n"] += 1
        if calls["n"] > 2:
            raise KeyboardInterrupt
        return real(*a, **k)

    monkeypatch.setattr(engine, "run_block", flaky)
    assert main(["run", str(sc_path), "--out", str(out), "--quiet", "--no-report"]) == 130
    monkeypatch.setattr(engine, "run_block", real)


def _toml(tmp_path):
    _frame(tmp_path)
    path = tmp_path / "s.toml"
    path.write_text('seed = 3\nreplicates = 200\nblock_size = 50\n[frame]\npath = "frame.csv"\ntarget = "y"\n'
                    '[[design]]\nlabel = "walk"\nmethod = "systematic"\nn = 24\nstarts = 2\n'
                    'variance = ["srs", "successive_differences", "between_starts"]\n')
    return path


def test_resume_with_a_variance_list_matches_an_uninterrupted_run(tmp_path, monkeypatch, capsys):
    path = _toml(tmp_path)
    full, cut = tmp_path / "full", tmp_path / "cut"
    assert main(["run", str(path), "--out", str(full), "--quiet", "--no-report"]) == 0
    _interrupted_then_resumed(path, cut, monkeypatch)
    assert main(["run", "--resume", str(cut), "--quiet", "--no-report"]) == 0
    assert "block file" not in capsys.readouterr().err  # every saved block was read back, none drawn again
    pd.testing.assert_frame_equal(pd.read_parquet(full / "replicates.parquet"),
                                  pd.read_parquet(cut / "replicates.parquet"))
    assert (full / "summary.csv").read_bytes() == (cut / "summary.csv").read_bytes()


def test_resume_refuses_a_blocks_folder_of_the_earlier_format(tmp_path, monkeypatch, capsys):
    path = _toml(tmp_path)
    cut = tmp_path / "cut"
    _interrupted_then_resumed(path, cut, monkeypatch)
    manifest = cut / "blocks" / "manifest.json"
    saved = json.loads(manifest.read_text())
    del saved["block_format"]  # as written before blocks carried their variance formulas
    manifest.write_text(json.dumps(saved))
    capsys.readouterr()
    assert main(["run", "--resume", str(cut), "--quiet", "--no-report"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error:") and err.count("\n") == 1 and "block format 1" in err


def test_a_run_folder_without_the_variance_column_reads_back_with_it(tmp_path):
    """A folder written before formulas were listed: each design's one formula is in run.json."""
    res = sw.run(_scenario(tmp_path, [{"label": "simple", "method": "srs", "n": 24}, DESIGNS["systematic"][0]]),
                 seed=1)
    out = res.write(tmp_path / "out")
    summary = pd.read_csv(out / "summary.csv")
    summary.drop(columns="variance").to_csv(out / "summary.csv", index=False)
    back = read_run(out)
    assert list(back.summary["variance"]) == list(summary["variance"])


def test_the_memory_check_counts_a_row_per_formula():
    """limits.py: ROW_BYTES per replicate-table row, one row per estimator x formula x variable x replicate."""
    from samplewright.designs.systematic import Systematic
    from samplewright.errors import InputError
    from samplewright.population.frame import Frame
    from samplewright.simulation.engine import make_cells
    from samplewright.simulation.limits import BLOCK_BYTES, ROW_BYTES, check_run_memory

    frame = Frame.from_dataframe(pd.DataFrame({"y": np.arange(1.0, 101.0)}), target="y")
    cells = make_cells([Systematic("w", n=2, variance=["srs", "successive_differences"])], [("ht",)])
    need = 10**4 * 2 * ROW_BYTES + 20 * BLOCK_BYTES  # 10^4 replicates x (1 estimator x 2 formulas); 20 blocks
    check_run_memory(frame, cells, 10**4, 500, memory=need)
    with pytest.raises(InputError, match="replicate table"):
        check_run_memory(frame, cells, 10**4, 500, memory=need - 1)


def _formula_cases():
    from test_design_protocol import CASES

    from samplewright.designs import DESIGN_CLASSES

    return [(m, p) for m, p in CASES if len(DESIGN_CLASSES[m].variances) > 1]


@pytest.mark.parametrize("method, params", _formula_cases())
def test_every_view_of_a_listed_draw_is_the_one_formula_draw(method, params):
    """For every design offering several formulas: listing all it accepts, the block viewed with each
    gives bit for bit the estimates, SEs, intervals and df of a design asking for that formula alone."""
    from test_design_protocol import protocol_frame

    from samplewright.designs import DESIGN_CLASSES
    from samplewright.errors import InputError
    from samplewright.estimation.registry import ESTIMATORS

    frame, cls = protocol_frame(), DESIGN_CLASSES[method]
    usable = []
    for name in cls.variances:
        try:
            cls("one", variance=name, **params).check(frame)
            usable.append(name)
        except InputError:
            continue
    listed = cls("all", variance=usable, **params)
    listed.check(frame)
    block = listed.draw(frame, np.random.default_rng(12), 64)
    for name in usable:
        alone = cls("one", variance=name, **params).draw(frame, np.random.default_rng(12), 64)
        for est in ("ht", "hajek"):
            a = ESTIMATORS[est](block.with_variance(name), frame.N, frame.V, 0.95)
            b = ESTIMATORS[est](alone, frame.N, frame.V, 0.95)
            for k in ("estimate", "se", "lower", "upper", "df"):
                assert np.array_equal(getattr(a, k), getattr(b, k), equal_nan=True), (name, est, k)
    assert len(usable) > 1  # the test compares at least two formulas
