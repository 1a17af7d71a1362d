"""samplewright propose: the screen is honest (anticipated against rehearsed variance), the proposal beats the
designs a user lists by hand, and proposal.toml runs and draws."""

from __future__ import annotations

import tomllib

import numpy as np
import pandas as pd
import pytest

from samplewright import propose, run, scenario_from_dict
from samplewright.cli.main import main
from samplewright.errors import InputError

#: an invented business register: a skewed turnover y and a heavy-tailed employee count (the size column)
REGISTER = {"units": 3000, "seed": 4, "mean": 200.0, "sd": 150.0, "skew": "lognormal", "skewness": 4.0,
            "size_correlation": 0.9, "size_cv": 0.5, "size_mean": 40.0}
BUDGET = 4500.0  # fixed 500 + 20 per unit: 200 units


def register(**extra) -> dict:
    return {"title": "register", "seed": 5, "frame": {"synthetic": dict(REGISTER)},
            "cost": {"fixed": 500.0, "per_unit": 20.0},
            "design": [{"label": "listed", "method": "srs", "n": 50}], **extra}


@pytest.fixture(scope="module")
def proposed():
    return propose(scenario_from_dict(register()), budget=BUDGET, replicates=1500, seed=3)


def test_screen_covers_the_families_and_shortlists_six(proposed):
    cand = proposed.candidates
    assert {"srs", "bands on size", "pps"} <= set(cand["family"])
    assert set(cand.loc[cand["family"] == "bands on size", "boundary_rule"]) >= {"cum_sqrt_f", "geometric",
                                                                               "take_all"}
    assert int(cand["shortlisted"].sum()) == 6
    short = cand[cand["shortlisted"]]
    assert short["rank"].tolist() == [1, 2, 3, 4, 5, 6]
    assert (short["expected_cost"] <= BUDGET).all()  # the budget is a mean cost; these designs' cost is fixed
    assert proposed.info["proposal"]["candidates"] == len(cand)
    assert sorted(proposed.summary["design"].unique()) == sorted(short["design"])


def test_anticipated_variance_within_monte_carlo_error_of_rehearsed(proposed):
    # The closed forms (proposal/anticipate.py; Cochran 1977 eq. 5.6, 2.8, 9A.5) are the design variances;
    # the rehearsed empirical variance estimates them with MCSE 2 empSE MCSE(empSE) (Morris, White and
    # Crowther 2019, table 6, by the delta method).  z-bound of 4 MCSE per design.
    short = proposed.candidates[proposed.candidates["shortlisted"]]
    z = (short["rehearsed_variance"] - short["anticipated_variance"]).abs() / short["rehearsed_variance_mcse"]
    assert (z < 4).all(), short[["design", "anticipated_variance", "rehearsed_variance"]]


def rmse_and_mcse(reps: pd.DataFrame, design: str, truth: float):
    """RMSE of the HT estimates and its MCSE, sd((x - truth)^2) / (2 RMSE sqrt(R)) (Morris, White and
    Crowther 2019, table 6, MSE's MCSE by the delta method)."""
    x = reps.loc[(reps["design"] == design) & (reps["estimator"] == "ht"), "estimate"].to_numpy()
    sq = (x - truth) ** 2
    rmse = float(np.sqrt(sq.mean()))
    return rmse, float(sq.std(ddof=1) / np.sqrt(sq.size) / (2 * rmse))


def test_proposal_no_worse_than_srs_and_proportional_equal_width_strata(proposed):
    # The hand-listed rivals at the same budget (200 units): SRS, and proportional allocation over
    # equal-width bands of the size column (as many of 2..5 bands as leave 2 units in each).
    sc = scenario_from_dict(register())
    frame = sc.load_frame()
    x = frame.size
    listed = [{"label": "srs", "method": "srs", "n": 200}]
    for H in (5, 4, 3, 2):
        b = np.linspace(x.min(), x.max(), H + 1)[1:-1]
        if np.bincount(np.searchsorted(b, x), minlength=H).min() >= 2:
            listed.append({"label": f"equal-width-{H}", "method": "stratified", "n": 200,
                           "allocation": "proportional", "boundaries": [float(v) for v in b]})
            break
    assert len(listed) == 2
    base = run(scenario_from_dict(register(design=listed) | {"design": listed}), replicates=1500, seed=3)
    truth = float(frame.mean[0])
    best = proposed.candidates.loc[proposed.candidates["rank"] == 1, "design"].item()
    r_prop, m_prop = rmse_and_mcse(proposed.replicates, best, truth)
    rivals = [rmse_and_mcse(base.replicates, d["label"], truth) for d in listed]
    r_base, m_base = min(rivals)
    mcse_diff = float(np.hypot(m_prop, m_base))  # independent streams (each design's own seed key)
    print(f"proposal {best}: RMSE {r_prop:.4g} (MCSE {m_prop:.2g}); best listed {r_base:.4g} (MCSE {m_base:.2g}); "
          f"difference MCSE {mcse_diff:.2g}")
    assert r_prop <= r_base + 2 * mcse_diff


