"""Every sentence a person reads about the pick, and how its numbers are written.

The decision (``decision/``) returns numbers and states only; the words live here:
:func:`verdict_sentence` (the one-sentence verdict, ``recommendation.json`` ``statement``),
:func:`undecided_sentences` (points the rehearsal could not settle, and what it would take),
:func:`passed_over_text` (why a point was not picked) and :func:`key_numbers` (the verdict card).

Numbers are written to what their Monte Carlo error supports (:func:`mc_round`: to the decimal of
the MCSE's leading digit, so an MCSE of 0.083 keeps two decimals and one of 23 rounds to tens; a
common practice in reporting simulation studies, Morris, White and Crowther 2019, sec. 5.2), with
thousands separators and never in scientific notation.  A coverage of 0 or 1 has a Monte Carlo SE of
0 from its formula, so it is shown with its exact binomial (Clopper-Pearson) interval instead.

Money and units come from the scenario's ``[labels]`` (config/labels.py), kept in run.json
``labels`` and recommendation.json ``units``.  Keys the decision may not yet write (``pick``,
``pick_stability``, ``published_moe``...) are read as absent.  Nothing here imports matplotlib.
"""

from __future__ import annotations

import math

from samplewright.config.goal import COVERAGE_TOLERANCE
from samplewright.decision import evidence as ev
from samplewright.designs.registry import DESIGN_CLASSES
from samplewright.evaluation.normal import normal_quantile
from samplewright.report.names import estimator_name, method_name, variance_name

#: confidence level of the exact binomial interval shown for a coverage of 0 or 1
EXACT_INTERVAL_LEVEL = 0.95
#: methods whose sample is spread over the frame's strata (their size is said "in S strata")
STRATIFIED_METHODS = ("stratified", "stratified_cluster")


# ------------------------------------------------------------------ numbers
def _finite(x) -> bool:
    try:
        return x is not None and math.isfinite(float(x))
    except (TypeError, ValueError):
        return False


def num(value, digits: int = 4) -> str:
    """A number to ``digits`` significant figures, thousands separators from 1,000, never an exponent.

    Examples
    --------
    >>> num(1234567.8), num(0.000012345), num(5.31772), num(None)
    ('1,234,568', '0.00001234', '5.318', 'n/a')
    """
    if value is None:
        return "n/a"
    try:
        v = float(value)
    except (TypeError, ValueError):
        return str(value)
    if math.isinf(v):  # e.g. a design effect against an SRS variance of 0 (evaluation/measures.py)
        return "infinite" if v > 0 else "minus infinite"
    if not math.isfinite(v):
        return "n/a"
    if v == 0:
        return "0"
    if abs(v) >= 10 ** (digits - 1) or (abs(v) >= 1000 and v == round(v)):
        return f"{v:,.0f}"
    decimals = digits - 1 - math.floor(math.log10(abs(v)))
    text = f"{v:.{decimals}f}"
    return text.rstrip("0").rstrip(".") if "." in text else text


def mc_round(value, mcse) -> str:
    """``value`` rounded to the decimal of its Monte Carlo SE's leading digit (module notes).

    Without a usable MCSE (None, 0: an exact run or a fixed cost) four significant figures.

    Examples
    --------
    >>> mc_round(5.31772, 0.083), mc_round(3650.4, 23.0), mc_round(0.9431, 0.0052), mc_round(7.25, 0)
    ('5.32', '3,650', '0.943', '7.25')
    """
    if not _finite(value):
        return "n/a"
    if not _finite(mcse) or float(mcse) <= 0:
        return num(value)
    decimals = -math.floor(math.log10(float(mcse)))
    v = round(float(value), decimals) + 0.0  # + 0.0: no "-0"
    return f"{v:,.{max(decimals, 0)}f}"


def percent(share, mcse=None) -> str:
    """A share (0..1) in per cent, rounded by its MCSE (``"94.3 %"``)."""
    if not _finite(share):
        return "n/a"
    return f"{mc_round(100 * float(share), None if mcse is None else 100 * float(mcse))} %"


