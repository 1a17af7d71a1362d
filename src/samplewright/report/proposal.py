"""The report's section "How the proposal was found" (a ``propose`` run only): what was screened, how,
and whether the screen's anticipated variances held in the rehearsal.  Numbers and sentences only; the
template prints them (escaped) and the two figures (``proposal_check``, ``proposal_boundaries``) are drawn
by :mod:`samplewright.report.figures`."""

from __future__ import annotations

import numpy as np

from samplewright.report.table import with_mcse
from samplewright.report.verdict import labels_of, money, num

#: the figures the section shows (and the general figure list leaves out)
FIGURES = ("proposal_check", "proposal_boundaries")


def proposal_context(res) -> dict | None:
    """The section's content, or None for a run that is not a proposal."""
    info = (res.info or {}).get("proposal")
    cand = getattr(res, "candidates", None)
    if not info or cand is None:
        return None
    labels = labels_of(res.info, getattr(res, "recommendation", None))
    goal = info.get("goal") or {}
    kind, value = next(iter(goal.items())) if goal else (None, None)
    goal_text = {"budget": f"the most precise design a mean cost of {money(value, labels)} buys",
                 "moe": f"the cheapest design whose margin of error is at most {num(value)}",
                 "relative_moe": f"the cheapest design whose margin of error is at most {num(100 * (value or 0))}% "
                                 f"of the mean"}.get(kind, "the goal")
    if info.get("auxiliary_only"):
        basis = (f"Screening used the auxiliary column {info.get('screened_on')} in place of the study variable, as "
                 f"real planning must (the study variable is not known before the survey); the rehearsal then "
                 f"measured every shortlisted design on the study variable itself.")
    else:
        basis = (f"Screening used the study variable {info.get('screened_on')} itself: a rehearsal knows its value "
                 f"for every unit of the frame. For real planning, screen on an auxiliary instead "
                 f"(samplewright propose --screen-on COLUMN).")
    families = []
    for fam, rows in cand.groupby("family", sort=True):
        ok = rows["size"].notna()
        families.append({"family": str(fam), "screened": int(len(rows)), "feasible": int(ok.sum()),
                         "best_se": num(rows.loc[ok, "anticipated_se"].min()) if ok.any() else "n/a"})
    short = cand[cand["shortlisted"].astype(bool)].sort_values("rank")
    rows = []
    for r in short.itertuples(index=False):
        rv, rm = float(r.rehearsed_variance), float(r.rehearsed_variance_mcse)
        se = float(np.sqrt(rv)) if np.isfinite(rv) else float("nan")
        se_mcse = rm / (2 * se) if se > 0 else float("nan")
        z = (rv - float(r.anticipated_variance)) / rm if rm > 0 else float("nan")
        rows.append({"rank": int(r.rank), "design": str(r.design), "family": str(r.family), "size": int(r.size),
                     "anticipated_se": num(r.anticipated_se), "rehearsed_se": with_mcse(se, se_mcse),
                     "z": "n/a" if not np.isfinite(z) else f"{z:+.1f}", "expected_cost": money(r.expected_cost, labels),
                     "rehearsed_cost": money(r.rehearsed_cost, labels)})
    return {"goal_text": goal_text, "basis": basis, "screened": int(len(cand)), "families": families,
            "shortlist": rows, "stratifier": info.get("stratifier"), "notes": list(info.get("notes") or []),
            "figures": list(FIGURES)}
