"""What the report and the brief say: one context built from a run's tables, shared by both templates."""

from __future__ import annotations

import datetime as _dt
import re
from pathlib import Path

import jinja2
import matplotlib
import numpy as np

from samplewright._version import __version__
from samplewright.evaluation.stopping import replicate_counts
from samplewright.report.figures import FIGURES, estimator_name, figure_names, primary_rows
from samplewright.report.findings import (
    SHORT_ESTIMATOR,
    cost_text,
    findings,
    is_exact,
    measure_text,
    money,
    num,
    summary_rows,
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


def _pick_row(p: dict, label: str) -> dict:
    cov = p.get("coverage")
    return {
        "label": label,
        "design": p.get("design"),
        "size": p.get("size"),
        "estimator": estimator_name(p["estimator"]) if p.get("estimator") else "",
        "mean_cost": money(p.get("mean_cost")),
        "moe": num(p.get("moe")),
        "empirical_se": num(p.get("empirical_se")),
        "coverage": "n/a" if cov is None else f"{100 * float(cov):.1f}%",
        "interpolated": bool(p.get("interpolated", False)),
    }


def recommendation_context(res) -> dict | None:
    rec = res.recommendation
    if not isinstance(rec, dict):
        return None
    picks = [_pick_row(rec[k], label) for k, label in PICKS if isinstance(rec.get(k), dict)]
    missing = [label for k, label in PICKS if k in rec and not isinstance(rec.get(k), dict)]
    passed = []
    for p in rec.get("passed_over") or []:
        if isinstance(p, dict):
            reason = str(p.get("reason", ""))
            passed.append(
                {
                    "design": p.get("design"),
                    "size": p.get("size"),
                    "reason": reason,
                    "estimator": estimator_name(p["estimator"]) if p.get("estimator") else "",
                    "untrusted": "under-cover" in reason,
                }
            )
    goal = rec.get("goal") if isinstance(rec.get("goal"), dict) else {}
    goals = []
    if goal.get("moe") is not None:
        conf = goal.get("confidence")
        goals.append(
            f"margin of error at most {num(goal['moe'])}"
            + (f" at {100 * float(conf):g}% confidence" if conf else "")
        )
    if goal.get("budget") is not None:
        goals.append(f"average cost at most {money(goal['budget'])}")
    return {
        "statement": rec.get("statement") or "",
        "picks": picks,
        "unmet": missing,
        "passed_over": passed,
        "goal_text": " and ".join(goals),
        "goal_variable": goal.get("variable"),
        "untrusted": _untrusted(passed),
        "rules": [str(rec[k]) for k in ("coverage_rule", "margin_rule") if rec.get(k)],
    }


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
    for d in info.get("designs") or [{"label": x, "method": "", "parameters": ""} for x in sizes]:
        lab = d.get("label")
        out.append(
            {
                "label": lab,
                "method": d.get("method", ""),
                "parameters": d.get("parameters", ""),
                "sizes": ", ".join(map(str, sizes.get(lab, []))),
                "estimators": ests.get(lab, ""),
            }
        )
    return out


def brief_rows(res) -> list[dict]:
    """One line per design x size for the brief: each design's first estimator."""
    rows = []
    show, cost = measure_text(is_exact(res.summary)), cost_text(res.summary)
    for var in dict.fromkeys(res.summary["variable"]):
        for r in primary_rows(res.summary, var, max_rows=10**9).itertuples(index=False):
            rows.append(
                {
                    "design": r.design,
                    "size": int(r.size),
                    "variable": var,
                    "mean_cost": cost(r.mean_cost),
                    "moe": num(r.moe),
                    "bias": show(r.bias, r.bias_mcse),
                    "coverage": show(r.coverage, r.coverage_mcse, scale=100.0),
                    "estimator": estimator_name(r.estimator),
                }
            )
    return rows


def build_context(res, folder: Path | None = None) -> dict:
    """Everything the templates print, as plain strings, lists and dicts."""
    info = res.info or {}
    confidence = float(info.get("confidence", 0.95))
    finished = None
    if folder is not None and (Path(folder) / "run.json").exists():
        finished = (Path(folder) / "run.json").stat().st_mtime
    warnings = list(dict.fromkeys(list(info.get("warnings") or []) + list(res.warnings or [])))
    rec = recommendation_context(res)
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
        "findings": findings(res.summary[res.summary["variable"].isin(figure_variables(res))], confidence)
        if len(res.summary)
        else [],
        "summary_rows": summary_rows(res.summary, confidence),
        "multi_variable": res.summary["variable"].nunique() > 1,
        "estimator_legend": "; ".join(
            f"{SHORT_ESTIMATOR[e]}: {estimator_name(e)}"
            for e in dict.fromkeys(res.summary["estimator"])
            if SHORT_ESTIMATOR.get(e, estimator_name(e)) != estimator_name(e)
        ),
        "brief_rows": brief_rows(res) if len(res.summary) else [],
        "warnings": warnings,
        "untrusted": rec["untrusted"] if rec else [],
        "notes": notes,
        "metadata": metadata(info, finished, counts),
        "reproduce": _reproduce(info),
        "cautions": [EXACT_CAUTION if c is CAUTIONS[4] and info.get("exact") else c for c in CAUTIONS],
        "any_low": any(r["coverage_flag"] == "low" for r in summary_rows(res.summary, confidence)),
        "any_high": any(r["coverage_flag"] == "high" for r in summary_rows(res.summary, confidence)),
        "has_nan": bool(np.any(~np.isfinite(res.summary.select_dtypes("number").to_numpy(float)))),
    }
