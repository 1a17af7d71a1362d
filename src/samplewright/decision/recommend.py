"""Goals and the recommendation: the cheapest design meeting every margin, the best within a budget.

A *point* is one design x size x estimator (x variance formula, when the summary names it:
:func:`point_columns`).  Each goal (``[goal]`` or one ``[[goal]]`` per variable or domain) is
judged on the point's row of its variable with the three-state evidence of
:mod:`samplewright.decision.evidence`: coverage against nominal - tolerance, the margin (achieved
z x RMSE and published mean CI half-width, both within the goal), the mean cost against the
budget, each ``met``, ``not met`` or ``undecided`` from its Monte Carlo SE.  Only points whose
every criterion is met for every goal are picked:

- ``cheapest_meeting_moe``: the least mean cost (then fewest units, then the first goal's margin)
  among points meeting every margin goal, coverage, and the budget when there is one;
- ``best_within_budget``: the smallest margin of the first goal (the larger of the achieved and
  the published margin, the one a goal has to meet) among points meeting coverage and the budget.

The headline ``pick`` is ``cheapest_meeting_moe`` when a goal has a margin, else
``best_within_budget``.  Points still ``undecided`` that would beat the headline pick, were
their undecided criteria met, are listed in ``undecided`` with the replicates that would decide
them.

The former rule, coverage >= nominal - 3 MCSE, was a significance test against the exact
nominal level: a design whose coverage is a little short of nominal was accepted at a small
replicate count and rejected at a larger one, so the pick changed with R.  A practical tolerance
with the estimate's own MC error gives a verdict that only firms up as replicates grow.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
import pandas as pd

from samplewright.config.goal import Goal
from samplewright.decision import evidence as ev
from samplewright.decision.frontier import interpolate_goal
from samplewright.evaluation.measures import moe_mcse
from samplewright.evaluation.normal import normal_quantile

PICK_KEYS = ("design", "method", "size", "estimator", "variable", "mean_n", "mean_cost", "p90_cost", "moe",
             "moe_mcse", "empirical_se", "rmse", "coverage", "coverage_mcse", "replicates", "published_moe",
             "published_moe_mcse", "published_moe_p90", "cost_mcse")
PICKS = ("cheapest_meeting_moe", "best_within_budget")


def point_columns(table: pd.DataFrame) -> list[str]:
    """The key columns of a point: design, size, estimator, and variance when the table has it."""
    keys = ["design", "size", "estimator"]
    return keys + ["variance"] if "variance" in table.columns else keys


def goal_variable(goal: Goal, front: pd.DataFrame, domain_column: str | None = None) -> str:
    """The output variable a goal is about: its target (default the first), or ``target[column=value]``."""
    target = goal.variable if goal.variable is not None else (front["variable"].iloc[0] if len(front) else None)
    if goal.domain is None or target is None:
        return target
    return f"{target}[{domain_column}={goal.domain}]"


@dataclass
class Board:
    """Every point's numbers for every goal, as arrays: (goal, point) for the per-variable measures,
    (point,) for cost and size.  :mod:`samplewright.decision.stability` fills the same arrays from
    each bootstrap round."""

    replicates: np.ndarray
    coverage: np.ndarray
    coverage_mcse: np.ndarray
    moe: np.ndarray
    moe_mcse: np.ndarray
    published: np.ndarray
    published_mcse: np.ndarray
    cost: np.ndarray
    cost_mcse: np.ndarray
    mean_n: np.ndarray


@dataclass
class Setting:
    """What the points are judged against: the goals' margins and z, nominal, tolerance, budget."""

    goals: tuple[Goal, ...]
    variables: list[str]  # the output variable of each goal
    moe_goal: np.ndarray  # (G,) the margin each goal asks for (NaN: none)
    z: np.ndarray  # (G,) normal quantile at each goal's confidence
    scale: np.ndarray  # (G,) published margin at the goal's level over the run's (z ratio)
    nominal: float
    tolerance: float
    budget: float | None
    exact: bool = False

    @property
    def has_margin(self) -> bool:
        return bool(np.isfinite(self.moe_goal).any())

    @property
    def headline(self) -> str:
        return PICKS[0] if self.has_margin else PICKS[1]


