"""The verdict's words (report/verdict.py), the scenario's [labels], the compact table, and the verdict card.

Recommendation dicts are built in the tests with the keys of the agreed interface (VERDICT_API: ``pick``,
``pick_stability``, ``published_moe``, ``variance``, ``goals``, ``undecided``, ``units``), so the words are
checked whether or not the decision already writes them; values are invented for exercising code.
"""

from __future__ import annotations

import json
import math
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import samplewright
from samplewright.cli import main as cli
from samplewright.designs.registry import DESIGN_CLASSES
from samplewright.errors import InputError
from samplewright.report import verdict as V
from samplewright.report.table import compact_rows, coverage_cell, format_compact, with_frontier_mcse

LABELS = {"currency": "EUR", "unit": "trees", "cluster": "blocks", "variables": {"apples": "kg"}}


def _pick(**over) -> dict:
    p = {"design": "every k-th tree", "method": "systematic", "size": 400, "estimator": "ht",
         "variable": "apples", "mean_n": 400.0, "mean_cost": 3612.4, "p90_cost": 3700.0, "cost_mcse": 4.1,
         "moe": 5.3177, "moe_mcse": 0.083, "empirical_se": 2.7, "rmse": 2.71, "coverage": 0.9512,
         "coverage_mcse": 0.0048, "replicates": 2000, "variance": "successive_differences",
         "published_moe": 6.1432, "published_moe_mcse": 0.012, "published_moe_p90": 6.52,
         "evidence": {"coverage": "met", "margin": "met", "cost": "met"}}
    p.update(over)
    return p


def _rec(**over) -> dict:
    rec = {"cheapest_meeting_moe": _pick(), "best_within_budget": None, "passed_over": [], "interpolated": [],
           "goal": {"moe": 8.0, "budget": 4500.0, "confidence": 0.95, "variable": "apples"},
           "goals": [{"moe": 8.0, "budget": 4500.0, "confidence": 0.95, "variable": "apples", "domain": None}],
           "pick": "cheapest_meeting_moe", "pick_stability": 0.97, "stability_rounds": 200,
           "runner_up": _pick(design="zones, Neyman", method="stratified"), "runner_up_share": 0.03,
           "undecided": [], "coverage_tolerance": 0.01,
           "units": {"currency": "EUR", "variables": {"apples": "kg"}}}
    rec.update(over)
    return rec


INFO = {"confidence": 0.95, "labels": LABELS, "frame": {"strata": 4}}


# ------------------------------------------------------------------ rounding
@pytest.mark.parametrize("value,mcse,want", [
    (5.31772, 0.083, "5.32"),      # leading digit of 0.083 in the second decimal
    (5.31772, 0.1, "5.3"),         # 0.1: the first decimal
    (5.31772, 0.99, "5.3"),
    (3612.4, 23.0, "3,610"),       # tens: thousands separator, no decimals
    (1234567.0, 4000.0, "1,235,000"),
    (0.000012345, 0.0000021, "0.000012"),  # no scientific notation
    (-0.004, 0.05, "0.00"),        # no "-0"
    (7.25, 0.0, "7.25"),           # no Monte Carlo error (exact run, fixed cost): 4 significant figures
    (float("nan"), 0.1, "n/a"),
])
def test_a_value_is_rounded_to_the_decimal_of_its_mcse_leading_digit(value, mcse, want):
    # the rule of report/verdict.py (common practice: report no more digits than the Monte Carlo error
    # supports; Morris, White and Crowther 2019, sec. 5.2)
    assert V.mc_round(value, mcse) == want


def test_costs_have_thousands_separators_and_the_currency():
    assert V.money(4319.6, LABELS) == "4,320 EUR"
    assert V.money(4319.6, {"currency": "$"}) == "$4,320"
    assert V.money(123456789.0, LABELS, 12.0) == "123,456,790 EUR"
    assert "e+" not in V.num(1.5e12) and V.num(1.5e12) == "1,500,000,000,000"


