"""Goals and the recommendation: the cheapest design meeting a margin, the best within a budget.

Only designs whose intervals can be trusted are recommended.  A point's coverage is
acceptable when it is not below the nominal level by more than ``COVERAGE_Z`` Monte Carlo
standard errors (coverage MCSE = sqrt(c (1 - c) / R); Morris, White & Crowther 2019, Table 6):

    coverage >= nominal - COVERAGE_Z x coverage_mcse

With z = 3 a design whose intervals really hold at the nominal rate is passed over by chance
about once in 740 comparisons (one-sided normal tail), while a real shortfall of a few points
is caught at the replicate counts of a typical run.  Every point not picked is listed in
``passed_over`` with the reason.
"""

from __future__ import annotations

import math
from dataclasses import asdict

import pandas as pd

from samplewright.config.goal import Goal
from samplewright.decision.frontier import interpolate_goal
from samplewright.designs import size_words
from samplewright.evaluation.normal import normal_quantile
from samplewright.evaluation.stopping import replicate_counts

#: how many Monte Carlo SEs of coverage below nominal are tolerated (see module notes)
COVERAGE_Z = 3.0

PICK_KEYS = ("design", "method", "size", "estimator", "variable", "mean_n", "mean_cost", "p90_cost", "moe",
             "moe_mcse", "empirical_se", "rmse", "coverage", "coverage_mcse", "replicates")


def coverage_acceptable(coverage: float, coverage_mcse: float, nominal: float, z: float = COVERAGE_Z) -> bool:
    """Coverage not below ``nominal`` by more than z Monte Carlo SEs (see module notes)."""
    if math.isnan(coverage):  # no intervals to judge
        return False
    return bool(coverage >= nominal - z * coverage_mcse)


def _pick(row) -> dict:
    out = {}
    for k in PICK_KEYS:
        v = row[k]
        out[k] = int(v) if k in ("size", "replicates") else (v if isinstance(v, str) else float(v))
    return out


def _money(x: float) -> str:
    return f"{x:,.0f}" if abs(x) >= 100 else f"{x:,.2f}"


def _num(x: float) -> str:
    return f"{x:.4g}"


def recommend(front: pd.DataFrame, goal: Goal, nominal: float) -> dict:
    """Pick among the frontier's points of the goal's variable; say why the others were passed over.

    Parameters
    ----------
    front : DataFrame
        From :func:`samplewright.decision.frontier.frontier_table` (its ``moe`` at the goal's confidence).
    goal : Goal
    nominal : float
        The confidence level of the run's intervals (what coverage is judged against).

    Returns
    -------
    dict with ``cheapest_meeting_moe``, ``best_within_budget`` (each a dict of design, size,
    mean_cost, moe, empirical_se, coverage ... or None), ``passed_over`` (list of {design,
    size, estimator, reason}), ``interpolated`` (sizes between the simulated ones that would meet
    the goal exactly, from the fitted curves), ``statement`` and the rules used.
    """
    variable = goal.variable if goal.variable is not None else (front["variable"].iloc[0] if len(front) else None)
    conf = nominal if goal.confidence is None else goal.confidence
    pts = front[front["variable"] == variable].reset_index(drop=True)
    ok = [coverage_acceptable(c, m, nominal) for c, m in zip(pts["coverage"], pts["coverage_mcse"])]
    pts = pts.assign(_ok=ok)
    cheapest = best = None
    if goal.moe is not None:
        cand = pts[pts["_ok"] & (pts["moe"] <= goal.moe)]
        if len(cand):
            # equal costs (no cost model: every cost is 0) fall back to the fewest units to field, then the margin
            cheapest = _pick(cand.sort_values(["mean_cost", "mean_n", "moe"], kind="stable").iloc[0])
    if goal.budget is not None:
        cand = pts[pts["_ok"] & (pts["mean_cost"] <= goal.budget)]
        if len(cand):
            best = _pick(cand.sort_values(["moe", "mean_cost"], kind="stable").iloc[0])
    passed = []
    chosen = {(p["design"], p["size"], p["estimator"]) for p in (cheapest, best) if p is not None}
    for _, r in pts.iterrows():
        key = (r["design"], int(r["size"]), r["estimator"])
        if key in chosen:
            continue
        passed.append({"design": r["design"], "size": int(r["size"]), "estimator": r["estimator"],
                       "reason": _reason(r, goal, nominal, cheapest, best)})
    interp = interpolate_goal(pts, goal.moe, goal.budget, normal_quantile(conf))
    good_designs = {(d, e) for (d, e), g in pts.groupby(["design", "estimator"]) if g["_ok"].all()}
    for row in interp:
        row["coverage_acceptable_at_every_size"] = (row["design"], row["estimator"]) in good_designs
    rec = {
        "cheapest_meeting_moe": cheapest,
        "best_within_budget": best,
        "passed_over": passed,
        "interpolated": interp,
        "goal": {**asdict(goal), "variable": variable, "confidence": conf},
        "coverage_rule": f"coverage >= {nominal:g} - {COVERAGE_Z:g} x coverage_mcse",
        "margin_rule": f"moe = {normal_quantile(conf):.4f} x rmse (normal quantile at {conf:g})",
    }
    rec["statement"] = statement(rec, pts, nominal)
    return rec