def setting(front: pd.DataFrame, goals: tuple[Goal, ...], nominal: float, domain_column: str | None = None,
            exact: bool = False) -> Setting:
    """The :class:`Setting` of ``goals`` on ``front`` (relative margins resolved against each variable's truth)."""
    variables = [goal_variable(g, front, domain_column) for g in goals]
    truth = dict(zip(front["variable"], front["truth"]))
    moe = [g.moe if g.moe is not None else
           g.relative_moe * abs(truth.get(v, np.nan)) if g.relative_moe is not None else np.nan
           for g, v in zip(goals, variables)]
    z = np.array([normal_quantile(nominal if g.confidence is None else g.confidence) for g in goals])
    first = goals[0]
    return Setting(goals=goals, variables=variables, moe_goal=np.array(moe, dtype=float), z=z,
                   scale=z / normal_quantile(nominal), nominal=nominal, tolerance=first.coverage_tolerance,
                   budget=first.budget, exact=exact)


def board_rows(front: pd.DataFrame, variables: list[str]) -> tuple[list[tuple], np.ndarray]:
    """The points of ``front`` (in order of first row) and, per goal variable, each point's row (-1: none)."""
    keys = point_columns(front)
    index = {}
    pos = {v: g for g, v in enumerate(variables)}
    table = []
    for i, (key, var) in enumerate(zip(front[keys].itertuples(index=False, name=None), front["variable"])):
        if key not in index:
            index[key] = len(index)
            table.append([-1] * len(variables))
        if var in pos:
            table[index[key]][pos[var]] = i
    rows = np.array(table, dtype=int).T.reshape(len(variables), len(index))
    return list(index), rows


def board(front: pd.DataFrame, rows: np.ndarray, s: Setting) -> Board:
    """The measures of every point for every goal, from the frontier table (at its first goal's level)."""

    def take(col):
        v = front[col].to_numpy(dtype=float)
        return np.where(rows >= 0, v[np.maximum(rows, 0)], np.nan)

    rmse, mse_mcse = take("rmse"), take("mse_mcse")
    z = s.z[:, None]
    any_row = rows.max(axis=0)  # cost and size: a property of the sample, any variable's row will do
    cost = front["mean_cost"].to_numpy(dtype=float)[np.maximum(any_row, 0)]
    return Board(replicates=take("replicates"), coverage=take("coverage"), coverage_mcse=take("coverage_mcse"),
                 moe=z * rmse, moe_mcse=moe_mcse(mse_mcse, rmse, z), published=take("published_moe") * s.scale[:, None],
                 published_mcse=take("published_moe_mcse") * s.scale[:, None], cost=cost,
                 cost_mcse=front["cost_mcse"].to_numpy(dtype=float)[np.maximum(any_row, 0)],
                 mean_n=front["mean_n"].to_numpy(dtype=float)[np.maximum(any_row, 0)])


def score(b: Board, s: Setting) -> dict:
    """Evidence codes: ``coverage`` and ``margin`` (goal, point) and ``cost`` (point,); a goal without a
    margin and a run without a budget have their criterion met by definition (nothing to meet)."""
    cov = ev.coverage_code(b.coverage, b.coverage_mcse, b.replicates, s.nominal, s.tolerance, s.exact)
    goal = s.moe_goal[:, None]
    margin = np.where(np.isfinite(goal), ev.margin_code(b.moe, b.moe_mcse, b.published, b.published_mcse, goal),
                      ev.MET)
    cost = np.full(b.cost.shape, ev.MET) if s.budget is None else ev.cost_code(b.cost, b.cost_mcse, s.budget)
    return {"coverage": cov, "margin": margin, "cost": cost}


def binding_margin(b: Board) -> np.ndarray:
    """The first goal's margin a goal must meet: the larger of the achieved and the published one."""
    return np.fmax(b.moe[0], b.published[0])


#: significant figures a ranking compares: values equal to these count as tied (:func:`ranking`)
RANK_DIGITS = 12