# ------------------------------------------------------------------ coverage at 100 %
@pytest.mark.parametrize("R", [200, 2000])
def test_full_coverage_shows_its_exact_binomial_interval(R):
    # Clopper-Pearson interval of R successes in R trials, as scipy.stats computes it
    # (beta quantiles from scipy.special here, from scipy.stats' own routine there: equal to 1e-12), and the
    # closed form of R in R, lower bound (alpha / 2) ** (1 / R) (Clopper and Pearson 1934)
    ci = stats.binomtest(R, R).proportion_ci(method="exact")
    assert V.coverage_interval(1.0, R) == pytest.approx((ci.low, ci.high), rel=1e-12)
    assert V.coverage_interval(1.0, R)[0] == pytest.approx(0.025 ** (1 / R), rel=1e-12)
    text = V.coverage_text(1.0, 0.0, R)
    assert f"{100 * ci.low:.2f} to 100 %" in text and "(0.0)" not in text
    cell = coverage_cell(1.0, 0.0, R)
    assert cell.startswith("100 (") and "(0.0)" not in cell and V.num(100 * ci.low) in cell
    # zero coverage likewise: 0 of R
    ci0 = stats.binomtest(0, R).proportion_ci(method="exact")
    # the closed form 1 - (alpha / 2) ** (1 / R) to rounding; binomtest's own root finder is within 1e-9 of it
    assert V.coverage_interval(0.0, R) == pytest.approx((0.0, -math.expm1(math.log(0.025) / R)), rel=1e-12)
    assert V.coverage_interval(0.0, R) == pytest.approx((ci0.low, ci0.high), rel=1e-9)


# ------------------------------------------------------------------ the sentence
def test_the_verdict_sentence_names_design_size_cost_margins_and_stability():
    s = V.verdict_sentence(_rec(), INFO)
    assert s.startswith("Use 'every k-th tree' (systematic sample, Horvitz-Thompson estimator, analysed with "
                        "successive differences): 400 trees")
    assert "expected cost 3,612 EUR of the budget 4,500 EUR" in s  # cost MCSE 4.1: whole units
    assert "published margin ±6.14 kg against the goal ±8 kg" in s  # MCSE 0.012: two decimals
    assert s.endswith("this pick held in 97 % of 200 re-rehearsals.")
    assert ". " not in s  # one sentence


def test_the_sentence_copes_without_the_new_keys():
    old = _rec()
    for k in ("pick", "pick_stability", "stability_rounds", "runner_up", "runner_up_share", "undecided", "goals",
              "coverage_tolerance", "units"):
        old.pop(k)
    for k in ("variance", "published_moe", "published_moe_mcse", "published_moe_p90", "cost_mcse", "evidence"):
        old["cheapest_meeting_moe"].pop(k)
    s = V.verdict_sentence(old, {"confidence": 0.95})
    assert s.startswith("Use 'every k-th tree' (systematic sample, Horvitz-Thompson estimator): 400 units")
    assert "margin ±5.32 against the goal ±8" in s and "re-rehearsals" not in s
    assert V.key_numbers(old, {}) and V.undecided_sentences(old, {}) == []


def test_no_design_meets_the_goal_names_the_closest_and_what_it_misses():
    rec = _rec(pick=None, cheapest_meeting_moe=None, pick_stability=None)
    summary = pd.DataFrame({
        "design": ["a", "b"], "method": ["srs", "cluster"], "size": [100, 10], "estimator": ["ht", "ht"],
        "variable": ["apples", "apples"], "mean_n": [100.0, 400.0], "mean_cost": [4000.0, 4400.0],
        "moe": [9.1, 30.0], "published_moe": [9.4, 31.0], "published_moe_mcse": [0.05, 0.5],
        "coverage": [0.95, 0.90], "coverage_mcse": [0.005, 0.007], "truth": [200.0, 200.0],
    })
    s = V.verdict_sentence(rec, INFO, summary)
    assert s.startswith("No rehearsed design meets the goal (a margin of at most ±8 kg and an expected cost "
                        "of at most 4,500 EUR): the closest is 'a' at 100 trees")
    assert "published margin ±9.40 kg is above the goal ±8 kg" in s and "'b'" not in s


