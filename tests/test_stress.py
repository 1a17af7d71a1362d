"""Stress runs: [[assumption]] points, common random numbers, break-even values, refusals, determinism."""

from __future__ import annotations

import copy
import json
import math

import numpy as np
import pandas as pd
import pytest

from samplewright import run, scenario_from_dict
from samplewright.cli.main import main
from samplewright.config.synthetic import SyntheticSpec
from samplewright.evaluation.measures import mean_mcse
from samplewright.population.synth import generate
from samplewright.results.load import read_run

# one-stage cluster sampling against SRS at equal cost on a synthetic clustered frame: 20,000 units in
# 2,000 clusters of exactly m = 10; the cluster design takes k = 20 whole clusters (200 units), SRS n = 50
# units; at 10 per unit and 50 per cluster visited (an SRS unit visits its own cluster) both cost about 3,000
N, M, m, k, n = 20_000, 2_000, 10, 20, 50
ICC = [0.2, 0.29, 0.38, 0.47]


def cluster_doc(values=ICC, replicates=4000, seed=11) -> dict:
    return {
        "seed": seed, "replicates": replicates,
        "frame": {"synthetic": {"units": N, "seed": 4, "clusters": {"mean_size": m, "icc": 0.3, "size_cv": 0.0}}},
        "design": [{"label": "srs", "method": "srs", "n": n, "estimators": ["ht"]},
                   {"label": "clusters", "method": "cluster", "clusters": k, "estimators": ["ht"]}],
        "cost": {"per_unit": 10, "per_cluster": 50, "charge_touched_clusters": True},
        "goal": {"budget": 4000},
        "assumption": [{"name": "icc", "set": "frame.synthetic.clusters.icc", "values": list(values)}],
    }


def _roh(icc: float) -> float:
    """The frame's own intra-cluster correlation in Kish's sense: m S_b^2 / S^2 = 1 + (m - 1) roh, with S_b^2 the
    variance of the cluster means and S^2 the unit variance (both divisor count - 1; Kish 1965, sec. 5.4)."""
    df = generate(SyntheticSpec(units=N, seed=4, clusters={"mean_size": m, "icc": icc, "size_cv": 0.0}))
    S2 = df["y"].var(ddof=1)
    Sb2 = df.groupby("cluster")["y"].mean().var(ddof=1)
    return (m * Sb2 / S2 - 1) / (m - 1)


@pytest.mark.parametrize("replicates", [2500, 8000])  # the same answer as evidence grows
def test_break_even_matches_kish_closed_form(replicates):
    # Closed form.  SRS of n units without replacement: V_srs = (1 - n/N) S^2 / n (Cochran 1977, eq. 2.8).
    # SRS of k of the M equal clusters, every unit taken: V_clu = (1 - k/M) S_b^2 / k (Cochran 1977, sec. 9.2),
    # which with Kish's design effect is (1 - k/M) S^2 / (k m) [1 + (m - 1) roh] (Kish 1965, sec. 5.4).
    # Both designs are unbiased, so each margin is z sqrt(V) and within the budget the smaller margin is
    # picked: the cluster design wins while V_clu < V_srs, i.e. up to
    #     roh* = [ (1 - n/N) k m / ((1 - k/M) n) - 1 ] / (m - 1)   (S^2 cancels).
    # The assumption varies the generator's icc; the frame's own roh at each icc is computed exactly from the
    # frame, and the icc where roh = roh* read off linearly between the two bracketing values.
    roh_star = ((1 - n / N) * k * m / ((1 - k / M) * n) - 1) / (m - 1)
    rohs = [_roh(x) for x in ICC]
    icc_star = float(np.interp(roh_star, rohs, ICC))
    res = run(scenario_from_dict(cluster_doc(replicates=replicates)))
    be = res.break_even
    assert len(be) == 1, be
    row = be.iloc[0]
    assert (row["from_value"], row["to_value"]) == (0.29, 0.38)
    assert row["pick_before"].startswith("clusters") and row["pick_after"].startswith("srs")
    assert row["method"].startswith("linear interpolation")
    assert row["break_even_se"] > 0
    # within 4 of its stated standard errors of the closed form (a z-bound on the Monte Carlo error)
    assert abs(row["break_even"] - icc_star) <= 4 * row["break_even_se"], (row["break_even"], icc_star)
    assert math.isclose(row["low"], row["break_even"] - 2 * row["break_even_se"])
    # the verdict at each point agrees with the closed form away from the break-even
    picks = res.stress_verdict.set_index("icc")["design"]
    assert picks[0.2] == "clusters" and picks[0.47] == "srs"


