"""What the report and the brief say: one context built from a run's tables, shared by both templates."""

from __future__ import annotations

import datetime as _dt
import re
from pathlib import Path

import jinja2
import matplotlib
import numpy as np

from samplewright._version import __version__
from samplewright.decision.evidence import NOT_MET
from samplewright.evaluation.stopping import replicate_counts
from samplewright.report.figures import FIGURES, figure_names
from samplewright.report.findings import SHORT_ESTIMATOR, findings, summary_rows
from samplewright.report.names import estimator_name, parameter_text, variance_name
from samplewright.report.table import compact_columns, compact_rows, coverage_cell, default_rows, with_frontier_mcse
from samplewright.report.verdict import (
    analysis_text,
    between_sizes_sentences,
    cost_header,
    coverage_text,
    coverage_tolerance,
    goal_text,
    goals_of,
    key_numbers,
    labels_of,
    margin_header,
    mc_round,
    money,
    num,
    passed_over_text,
    pick_of,
    shortfalls,
    size_text,
    undecided_sentences,
    unit_of,
    verdict_sentence,
)

CAUTIONS = [
    ("The rehearsal treats the frame as the population. Units missing from the frame, duplicates and "
    "out-of-date "
    "records are not rehearsed unless the scenario models them; a real frame is only as good as its "
    "coverage."),
    ("A synthetic frame is only as good as the structure asked for (strata, clusters, skewness, list order): "
    "the ranking of designs can change on a population that differs from it."),
    ("Unless the scenario models non-response or measurement error, every sampled unit is assumed to respond "
    "and to be measured without error."),
    ("Costs come from the scenario's cost model, not from quotes; standard errors and intervals are those of "
    "the estimators listed, and a different analysis can behave differently."),
    ("Every measure carries Monte Carlo error (shown in brackets). A difference between designs smaller than "
    "about two of those errors is not evidence of a difference."),
    ("Decisions with legal, financial or health consequences (audit findings, health or safety surveys) must "
    "follow the applicable professional standards and local regulations, and a qualified statistician's "
    "review."),
]

#: replaces the Monte Carlo caution (CAUTIONS[4]) for an exact-mode run
EXACT_CAUTION = ("Every measure is computed over every possible sample of each design, weighted by its "
                 "probability: the numbers are exact for this frame, with no error from the rehearsal itself.")

PICKS = (
    ("cheapest_meeting_moe", "Cheapest design meeting the margin-of-error goal"),
    ("best_within_budget", "Most precise design within the budget"),
)


def slug(text: str) -> str:
    """A file-name-safe form of a label."""
    s = re.sub(r"[^A-Za-z0-9]+", "-", str(text)).strip("-").lower()
    return s or "x"


def figure_variables(res) -> list[str]:
    """Study variables that get their own figures: the frame's targets (domain rows stay in the table)."""
    have = list(dict.fromkeys(res.summary["variable"])) if len(res.summary) else []
    targets = [v for v in ((res.info or {}).get("frame") or {}).get("variables") or [] if v in have]
    return targets or have


def figure_plan(res) -> list[dict]:
    """Every figure the report draws: name, file stem, variable, heading and caption."""
    variables = figure_variables(res)
    exact = bool((res.info or {}).get("exact"))
    plan = []
    for name in figure_names(res):
        spec = FIGURES[name]
        caption = spec.exact_caption if exact and spec.exact_caption else spec.caption
        targets = variables if spec.per_variable else [None]
        for i, var in enumerate(targets):
            stem = name if (i == 0 or var is None) else f"{name}-{slug(var)}"
            head = spec.heading if (var is None or len(variables) == 1) else f"{spec.heading}: {var}"
            plan.append(
                {"name": name, "stem": stem, "variable": var, "heading": head, "caption": caption}
            )
    return plan