def _snapped(x: np.ndarray) -> np.ndarray:
    """``x`` rounded to :data:`RANK_DIGITS` significant figures (0, NaN and inf as they are)."""
    x = np.asarray(x, dtype=float)
    ok = np.isfinite(x) & (x != 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        scale = np.where(ok, 10.0 ** (RANK_DIGITS - 1 - np.floor(np.log10(np.abs(np.where(ok, x, 1.0))))), 1.0)
    return np.where(ok, np.round(x * scale) / scale, x)


def ranking(b: Board, which: str) -> np.ndarray:
    """Points in order of preference for ``which`` pick (stable: ties keep the table's order).

    Values are compared to :data:`RANK_DIGITS` significant figures, so two points with the same numbers
    up to rounding (the HT and Hajek means of a fixed-size sample; sums taken in another order) are tied
    and the table's order decides, never the rounding.
    """
    order = np.arange(len(b.cost))
    cost, margin = _snapped(b.cost), _snapped(binding_margin(b))
    if which == PICKS[0]:  # equal costs (no cost model) fall back to the fewest units, then the margin
        return np.lexsort((order, margin, _snapped(b.mean_n), cost))
    return np.lexsort((order, cost, margin))


def eligible(codes: dict, s: Setting, which: str, assume_met: np.ndarray | None = None) -> np.ndarray:
    """Points whose every criterion of ``which`` pick is met (or, with ``assume_met``, met or undecided there)."""
    need = [codes["coverage"].min(axis=0), codes["cost"]]
    if which == PICKS[0]:
        need.append(codes["margin"].min(axis=0))
    state = np.min(np.stack(need), axis=0)
    ok = state == ev.MET
    return ok | (assume_met & (state == ev.UNDECIDED)) if assume_met is not None else ok


def choose(b: Board, s: Setting, codes: dict | None = None) -> dict:
    """The index of each pick (None when nothing qualifies): see module notes."""
    codes = score(b, s) if codes is None else codes
    out = {}
    for which in PICKS:
        if which == PICKS[0] and not s.has_margin or which == PICKS[1] and s.budget is None:
            out[which] = None
            continue
        ok = eligible(codes, s, which)
        order = [i for i in ranking(b, which) if ok[i]]
        out[which] = int(order[0]) if order else None
    return out


# ------------------------------------------------------------------ the recommendation
def recommend(front: pd.DataFrame, goals, nominal: float, domain_column: str | None = None,
              exact: bool = False) -> dict:
    """Pick among the frontier's points for ``goals``; say why the others were passed over.

    Parameters
    ----------
    front : DataFrame
        From :func:`samplewright.decision.frontier.frontier_table` (its ``moe`` at the first goal's level).
    goals : Goal or tuple of Goal
        All must be met; the budget and coverage tolerance are the first goal's (the same in every goal).
    nominal : float
        The confidence level of the run's intervals (what coverage is judged against).
    domain_column : str, optional
        The frame's domain column (names the output variable of a goal with a ``domain``).
    exact : bool
        The front comes from exact mode (no Monte Carlo error).

    Returns
    -------
    dict with ``cheapest_meeting_moe``, ``best_within_budget`` (each a dict of the point's numbers,
    its ``evidence`` and its ``goals``, or None), ``pick``, ``undecided``, ``passed_over``,
    ``interpolated``, ``goal`` (the first), ``goals``, ``coverage_tolerance`` and the rules (the statement is
    the report's words, set by the caller: :func:`samplewright.report.verdict.verdict_sentence`).
    """
    goals = (goals,) if isinstance(goals, Goal) else tuple(goals)
    s = setting(front, goals, nominal, domain_column, exact)
    keys, rows = board_rows(front, s.variables)
    b = board(front, rows, s)
    codes = score(b, s)
    chosen = choose(b, s, codes)
    picks = {w: None if i is None else pick_dict(front, rows, b, s, codes, i) for w, i in chosen.items()}
    first = goals[0]
    pts = front[front["variable"] == s.variables[0]]
    interp = interpolate_goal(pts.reset_index(drop=True), None if np.isnan(s.moe_goal[0]) else float(s.moe_goal[0]),
                              first.budget, float(s.z[0]))
    cov_ok = codes["coverage"][0] == ev.MET
    good = {}  # per design, estimator and variance formula: coverage met at every rehearsed size
    for i, key in enumerate(keys):
        analysis = (key[0], key[2], key[3] if len(key) > 3 else None)
        good[analysis] = good.get(analysis, True) and bool(cov_ok[i])
    for row in interp:
        analysis = (row["design"], row["estimator"], row.get("variance"))
        row["coverage_acceptable_at_every_size"] = good.get(analysis, False)
    headline = s.headline
    rec = {
        **picks,
        "pick": headline if picks[headline] is not None else None,
        "undecided": undecided(keys, b, s, codes, chosen[headline], s.variables),
        "passed_over": [{**dict(zip(point_columns(front), _plain(key))),
                         "evidence": evidence_of(s, codes, i), "reason": _reason(i, b, s, codes)}
                        for i, key in enumerate(keys) if i not in chosen.values()],
        "interpolated": interp,
        "goal": goal_dict(first, s, 0),
        "goals": [goal_dict(g, s, k) for k, g in enumerate(goals)],
        "coverage_tolerance": s.tolerance,
        "coverage_rule": (f"met when coverage - {ev.EVIDENCE_Z:g} x coverage_mcse >= {nominal:g} - {s.tolerance:g}, "
                          f"not met when coverage + {ev.EVIDENCE_Z:g} x coverage_mcse < {nominal:g} - "
                          f"{s.tolerance:g} (exact binomial bound at a coverage of 0 or 1), else undecided"),
        "margin_rule": (f"moe = {float(s.z[0]):.4f} x rmse (normal quantile at {_conf(first, nominal):g}) and the "
                        f"published margin (mean CI half-width) both within the goal by {ev.EVIDENCE_Z:g} MCSE"),
    }
    return rec


def _conf(goal: Goal, nominal: float) -> float:
    return nominal if goal.confidence is None else goal.confidence


def _plain(key: tuple) -> tuple:
    return tuple(int(k) if isinstance(k, (int, np.integer)) else k for k in key)


def goal_dict(goal: Goal, s: Setting, g: int) -> dict:
    """A goal as recommendation.json shows it: its keys, its output variable and the margin it asks for."""
    moe = float(s.moe_goal[g]) if np.isfinite(s.moe_goal[g]) else None
    target = goal.variable if goal.variable is not None or s.variables[g] is None else s.variables[g].split("[")[0]
    return {**asdict(goal), "variable": target, "output": s.variables[g],
            "confidence": _conf(goal, s.nominal), "moe_goal": moe}


def _num(v) -> float | None:
    return None if v is None or not np.isfinite(v) else float(v)


def evidence_of(s: Setting, codes: dict, i: int) -> dict:
    """Point ``i``'s state on each criterion over every goal (its worst), None for a criterion no goal sets."""
    return {"coverage": ev.state(codes["coverage"][:, i].min()),
            "margin": ev.state(codes["margin"][:, i].min()) if s.has_margin else None,
            "cost": ev.state(codes["cost"][i]) if s.budget is not None else None}


def pick_dict(front: pd.DataFrame, rows: np.ndarray, b: Board, s: Setting, codes: dict, i: int) -> dict:
    """A pick: the point's numbers on its first goal's row, the evidence and every goal's own numbers."""
    r = front.iloc[int(rows[0, i])]  # a pick has a row for every goal
    out = {k: (int(r[k]) if k in ("size", "replicates") else r[k] if isinstance(r[k], str) else float(r[k]))
           for k in PICK_KEYS}
    out["variance"] = r["variance"] if "variance" in front.columns else None
    out["evidence"] = evidence_of(s, codes, i)
    out["goals"] = []
    for g in range(len(s.goals)):
        p90 = front["published_moe_p90"].to_numpy(dtype=float)[rows[g, i]] if rows[g, i] >= 0 else np.nan
        has = np.isfinite(s.moe_goal[g])
        out["goals"].append({
            "variable": goal_dict(s.goals[g], s, g)["variable"], "output": s.variables[g],
            "domain": s.goals[g].domain, "moe_goal": _num(s.moe_goal[g]), "moe": _num(b.moe[g, i]),
            "moe_mcse": _num(b.moe_mcse[g, i]), "published_moe": _num(b.published[g, i]),
            "published_moe_mcse": _num(b.published_mcse[g, i]), "published_moe_p90": _num(p90 * s.scale[g]),
            "coverage": _num(b.coverage[g, i]), "coverage_mcse": _num(b.coverage_mcse[g, i]),
            "evidence": {"coverage": ev.state(codes["coverage"][g, i]),
                         "margin": ev.state(codes["margin"][g, i]) if has else None,
                         "cost": out["evidence"]["cost"]}})
    return out


def undecided(keys: list, b: Board, s: Setting, codes: dict, pick: int | None, variables: list[str]) -> list[dict]:
    """Undecided points that would beat the headline pick were their undecided criteria met, one entry
    per undecided criterion, with ``replicates_needed`` (:func:`criteria_to_decide`)."""
    which = s.headline
    if which == PICKS[1] and s.budget is None:
        return []
    maybe = eligible(codes, s, which, assume_met=np.ones(len(keys), dtype=bool)) & ~eligible(codes, s, which)
    order = list(ranking(b, which))
    bar = order.index(pick) if pick is not None else len(order)
    out = []
    for i in order[:bar]:
        if maybe[i]:
            cols = ["design", "size", "estimator", "variance"]
            base = dict(zip(cols, _plain(keys[i]) + (None,) * (len(cols) - len(keys[i]))))
            out += [{**base, **c} for c in criteria_to_decide(i, b, s, codes, variables, which)]
    return out


def criteria_to_decide(i: int, b: Board, s: Setting, codes: dict, variables: list[str], which: str) -> list[dict]:
    """Each undecided criterion of point ``i``: its value, MCSE, limit, replicates and the replicates that
    would decide it.  The count assumes the estimate stays where it is while its MCSE shrinks as 1 / sqrt(R)
    (:func:`samplewright.decision.evidence.replicates_to_decide`)."""
    out = []
    for g, var in enumerate(variables):
        R = int(b.replicates[g, i]) if np.isfinite(b.replicates[g, i]) else 0
        if codes["coverage"][g, i] == ev.UNDECIDED:
            c, m, lim = float(b.coverage[g, i]), float(b.coverage_mcse[g, i]), s.nominal - s.tolerance
            out.append({"variable": var, "criterion": "coverage", "value": c, "mcse": m, "limit": lim,
                        "replicates": R, "replicates_needed": ev.coverage_replicates_to_decide(c, m, lim, R)})
        if which == PICKS[0] and codes["margin"][g, i] == ev.UNDECIDED:
            lim = float(s.moe_goal[g])
            pairs = [(float(b.moe[g, i]), float(b.moe_mcse[g, i])), (float(b.published[g, i]),
                                                                         float(b.published_mcse[g, i]))]
            need = [(ev.replicates_to_decide(v, m, lim, R), v, m) for v, m in pairs if v + ev.EVIDENCE_Z * m > lim]
            n, v, m = max(need, key=lambda t: math.inf if t[0] is None else t[0])
            out.append({"variable": var, "criterion": "margin", "value": v, "mcse": m, "limit": lim,
                        "replicates": R, "replicates_needed": n})
    if s.budget is not None and codes["cost"][i] == ev.UNDECIDED:
        R = int(np.nanmax(b.replicates[:, i]))
        c, m = float(b.cost[i]), float(b.cost_mcse[i])
        out.append({"variable": None, "criterion": "cost", "value": c, "mcse": m, "limit": s.budget,
                    "replicates": R, "replicates_needed": ev.replicates_to_decide(c, m, s.budget, R)})
    return out


def _money(x: float) -> str:
    return f"{x:,.0f}" if abs(x) >= 100 else f"{x:,.2f}"


def _num4(x: float) -> str:
    return f"{x:.4g}"


def _reason(i: int, b: Board, s: Setting, codes: dict) -> str:
    """Why point ``i`` was not picked: each criterion not met or undecided, goal by goal."""
    parts = []
    for g, var in enumerate(s.variables):
        c = b.coverage[g, i]
        code = codes["coverage"][g, i]
        if np.isnan(c):
            parts.append(f"no coverage to judge for {var!r} (no intervals were formed)")
        elif code != ev.MET:
            word = "intervals under-cover" if code == ev.NOT_MET else "coverage undecided"
            parts.append(f"{word} for {var!r}: {c:.1%} held the true value (Monte Carlo SE "
                         f"{b.coverage_mcse[g, i]:.1%}) against {s.nominal - s.tolerance:.1%} ({s.nominal:.0%} "
                         f"less the tolerance {s.tolerance:.1%})")
        if np.isfinite(s.moe_goal[g]) and codes["margin"][g, i] != ev.MET:
            word = "above" if codes["margin"][g, i] == ev.NOT_MET else "undecided against"
            parts.append(f"margin for {var!r} {word} the target {_num4(s.moe_goal[g])}: achieved "
                         f"{_num4(b.moe[g, i])}, published {_num4(b.published[g, i])}")
    if s.budget is not None and codes["cost"][i] != ev.MET:
        word = "above" if codes["cost"][i] == ev.NOT_MET else "undecided against"
        parts.append(f"mean cost {_money(b.cost[i])} {word} the budget {_money(s.budget)}")
    return "; ".join(parts) if parts else "meets the goal but another point is preferred by the pick rule"
