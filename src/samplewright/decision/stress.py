"""What would change the pick: the tables of a stress run (stress.csv, stress_verdict.csv, break_even.csv).

Each assumption point is a full run (simulation/stress.py builds it, with common random numbers).
Here its summary, frontier and recommendation become one block of rows of ``stress.csv``, one row
of ``stress_verdict.csv`` (the headline pick and its evidence), and, between neighbouring points of
a line (one assumption moving, the others fixed) whose picks differ, one row of ``break_even.csv``.

Break-even values
-----------------
The pick changes between values x1 < x2 of an assumption because some deciding difference d
changes sign.  Which d depends on why the pick changed (the margin is the achieved one, z x RMSE):

- both picks qualify at both points: the rule's ranking crossed: for the cheapest pick meeting the
  margin d = cost(P1) - cost(P2); for the most precise pick within budget d = moe(P1) - moe(P2);
- the first pick stops qualifying: d = moe(P1) - goal margin (or cost(P1) - budget);
- else the second pick starts qualifying: d = moe(P2) - goal margin (or cost(P2) - budget).

``criterion`` says which, in words ("the two picks' costs cross", "'X' at size 45 no longer meets
the margin"...).

The break-even is the zero of d interpolated linearly between the two points,
x* = x1 + (x2 - x1) d1 / (d1 - d2).  Its standard error is by the delta method: with
g1 = -(x2 - x1) d2 / (d1 - d2)^2 and g2 = (x2 - x1) d1 / (d1 - d2)^2 the derivatives of x* in d1
and d2, each replicate r contributes phi_r = g1 psi1_r + g2 psi2_r, where psi is the replicate's
influence on d (for a margin z RMSE: z (e_r^2 - MSE) / (2 RMSE), e_r the replicate's error; for a
mean cost: c_r - mean cost), and SE(x*) = sd(phi) / sqrt(R) (the mean-of-replicates MCSE of
evaluation/measures.py).  Replicate r of the two points shares its random stream (common random
numbers), so the covariance between the points, which is large and positive, is counted, not
assumed away.  ``low`` and ``high`` are x* -+ 2 SE.  When d does not change sign (the pick
changed for another reason, such as coverage) only the bracketing interval [x1, x2] is given.
The interpolation itself assumes d is close to linear between the points: a coarse grid of values
adds an error the SE does not hold.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from samplewright.config.stress import BREAK_EVEN_COLUMNS, STRESS_COLUMNS, VERDICT_COLUMNS
from samplewright.decision.recommend import point_columns
from samplewright.evaluation.measures import mean_mcse
from samplewright.evaluation.normal import normal_quantile

#: half-width of the break-even's interval in standard errors (the z of the three-state evidence)
BREAK_EVEN_Z = 2.0
METHOD = ("linear interpolation of the deciding difference between the bracketing points; SE by the delta "
          "method from each replicate's influence, the points paired by common random numbers")
BRACKET = "bracketing interval: the deciding difference does not change sign between the points"


def headline(rec: dict | None) -> str | None:
    """The recommendation's headline pick key (its ``pick`` when given, else by the goal: margin first; so also
    when nothing qualifies)."""
    if rec is None:
        return None
    if rec.get("pick"):
        return rec["pick"]
    return "cheapest_meeting_moe" if _has_margin(rec["goal"]) else "best_within_budget"


def _has_margin(goal: dict) -> bool:
    return goal.get("moe") is not None or goal.get("relative_moe") is not None


@dataclass
class PointOutcome:
    """One assumption point's result, reduced to what the stress tables need."""

    index: int
    values: dict
    summary: pd.DataFrame
    frontier: pd.DataFrame | None
    recommendation: dict | None
    #: point key -> (squared errors, costs) of every replicate of the goal's variable, in replicate order
    errors: dict = field(default_factory=dict)

    @property
    def pick(self) -> dict | None:
        key = headline(self.recommendation)
        return None if key is None else self.recommendation.get(key)


def outcome(index: int, values: dict, summary: pd.DataFrame, replicates: pd.DataFrame,
            frontier: pd.DataFrame | None, rec: dict | None) -> PointOutcome:
    """The outcome of one point's run; keeps each replicate's error and cost of the goal's variable only."""
    errors = {}
    if rec is not None:
        variable = rec["goal"]["variable"]
        keys = point_columns(replicates)
        rows = replicates[replicates["variable"] == variable].sort_values("replicate", kind="stable")
        truth = summary[summary["variable"] == variable].set_index(keys)["truth"]
        for key, g in rows.groupby(keys, sort=False):
            e = g["estimate"].to_numpy(float) - float(truth.loc[key])
            errors[tuple(key)] = (e * e, g["cost"].to_numpy(float))
    return PointOutcome(index, dict(values), summary, frontier, rec, errors)