def test_undecided_points_say_what_it_would_take():
    rec = _rec(undecided=[{"design": "zones", "method": "stratified", "size": 400, "estimator": "hajek",
                           "variance": "psu", "variable": "apples", "criterion": "coverage", "value": 0.9391,
                           "mcse": 0.0051, "limit": 0.94, "replicates": 2000, "replicates_needed": 9000}])
    (line,) = V.undecided_sentences(rec, INFO)
    assert line.startswith("Undecided: 'zones' at 400 trees in 4 strata (Hajek, the between-PSU formula "
                           "variance): its coverage 93.9 %")
    assert "about 9,000 replicates would settle it (2,000 were run)." in line


def test_passed_over_reasons_in_plain_words():
    assert V.passed_over_text({"evidence": {"coverage": "not met", "margin": "met", "cost": "undecided"}}) == (
        "its intervals hold the true value too rarely; its expected cost is too close to the budget to call")
    assert V.passed_over_text({"reason": "margin 9 is above the target 8"}) == "Margin 9 is above the target 8"


# ------------------------------------------------------------------ [labels]
def _scenario(**extra) -> dict:
    return {"frame": {"synthetic": {"units": 600, "seed": 2, "target": "apples"}},
            "design": [{"label": "simple", "method": "srs", "n": [30, 60]}], **extra}


@pytest.mark.parametrize("labels,message", [
    ({"currency": 5}, "[labels]: currency must be a non-empty text"),
    ({"currency": "E" * 41}, "a label may have at most 40"),
    ({"units": {"pears": "kg"}}, "[labels.units]: variable 'pears' is not a target of [frame]"),
    ({"unit": "trees\n"}, "contains the control character"),
    ({"currancy": "EUR"}, "[labels]: unknown key 'currancy' (did you mean 'currency'?)"),
    ({"units": "kg"}, "[labels.units] must be a table"),
])
def test_labels_are_checked(labels, message):
    with pytest.raises(InputError) as err:
        samplewright.scenario_from_dict(_scenario(labels=labels))
    assert message in str(err.value)