def coverage_interval(coverage: float, replicates: int, level: float = EXACT_INTERVAL_LEVEL) -> tuple[float, float]:
    """The exact binomial (Clopper-Pearson) interval of a coverage seen in ``replicates`` samples
    (:func:`samplewright.decision.evidence.binomial_interval`; Clopper and Pearson 1934)."""
    k = int(round(float(coverage) * int(replicates)))
    lo, hi = ev.binomial_interval(k, int(replicates), level)
    return float(lo), float(hi)


def coverage_text(coverage, mcse, replicates=None) -> str:
    """A coverage with its Monte Carlo error: ``"94.3 % (MCSE 0.5)"``; at 0 % or 100 % the exact
    binomial interval instead (``"100 % (exact 95 % interval 99.82 to 100 %)"``); an exact-mode run
    (no replicates) shows the bare share."""
    if not _finite(coverage):
        return "n/a"
    c = float(coverage)
    if not _finite(replicates) or int(replicates) <= 0:
        return percent(c)
    if c in (0.0, 1.0):
        lo, hi = coverage_interval(c, int(replicates))
        return (f"{percent(c)} (exact {100 * EXACT_INTERVAL_LEVEL:g} % interval {100 * lo:.2f} to "
                f"{100 * hi:.2f} %)").replace("100.00 %", "100 %").replace(" 0.00 to", " 0 to")
    m = 100 * float(mcse) if _finite(mcse) else None
    return f"{percent(c, mcse)}" + (f" (MCSE {num(m, 2)})" if m else "")


# ------------------------------------------------------------------ labels
def labels_of(info: dict | None, rec: dict | None = None) -> dict:
    """The run's words for money and units: run.json ``labels``, else recommendation.json ``units``."""
    out = {"currency": None, "unit": "units", "cluster": "clusters", "variables": {}}
    for src in ((rec or {}).get("units"), (info or {}).get("labels")):
        if isinstance(src, dict):
            out.update({k: v for k, v in src.items() if k in out and v})
    if not isinstance(out["variables"], dict):
        out["variables"] = {}
    return out


def unit_of(labels: dict, variable) -> str:
    """The unit of a study variable (empty when the scenario names none); a domain row
    (``variable[domain]``) takes its variable's unit."""
    units = labels.get("variables") or {}
    if variable in units:
        return str(units[variable])
    base = str(variable).split("[", 1)[0] if variable is not None else None
    return str(units.get(base, ""))


def with_unit(text: str, unit: str) -> str:
    return f"{text} {unit}" if unit and text != "n/a" else text


def money(value, labels: dict | None = None, mcse=None) -> str:
    """A cost with the scenario's currency: ``"4,320 EUR"`` (a one-character symbol in front: ``"$4,320"``).

    Rounded by its MCSE when given, else to whole units from 100 up (four significant figures below).

    Examples
    --------
    >>> money(4319.6, {"currency": "EUR"}), money(4319.6, {"currency": "$"}), money(12.345)
    ('4,320 EUR', '$4,320', '12.35')
    """
    if not _finite(value):
        return "n/a"
    v = float(value)
    text = mc_round(v, mcse) if _finite(mcse) and float(mcse) > 0 else (f"{v:,.0f}" if abs(v) >= 100 else num(v))
    cur = (labels or {}).get("currency")
    if not cur:
        return text
    return f"{cur}{text}" if len(cur) == 1 and not cur.isalnum() else f"{text} {cur}"


def cost_header(labels: dict) -> str:
    """A cost column's header, with the currency when the scenario names one."""
    cur = labels.get("currency")
    return f"Expected cost ({cur})" if cur else "Expected cost"


def margin_header(labels: dict, variable, what: str = "Margin") -> str:
    unit = unit_of(labels, variable)
    return f"{what} ({unit})" if unit else what


# ------------------------------------------------------------------ naming a point
def size_text(method, size, mean_n=None, labels: dict | None = None, strata=None) -> str:
    """A design's size in words: ``"400 trees in 4 strata"``, ``"10 blocks (about 400 trees)"``."""
    lab = labels or labels_of(None)
    if size is None:
        return "n/a"
    cls = DESIGN_CLASSES.get(method)
    if cls is not None and cls.size_key == "clusters":  # the size counts clusters
        text = f"{int(size):,} {lab['cluster']}"
        if _finite(mean_n):
            text += f" (about {num(float(mean_n), 3)} {lab['unit']})"
    else:
        text = f"{int(size):,} {lab['unit']}"
    if method in STRATIFIED_METHODS and _finite(strata) and int(strata) > 1:
        text += f" in {int(strata)} strata"
    return text