def _assumption_columns(table: pd.DataFrame, o: PointOutcome, names: list[str]) -> pd.DataFrame:
    return table.assign(**{n: o.values[n] for n in names})


def stress_table(outcomes: list[PointOutcome], names: list[str]) -> pd.DataFrame:
    """stress.csv: one row per point x design x size x estimator (x variance) x variable."""
    parts = []
    for o in outcomes:
        t = o.summary.drop(columns=["moe"])
        keys = point_columns(t) + ["variable"]
        if o.frontier is not None:  # the margin at the goal's confidence and its MCSE
            t = t.merge(o.frontier[keys + ["moe", "moe_mcse"]], on=keys, how="left")
        else:  # exact mode: the summary's margin, without Monte Carlo error
            t = t.assign(moe=o.summary["moe"].to_numpy(), moe_mcse=0.0)
        parts.append(_assumption_columns(t.assign(point=o.index), o, names))
    table = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame()
    extra = [c for c in ("published_moe", "published_moe_mcse") if c in table.columns]
    return table.reindex(columns=_with_variance(["point", *names, *STRESS_COLUMNS[1:]], table) + extra)


def _with_variance(columns: list[str], table: pd.DataFrame) -> list[str]:
    if "variance" not in table.columns:
        return columns
    i = columns.index("estimator") + 1
    return columns[:i] + ["variance"] + columns[i:]


def verdict_table(outcomes: list[PointOutcome], names: list[str]) -> pd.DataFrame:
    """stress_verdict.csv: the headline pick at every point, with its three-state evidence when the run has it."""
    rows = []
    for o in outcomes:
        p, rec = o.pick or {}, o.recommendation or {}
        evidence = p.get("evidence") or {}
        row = {"point": o.index, **{n: o.values[n] for n in names}, "pick": headline(o.recommendation)}
        if rec:  # the goal at this point (a relative margin as its value for the variable's true mean)
            row["goal_moe"] = _goal(o, "moe").value if _has_margin(rec["goal"]) else None
            row["goal_budget"] = rec["goal"].get("budget")
        row.update({k: p.get(k) for k in VERDICT_COLUMNS[4:-4]})
        if "variance" in p:
            row["variance"] = p["variance"]
        row.update({f"evidence_{k}": evidence.get(k) for k in ("coverage", "margin", "cost")})
        row["pick_stability"] = rec.get("pick_stability")
        rows.append(row)
    table = pd.DataFrame(rows)
    return table.reindex(columns=_with_variance(["point", *names, *VERDICT_COLUMNS[1:]], table))


def pick_label(p: dict | None) -> str:
    """How the tables name a pick: ``design, size 200, ht`` (and the variance formula when there is one)."""
    if p is None:
        return "none"
    tail = f", {p['variance']}" if p.get("variance") else ""
    return f"{p['design']}, size {p['size']}, {p['estimator']}{tail}"


def _identity(p: dict | None) -> tuple | None:
    return None if p is None else (p["design"], int(p["size"]), p["estimator"], p.get("variance"))


def _key(p: dict, o: PointOutcome) -> tuple | None:
    """The point key of pick ``p`` among ``o``'s kept errors (None when that point was not rehearsed there)."""
    for key in o.errors:
        if key[:3] == (p["design"], int(p["size"]), p["estimator"]) and key[3:] in ((), (p.get("variance"),)):
            return key
    return None


class _Term:
    """One term of a deciding difference at one point: its value and each replicate's influence on it."""

    def __init__(self, value: float, influence: np.ndarray | None):
        self.value, self.influence = value, influence


def _margin(o: PointOutcome, key: tuple) -> _Term:
    e2 = o.errors[key][0]
    z = normal_quantile(o.recommendation["goal"]["confidence"])
    mse = float(e2.mean())
    rmse = math.sqrt(mse)
    return _Term(z * rmse, z * (e2 - mse) / (2 * rmse) if rmse > 0 else np.zeros_like(e2))


def _cost(o: PointOutcome, key: tuple) -> _Term:
    c = o.errors[key][1]
    return _Term(float(c.mean()), c - c.mean())


