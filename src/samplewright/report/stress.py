"""The report's "What would change the pick" section: the pick at each assumption point and the break-even values.

Built from a stress run's tables only (``stress_verdict``, ``break_even``) and run.json's ``stress``
account; every sentence about a break-even lives here.  :func:`stress_context` returns None for a run
without ``[[assumption]]`` tables, and the section is then left out.
"""

from __future__ import annotations

import math

import pandas as pd

from samplewright.decision.stress import BREAK_EVEN_Z, pick_label
from samplewright.report.figures import stress_of
from samplewright.report.findings import money
from samplewright.report.names import estimator_name, variance_name
from samplewright.report.verdict import mc_round


def _value(v) -> str:
    return f"{float(v):g}"


def _is_blank(v) -> bool:
    return v is None or (isinstance(v, float) and math.isnan(v))


def _where(row, names: list[str]) -> str:
    fixed = [f"{n} = {_value(row[n])}" for n in names if n != row["assumption"] and not _is_blank(row.get(n))]
    return f" (with {', '.join(fixed)})" if fixed else ""


def _at(row) -> str:
    """The break-even value and its interval, or the bracketing values when it is not interpolated."""
    x = row["break_even"]
    if _is_blank(x) or not math.isfinite(float(x)):
        return (f"somewhere between {_value(row['from_value'])} and {_value(row['to_value'])} (not interpolated: "
                f"no margin, cost or goal behind the pick crosses there; coverage or another design decides)")
    return (f"about {_value(round(float(x), 4))} (interval {_value(round(float(row['low']), 4))} to "
            f"{_value(round(float(row['high']), 4))})")


def _plain(p: dict) -> str:
    """A pick as the section names it: design, size, and the plain names of its estimator and variance formula
    (the tables' :func:`~samplewright.decision.stress.pick_label` keeps the codes)."""
    tail = "" if _is_blank(p.get("variance")) else f", {variance_name(p['variance'])}"
    return f"{p['design']}, size {int(p['size'])}, {estimator_name(p['estimator'])}{tail}"


def _design(v) -> str:
    return "nothing" if _is_blank(v) else f"'{v}'"


def change_sentences(changes: pd.DataFrame, names: list[str], plain: dict | None = None) -> list[str]:
    """The break-even rows in words: first where the design picked changes, then where only its size or
    estimator does (one sentence per design and line); ``plain`` maps a pick's table label to its words."""
    plain = plain or {}
    out = []
    for _, r in changes.iterrows():
        if r["design_before"] == r["design_after"]:
            continue
        why = "" if _is_blank(r["criterion"]) else f", because {r['criterion']}"
        out.append(f"{_design(r['design_before'])} is picked while {r['assumption']} is below {_at(r)}"
                   f"{_where(r, names)}; above it {_design(r['design_after'])} is picked{why}.")
    same = changes[changes["design_before"] == changes["design_after"]]
    for (design, name), g in same.groupby(["design_before", "assumption"], sort=False):
        cut = len(design) + 2  # pick_label starts "design, "
        steps = "; ".join(f"from {plain.get(r['pick_before'], r['pick_before'])[cut:]} to "
                          f"{plain.get(r['pick_after'], r['pick_after'])[cut:]} at {_at(r)}"
                          for _, r in g.iterrows())
        out.append(f"The size or estimator picked for '{design}' changes with {name}{_where(g.iloc[0], names)}: "
                   f"{steps}.")
    return out


def stress_context(res) -> dict | None:
    """Everything the section prints (None without a stress run)."""
    info = stress_of(res)
    if not info:
        return None
    names = [a["name"] for a in info["assumptions"]]
    verdict = res.stress_verdict  # present with the stress account (stress_of)
    changes = res.break_even if res.break_even is not None else []  # break_even.csv may be missing
    picks = verdict["design"].dropna().unique()
    chosen = [p for p in verdict.to_dict("records") if not _is_blank(p.get("design"))]
    plain = {pick_label({**p, "size": int(p["size"])}): _plain(p) for p in chosen}
    if verdict["pick"].isna().all():
        lead = ["The scenario sets no [goal], so no design is picked at any point; stress.csv holds every point's "
                "measures, and the figure shows how each design's margin and cost move with the assumptions."]
    elif len(changes):
        lead = change_sentences(changes, names, plain)
    elif len(picks) == 1 and verdict["design"].notna().all():
        lead = [f"The pick is the same at every point rehearsed: {_plain(verdict.iloc[0].to_dict())}."]
    else:
        lead = ["No pick changes between neighbouring points of an assumption."]
    rows = []
    for _, v in verdict.iterrows():
        p = v.to_dict()
        rows.append({"point": int(v["point"]), "values": [_value(v[n]) for n in names],
                     "pick": "nothing qualifies" if _is_blank(p.get("design")) else _plain(p),
                     "moe": mc_round(p.get("moe"), p.get("moe_mcse")), "cost": money(p.get("mean_cost")),
                     "evidence": ", ".join(f"{k}: {p[f'evidence_{k}']}" for k in ("coverage", "margin", "cost")
                                           if not _is_blank(p.get(f"evidence_{k}")))})
    assumptions = [{"name": a["name"], "key": a["set"], "tried": ", ".join(_value(x) for x in a["values"]),
                    "base": _value(a["base"])} for a in info["assumptions"]]
    mode = ("every combination of the values (grid)" if info["mode"] == "grid"
            else "each assumption over its values, the others at the scenario's own values")
    return {"mode": mode, "points": int(info["points"]), "assumptions": assumptions, "names": names,
            "lead": lead, "rows": rows, "method": _METHOD}


_METHOD = (
    "Every point reuses the run's random samples (common random numbers), so differences between points are the "
    "assumptions' effect rather than simulation noise. Where the pick changes between two neighbouring values, the "
    "quantity that decided it (the margin or cost of the two picks, or a pick's margin against the goal) is "
    "interpolated linearly between them; its zero is the break-even value. Its standard error is by the delta "
    f"method, from each rehearsed sample's contribution at both values, and the interval is +-{BREAK_EVEN_Z:g} "
    "standard errors. Linear interpolation assumes the quantity is close to a straight line between the values: "
    "rehearse more values near a break-even to check it.")
