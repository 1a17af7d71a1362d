"""From a scenario and a goal to the proposal: the screen, the shortlist as a scenario, and the check of the screen.

``prepare`` resolves the goal (a budget, a margin of error, or a margin relative to the mean; the
scenario's ``[goal]`` when none is given), screens the candidates (:mod:`samplewright.proposal.search`)
and returns the scenario that rehearses the shortlist -- the scenario ``DIR/proposal.toml`` holds.
``rehearsed`` adds to the candidates the rehearsal's empirical variance of each shortlisted design's
HT mean, with its Monte Carlo standard error, so the report can show whether the screen was honest.

Screening uses the study variable's values, which a rehearsal knows.  For real planning, where the
target is not known, ``screen_on`` names an auxiliary column (the size column or one of the frame's
auxiliary columns) whose variance stands in for the target's; the margin must then be relative.
"""

from __future__ import annotations

import copy
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from samplewright.config.toml_text import toml_text
from samplewright.decision.planning import z_value
from samplewright.errors import InputError, show
from samplewright.evaluation.measures import empirical_se_mcse
from samplewright.proposal.search import Screen, screen
from samplewright.simulation.scenario import Scenario, scenario_from_dict

#: how many shortlisted designs are rehearsed by default
DEFAULT_CANDIDATES = 6


@dataclass(frozen=True)
class Proposal:
    """The screen and what the rehearsal of its shortlist needs."""

    screen: Screen
    scenario: Scenario  # the shortlist, rehearsed by ``run``
    doc: dict  # the same as a scenario document (DIR/proposal.toml), the frame path absolute
    info: dict  # run.json "proposal"


def prepare(scenario: Scenario, frame, budget=None, moe=None, relative_moe=None,
            max_candidates: int = DEFAULT_CANDIDATES, screen_on: str | None = None,
            stratify_by: str | None = None, seed: int | None = None) -> Proposal:
    """Screen the candidates for the goal and build the scenario of the shortlist (see the module notes)."""
    if isinstance(max_candidates, bool) or not isinstance(max_candidates, (int, np.integer)) or max_candidates < 1:
        raise InputError(f"--max-candidates must be a whole number of at least 1, got {show(max_candidates)}")
    given = {k: v for k, v in (("budget", budget), ("moe", moe), ("relative_moe", relative_moe)) if v is not None}
    if len(given) > 1:
        raise InputError(f"propose: give one goal, --budget, --moe or --relative-moe, not {' and '.join(given)}")
    goal = scenario.goal
    if not given:
        if goal is not None and goal.moe is not None:
            given = {"moe": goal.moe}
        elif goal is not None and getattr(goal, "relative_moe", None) is not None:  # the [goal] key of issue 14
            given = {"relative_moe": goal.relative_moe}
        elif goal is not None and goal.budget is not None:
            given = {"budget": goal.budget}
        else:
            raise InputError("propose needs a goal: give --budget, --moe or --relative-moe, or a [goal] table in "
                             "the scenario")
    (kind, value), = given.items()
    if not (isinstance(value, (int, float)) and np.isfinite(value) and value > 0):
        raise InputError(f"propose: --{kind.replace('_', '-')} must be a number above 0, got {show(value)}")
    variable = goal.variable if goal is not None and goal.variable else frame.variables[0]
    y = frame.y[:, frame.variables.index(variable)]
    confidence = goal.confidence if goal is not None and goal.confidence else scenario.confidence
    z = z_value(confidence)
    screened_on, s = variable, y
    if screen_on is not None:
        screened_on, s = _auxiliary(frame, screen_on)
        if kind == "moe":
            raise InputError("propose: screening on an auxiliary needs --budget or --relative-moe (a margin "
                             "given with --moe is in the target's units, which the auxiliary does not share)")
    budget = value if kind == "budget" else None
    margin = None if kind == "budget" else value if kind == "moe" else value * abs(float(np.mean(s)))
    bound = scenario.cost.bind(frame)
    found = screen(bound, scenario.cost, s, screened_on, budget=budget, moe=margin, z=z,
                   seed=scenario.seed if seed is None else seed, max_candidates=int(max_candidates),
                   stratify_by=stratify_by)
    if not found.shortlist:  # nothing is written: say why for the reference design (SRS), else the first
        cand = found.candidates
        ref = cand[cand["design"] == "srs"] if (cand["design"] == "srs").any() else cand.head(1)
        why = "".join(f"; e.g. {d}: {note}" for d, note in zip(ref["design"], ref["note"]) if note)
        raise InputError(f"propose: none of the {len(cand)} candidate designs meets the goal "
                         f"({kind.replace('_', ' ')} = {value:g}){why}")
    goal_table = {kind: float(value)}  # the goal as given: a budget, a margin, or a margin relative to the mean
    doc = proposal_doc(scenario, found.shortlist, goal_table, variable, confidence)
    base = scenario.source.parent if scenario.source is not None else Path(".")
    rehearsal = scenario_from_dict(doc, base=base, source=scenario.source)
    fam = found.candidates.groupby("family", sort=True).size()
    info = {"goal": {kind: value}, "variable": variable, "screened_on": screened_on,
            "auxiliary_only": screen_on is not None, "stratifier": found.stratifier,
            "candidates": len(found.candidates), "by_family": {str(k): int(v) for k, v in fam.items()},
            "shortlist": [t["label"] for t in found.shortlist], "boundaries": found.boundaries,
            "notes": found.notes, "stratifier_histogram": _histogram(found.stratifier_values)}
    return Proposal(screen=found, scenario=rehearsal, doc=doc, info=info)