def test_common_random_numbers_shrink_the_mcse_of_a_difference():
    # every point runs with the run's seed: its numbers are those of a plain run of the point's scenario
    res = run(scenario_from_dict(cluster_doc(values=[0.29, 0.38], replicates=2000)))
    reps = {}
    for x, seed in ((0.29, 11), (0.38, 11), (0.38, 12)):
        doc = cluster_doc(values=[x], replicates=2000, seed=seed)
        doc["frame"]["synthetic"]["clusters"]["icc"] = x
        del doc["assumption"]
        point = run(scenario_from_dict(doc))
        r = point.replicates
        # the first 2,000 of each: a point whose pick was undecided may have been given more
        reps[(x, seed)] = r[(r["design"] == "srs") & (r["replicate"] < 2000)].sort_values("replicate")
        if seed == 11:
            got = res.stress[(res.stress["icc"] == x)].set_index("design")["rmse"]
            want = point.summary.set_index("design")["rmse"]
            assert got.equals(want.loc[got.index])
    # the MCSE of the mean difference in squared error between the points (Morris, White and Crowther 2019,
    # Table 6: sd of the paired differences / sqrt(R)): paired by common random numbers, against the same
    # difference with the second point drawn from another seed (independent streams)
    truth = {x: generate(SyntheticSpec(units=N, seed=4, clusters={"mean_size": m, "icc": x, "size_cv": 0.0}))["y"]
             .mean() for x in (0.29, 0.38)}
    sq = {key: ((t["estimate"].to_numpy() - truth[key[0]]) ** 2) for key, t in reps.items()}
    paired = mean_mcse(sq[(0.38, 11)] - sq[(0.29, 11)])
    independent = mean_mcse(sq[(0.38, 12)] - sq[(0.29, 11)])
    assert paired < 0.5 * independent, (paired, independent)


def test_jobs_do_not_change_a_stress_run():
    doc = cluster_doc(values=[0.1, 0.5], replicates=300)
    doc["block_size"] = 100
    one = run(scenario_from_dict(doc), jobs=1)
    two = run(scenario_from_dict(doc), jobs=2)
    for name in ("stress", "stress_verdict", "break_even"):
        pd.testing.assert_frame_equal(getattr(one, name), getattr(two, name))


def test_one_at_a_time_and_grid_points():
    doc = cluster_doc(values=[0.1, 0.5], replicates=100)
    doc["assumption"].append({"name": "budget", "set": "goal.budget", "values": [2000, 3500]})
    res = run(scenario_from_dict(doc))
    v = res.stress_verdict
    # one at a time: each assumption over its values, the other at the scenario's own value
    assert v[["icc", "budget"]].values.tolist() == [[0.1, 4000], [0.5, 4000], [0.3, 2000], [0.3, 3500]]
    assert v["design"].isna().tolist() == [False, False, True, False]  # nothing fits a budget of 2000
    assert "stress_lines" in res.figure_names() and "stress_tiles" not in res.figure_names()
    doc["stress"] = {"mode": "grid"}
    res = run(scenario_from_dict(doc))
    grid = res.stress_verdict
    assert grid[["icc", "budget"]].values.tolist() == [[0.1, 2000], [0.1, 3500], [0.5, 2000], [0.5, 3500]]
    # two assumptions on a grid: a tile map of the winner, one tile per point
    assert "stress_tiles" in res.figure_names() and "stress_lines" not in res.figure_names()
    ax = res.figure("stress_tiles").axes[0]
    assert ax.images[0].get_array().shape == (2, 2)