def _goal(o: PointOutcome, what: str) -> _Term:
    """The goal's margin or budget at a point (a relative margin is a fraction of the variable's true mean)."""
    g = o.recommendation["goal"]
    if what == "moe" and g.get("moe") is None and g.get("relative_moe") is not None:
        s = o.summary
        truth = s.loc[s["variable"] == g["variable"], "truth"].iloc[0]
        return _Term(float(g["relative_moe"]) * abs(float(truth)), None)
    return _Term(float(g[what]), None)


def _difference(a: _Term, b: _Term) -> _Term:
    if a.influence is None or b.influence is None:
        inf = a.influence if b.influence is None else (-b.influence if a.influence is None else None)
    else:
        R = min(len(a.influence), len(b.influence))
        inf = a.influence[:R] - b.influence[:R]
    return _Term(a.value - b.value, inf)


def _criterion(rule: str, o1: PointOutcome, o2: PointOutcome, p1: dict, p2: dict):
    """(criterion text, function of an outcome giving the deciding difference d) between picks p1 and p2."""
    margin_rule = rule == "cheapest_meeting_moe"
    quality, limit = (_margin, "moe") if margin_rule else (_cost, "budget")
    rank = _cost if margin_rule else _margin

    def qualifies(o, p):
        return quality(o, _key(p, o)).value <= _goal(o, limit).value

    if qualifies(o2, p1) and qualifies(o1, p2):
        what = "costs" if margin_rule else "margins"
        return f"the two picks' {what} cross", lambda o: _difference(rank(o, _key(p1, o)), rank(o, _key(p2, o)))
    stops = not qualifies(o2, p1)
    p = p1 if stops else p2
    goal = "meets the margin" if margin_rule else "fits the budget"
    text = f"'{p['design']}' at size {p['size']} {'no longer' if stops else 'now'} {goal}"
    return text, lambda o: _difference(quality(o, _key(p, o)), _goal(o, limit))


def _break_even(name: str, x1: float, x2: float, o1: PointOutcome, o2: PointOutcome) -> dict:
    p1, p2 = o1.pick, o2.pick
    row = {"assumption": name, "from_value": x1, "to_value": x2, "pick_before": pick_label(p1),
           "pick_after": pick_label(p2), "design_before": (p1 or {}).get("design"),
           "design_after": (p2 or {}).get("design"), "criterion": None, "break_even": math.nan,
           "break_even_se": math.nan, "low": x1, "high": x2, "method": BRACKET}
    rule = headline(o1.recommendation)
    both = p1 is not None and p2 is not None
    if not both or any(_key(p, o) is None for p in (p1, p2) for o in (o1, o2)):
        return row
    text, deciding = _criterion(rule, o1, o2, p1, p2)
    d1, d2 = deciding(o1), deciding(o2)
    if not d1.value * d2.value < 0:  # d did not move the pick (evidence such as coverage did): no criterion
        return row
    row["criterion"] = text
    D, dx = d1.value - d2.value, x2 - x1
    x = x1 + dx * d1.value / D
    g1, g2 = -dx * d2.value / D**2, dx * d1.value / D**2
    if d1.influence is None or d2.influence is None:
        se = 0.0
    else:
        R = min(len(d1.influence), len(d2.influence))
        se = mean_mcse(g1 * d1.influence[:R] + g2 * d2.influence[:R])
    return {**row, "break_even": x, "break_even_se": se, "low": x - BREAK_EVEN_Z * se,
            "high": x + BREAK_EVEN_Z * se, "method": METHOD}


def break_even_table(outcomes: list[PointOutcome], names: list[str],
                     lines: list[tuple[str, list[int]]]) -> pd.DataFrame:
    """break_even.csv: where the pick changes along each line of points (see module notes)."""
    by_index = {o.index: o for o in outcomes}
    rows = []
    for name, members in lines:
        pts = [by_index[k] for k in members]
        for o1, o2 in zip(pts, pts[1:]):
            if o1.recommendation is None or _identity(o1.pick) == _identity(o2.pick):
                continue
            fixed = {n: o1.values[n] for n in names if n != name}
            rows.append({**_break_even(name, o1.values[name], o2.values[name], o1, o2), **fixed})
    cols = BREAK_EVEN_COLUMNS[:1] + names + BREAK_EVEN_COLUMNS[1:]
    return pd.DataFrame(rows).reindex(columns=cols)