def test_proposal_toml_runs_and_draws(proposed, tmp_path, capsys):
    out = proposed.write(tmp_path / "p")
    doc = tomllib.loads((out / "proposal.toml").read_text())
    assert [d["label"] for d in doc["design"]] == proposed.info["proposal"]["shortlist"]
    assert doc["goal"]["budget"] == BUDGET
    assert pd.read_csv(out / "candidates.csv")["design"].tolist() == proposed.candidates["design"].tolist()
    strata = pd.read_csv(out / "candidates.csv", dtype=str)["strata"].dropna()
    assert len(strata) and strata.str.fullmatch(r"\d+").all()  # counts read as counts, not "8.0"
    assert main(["run", str(out / "proposal.toml"), "--out", str(tmp_path / "again"), "--replicates", "30",
                 "--quiet", "--no-report"]) == 0
    label = doc["design"][0]["label"]
    assert main(["draw", str(out / "proposal.toml"), "--design", label, "--seed", "1",
                 "--out", str(tmp_path / "s.csv")]) == 0
    capsys.readouterr()
    assert len(pd.read_csv(tmp_path / "s.csv")) == doc["design"][0]["n"]


def test_proposal_toml_with_a_frame_file_runs_from_its_folder(tmp_path, capsys):
    frame = scenario_from_dict(register()).frame.dataframe()
    (tmp_path / "data").mkdir()
    frame.to_csv(tmp_path / "data" / "reg.csv", index=False)
    (tmp_path / "s.toml").write_text('seed = 2\n[frame]\npath = "data/reg.csv"\ntarget = "y"\nsize = "size"\n'
                                     '[cost]\nfixed = 500.0\nper_unit = 20.0\n[goal]\nbudget = 4500.0\n'
                                     '[[design]]\nlabel = "a"\nmethod = "srs"\nn = 10\n')
    assert main(["propose", str(tmp_path / "s.toml"), "--out", str(tmp_path / "o"), "--replicates", "40",
                 "--max-candidates", "2", "--quiet", "--no-report"]) == 0
    text = (tmp_path / "o" / "proposal.toml").read_text()
    assert 'path = "../data/reg.csv"' in text
    assert main(["run", str(tmp_path / "o" / "proposal.toml"), "--out", str(tmp_path / "r"), "--replicates", "20",
                 "--quiet", "--no-report"]) == 0
    capsys.readouterr()


def test_margin_goal_proposes_the_cheapest_designs():
    res = propose(scenario_from_dict(register()), relative_moe=0.05, max_candidates=3, replicates=200, seed=1)
    cand = res.candidates
    target = 0.05 * abs(float(scenario_from_dict(register()).load_frame().mean[0]))
    ok = cand["size"].notna()
    assert (cand.loc[ok, "anticipated_moe"] <= target * (1 + 1e-12)).all()
    short = cand[cand["shortlisted"]].sort_values("rank")
    assert short["expected_cost"].is_monotonic_increasing
    assert short["expected_cost"].iloc[0] == cand.loc[ok, "expected_cost"].min()
    # the shortlist's scenario keeps the goal as it was given: relative to the mean, judged by the verdict
    assert res.proposal["goal"]["relative_moe"] == 0.05 and "moe" not in res.proposal["goal"]
    assert res.recommendation["goals"][0]["moe_goal"] == pytest.approx(target, rel=1e-12)


def test_screening_on_an_auxiliary_only(capsys):
    sc = scenario_from_dict(register())
    res = propose(sc, budget=BUDGET, screen_on="size", max_candidates=2, replicates=100, seed=1)
    assert res.info["proposal"]["auxiliary_only"] is True
    assert set(res.candidates["screened_on"]) == {"size (auxiliary only)"}
    with pytest.raises(InputError, match="needs --budget or --relative-moe"):
        propose(sc, moe=5.0, screen_on="size", replicates=10)
    with pytest.raises(InputError, match="--screen-on 'nope'"):
        propose(sc, budget=BUDGET, screen_on="nope", replicates=10)