def _pick_row(p: dict, label: str, info: dict) -> dict:
    """A pick as a table row (the currency and unit are in the table's headers)."""
    return {
        "label": label,
        "design": p.get("design"),
        "size": p.get("size"),
        "estimator": estimator_name(p["estimator"]) if p.get("estimator") else "",
        "analysis": analysis_text(p, info),
        "mean_cost": money(p.get("mean_cost"), None, p.get("cost_mcse")),
        "moe": mc_round(p.get("moe"), p.get("moe_mcse")),
        "published_moe": mc_round(p.get("published_moe"), p.get("published_moe_mcse"))
        if p.get("published_moe") is not None else "n/a",
        "coverage": coverage_text(p.get("coverage"), p.get("coverage_mcse"), p.get("replicates")),
        "interpolated": bool(p.get("interpolated", False)),
    }


def _untrusted_point(p: dict) -> bool:
    """Passed over because its intervals under-cover (its evidence, or an older recommendation's reason)."""
    ev = p.get("evidence")
    if isinstance(ev, dict) and "coverage" in ev:
        return ev["coverage"] == "not met"
    return "under-cover" in str(p.get("reason", ""))


def recommendation_context(res, labels: dict) -> dict | None:
    rec = res.recommendation
    if not isinstance(rec, dict):
        return None
    info = res.info or {}
    picks = [_pick_row(rec[k], label, info) for k, label in PICKS if isinstance(rec.get(k), dict)]
    missing = [label for k, label in PICKS if k in rec and not isinstance(rec.get(k), dict)]
    passed = []
    for p in rec.get("passed_over") or []:
        if isinstance(p, dict):
            passed.append(
                {
                    "design": p.get("design"),
                    "size": p.get("size"),
                    "reason": passed_over_text(p),
                    "estimator": estimator_name(p["estimator"]) if p.get("estimator") else "",
                    "untrusted": _untrusted_point(p),
                }
            )
    goal = rec.get("goal") if isinstance(rec.get("goal"), dict) else {}
    conf = goal.get("confidence")
    want = goal_text(goals_of(rec), labels)
    return {
        "picks": picks,
        "unmet": missing,
        "passed_over": passed,
        "goal_text": want + (f" (margins at {100 * float(conf):g} % confidence)" if want and conf else ""),
        "goal_variable": goal.get("variable"),
        "untrusted": _untrusted(passed),
        "rules": [str(rec[k]) for k in ("coverage_rule", "margin_rule") if rec.get(k)],
        "between": between_sizes_sentences(rec, labels),
    }


def verdict_context(res) -> dict:
    """The verdict card: the sentence, the undecided points, the key numbers."""
    rec, info = res.recommendation, res.info or {}
    return {
        "sentence": verdict_sentence(rec, info, with_frontier_mcse(res.summary, res.frontier)),
        "undecided": undecided_sentences(rec, info),
        "numbers": key_numbers(rec, info),
        "has_goal": isinstance(rec, dict),
    }


def _margin_of(row: dict) -> float:
    """The larger of the achieved and published margins of a summary row (a margin goal needs both)."""
    vals = [float(row[k]) for k in ("moe", "published_moe") if row.get(k) is not None and np.isfinite(row[k])]
    return max(vals) if vals else float("nan")


def _same_point(row: dict, p: dict | None) -> bool:
    return isinstance(p, dict) and all(row.get(k) == p.get(k) for k in ("design", "size", "estimator")) and (
        not p.get("variance") or row.get("variance") in (None, p.get("variance")))


def goal_variable(res):
    """The study variable the verdict is about: the pick's, the first goal's, else the summary's first."""
    rec = res.recommendation if isinstance(res.recommendation, dict) else None
    _, pick = pick_of(rec)
    goals = goals_of(rec) if rec else []
    return (pick or {}).get("variable") or next((g.get("variable") for g in goals if g.get("variable")), None) \
        or res.summary["variable"].iloc[0]