def _design_setting(p: dict, info: dict | None, key: str):
    """A point's own ``key`` (``variance``, ``method``), else its design's in run.json ``designs``."""
    if p.get(key):
        return p[key]
    for d in (info or {}).get("designs") or []:
        if isinstance(d, dict) and d.get("label") == p.get("design"):
            return d.get(key)
    return None


def variance_of(p: dict, info: dict | None = None):
    """A point's variance formula: its own ``variance``, else its design's in run.json ``designs``."""
    return _design_setting(p, info, "variance")


def analysis_text(p: dict, info: dict | None = None) -> str:
    """How a point is drawn and analysed: ``"systematic sample, Horvitz-Thompson estimator, analysed with
    successive differences"``."""
    parts = [method_name(p.get("method"))] if p.get("method") else []
    if p.get("estimator"):
        parts.append(f"{estimator_name(p['estimator'])} estimator")
    v = variance_name(variance_of(p, info))
    if v:
        parts.append(f"analysed with {v}")
    return ", ".join(parts)


def point_name(p: dict, labels: dict, info: dict | None = None) -> str:
    """``'every k-th tree' at 400 trees`` (the design's label quoted as given)."""
    strata = ((info or {}).get("frame") or {}).get("strata")
    method = _design_setting(p, info, "method")  # undecided entries carry no method: the design's, from run.json
    return f"'{p.get('design')}' at {size_text(method, p.get('size'), p.get('mean_n'), labels, strata)}"


# ------------------------------------------------------------------ the pick
def pick_of(rec: dict | None) -> tuple[str | None, dict | None]:
    """The headline pick: recommendation.json ``pick`` names it; an older recommendation has none, so
    the margin's pick when a margin goal is set, else the budget's."""
    if not isinstance(rec, dict):
        return None, None
    key = rec.get("pick")
    if key is None and "pick" not in rec:
        key = "cheapest_meeting_moe" if (rec.get("goal") or {}).get("moe") is not None else "best_within_budget"
    p = rec.get(key) if key else None
    return (key, p) if isinstance(p, dict) else (None, None)


def goals_of(rec: dict) -> list[dict]:
    """The run's goals as dicts: recommendation.json ``goals``, else its one ``goal``."""
    goals = rec.get("goals")
    if isinstance(goals, list) and goals:
        return [g for g in goals if isinstance(g, dict)]
    g = rec.get("goal")
    return [g] if isinstance(g, dict) else []


def _pick_goals(p: dict, rec: dict) -> list[dict]:
    """One entry per margin goal for the pick: its ``goals`` list, else built from the pick itself."""
    if isinstance(p.get("goals"), list) and p["goals"]:
        return [g for g in p["goals"] if isinstance(g, dict)]
    g = (goals_of(rec) or [{}])[0]
    return [{"variable": p.get("variable"), "domain": g.get("domain"), "moe_goal": g.get("moe"),
             "moe": p.get("moe"), "published_moe": p.get("published_moe"),
             "published_moe_p90": p.get("published_moe_p90"), "coverage": p.get("coverage"),
             "coverage_mcse": p.get("coverage_mcse")}]


def _margin_mcse(p: dict, g: dict, key: str):
    """The MCSE of a goal's margin: its own, else the pick's when the goal is about the pick's variable."""
    own = g.get(f"{key}_mcse")
    if own is not None:
        return own
    return p.get(f"{key}_mcse") if g.get("variable") in (None, p.get("variable")) and g.get(key) == p.get(key) \
        else None


def _margin_clause(p: dict, g: dict, labels: dict, goal: dict | None, several: bool) -> str:
    """``published margin ±6.1 apples against the goal ±8 apples``."""
    unit = unit_of(labels, g.get("variable"))
    published = g.get("published_moe")
    key, what = ("published_moe", "published margin") if _finite(published) else ("moe", "margin")
    text = f"{what} ±{with_unit(mc_round(g.get(key), _margin_mcse(p, g, key)), unit)}"
    where = _goal_subject(g) if several else ""
    if _finite(g.get("moe_goal")):
        rel = (goal or {}).get("relative_moe")
        target = with_unit(num(g["moe_goal"]), unit)
        target = f"±{num(100 * float(rel), 3)} % of the mean (±{target})" if _finite(rel) else f"±{target}"
        text += f" against the goal {target}"
    return text + where