@pytest.mark.parametrize("doc, kwargs, match", [
    (register(), {}, "propose needs a goal"),
    (register(), {"budget": 1.0, "moe": 2.0}, "not budget and moe"),
    ({**register(), "cost": {}}, {"budget": 100.0}, "needs costs"),
    (register(), {"budget": 100.0}, "none of the"),
    (register(), {"budget": -3.0}, "must be a number above 0"),
])
def test_refusals(doc, kwargs, match):
    with pytest.raises(InputError, match=match):
        propose(scenario_from_dict(doc), replicates=10, **kwargs)


def test_cli_refusal_is_one_error_line(tmp_path, capsys):
    (tmp_path / "s.toml").write_text('[frame.synthetic]\nunits = 200\n[[design]]\nlabel = "a"\nmethod = "srs"\n'
                                     'n = 10\n')
    assert main(["propose", str(tmp_path / "s.toml"), "--out", str(tmp_path / "o"), "--budget", "100"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("error:") and "needs costs" in err[0]
    assert not (tmp_path / "o").exists()


def test_report_explains_how_the_proposal_was_found(proposed, tmp_path, capsys):
    out = proposed.write(tmp_path / "r", report=True)
    page = (out / "report.html").read_text()
    assert "How the proposal was found" in page
    assert f"{len(proposed.candidates)} candidate designs were screened" in page
    assert page.count('id="fig-proposal_check"') == 1 and page.count('id="fig-proposal_boundaries"') == 1
    assert (out / "figures" / "proposal_boundaries.png").exists()
    brief = (out / "brief.md").read_text()
    assert f"**How the proposal was found.** {len(proposed.candidates)} candidate designs were screened" in brief
    # rebuilt from the folder alone (samplewright report DIR): the same section
    (out / "report.html").unlink()
    assert main(["report", str(out)]) == 0
    capsys.readouterr()
    assert "How the proposal was found" in (out / "report.html").read_text()


def test_a_plain_run_has_no_proposal_section(tmp_path):
    res = run(scenario_from_dict(register()), replicates=50, seed=1)
    page = (res.write(tmp_path / "plain", report=True) / "report.html").read_text()
    assert "How the proposal was found" not in page and "proposal_check" not in page


def test_bundled_register_scenario_propose_beats_the_designs_listed_by_hand():
    # scenarios/business_register.toml lists SRS and the usual employee size classes (proportional,
    # Neyman); at the same budget the proposal's best design has a smaller RMSE by more than 2 MCSE of
    # the difference (RMSE MCSE: Morris, White and Crowther 2019, table 6).
    from pathlib import Path

    from samplewright import load_scenario

    sc = load_scenario(Path(__file__).resolve().parents[1] / "scenarios" / "business_register.toml")
    listed = run(sc, replicates=1000, seed=9)
    found = propose(sc, max_candidates=2, replicates=1000, seed=9)
    truth = float(listed.summary["truth"].iloc[0])
    r_list, m_list = min(rmse_and_mcse(listed.replicates, d.label, truth) for d in sc.designs)
    best = found.candidates.loc[found.candidates["rank"] == 1, "design"].item()
    r_prop, m_prop = rmse_and_mcse(found.replicates, best, truth)
    assert found.summary["mean_cost"].max() <= sc.goal.budget
    assert r_prop + 2 * float(np.hypot(m_prop, m_list)) < r_list


def test_clustered_stratified_frame_screens_frame_strata_and_kish_takes():
    doc = {"seed": 3, "frame": {"synthetic": {
        "units": 4000, "seed": 8, "clusters": {"mean_size": 20, "icc": 0.1},
        "strata": [{"name": "a", "share": 0.5, "mean": 50, "sd": 10},
                   {"name": "b", "share": 0.5, "mean": 80, "sd": 30}]}},
        "cost": {"per_cluster": 200.0, "per_unit": 10.0, "per_unit_by_stratum": {"b": 25.0}},
        "design": [{"label": "x", "method": "srs", "n": 10}]}
    sc = scenario_from_dict(doc)
    res = propose(sc, moe=3.0, replicates=1000, seed=2)
    cand = res.candidates
    assert set(cand["family"]) == {"srs", "frame strata", "cluster"}
    assert "strata-optimal" in set(cand["design"])  # the strata's unit costs differ (10 and 25)
    assert any("no banded stratification" in n for n in res.info["proposal"]["notes"])
    # Kish (1965, sec. 8.3): m_opt = sqrt((c1 / c2) (1 - rho) / rho) with the frame's own ANOVA rho (Donner 1986),
    # c1 = 200 per cluster, c2 = the mean cost of a unit (10, or 25 in stratum b); takes near it: m/1.5, m, 1.5 m
    from samplewright.diagnostics.inspection import anova_icc

    frame = sc.load_frame()
    rho = anova_icc(frame.y[:, 0], frame.cluster)
    c2 = 10.0 + 15.0 * float(np.mean(frame.stratum == frame.stratum_labels.index("b")))
    m = np.sqrt(200.0 / c2 * (1 - rho) / rho)
    takes = {int(round(v)) for v in (m / 1.5, m, m * 1.5)} - {0, 1}
    assert {f"clusters-take{k}" for k in takes} <= set(cand["design"])
    ok = cand["size"].notna()
    assert (cand.loc[ok, "anticipated_moe"] <= 3.0).all()
    short = cand[cand["shortlisted"]]
    assert "cluster" in set(short["family"])
    # anticipated vs rehearsed variance, the cluster closed forms included (z-bound of 4 MCSE, as above)
    z = (short["rehearsed_variance"] - short["anticipated_variance"]).abs() / short["rehearsed_variance_mcse"]
    assert (z < 4).all(), short[["design", "anticipated_variance", "rehearsed_variance"]]


@pytest.mark.parametrize("slope, fixed, budget", [(20.0, 500.0, 4500.0), (3.0, 0.0, 1000.0), (7.5, 2.0, 7.0)])
def test_largest_size_within_the_budget_is_exact_for_linear_costs(slope, fixed, budget):
    from samplewright.proposal.search import _largest_within

    asked = []

    def price(s):
        asked.append(s)
        return fixed + slope * s

    got = _largest_within(price, 2, 100_000, budget)
    want = int((budget - fixed) // slope)  # the largest s with fixed + slope s <= budget
    assert got == (want if want >= 2 else None)
    assert max(asked) <= max(4 * want, 2)  # the pilot sizes stay near the answer


def test_screen_does_not_depend_on_replicates_or_jobs():
    # the screen is closed forms and fixed-size pilot draws keyed by the seed and the candidate's label:
    # the same candidates and shortlist at 60 and 200 replicates; the rehearsal the same with 1 or 2 jobs
    sc = scenario_from_dict(register())
    a = propose(sc, budget=BUDGET, max_candidates=2, replicates=60, seed=4)
    b = propose(sc, budget=BUDGET, max_candidates=2, replicates=200, seed=4, jobs=2)
    screened = [c for c in a.candidates.columns if not c.startswith("rehearsed")]
    pd.testing.assert_frame_equal(a.candidates[screened], b.candidates[screened])
    c = propose(sc, budget=BUDGET, max_candidates=2, replicates=200, seed=4)
    pd.testing.assert_frame_equal(b.summary, c.summary)


def test_bands_on_an_auxiliary_column_when_the_frame_has_no_size(tmp_path, capsys):
    frame = scenario_from_dict(register()).frame.dataframe().rename(columns={"size": "vat"})
    frame.to_csv(tmp_path / "reg.csv", index=False)
    (tmp_path / "s.toml").write_text('seed = 2\n[frame]\npath = "reg.csv"\ntarget = "y"\nauxiliary = "vat"\n'
                                     '[cost]\nfixed = 500.0\nper_unit = 20.0\n'
                                     '[[design]]\nlabel = "a"\nmethod = "srs"\nn = 10\n')
    assert main(["propose", str(tmp_path / "s.toml"), "--out", str(tmp_path / "o"), "--budget", "4500",
                 "--replicates", "40", "--max-candidates", "3", "--quiet", "--no-report"]) == 0
    capsys.readouterr()
    cand = pd.read_csv(tmp_path / "o" / "candidates.csv")
    assert "bands on vat" in set(cand["family"]) and "pps" not in set(cand["family"])
    doc = tomllib.loads((tmp_path / "o" / "proposal.toml").read_text())
    assert {d.get("stratify_by") for d in doc["design"] if d["method"] == "stratified"} == {"vat"}


def test_nothing_meets_the_goal_says_why_without_pointing_at_an_unwritten_file(tmp_path, capsys):
    # interface check: the refusal comes before anything is written, so it cannot send the reader to
    # candidates.csv; it gives the reference design's (SRS) own reason instead
    (tmp_path / "s.toml").write_text('[frame.synthetic]\nunits = 200\n[cost]\nfixed = 500.0\nper_unit = 20.0\n'
                                     '[[design]]\nlabel = "a"\nmethod = "srs"\nn = 10\n')
    assert main(["propose", str(tmp_path / "s.toml"), "--out", str(tmp_path / "o"), "--budget", "100"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("error:") and "none of the" in err[0], err
    assert "candidates.csv" not in err[0] and "srs: the budget does not pay" in err[0]
    assert not (tmp_path / "o").exists()