#: classes of the stratifier's histogram kept for the report's figure
HISTOGRAM_CLASSES = 40


def _histogram(x) -> dict | None:
    """The stratifier's distribution for the report (which never sees the frame): class edges and counts,
    on a log scale when the values are positive and span more than two powers of ten."""
    if x is None:
        return None
    x = np.asarray(x, dtype=float)
    log = bool(x.min() > 0 and x.max() / x.min() > 100)
    edges = (np.geomspace(x.min(), x.max(), HISTOGRAM_CLASSES + 1) if log
             else np.linspace(x.min(), x.max(), HISTOGRAM_CLASSES + 1))
    counts, _ = np.histogram(x, bins=edges)
    return {"edges": edges.tolist(), "counts": counts.tolist(), "log": log}


def _auxiliary(frame, name: str):
    """The column ``screen_on`` names (the size column or an auxiliary), as (label, values)."""
    values = frame.numeric_column(name)
    if values is None:
        raise InputError(f"propose: --screen-on {name!r} is neither the frame's size column nor an auxiliary "
                         f"column ({', '.join(frame.numeric_names) or 'none set in [frame]'})")
    return f"{name} (auxiliary only)", values


def proposal_doc(scenario: Scenario, shortlist: list, goal: dict, variable: str, confidence: float) -> dict:
    """The scenario document of the shortlist: the scenario's own settings, its designs replaced by the
    shortlist and its goal by the one proposed for; a frame file's path made absolute."""
    doc = {k: copy.deepcopy(v) for k, v in scenario.raw.items() if k not in ("design", "goal")}
    if scenario.frame.path is not None:
        doc["frame"]["path"] = str(Path(scenario.frame.path).resolve())
    doc["design"] = [dict(t) for t in shortlist]
    doc["goal"] = {**goal, "variable": variable, "confidence": float(confidence)}
    return doc


def proposal_text(doc: dict, candidates: pd.DataFrame, out) -> str:
    """DIR/proposal.toml: ``doc`` with the frame path relative to folder ``out``, each design preceded by a
    comment saying what the screen expected of it."""
    doc = copy.deepcopy(doc)
    path = doc.get("frame", {}).get("path")
    if path is not None:
        try:
            doc["frame"]["path"] = os.path.relpath(path, Path(out).resolve())
        except ValueError:  # another drive: keep it absolute
            pass
    rows = candidates.set_index("design")
    comments = {"": [f"samplewright propose: the {len(doc['design'])} best of {len(candidates)} screened designs, "
                     "best first (every candidate is in candidates.csv).",
                     "Edit and rehearse it with `samplewright run`; draw the sample with `samplewright draw`."]}
    for i, t in enumerate(doc["design"], start=1):
        r = rows.loc[t["label"]]
        comments[f"[[design]] {i}"] = [f"{r['family']}: anticipated SE of the mean {r['anticipated_se']:.4g}, "
                                       f"expected cost {r['expected_cost']:.6g}"]
    return toml_text(doc, comments)


def rehearsed(candidates: pd.DataFrame, summary: pd.DataFrame, variable: str) -> pd.DataFrame:
    """``candidates`` with the rehearsal's variance of each shortlisted design's HT mean, its MCSE
    (2 empSE MCSE(empSE), the delta method on MCSE(empSE) = empSE / sqrt(2 (R - 1)), Morris, White and
    Crowther 2019, table 6) and the mean cost; empty for the others."""
    rows = summary[(summary["estimator"] == "ht") & (summary["variable"] == variable)].set_index("design")
    rows = rows[~rows.index.duplicated()]  # one row per design (several variance formulas share the estimates)
    out = candidates.copy()
    se = out["design"].map(rows["empirical_se"]).where(out["shortlisted"])
    R = out["design"].map(rows["replicates"]).where(out["shortlisted"])
    out["rehearsed_variance"] = se**2
    out["rehearsed_variance_mcse"] = 2.0 * se * empirical_se_mcse(se, R)
    out["rehearsed_cost"] = out["design"].map(rows["mean_cost"]).where(out["shortlisted"])
    return out