def _goal_subject(g: dict) -> str:
    parts = []
    if g.get("variable") is not None:
        parts.append(f"'{g['variable']}'")
    if g.get("domain") is not None:
        parts.append(f"in '{g['domain']}'")
    return f" for {' '.join(parts)}" if parts else ""


def _matching_goal(g: dict, goals: list[dict]) -> dict | None:
    for goal in goals:
        if goal.get("variable") in (None, g.get("variable")) and goal.get("domain") == g.get("domain"):
            return goal
    return goals[0] if goals else None


def verdict_sentence(rec: dict | None, info: dict | None = None, summary=None) -> str:
    """The verdict in one sentence (recommendation.json ``statement``).

    "Use 'X' (systematic sample, Horvitz-Thompson estimator, successive differences variance):
    400 trees, expected cost 3,650 EUR of the budget 4,500 EUR, published margin ±6.1 apples against the
    goal ±8 apples; this pick held in 97 % of 200 re-rehearsals."  With no pick, the plain
    'no design meets the goal' sentence of :func:`no_pick_sentence`.
    """
    if not isinstance(rec, dict):
        return "The scenario sets no goal (no [goal] margin of error or budget), so no design is recommended."
    labels = labels_of(info, rec)
    _, p = pick_of(rec)
    if p is None:
        return no_pick_sentence(rec, info, summary)
    goals = goals_of(rec)
    budget = next((g.get("budget") for g in goals if g.get("budget") is not None), None)
    strata = ((info or {}).get("frame") or {}).get("strata")
    parts = [size_text(p.get("method"), p.get("size"), p.get("mean_n"), labels, strata)]
    if _finite(p.get("mean_cost")) and (float(p["mean_cost"]) != 0 or budget is not None):
        cost = f"expected cost {money(p['mean_cost'], labels, p.get('cost_mcse'))}"
        if budget is not None:
            cost += f" of the budget {money(budget, labels)}"
        parts.append(cost)
    margins = [g for g in _pick_goals(p, rec) if _finite(g.get("published_moe")) or _finite(g.get("moe"))]
    parts += [_margin_clause(p, g, labels, _matching_goal(g, goals), len(margins) > 1) for g in margins]
    text = f"Use '{p.get('design')}' ({analysis_text(p, info)}): " + ", ".join(parts)
    stability = rec.get("pick_stability")
    if _finite(stability):
        rounds = rec.get("stability_rounds")
        of = f" of {int(rounds):,}" if _finite(rounds) else ""
        text += f"; this pick held in {100 * float(stability):.0f} %{of} re-rehearsals"
    return text + "."


def goal_text(goals: list[dict], labels: dict) -> str:
    """``a margin of at most ±8 apples and an expected cost of at most 4,500 EUR`` (each margin goal names
    its variable and domain when there are several)."""
    want = []
    for g in goals:
        subject = _goal_subject(g) if len(goals) > 1 else ""
        if g.get("moe") is not None:
            want.append(f"a margin of at most ±{with_unit(num(g['moe']), unit_of(labels, g.get('variable')))}"
                        + subject)
        elif g.get("relative_moe") is not None:
            want.append(f"a margin of at most ±{num(100 * float(g['relative_moe']), 3)} % of the mean" + subject)
    budget = next((g.get("budget") for g in goals if g.get("budget") is not None), None)
    if budget is not None:
        want.append(f"an expected cost of at most {money(budget, labels)}")
    return " and ".join(want)


def coverage_tolerance(rec: dict | None) -> float:
    """How far below nominal a coverage may fall: recommendation.json ``coverage_tolerance``, else the
    default of VERDICT_API (0.01, one percentage point; common practice)."""
    t = (rec or {}).get("coverage_tolerance")
    return float(t) if _finite(t) else COVERAGE_TOLERANCE  # [goal]'s default when the run names none