def comparison_rows(res, labels: dict) -> list[dict]:
    """Each design at its best size for the goal: the pick itself, else its cheapest point meeting every
    goal, else its point closest to them (:func:`samplewright.report.verdict.shortfalls`); without a goal,
    its most precise point.  One row per design, at its default analysis unless the pick is analysed
    otherwise."""
    rec, info = res.recommendation if isinstance(res.recommendation, dict) else None, res.info or {}
    summary = res.summary
    if summary is None or not len(summary):
        return []
    goals = goals_of(rec) if rec else []
    _, pick = pick_of(rec)
    runner = (rec or {}).get("runner_up")
    var = goal_variable(res)
    nominal = float(info.get("confidence") or 0.95)
    tol = coverage_tolerance(rec)
    summary = with_frontier_mcse(summary, res.frontier)
    rows = default_rows(summary, var).to_dict("records")
    if pick is not None and not any(_same_point(r, pick) for r in rows):  # the pick analysed otherwise
        rows += [r for r in summary[summary["variable"] == var].to_dict("records") if _same_point(r, pick)][:1]
    exact = bool(info.get("exact"))
    out = []
    for design in dict.fromkeys(r["design"] for r in rows):
        mine = [r for r in rows if r["design"] == design]
        chosen = next((r for r in mine if _same_point(r, pick)), None)
        if chosen is None and goals:
            scored = [(shortfalls(r, goals, nominal, tol, labels), r) for r in mine]
            meets = [r for miss, r in scored if not miss]
            chosen = min(meets, key=lambda r: (r["mean_cost"], r["mean_n"])) if meets else min(
                scored, key=lambda x: max(s for s, _ in x[0]))[1]
        if chosen is None:
            chosen = min(mine, key=lambda r: _margin_of(r) if np.isfinite(_margin_of(r)) else np.inf)
        close = shortfalls(chosen, goals, nominal, tol, labels) if goals else []  # every criterion not met
        misses = shortfalls(chosen, goals, nominal, tol, labels, (NOT_MET,)) if goals else []  # clearly missed
        role = "pick" if _same_point(chosen, pick) else "runner-up" if _same_point(chosen, runner) else ""
        pub = chosen.get("published_moe")
        out.append({
            "design": design,
            "size": size_text(chosen.get("method"), chosen.get("size"), chosen.get("mean_n"), labels,
                              (info.get("frame") or {}).get("strata")),
            "analysis": analysis_text({k: chosen.get(k) for k in ("estimator", "variance", "design")}, info),
            "mean_cost": (money(chosen["mean_cost"], None, None if exact else chosen.get("cost_mcse"))
                          if (summary["mean_cost"] != 0).any() else "—"),
            "moe": mc_round(chosen["moe"], None if exact else chosen.get("moe_mcse")),
            "published_moe": "n/a" if pub is None
            else mc_round(pub, None if exact else chosen.get("published_moe_mcse")),
            "coverage": coverage_cell(chosen["coverage"], chosen["coverage_mcse"], chosen.get("replicates"), exact),
            "status": role or ("" if not goals else "; ".join(w.removeprefix("its ") for _, w in misses) if misses
                               else "too close to call: " + "; ".join(w.removeprefix("its ") for _, w in close)
                               if close else "meets the goal"),
            "role": role,
        })
    return out


def _untrusted(passed: list[dict]) -> list[dict]:
    """Designs passed over because their intervals under-cover, one line per design (sizes listed)."""
    by = {}
    for p in passed:
        if p["untrusted"]:
            by.setdefault(p["design"], []).append(
                f"{p['size']}" + (f" ({p['estimator']})" if p["estimator"] else "")
            )
    return [{"design": d, "where": ", ".join(dict.fromkeys(v))} for d, v in by.items()]


def _reproduce(info: dict) -> str:
    """The command line that reproduces the run (run.json ``reproduce``), or why there is none."""
    return info.get("reproduce") or info.get("reproduce_note") or "not recorded (run.json from an older version)"