def _reason(r, goal, nominal, cheapest, best) -> str:
    if math.isnan(r["coverage"]):
        return "no coverage to judge (no intervals were formed), so it cannot be recommended"
    if not coverage_acceptable(r["coverage"], r["coverage_mcse"], nominal):
        return (f"intervals under-cover: {r['coverage']:.1%} of {nominal:.0%} intervals held the true value "
                f"(Monte Carlo SE {r['coverage_mcse']:.1%}), more than {COVERAGE_Z:g} SEs below nominal; "
                f"its reported margins could not be trusted")
    parts = []
    if goal.moe is not None:
        if r["moe"] > goal.moe:
            parts.append(f"margin {_num(r['moe'])} is above the target {_num(goal.moe)}")
        elif cheapest is not None:
            parts.append(f"meets the margin ({_num(r['moe'])}) but costs {_money(r['mean_cost'])} against "
                         f"{_money(cheapest['mean_cost'])} for the pick")
    if goal.budget is not None:
        if r["mean_cost"] > goal.budget:
            parts.append(f"mean cost {_money(r['mean_cost'])} is above the budget {_money(goal.budget)}")
        elif best is not None:
            parts.append(f"within budget but its margin {_num(r['moe'])} is wider than the pick's "
                         f"{_num(best['moe'])}")
    return "; ".join(parts) if parts else "not needed for the goal"


def _describe(p: dict) -> str:
    cost = f"mean cost {_money(p['mean_cost'])}"
    if p["p90_cost"] > p["mean_cost"] * (1 + 1e-9):
        cost += f" (90% of rehearsals at most {_money(p['p90_cost'])})"
    size = size_words(p["method"], p["size"], p.get("mean_n"))
    return (f"'{p['design']}' ({p['method']}, {p['estimator']} estimator) with {size}: margin of "
            f"error +-{_num(p['moe'])} (Monte Carlo SE {_num(p['moe_mcse'])}), {p['coverage']:.1%} of intervals "
            f"held the true value, {cost}")


def statement(rec: dict, pts: pd.DataFrame, nominal: float) -> str:
    """A short plain-language account of the pick and its evidence, for a memo."""
    g = rec["goal"]
    conf = g["confidence"]
    lines = []
    want = []
    if g["moe"] is not None:
        want.append(f"a margin of error of at most +-{_num(g['moe'])} at {conf:.0%} confidence")
    if g["budget"] is not None:
        want.append(f"a budget of {_money(g['budget'])}")
    lines.append(f"Goal for the mean of '{g['variable']}': {' and '.join(want)}.")
    c, b = rec["cheapest_meeting_moe"], rec["best_within_budget"]
    if g["moe"] is not None:
        if c is not None:
            lines.append(f"Cheapest design meeting the margin: {_describe(c)}.")
        else:
            lines.append("No rehearsed design and size with trustworthy intervals met the margin.")
    if g["budget"] is not None:
        if b is not None:
            tail = ""
            if b["p90_cost"] > g["budget"]:
                tail = " Its cost varies from sample to sample and exceeds the budget in over 10% of rehearsals."
            lines.append(f"Most precise within the budget: {_describe(b)}.{tail}")
        else:
            lines.append("No rehearsed design and size with trustworthy intervals fits the budget.")
    bad = [p for p in rec["passed_over"] if p["reason"].startswith("intervals under-cover")]
    if bad:
        names = sorted({p["design"] for p in bad})
        lines.append(f"Passed over because their confidence intervals under-cover (below {nominal:.0%} by more "
                     f"than Monte Carlo error allows) at one or more sizes: {', '.join(repr(n) for n in names)}.")
    for row in rec["interpolated"]:
        if not row["coverage_acceptable_at_every_size"]:
            continue
        if c is not None and row["design"] == c["design"] and row["estimator"] == c["estimator"] \
                and row.get("size_for_moe") is not None and row["moe_basis"] == "interpolated":
            need = math.ceil(row["size_for_moe"])
            if need < c["size"]:
                lines.append(f"Between the rehearsed sizes, '{row['design']}' would meet the margin at about "
                             f"{need} (cost about {_money(row['cost_for_moe'])}); this is interpolated from a fit "
                             f"of MSE = a/n + b, not simulated.")
        if b is not None and row["design"] == b["design"] and row["estimator"] == b["estimator"] \
                and row.get("size_for_budget") is not None and row["budget_basis"] == "interpolated" \
                and row.get("moe_for_budget") is not None and math.floor(row["size_for_budget"]) > b["size"]:
            buy = math.floor(row["size_for_budget"])
            lines.append(f"Between the rehearsed sizes, the budget would buy about {buy} with '{row['design']}' "
                         f"(margin about +-{_num(row['moe_for_budget'])}); this is interpolated from a fit of "
                         f"MSE = a/n + b, not simulated.")
    lines.append(f"Evidence: {replicate_counts(pts)} rehearsed samples per design and size drawn from the frame; "
                 f"the margin is {normal_quantile(conf):.2f} x the root mean square error of the estimates around the "
                 f"frame's true mean.")
    return " ".join(lines)