def shortfalls(row, goals: list[dict], nominal: float, tolerance: float, labels: dict,
               counted=(ev.NOT_MET, ev.UNDECIDED)) -> list[tuple[float, str]]:
    """(relative shortfall, words) of each criterion of a summary row whose state by the decision's evidence
    rule (:mod:`samplewright.decision.evidence`) is in ``counted``: by default every criterion not met;
    ``(NOT_MET,)`` only those clearly missed.  Empty when the row meets every criterion."""
    out = []
    exact = not _finite(row.get("replicates")) or bool(row.get("exact"))

    def mc(key):
        m = row.get(key)
        return 0.0 if exact or not _finite(m) else float(m)

    unit = unit_of(labels, row.get("variable"))
    g = _matching_goal({"variable": row.get("variable"), "domain": None}, goals) or {}
    goal_moe = g.get("moe")
    if goal_moe is None and g.get("relative_moe") is not None and _finite(row.get("truth")):
        goal_moe = float(g["relative_moe"]) * abs(float(row["truth"]))
    if _finite(goal_moe):
        # the summary's margins are at the run's confidence; the goal's may differ (the decision's scale)
        conf = g.get("confidence")
        scale = normal_quantile(float(conf)) / normal_quantile(nominal) if _finite(conf) else 1.0
        for key, what in (("published_moe", "published margin"), ("moe", "achieved margin")):
            if not _finite(row.get(key)):
                continue
            v, m = scale * float(row[key]), scale * mc(key + "_mcse")
            shown = scale * float(row[key + "_mcse"]) if _finite(row.get(key + "_mcse")) else None
            if int(ev.margin_code(v, m, v, m, float(goal_moe))) in counted:
                out.append((v / float(goal_moe) - 1,
                            f"its {what} ±{with_unit(mc_round(v, shown), unit)} is "
                            f"{'above' if v > float(goal_moe) else 'too close to call against'} the goal "
                            f"±{with_unit(num(goal_moe), unit)}"))
    budget = next((x.get("budget") for x in goals if x.get("budget") is not None), None)
    if _finite(budget) and _finite(row.get("mean_cost")):
        cost = float(row["mean_cost"])
        if int(ev.cost_code(cost, mc("cost_mcse"), float(budget))) in counted:
            out.append((cost / float(budget) - 1,
                        f"its expected cost {money(cost, labels, mc('cost_mcse'))} is "
                        f"{'above' if cost > float(budget) else 'too close to call against'} the budget "
                        f"{money(budget, labels)}"))
    floor = nominal - tolerance
    if _finite(row.get("coverage")):
        c = float(row["coverage"])
        R = int(row["replicates"]) if not exact else 1
        if int(ev.coverage_code(c, mc("coverage_mcse"), R, nominal, tolerance, exact)) in counted:
            out.append(((floor - c) / floor,
                        f"its intervals held the true value in {percent(c, row.get('coverage_mcse'))} "
                        f"of samples{'' if c < floor else ', too close to call'} against the promised "
                        f"{100 * nominal:g} % (less the tolerance {100 * tolerance:g} %)"))
    return out


def no_pick_sentence(rec: dict, info: dict | None = None, summary=None) -> str:
    """'No design meets the goal', naming the closest point of ``summary`` and what it misses."""
    labels = labels_of(info, rec)
    goals = goals_of(rec)
    text = "No rehearsed design meets the goal"
    want = goal_text(goals, labels)
    if want:
        text += f" ({want})"
    if summary is None or not len(summary):
        return text + "."
    nominal = float((info or {}).get("confidence") or (goals[0].get("confidence") if goals else None) or 0.95)
    tol = coverage_tolerance(rec)
    variables = {g.get("variable") for g in goals if g.get("variable") is not None}
    best = None
    for row in summary.to_dict("records"):
        if variables and row.get("variable") not in variables:
            continue
        misses = shortfalls(row, goals, nominal, tol, labels)
        score = max((s for s, _ in misses), default=0.0)
        if misses and (best is None or score < best[0]):
            best = (score, row, misses)
    if best is None:
        return text + "."
    _, row, misses = best
    est = f" with the {estimator_name(row.get('estimator'))} estimator" if row.get("estimator") else ""
    return (f"{text}: the closest is {point_name(row, labels, info)}{est}, where "
            + " and ".join(words for _, words in misses) + ".")


# ------------------------------------------------------------------ undecided points and passed-over reasons
CRITERIA = {"coverage": "coverage", "margin": "margin", "cost": "expected cost"}