def _utc(ts: float | None) -> str | None:
    if ts is None:
        return None
    return _dt.datetime.fromtimestamp(ts, _dt.UTC).strftime("%Y-%m-%d %H:%M:%S UTC")


def metadata(info: dict, finished: float | None, counts: str) -> list[tuple[str, str]]:
    """The run details: ``counts`` the replicates each design used (``stopping.replicate_counts``)."""
    versions = info.get("versions") or {}
    if info.get("exact"):  # every possible sample: no seed, replicates or blocks
        samples = info.get("samples") or {}
        rows = [("Possible samples enumerated", ", ".join(f"{k}: {num(v, 9)}" for k, v in samples.items()))]
        spent = ("enumeration", info.get("enumeration_seconds", float("nan")))
    else:
        rows = [
            ("Root seed", str(info.get("seed"))),
            ("Seed entropy", str(info.get("seed_entropy"))),
            ("Replicates per design and size", counts),
            ("Block size", str(info.get("block_size"))),
            ("Parallel jobs (results do not depend on it)", str(info.get("jobs"))),
        ]
        spent = ("simulation", info.get("simulation_seconds", float("nan")))
    rows += [
        ("Confidence level", f"{100 * float(info.get('confidence', 0.95)):g}%"),
        ("Scenario file", str(info.get("scenario") or "built in Python")),
        ("Scenario hash (SHA-256)", str(info.get("scenario_hash"))),
        (
            "Elapsed time",
            f"{float(info.get('elapsed_seconds', float('nan'))):.2f} s ({spent[0]} {float(spent[1]):.2f} s)",
        ),
    ]
    if info.get("notes"):  # set-up facts (allocation, certainty units, no cost model): not warnings
        rows.append(("Set-up notes", "; ".join(map(str, info["notes"]))))
    if finished is not None:
        rows.append(("Run finished", _utc(finished)))
    rows.append(("Versions", ", ".join(f"{k} {v}" for k, v in versions.items())))
    rows.append(("Report drawn with", (f"samplewright {__version__}, matplotlib {matplotlib.__version__}, "
                                       f"jinja2 {jinja2.__version__}")))
    return rows


def frame_context(res) -> dict:
    info = res.info or {}
    fr = info.get("frame") or {}
    roles = {k: v for k, v in (fr.get("roles") or {}).items() if v not in (None, 0, [], "")}
    truths = []
    for var, g in res.summary.groupby("variable", sort=False):
        truths.append({"variable": var, "truth": num(g["truth"].iloc[0], 6)})
    strata = []
    if res.allocation is not None and len(res.allocation):
        pop = res.allocation.drop_duplicates("stratum")
        tot = pop["population_units"].sum()
        strata = [
            {
                "stratum": r.stratum,
                "units": num(r.population_units, 9),
                "share": f"{100 * r.population_units / tot:.1f}%",
            }
            for r in pop.itertuples(index=False)
        ]
    return {
        "units": num(fr.get("units"), 9),
        "strata": fr.get("strata"),
        "clusters": fr.get("clusters"),
        "variables": ", ".join(map(str, fr.get("variables") or [t["variable"] for t in truths])),
        "source": fr.get("source") or "",
        "roles": roles,
        "truths": truths,
        "strata_rows": strata,
    }


def design_rows(res) -> list[dict]:
    info = res.info or {}
    sizes = {d: sorted({int(x) for x in g["size"]}) for d, g in res.summary.groupby("design", sort=False)}
    ests = {
        d: ", ".join(estimator_name(e) for e in dict.fromkeys(g["estimator"]))
        for d, g in res.summary.groupby("design", sort=False)
    }
    out = []
    for d in info.get("designs") or [{"label": x, "method": "", "parameters": {}} for x in sizes]:
        lab = d.get("label")
        out.append(
            {
                "label": lab,
                "method": d.get("method", ""),
                "parameters": parameter_text(d.get("parameters")),
                "variance": variance_name(d.get("variance")),
                "sizes": ", ".join(f"{s:,}" for s in sizes.get(lab, [])),
                "estimators": ests.get(lab, ""),
            }
        )
    return out