def test_stress_files_are_read_back(tmp_path):
    res = run(scenario_from_dict(cluster_doc(values=[0.1, 0.6], replicates=1000)))
    back = read_run(res.write(tmp_path / "out"))
    for name in ("stress", "stress_verdict", "break_even"):
        # a column of None (no three-state evidence yet) reads back as blanks
        pd.testing.assert_frame_equal(getattr(back, name), getattr(res, name).fillna(np.nan), check_dtype=False)
    assert len(back.break_even) == 1


def _inline(v) -> str:
    """A value as inline TOML (strings in JSON quotes, valid TOML basic strings)."""
    if isinstance(v, dict):
        return "{" + ", ".join(f"{k} = {_inline(x)}" for k, x in v.items()) + "}"
    if isinstance(v, list):
        return "[" + ", ".join(_inline(x) for x in v) + "]"
    return json.dumps(v)


def _refused(tmp_path, capsys, doc: dict) -> str:
    path = _scenario_file(tmp_path, doc)
    out = tmp_path / "out"
    code = main(["run", str(path), "--out", str(out), "--quiet"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and err[0].startswith("error:"), err
    assert not out.exists()  # refused before anything ran or was written
    return err[0]


@pytest.mark.parametrize("change, words", [
    (lambda d: d["assumption"][0].update(set="frame.synthetic.clusters.rho"), ["'icc'", "'rho'", "not a key"]),
    (lambda d: d["assumption"][0].update(values=[0.1, 1.5]), ["'icc'", "1.5", "icc"]),
    (lambda d: d["assumption"][0].update(set="replicates"), ["'icc'", "run setting"]),
    (lambda d: d["assumption"][0].update(values=[0.1, "high"]), ["'icc'", "'high'"]),
    (lambda d: d.update(stress={"max_points": 3}), ["4 points", "max_points = 3"]),
    # a bound on the cap itself: a grid of 10^8 points under max_points = 10^9 hung while building its points
    (lambda d: d.update(stress={"max_points": 10**9}), ["max_points", "at most 10000"]),
    (lambda d: d["assumption"].append({"name": "k", "set": "design.1.clusters", "values": [20, 3000]}),
     ["'k'", "3000", "clusters"]),  # refused once the frame is bound: 3000 of its 2000 clusters
])
def test_refusals(tmp_path, capsys, change, words):
    doc = copy.deepcopy(cluster_doc(replicates=50))
    change(doc)
    line = _refused(tmp_path, capsys, doc)
    for w in words:
        assert w in line, line


def test_user_frame_refuses_frame_keys(tmp_path, capsys):
    pd.DataFrame({"y": np.arange(50.0)}).to_csv(tmp_path / "f.csv", index=False)
    doc = {"frame": {"path": str(tmp_path / "f.csv"), "target": "y"},
           "design": [{"label": "s", "method": "srs", "n": 5}],
           "assumption": [{"name": "target", "set": "frame.target", "values": [1]}]}
    line = _refused(tmp_path, capsys, doc)
    assert "'target'" in line and "frame's values" in line


def _scenario_file(tmp_path, doc: dict):
    path = tmp_path / "s.toml"
    path.write_text("".join(f"{k} = {_inline(v)}\n" for k, v in doc.items()))
    return path


def test_cli_keeps_resumes_and_removes_point_blocks(tmp_path, capsys):
    doc = cluster_doc(values=[0.1, 0.6], replicates=300)
    doc["block_size"] = 100
    path, out = _scenario_file(tmp_path, doc), tmp_path / "out"
    assert main(["run", str(path), "--out", str(out), "--quiet", "--no-report", "--keep-blocks"]) == 0
    first = pd.read_csv(out / "stress.csv")
    assert not (out / "report.html").exists()
    blocks = out / "stress" / "point_002" / "blocks"
    assert (blocks / "manifest.json").is_file()
    # a point's lost blocks are drawn again on --resume, the others read back: the same numbers
    for f in sorted(blocks.glob("*.npz"))[:2]:
        f.unlink()
    assert main(["run", "--resume", str(out), "--quiet", "--no-report"]) == 0, capsys.readouterr().err
    pd.testing.assert_frame_equal(pd.read_csv(out / "stress.csv"), first)
    assert not (out / "stress").exists()  # every table written: the points' blocks are removed
    assert main(["run", str(path), "--out", str(tmp_path / "o2"), "--force"]) == 0
    printed = capsys.readouterr().out
    assert "what would change the pick: 'clusters' is picked while icc is below about" in printed
    assert "above it 'srs' is picked, because the two picks' margins cross" in printed
    assert "What would change the pick" in (tmp_path / "o2" / "report.html").read_text()
    assert "**What would change the pick.**" in (tmp_path / "o2" / "brief.md").read_text()
    assert (tmp_path / "o2" / "figures" / "stress_lines.png").is_file()


@pytest.mark.slow
def test_dask_gives_the_local_stress_numbers():
    distributed = pytest.importorskip("distributed")
    sc = scenario_from_dict({**cluster_doc(values=[0.1, 0.6], replicates=300), "block_size": 100})
    local = run(sc)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=":0") as cluster:
        remote = run(sc, backend="dask", scheduler=cluster.scheduler_address)
    for name in ("stress", "stress_verdict", "break_even"):
        pd.testing.assert_frame_equal(getattr(local, name), getattr(remote, name))


def test_progress_counts_assumption_points():
    import io

    from samplewright.simulation.stress import PointProgress, stress_points

    points = stress_points(scenario_from_dict(cluster_doc(values=[0.1, 0.6], replicates=10)))
    stream = io.StringIO()
    bar = PointProgress(points, enabled=True, stream=stream)
    bar.point_done(points[0])
    assert "assumption points 1/2" in stream.getvalue() and "icc = 0.1" in stream.getvalue()
    bar.point_done(points[1])
    bar.close()
    assert stream.getvalue().rstrip().endswith("2 assumption point(s) done in 0s")


def test_a_failure_in_the_stress_tables_keeps_the_run(monkeypatch):
    import samplewright.api as api

    def broken(*args):
        raise RuntimeError("broken on purpose")

    monkeypatch.setattr(api, "break_even_table", broken)
    with pytest.warns(api.SamplewrightWarning, match="the stress tables .* failed"):
        res = run(scenario_from_dict(cluster_doc(values=[0.1, 0.6], replicates=50)))
    assert len(res.summary) == 2 and res.recommendation is not None
    assert [what for what, _ in res.late_failures] == [
        "the stress tables (stress.csv, stress_verdict.csv, break_even.csv)"]


def test_any_numeric_key_and_no_goal():
    from samplewright.report.stress import stress_context

    doc = cluster_doc(values=[0.1], replicates=100)
    del doc["goal"]
    doc["assumption"] = [{"name": "visit", "set": "cost.per_cluster", "values": [0, 100]},
                         {"name": "n", "set": "design.0.n", "values": [40, 80]}]
    res = run(scenario_from_dict(doc))
    s = res.stress.set_index(["point", "design"])
    # the cost model's rate and the design's size are set at their points, the other at the scenario's own value
    assert s.loc[(1, "clusters"), "mean_cost"] == 200 * 10  # 200 units at 10, visits free
    assert s.loc[(2, "clusters"), "mean_cost"] == 20 * 100 + 200 * 10
    assert s.loc[(3, "srs"), "size"] == 40 and s.loc[(4, "srs"), "size"] == 80
    assert s.loc[(3, "clusters"), "mean_cost"] == 20 * 50 + 200 * 10
    assert res.stress_verdict["pick"].isna().all() and len(res.break_even) == 0
    assert "no [goal]" in stress_context(res)["lead"][0]


def test_a_pick_change_no_difference_explains_names_no_criterion():
    # interface check (decision/stress.py module notes): the criterion names the deciding difference d whose sign
    # change moved the pick; here both picks meet the margin at both points and the first stays the cheaper, so
    # no d changes sign (evidence, e.g. coverage, moved the pick) -- the row must not say "the two picks' costs
    # cross", which the report then printed beside "no margin, cost or goal crosses there"
    from samplewright.decision.stress import BRACKET, PointOutcome, break_even_table

    a = {"design": "villages", "size": 40, "estimator": "hajek", "variance": "two_stage"}
    b = {"design": "households", "size": 250, "estimator": "ht", "variance": "psu"}
    errors = {tuple(a.values()): (np.full(50, 9.0), np.full(50, 5040.0)),
              tuple(b.values()): (np.full(50, 4.0), np.full(50, 9069.0))}

    def outcome(i, x, pick):
        rec = {"pick": "cheapest_meeting_moe", "cheapest_meeting_moe": pick, "goal": {"moe": 8.0, "confidence": 0.95}}
        return PointOutcome(index=i, values={"icc": x}, summary=pd.DataFrame(), frontier=None, recommendation=rec,
                            errors=errors)

    table = break_even_table([outcome(1, 0.15, a), outcome(2, 0.2, b)], ["icc"], [("icc", [1, 2])])
    (row,) = table.to_dict("records")
    assert row["method"] == BRACKET and (row["low"], row["high"]) == (0.15, 0.2)
    assert row["criterion"] is None or (isinstance(row["criterion"], float) and math.isnan(row["criterion"]))


def test_the_stress_section_names_picks_plainly_and_rounds_margins_by_their_error():
    # format check: the report uses plain names for estimators and variance formulas (README, report.html) and
    # rounds a margin to the decimal of its MCSE's leading digit (report/verdict.py mc_round); the section
    # printed the tables' codes ("hajek, two_stage") and four significant figures ("6.589" with MCSE 0.119)
    from types import SimpleNamespace

    from samplewright.report.names import estimator_name, variance_name
    from samplewright.report.stress import stress_context

    def pick(point, x, size, moe, mcse):
        return {"point": point, "icc": x, "pick": "cheapest_meeting_moe", "design": "villages", "size": size,
                "estimator": "hajek", "variance": "two_stage", "moe": moe, "moe_mcse": mcse, "mean_cost": 5040.0,
                "evidence_coverage": "met", "evidence_margin": "met", "evidence_cost": None}

    verdict = pd.DataFrame([pick(1, 0.05, 25, 7.4404, 0.0967), pick(2, 0.1, 40, 6.5888, 0.119)])
    change = {"assumption": "icc", "from_value": 0.05, "to_value": 0.1,
              "pick_before": "villages, size 25, hajek, two_stage", "pick_after": "villages, size 40, hajek, two_stage",
              "design_before": "villages", "design_after": "villages", "criterion": math.nan,
              "break_even": math.nan, "break_even_se": math.nan, "low": 0.05, "high": 0.1, "method": "bracketing"}
    info = {"stress": {"mode": "one_at_a_time", "points": 2, "assumptions": [
        {"name": "icc", "set": "frame.synthetic.clusters.icc", "values": [0.05, 0.1], "base": 0.1}]}}
    res = SimpleNamespace(info=info, stress=pd.DataFrame({"point": [1, 2]}), stress_verdict=verdict,
                          break_even=pd.DataFrame([change]))
    ctx = stress_context(res)
    text = " ".join(ctx["lead"] + [r["pick"] for r in ctx["rows"]])
    assert "hajek" not in text and "two_stage" not in text, text
    assert estimator_name("hajek") in text and variance_name("two_stage") in text
    assert [r["moe"] for r in ctx["rows"]] == ["7.44", "6.6"]  # MCSE 0.0967: second decimal; 0.119: first
