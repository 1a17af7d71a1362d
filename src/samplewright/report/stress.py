"""The report's "What would change the pick" section: the pick at each assumption point and the break-even values.

Built from a stress run's tables only (``stress_verdict``, ``break_even``) and run.json's ``stress``
account; every sentence about a break-even lives here.  :func:`stress_context` returns None for a run
without ``[[assumption]]`` tables, and the section is then left out.
"""

from __future__ import annotations

import math

from samplewright.decision.stress import BREAK_EVEN_Z, pick_label
from samplewright.report.figures import stress_of
from samplewright.report.findings import money, num


def _value(v) -> str:
    return f"{float(v):g}"


def _is_blank(v) -> bool:
    return v is None or (isinstance(v, float) and math.isnan(v))


def change_sentence(row, names: list[str]) -> str:
    """One break-even row in words (the assumption, the picks either side, the value and its interval)."""
    name = row["assumption"]
    fixed = [f"{n} = {_value(row[n])}" for n in names if n != name and not _is_blank(row.get(n))]
    where = f" (with {', '.join(fixed)})" if fixed else ""
    before, after = row["pick_before"], row["pick_after"]
    if _is_blank(row["break_even"]) or not math.isfinite(float(row["break_even"])):
        return (f"The pick changes from {before} to {after} between {name} = {_value(row['from_value'])} and "
                f"{_value(row['to_value'])}{where}; the change is not interpolated (the margin, cost or goal "
                f"behind the pick does not cross between the two values: the change comes from coverage or "
                f"from a design that qualifies at only one of them).")
    return (f"{before} stays the pick while {name} is below about {_value(round(float(row['break_even']), 4))}"
            f"{where}; above it {after} is picked. Interval: {_value(round(float(row['low']), 4))} to "
            f"{_value(round(float(row['high']), 4))} (+-{BREAK_EVEN_Z:g} standard errors; deciding quantity: "
            f"{row['criterion']}).")


def stress_context(res) -> dict | None:
    """Everything the section prints (None without a stress run)."""
    info = stress_of(res)
    if not info:
        return None
    names = [a["name"] for a in info["assumptions"]]
    verdict = res.stress_verdict  # present with the stress account (stress_of)
    changes = res.break_even if res.break_even is not None else []  # break_even.csv may be missing
    picks = verdict["design"].dropna().unique()
    if verdict["pick"].isna().all():
        lead = ["The scenario sets no [goal], so no design is picked at any point; stress.csv holds every point's "
                "measures, and the figure shows how each design's margin and cost move with the assumptions."]
    elif len(changes):
        lead = [change_sentence(r, names) for _, r in changes.iterrows()]
    elif len(picks) == 1 and verdict["design"].notna().all():
        lead = [f"The pick is the same at every point rehearsed: {pick_label(verdict.iloc[0].to_dict())}."]
    else:
        lead = ["No pick changes between neighbouring points of an assumption."]
    rows = []
    for _, v in verdict.iterrows():
        p = v.to_dict()
        rows.append({"point": int(v["point"]), "values": [_value(v[n]) for n in names],
                     "pick": "nothing qualifies" if _is_blank(p.get("design")) else pick_label(p),
                     "moe": num(p.get("moe")), "cost": money(p.get("mean_cost")),
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