def _table_units(summary, labels: dict) -> str:
    """The units of the full table's numbers, said once above it (money, and each variable's unit)."""
    parts = []
    if labels.get("currency"):
        parts.append(f"costs in {labels['currency']}")
    for var in dict.fromkeys(summary["variable"]) if len(summary) else []:
        unit = unit_of(labels, var)
        if unit:
            parts.append(f"{var} in {unit}")
    return "; ".join(parts)


def build_context(res, folder: Path | None = None) -> dict:
    """Everything the templates print, as plain strings, lists and dicts."""
    info = res.info or {}
    confidence = float(info.get("confidence", 0.95))
    finished = None
    if folder is not None and (Path(folder) / "run.json").exists():
        finished = (Path(folder) / "run.json").stat().st_mtime
    warnings = list(dict.fromkeys(list(info.get("warnings") or []) + list(res.warnings or [])))
    labels = labels_of(info, res.recommendation if isinstance(res.recommendation, dict) else None)
    rec = recommendation_context(res, labels)
    var = goal_variable(res) if len(res.summary) else None
    rows = summary_rows(res.summary, confidence)
    counts = replicate_counts(res.summary)  # each design's own count: --until stops each at its own
    notes = []
    if res.replicates is None or len(res.replicates) == 0:
        notes.append(
            "replicates.parquet is missing, so the figures drawn from single replicates "
            "(where the estimates fall, which intervals miss) are left out."
        )
    return {
        "title": info.get("title") or "samplewright run",
        "generator": f"samplewright {__version__}",
        "generated": _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%d %H:%M UTC"),
        "confidence": confidence,
        "nominal": f"{100 * confidence:g}%",
        "replicates": counts,
        "exact": bool(info.get("exact")),
        "frame": frame_context(res),
        "designs": design_rows(res),
        "recommendation": rec,
        "verdict": verdict_context(res),
        "comparison": comparison_rows(res, labels),
        "labels": labels,
        "cost_header": cost_header(labels),
        "margin_header": margin_header(labels, var, "Achieved margin"),
        "published_header": margin_header(labels, var, "Published margin"),
        "table_units": _table_units(res.summary, labels),
        "has_published": "published_moe" in res.summary.columns,
        "has_variance": "variance" in res.summary.columns,
        "findings": findings(with_frontier_mcse(res.summary[res.summary["variable"].isin(figure_variables(res))],
                                           res.frontier), confidence, labels)
        if len(res.summary)
        else [],
        "summary_rows": rows,
        "multi_variable": res.summary["variable"].nunique() > 1,
        "estimator_legend": "; ".join(
            f"{SHORT_ESTIMATOR[e]}: {estimator_name(e)}"
            for e in dict.fromkeys(res.summary["estimator"])
            if SHORT_ESTIMATOR.get(e, estimator_name(e)) != estimator_name(e)
        ),
        "compact_columns": compact_columns(res.summary, labels) if len(res.summary) else [],
        "compact_rows": compact_rows(res.summary, res.frontier) if len(res.summary) else [],
        "warnings": warnings,
        "untrusted": rec["untrusted"] if rec else [],
        "notes": notes,
        "metadata": metadata(info, finished, counts),
        "reproduce": _reproduce(info),
        "cautions": [EXACT_CAUTION if c is CAUTIONS[4] and info.get("exact") else c for c in CAUTIONS],
        "any_low": any(r["coverage_flag"] == "low" for r in rows),
        "any_high": any(r["coverage_flag"] == "high" for r in rows),
        "has_nan": bool(np.any(~np.isfinite(res.summary.select_dtypes("number").to_numpy(float)))),
    }