def test_a_bad_label_is_one_error_line_and_exit_2(tmp_path, capsys):
    sc = tmp_path / "s.toml"
    sc.write_text('[frame.synthetic]\nunits = 300\ntarget = "y"\n[frame]\ntarget = "y"\n'
                  '[[design]]\nlabel = "s"\nmethod = "srs"\nn = 20\n[labels.units]\nz = "kg"\n', encoding="utf-8")
    assert cli.main(["run", str(sc), "--out", str(tmp_path / "o"), "--replicates", "50"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("error: [labels.units]: variable 'z'"), err


# ------------------------------------------------------------------ a run with labels: report, brief, terminal
HOSTILE = "<script>x</script>=cmd("


def _write_toml(doc: dict, path) -> None:
    lines = [f'title = "{doc["title"]}"', "[frame.synthetic]", "units = 600", "seed = 2", 'target = "apples"',
             "[cost]", "fixed = 250000.0", "per_unit = 12500.0", "[goal]", "moe = 40.0", "budget = 2000000.0",
             "[labels]", 'currency = "NOK"', 'unit = "trees"', "[labels.units]", 'apples = "kg"']
    for d in doc["design"]:
        lines += ["[[design]]", f"label = {json.dumps(d['label'])}", f'method = "{d["method"]}"',
                  f"n = {json.dumps(d['n'])}"]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


@pytest.fixture(scope="module")
def labelled_run(tmp_path_factory):
    base = tmp_path_factory.mktemp("labelled")
    doc = _scenario(title="Orchard test")
    doc["design"].append({"label": HOSTILE, "method": "systematic", "n": 60})
    path = base / "s.toml"
    _write_toml(doc, path)
    out = base / "run"
    import contextlib
    import io

    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        code = cli.main(["run", str(path), "--out", str(out), "--replicates", "200", "--seed", "3"])
    assert code == 0
    return out, buf.getvalue()


def test_units_and_currency_reach_the_sentence_tables_and_axes(labelled_run):
    out, stdout = labelled_run
    rec = json.loads((out / "recommendation.json").read_text(encoding="utf-8"))
    assert rec["units"] == {"currency": "NOK", "variables": {"apples": "kg"}}
    assert json.loads((out / "run.json").read_text(encoding="utf-8"))["labels"]["unit"] == "trees"
    assert "NOK" in rec["statement"] and " kg" in rec["statement"]
    html = (out / "report.html").read_text(encoding="utf-8")
    for header in ("Expected cost (NOK)", "Achieved margin (kg)"):
        assert f">{header}</th>" in html, header
    brief = (out / "brief.md").read_text(encoding="utf-8")
    assert "| Expected cost (NOK) |" in brief
    back = samplewright.read_run(out)
    ax = back.figure("verdict").axes[0]
    assert ax.get_xlabel() == "Expected cost of one survey (NOK)" and "(kg)" in ax.get_ylabel()
    ax = back.figure("cost_precision").axes[0]
    assert "(NOK)" in ax.get_xlabel() and "(kg)" in ax.get_ylabel()
    for name in ("bias", "se_check"):
        assert "(apples, kg)" in back.figure(name).axes[0].get_xlabel(), name
    assert "Expected cost (NOK)" in stdout and "Margin (kg)" in stdout


def test_user_text_is_escaped_everywhere_a_person_reads(labelled_run):
    out, _ = labelled_run
    html = (out / "report.html").read_text(encoding="utf-8")
    assert "<script>" not in html and "&lt;script&gt;x&lt;/script&gt;=cmd(" in html
    brief = (out / "brief.md").read_text(encoding="utf-8")
    assert "<script>" not in brief and "&lt;script&gt;x&lt;/script&gt;=cmd(" in brief
    summary = (out / "summary.csv").read_text(encoding="utf-8")
    assert ",<script>" not in summary and ",=cmd(" not in summary  # the formula guard of samplewright.files


def test_terminal_table_has_thousands_separators_and_no_exponent(labelled_run):
    out, stdout = labelled_run
    assert "e+" not in stdout and "e-0" not in stdout
    table = stdout.split("\n\n")[0].splitlines()
    assert table[0].split()[:2] == ["Design", "Size"]
    # srs at n = 30: cost = 250,000 + 30 x 12,500 = 625,000 in every replicate (the linear cost model)
    assert any("625,000" in ln for ln in table), table
    summary = pd.read_csv(out / "summary.csv")
    assert len([ln for ln in table[1:] if not ln.startswith("(")]) == len(summary[["design", "size"]]
                                                                          .drop_duplicates())
    assert "recommendation: " in stdout


def test_compact_rows_take_each_designs_first_estimator():
    summary = pd.DataFrame({
        "design": ["a", "a", "a", "a"], "method": ["srs"] * 4, "size": [10, 10, 20, 20],
        "estimator": ["hajek", "ht", "hajek", "ht"], "variable": ["y"] * 4, "mean_n": [10.0, 10, 20, 20],
        "mean_cost": [0.0] * 4, "moe": [1.0, 2.0, 0.5, 0.6], "bias": [0.0] * 4, "bias_mcse": [0.1] * 4,
        "coverage": [0.95] * 4, "coverage_mcse": [0.01] * 4, "replicates": [100] * 4,
    })
    rows = compact_rows(summary)
    assert [(r["size"], r["estimator"]) for r in rows] == [("10", "hajek"), ("20", "hajek")]
    assert "Expected cost" not in format_compact(summary, V.labels_of(None))  # no cost model: no column


# ------------------------------------------------------------------ the demo
class _Tags(HTMLParser):
    def __init__(self):
        super().__init__()
        self.order = []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if tag == "table" or a.get("id") == "verdict":
            self.order.append(a.get("id") or tag)


@pytest.mark.slow
def test_the_demo_report_reads_without_python_reprs(demo_run):
    assert demo_run.returncode == 0, demo_run.stderr
    html = (demo_run.out / "report.html").read_text(encoding="utf-8")
    brief = (demo_run.out / "brief.md").read_text(encoding="utf-8")
    for text in (html, brief):
        for bad in ("<samplewright.", "object at 0x", "Design(", *(f"{c.__name__}(" for c in DESIGN_CLASSES.values())):
            assert bad not in text, bad
    tags = _Tags()
    tags.feed(html)
    assert tags.order[0] == "verdict" and tags.order.count("table") >= 3  # the card before every table
    rec = json.loads((demo_run.out / "recommendation.json").read_text(encoding="utf-8"))
    assert rec["statement"] in demo_run.stdout and "e+" not in demo_run.stdout
    assert sum(1 for ln in brief.splitlines() if ln.startswith("**Verdict.**")) == 1
    assert all(w in rec["statement"] for w in ("EUR", "apples", "trees"))


def test_the_report_shows_the_new_recommendation_keys_when_the_decision_writes_them(labelled_run, tmp_path):
    # the keys of VERDICT_API added by hand to a finished run: published margins and a variance column in the
    # summary, the pick's stability, runner-up and an undecided point in the recommendation
    out, _ = labelled_run
    res = samplewright.read_run(out)
    s = res.summary
    res.summary = s.assign(published_moe=s["moe"] * 1.1, published_moe_mcse=0.01, published_moe_p90=s["moe"] * 1.3,
                           variance=["srs" if m == "srs" else "successive_differences" for m in s["method"]])
    key = next(k for k in ("cheapest_meeting_moe", "best_within_budget") if res.recommendation.get(k))
    p = res.recommendation[key]
    row = res.summary[(res.summary["design"] == p["design"]) & (res.summary["size"] == p["size"])
                      & (res.summary["estimator"] == p["estimator"])].iloc[0]
    p.update(variance=row["variance"], published_moe=float(row["published_moe"]), published_moe_mcse=0.01,
             published_moe_p90=float(row["published_moe_p90"]))
    res.recommendation.update(pick=key, pick_stability=0.915, stability_rounds=200, runner_up=None,
                              runner_up_share=0.0, undecided=[{**{k: p[k] for k in ("design", "size", "estimator",
                                                                                     "variable", "method")},
                                                               "variance": p["variance"], "criterion": "margin",
                                                               "value": 39.9, "mcse": 0.4, "limit": 40.0,
                                                               "replicates": 200, "replicates_needed": 1800}])
    d = res.write(tmp_path / "again")
    html = samplewright.write_report(res, d).read_text(encoding="utf-8")
    assert ">Published margin (kg)</th>" in html and ">Variance</th>" in html
    assert "this pick held in 92 % of 200 re-rehearsals" in html  # 0.915 shown to whole per cent
    assert "about 1,800 replicates would settle it (200 were run)" in html
    brief = (d / "brief.md").read_text(encoding="utf-8")
    assert "Published margin (kg)" in brief and "Stability: 92 % of 200 re-rehearsals" in brief


def test_several_goals_and_a_relative_margin_each_get_their_clause():
    goals = [{"relative_moe": 0.05, "budget": 4500.0, "variable": "apples", "domain": None},
             {"moe": 3.0, "variable": "pears", "domain": "north"}]
    pick = _pick(goals=[
        {"variable": "apples", "domain": None, "moe_goal": 9.1, "moe": 5.3, "published_moe": 6.14,
         "published_moe_p90": 6.5, "coverage": 0.95, "coverage_mcse": 0.005},
        {"variable": "pears", "domain": "north", "moe_goal": 3.0, "moe": 2.2, "published_moe": 2.46,
         "published_moe_p90": 2.7, "coverage": 0.94, "coverage_mcse": 0.005}])
    labels = {**LABELS, "variables": {"apples": "kg", "pears": "kg"}}
    rec = _rec(cheapest_meeting_moe=pick, goals=goals, units={"currency": "EUR", "variables": labels["variables"]})
    s = V.verdict_sentence(rec, {**INFO, "labels": labels})
    # relative goal: the fraction of the true mean and the margin it means (the pick's moe_goal)
    assert "published margin ±6.14 kg against the goal ±5 % of the mean (±9.1 kg) for 'apples'" in s
    assert "published margin ±2.46 kg against the goal ±3 kg for 'pears' in 'north'" in s
    names = [k for k, _ in V.key_numbers(rec, {**INFO, "labels": labels})]
    assert "Published margin for 'pears' in 'north'" in names


def test_the_verdict_chart_shades_the_goal_rings_the_pick_and_its_labels_do_not_overlap(labelled_run):
    from matplotlib.patches import Rectangle
    from matplotlib.text import Annotation, Text

    out, _ = labelled_run
    back = samplewright.read_run(out)
    fig = back.figure("verdict")
    ax = fig.axes[0]
    shade = [p for p in ax.patches if isinstance(p, Rectangle)]
    assert len(shade) == 1
    x0, y0 = shade[0].get_xy()
    # the region meeting the goal: up to the budget (2,000,000) and down from the margin goal (40)
    assert y0 == 0 and x0 + shade[0].get_width() == pytest.approx(2_000_000.0)
    assert shade[0].get_height() == pytest.approx(40.0)
    texts = [t for t in ax.texts if isinstance(t, Annotation)]
    key = next(k for k in ("cheapest_meeting_moe", "best_within_budget") if back.recommendation.get(k))
    assert any(t.get_text().startswith(f"pick: {back.recommendation[key]['design']}") for t in texts)
    renderer = fig.canvas.get_renderer()
    boxes = [Text.get_window_extent(t, renderer) for t in texts]  # the text alone, without its leader
    for i, a in enumerate(boxes):
        for b in boxes[i + 1:]:
            assert not a.overlaps(b), (a, b)


def test_design_settings_name_every_listed_variance_formula():
    # a design scored under two formulas (run.json keeps the list) reads as both plain names
    from samplewright.report.names import parameter_text, variance_name

    text = parameter_text({"n": 400, "variance": ["srs", "successive_differences"]})
    assert text == f"n = 400; variance = {variance_name('srs')}, {variance_name('successive_differences')}"


def test_terminal_table_shows_each_listed_formula_of_a_design():
    # a systematic design scored under two formulas: one row each, named, with each formula's own published
    # margin (the mean half-width of its intervals, recomputed here from the replicate table)
    from samplewright import run, scenario_from_dict
    from samplewright.report.names import variance_name

    res = run(scenario_from_dict({
        "frame": {"synthetic": {"units": 600, "seed": 5}},
        "design": [{"label": "every k-th", "method": "systematic", "n": 60,
                    "variance": ["srs", "successive_differences"]}]}), replicates=300, seed=3)
    rows = compact_rows(res.summary)
    assert [r["design"] for r in rows] == [f"every k-th ({variance_name(v).removeprefix('the ')})"
                                           for v in ("srs", "successive_differences")]
    reps = res.replicates[res.replicates["estimator"] == res.summary["estimator"].iloc[0]]
    half = ((reps["upper"] - reps["lower"]) / 2).groupby(reps["variance"]).mean()
    got = res.summary.set_index("variance").loc[["srs", "successive_differences"]]
    got = got[got["estimator"] == res.summary["estimator"].iloc[0]]["published_moe"]
    assert np.allclose(got.to_numpy(), half.loc[["srs", "successive_differences"]].to_numpy(), rtol=1e-12)


def test_the_comparison_table_judges_points_by_the_decision_evidence_rule():
    # 50 of 50 intervals held the truth: the coverage MCSE formula gives 0, but the exact (Clopper-Pearson)
    # lower bound at the rule's z = 2, 0.02275 ** (1 / 50) = 0.927, is below 0.95 - 0.01: undecided, not met
    from scipy import stats as st

    from samplewright.decision.evidence import NOT_MET

    row = {"variable": "y", "replicates": 50, "coverage": 1.0, "coverage_mcse": 0.0, "mean_cost": 10.0,
           "moe": 1.0, "moe_mcse": 0.01, "published_moe": 1.0, "published_moe_mcse": 0.01, "truth": 5.0}
    goals = [{"variable": "y", "moe": 2.0}]
    low = st.beta.ppf(st.norm.sf(2.0), 50, 1)  # Clopper-Pearson lower bound with 50 of 50 (scipy.stats)
    assert low == pytest.approx(st.norm.sf(2.0) ** (1 / 50)) and low < 0.94
    close = V.shortfalls(row, goals, 0.95, 0.01, V.labels_of(None))
    assert [w for _, w in close] and "intervals held" in close[0][1]
    assert V.shortfalls(row, goals, 0.95, 0.01, V.labels_of(None), (NOT_MET,)) == []
    row.update(replicates=5000)  # 5,000 of 5,000: the exact bound is 0.9991, so coverage is met
    assert V.shortfalls(row, goals, 0.95, 0.01, V.labels_of(None)) == []


def test_between_sizes_sentences_say_they_are_interpolated():
    # the fitted MSE = a/n + b (decision/frontier.py) puts the margin goal at n = 314.2: a size below the pick's
    # 400 that would meet it, rounded up; a curve of another estimator says nothing about this pick
    pick = {"design": "srs", "estimator": "ht", "variance": "psu", "size": 400, "variable": "y"}
    row = {"design": "srs", "estimator": "ht", "variance": "psu", "coverage_acceptable_at_every_size": True,
           "size_for_moe": 314.2, "cost_for_moe": 3142.0, "moe_basis": "interpolated"}
    rec = {"cheapest_meeting_moe": pick, "best_within_budget": None, "interpolated": [row]}
    (text,) = V.between_sizes_sentences(rec, V.labels_of(None))
    assert "about 315" in text and "3,142" in text and "not rehearsed" in text
    rec["interpolated"] = [{**row, "estimator": "hajek"}]
    assert V.between_sizes_sentences(rec, V.labels_of(None)) == []


def test_the_evidence_row_names_only_the_criteria_the_goal_judges():
    # interface/format check: a budget-only goal judges no margin (the decision writes margin: null) and a
    # margin-only goal no cost; the card must not show the reader the word "None" for them
    budget_only = _rec(cheapest_meeting_moe=_pick(evidence={"coverage": "met", "margin": None, "cost": "met"}))
    rows = dict(V.key_numbers(budget_only, INFO))
    assert rows["Evidence"] == "coverage met, expected cost met"
    margin_only = _rec(cheapest_meeting_moe=_pick(evidence={"coverage": "met", "margin": "met", "cost": None}))
    assert dict(V.key_numbers(margin_only, INFO))["Evidence"] == "coverage met, margin met"


def test_an_undecided_coverage_above_the_promise_reads_too_close_to_call():
    # evidence rule (README, decision/evidence.py): coverage c with MCSE s is met when c - 2 s >= q - t; here
    # 0.96 - 2 x 0.0139 = 0.932 < 0.94 <= 0.96 + 2 x 0.0139: undecided, not a miss -- the words must not read
    # "held 96 % against the promised 95 %" as if that were a shortfall
    row = {"variable": "apples", "coverage": 0.96, "coverage_mcse": 0.0139, "replicates": 200}
    ((_, words),) = V.shortfalls(row, [{"variable": "apples"}], 0.95, 0.01, LABELS)
    assert words == ("its intervals held the true value in 96 % of samples, too close to call against the "
                     "promised 95 % (less the tolerance 1 %)")
    below = {**row, "coverage": 0.90, "coverage_mcse": 0.0212}  # 0.90 + 2 x 0.0212 < 0.94: not met
    ((_, words),) = V.shortfalls(below, [{"variable": "apples"}], 0.95, 0.01, LABELS)
    assert words == ("its intervals held the true value in 90 % of samples against the promised 95 % "
                     "(less the tolerance 1 %)")


def test_an_undecided_points_monte_carlo_error_has_two_significant_figures():
    # format check: an MCSE is shown to two significant figures, as the tables show it (report/table.py,
    # with_mcse); four ("0.4221 %", "0.03987") claimed a precision the error of an error does not have
    base = {"design": "zones", "method": "stratified", "size": 400, "estimator": "ht", "variance": "psu",
            "variable": "apples", "replicates": 300, "replicates_needed": 19000}
    rec = _rec(undecided=[{**base, "criterion": "coverage", "value": 0.9433, "mcse": 0.004221, "limit": 0.94},
                          {**base, "criterion": "margin", "value": 3.13, "mcse": 0.03987, "limit": 3.1},
                          {**base, "criterion": "cost", "value": 4490.0, "mcse": 11.56, "limit": 4500.0}])
    cov, margin, cost = V.undecided_sentences(rec, INFO)
    assert "(Monte Carlo error 0.42 %)" in cov
    assert "(Monte Carlo error 0.040 kg)" in margin
    assert "(Monte Carlo error 12 EUR)" in cost


def test_a_cost_with_a_monte_carlo_error_is_rounded_by_it_in_every_table_and_sentence():
    # the rounding rule (report/verdict.py mc_round: to the decimal of the MCSE's leading digit; Morris, White
    # and Crowther 2019, sec. 5.2): a mean cost 30,833.35 with MCSE 11.6 (sampled clusters vary the cost) reads
    # 30,830 everywhere, as the verdict card already wrote it -- the compact table and the closest-design
    # sentence printed all five digits
    summary = pd.DataFrame({
        "design": ["strata"], "method": ["stratified"], "size": [500], "estimator": ["ht"], "variable": ["apples"],
        "mean_n": [500.0], "mean_cost": [30833.35], "moe": [124.7], "bias": [3.4], "bias_mcse": [3.7],
        "coverage": [0.957], "coverage_mcse": [0.012], "replicates": [300], "truth": [4000.0],
        "published_moe": [123.9], "published_moe_mcse": [0.33]})
    frontier = summary[["design", "size", "estimator", "variable"]].assign(moe_mcse=5.3, cost_mcse=11.6)
    (row,) = compact_rows(summary, frontier)
    assert row["mean_cost"] == "30,830"
    rec = _rec(cheapest_meeting_moe=None, pick=None, pick_stability=None,
               goals=[{"moe": 120.0, "budget": 30000.0, "confidence": 0.95, "variable": "apples"}])
    s = V.verdict_sentence(rec, INFO, with_frontier_mcse(summary, frontier))
    assert "expected cost 30,830 EUR is above the budget 30,000 EUR" in s, s


def test_an_undecided_cluster_point_counts_clusters_not_units():
    # interface check: recommendation.json undecided entries carry no method, so the sentence takes it from
    # run.json designs; it said "'villages' at 30 trees" for 30 clusters of a cluster design
    rec = _rec(undecided=[{"design": "villages", "size": 30, "estimator": "hajek", "variance": "two_stage",
                           "variable": "apples", "criterion": "coverage", "value": 0.944, "mcse": 0.0042,
                           "limit": 0.94, "replicates": 3000, "replicates_needed": 15817}])
    info = {**INFO, "designs": [{"label": "villages", "method": "cluster", "variance": "two_stage"}]}
    (line,) = V.undecided_sentences(rec, info)
    assert line.startswith("Undecided: 'villages' at 30 blocks ("), line


def test_replicates_that_would_settle_a_point_are_said_to_two_figures():
    # the count is an estimate from the current MCSE (it assumes the estimate stays put): rounded up
    assert [V._two_figures(n) for n in (7, 99, 241_649, 15_817, 7_268, 3_000)] == [7, 99, 250_000, 16_000, 7_300,
                                                                                   3_000]