def _criterion_value(c: str, value, mcse, labels: dict, variable) -> str:
    if c == "coverage":
        return percent(value, mcse)
    if c == "cost":
        return money(value, labels, mcse)
    return "±" + with_unit(mc_round(value, mcse), unit_of(labels, variable))


def _two_figures(count: int) -> int:
    """A count rounded up to two significant figures (an estimate from the current MCSE: 241,649 -> 250,000)."""
    if count < 100:
        return count
    step = 10 ** (len(str(count)) - 2)
    return -(-count // step) * step


def undecided_sentences(rec: dict | None, info: dict | None = None) -> list[str]:
    """One sentence per point the rehearsal could not settle, and how many replicates would."""
    if not isinstance(rec, dict):
        return []
    labels = labels_of(info, rec)
    out = []
    for u in rec.get("undecided") or []:
        if not isinstance(u, dict):
            continue
        c = str(u.get("criterion", ""))
        value = _criterion_value(c, u.get("value"), u.get("mcse"), labels, u.get("variable"))
        limit = _criterion_value(c, u.get("limit"), None, labels, u.get("variable"))
        mcse = u.get("mcse")  # itself to two significant figures (rounded by a tenth of itself), as the tables
        mc = _criterion_value(c, mcse, 0.1 * float(mcse) if _finite(mcse) else None, labels,
                              u.get("variable")).lstrip("±")
        text = (f"Undecided: {point_name(u, labels, info)} ({estimator_name(u.get('estimator'))}"
                + (f", {variance_name(u.get('variance'))} variance" if variance_name(u.get("variance")) else "")
                + f"): its {CRITERIA.get(c, c)} {value} (Monte Carlo error {mc}) is too close to the limit {limit} "
                f"to call")
        need, have = u.get("replicates_needed"), u.get("replicates")
        if _finite(need):
            text += f"; about {_two_figures(int(need)):,} replicates would settle it"
            text += f" ({int(have):,} were run)." if _finite(have) else "."
        else:
            text += "; more replicates than the run allowed would be needed (raise --max-replicates)."
        out.append(text)
    return out


STATE_WORDS = {
    "coverage": {"not met": "its intervals hold the true value too rarely",
                 "undecided": "its coverage is too close to the promised level to call"},
    "margin": {"not met": "its margin is above the goal", "undecided": "its margin is too close to the goal to call"},
    "cost": {"not met": "its expected cost is above the budget",
             "undecided": "its expected cost is too close to the budget to call"},
}


def passed_over_text(p: dict) -> str:
    """Why a point was not picked, in plain words: from its evidence states when the decision gives
    them (``evidence`` = {criterion: "met" | "not met" | "undecided"}), else its ``reason``."""
    ev = p.get("evidence")
    if isinstance(ev, dict):
        words = [STATE_WORDS[c][s] for c, s in ev.items() if c in STATE_WORDS and s in STATE_WORDS[c]]
        if words:
            return "; ".join(words)
    reason = str(p.get("reason") or "")
    return reason[:1].upper() + reason[1:] if reason else "Not needed for the goal"


# ------------------------------------------------------------------ the verdict card
def key_numbers(rec: dict | None, info: dict | None = None) -> list[tuple[str, str]]:
    """The verdict card's numbers for the pick, as (name, text) pairs; empty without a pick."""
    _, p = pick_of(rec)
    if p is None:
        return []
    labels = labels_of(info, rec)
    goals = goals_of(rec)
    strata = ((info or {}).get("frame") or {}).get("strata")
    rows = [("Design", f"'{p.get('design')}': {analysis_text(p, info)}"),
            ("Size", size_text(p.get("method"), p.get("size"), p.get("mean_n"), labels, strata))]
    budget = next((g.get("budget") for g in goals if g.get("budget") is not None), None)
    if _finite(p.get("mean_cost")) and (float(p["mean_cost"]) != 0 or budget is not None):
        cost = money(p["mean_cost"], labels, p.get("cost_mcse"))
        if _finite(p.get("p90_cost")) and float(p["p90_cost"]) > float(p["mean_cost"]) * (1 + 1e-9):
            cost += f" (90 % of samples at most {money(p['p90_cost'], labels)})"
        rows.append(("Expected cost", cost))
    if budget is not None:
        rows.append(("Budget", money(budget, labels)))
    margins = _pick_goals(p, rec)
    for g in margins:
        unit = unit_of(labels, g.get("variable"))
        sub = _goal_subject(g) if len(margins) > 1 else ""
        goal = f" (goal ±{with_unit(num(g['moe_goal']), unit)})" if _finite(g.get("moe_goal")) else ""
        if _finite(g.get("moe")):
            rows.append((f"Achieved margin{sub}", f"±{with_unit(mc_round(g['moe'], _margin_mcse(p, g, 'moe')), unit)}"
                         + goal))
        if _finite(g.get("published_moe")):
            text = f"±{with_unit(mc_round(g['published_moe'], _margin_mcse(p, g, 'published_moe')), unit)}"
            if _finite(g.get("published_moe_p90")):
                text += f", 90th percentile ±{with_unit(num(g['published_moe_p90'], 3), unit)}"
            rows.append((f"Published margin{sub}", text + goal))
        if _finite(g.get("coverage")):
            conf = float((info or {}).get("confidence") or 0.95)
            rows.append((f"Coverage of the {100 * conf:g} % intervals{sub}",
                         coverage_text(g["coverage"], g.get("coverage_mcse"), p.get("replicates"))))
    stability = rec.get("pick_stability")
    if _finite(stability):
        rounds = rec.get("stability_rounds")
        text = f"{100 * float(stability):.0f} %" + (f" of {int(rounds):,} re-rehearsals" if _finite(rounds) else "")
        ru = rec.get("runner_up")
        if isinstance(ru, dict) and _finite(rec.get("runner_up_share")):
            text += (f"; runner-up {point_name(ru, labels, info)} in {100 * float(rec['runner_up_share']):.0f} %")
        rows.append(("Stability", text))
    ev = p.get("evidence")
    judged = {c: s for c, s in ev.items() if s is not None} if isinstance(ev, dict) else {}  # None: not a goal
    if judged:
        rows.append(("Evidence", ", ".join(f"{CRITERIA.get(c, c)} {s}" for c, s in judged.items())))
    return rows


def _same_analysis(p, key: tuple) -> bool:
    """Whether pick ``p`` is the design, estimator and variance formula ``key``."""
    return isinstance(p, dict) and (p.get("design"), p.get("estimator"), p.get("variance")) == key


def between_sizes_sentences(rec: dict | None, labels: dict) -> list[str]:
    """What the fitted curves say between the rehearsed sizes of the picks (recommendation ``interpolated``):
    a smaller size that would meet the margin, or a larger one the budget would buy.  Each is interpolated
    from a fit of MSE = a/n + b (decision/frontier.py), not rehearsed, and says so."""
    if not isinstance(rec, dict):
        return []
    c, b = rec.get("cheapest_meeting_moe"), rec.get("best_within_budget")
    out = []
    for row in rec.get("interpolated") or []:
        if not isinstance(row, dict) or not row.get("coverage_acceptable_at_every_size"):
            continue
        key = (row.get("design"), row.get("estimator"), row.get("variance"))
        if _same_analysis(c, key) and _finite(row.get("size_for_moe")) and row.get("moe_basis") == "interpolated":
            need = math.ceil(float(row["size_for_moe"]))
            if need < int(c["size"]):
                out.append(f"Between the rehearsed sizes, '{row['design']}' would meet the margin at about "
                           f"{need:,} (expected cost about {money(row.get('cost_for_moe'), labels)}): interpolated "
                           f"from a fit of MSE = a/n + b, not rehearsed.")
        buys = _finite(row.get("size_for_budget")) and row.get("budget_basis") == "interpolated"
        if _same_analysis(b, key) and buys and _finite(row.get("moe_for_budget")) \
                and math.floor(float(row["size_for_budget"])) > int(b["size"]):
            unit = unit_of(labels, b.get("variable"))
            out.append(f"Between the rehearsed sizes, the budget would buy about "
                       f"{math.floor(float(row['size_for_budget'])):,} with '{row['design']}' (achieved margin about "
                       f"±{with_unit(num(row['moe_for_budget']), unit)}): interpolated from a fit of MSE = a/n + b, "
                       f"not rehearsed.")
    return out

