"""Plain-language findings read off a run's summary table, and the full table's display rows.

These are descriptions of what the simulation measured, not a recommendation: the pick under
a budget or a margin-of-error goal is made by the planning step (recommendation.json) and only
quoted here.

A simulated coverage is called *below the promised level* when it is more than ``COVERAGE_Z`` = 3
Monte Carlo SEs below nominal (MCSE = sqrt(c (1 - c) / R), Morris, White & Crowther 2019, Table 6),
and *above* it when more than as many SEs above: a description of what the rehearsal measured.
The recommendation judges coverage with a practical tolerance instead
(:mod:`samplewright.decision.evidence`).  An exact-mode run
(``run --exact``, an ``exact`` column in the summary) has no Monte Carlo error: its coverage is
the probability-weighted share of every possible sample, so it is below or above the promised
level as it stands, and its numbers are shown without brackets.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from samplewright.report.figures.rows import cell_label
from samplewright.report.figures.style import estimator_name
from samplewright.report.names import variance_name
from samplewright.report.table import cost_text, coverage_cell, is_exact, measure_text, percent_like
from samplewright.report.verdict import mc_round, money, num, unit_of, with_unit

#: Monte Carlo SEs from nominal beyond which a coverage is described as below or above it (module notes)
COVERAGE_Z = 3.0

#: an estimated SE this far from the empirical SE (ratio) is worth a sentence (common practice)
SE_RATIO_NOTE = 0.2


SHORT_ESTIMATOR = {"ht": "HT", "hajek": "Hajek"}


def coverage_verdict(coverage: float, mcse: float, confidence: float) -> str:
    """``"low"``, ``"high"`` or ``"ok"``: coverage against the promised level, beyond Monte Carlo error."""
    if not np.isfinite(coverage):
        return "ok"
    if coverage < confidence - COVERAGE_Z * mcse:
        return "low"
    if coverage - COVERAGE_Z * mcse > confidence:
        return "high"
    return "ok"


def summary_rows(summary: pd.DataFrame, confidence: float) -> list[dict]:
    """The summary table as display strings (one dict per row), with MCSEs beside their measures."""
    out = []
    exact = is_exact(summary)
    show, cost = measure_text(exact), cost_text(summary)
    for r in summary.itertuples(index=False):
        out.append(
            {
                "design": r.design,
                "method": r.method,
                "size": int(r.size),
                "estimator": SHORT_ESTIMATOR.get(r.estimator, r.estimator),
                "variable": r.variable,
                "mean_n": num(r.mean_n),
                "mean_cost": cost(r.mean_cost),
                "truth": num(r.truth, 6),
                "bias": show(r.bias, r.bias_mcse),
                "relative_bias": percent_like(
                    r.relative_bias, r.bias_mcse / abs(r.truth) if r.truth else float("nan")
                ),
                "empirical_se": show(r.empirical_se, r.empirical_se_mcse),
                "mean_se": num(r.mean_se),
                "se_ratio": num(r.se_ratio, 3),
                "rmse": num(r.rmse),
                "deff": num(r.deff, 3),
                "coverage": coverage_cell(r.coverage, r.coverage_mcse, r.replicates, exact),
                "coverage_flag": coverage_verdict(r.coverage, r.coverage_mcse, confidence),
                "moe": num(r.moe),
                "published_moe": show(getattr(r, "published_moe", None), getattr(r, "published_moe_mcse", 0.0)),
                "variance": variance_name(getattr(r, "variance", None)),
                "replicates": int(r.replicates),
            }
        )
    return out


def findings(summary: pd.DataFrame, confidence: float, labels: dict | None = None) -> list[str]:
    """Sentences a reader needs from the summary: precision, cost, and intervals that lie (money and
    units in the words of ``labels``, :func:`samplewright.report.verdict.labels_of`; margins rounded by
    their Monte Carlo SE when the summary has ``moe_mcse``, :func:`samplewright.report.table.with_frontier_mcse`)."""
    out = []
    labels = labels or {}
    nominal = f"{100 * confidence:g}%"
    exact = is_exact(summary)
    for var, s in summary.groupby("variable", sort=False):
        unit = unit_of(labels, var)
        lab = {
            i: f"{cell_label(d, m, n, u)} ({estimator_name(e)})"
            for i, d, m, n, u, e in zip(s.index, s["design"], s["method"], s["size"], s["mean_n"], s["estimator"])
        }
        verdict = {
            i: coverage_verdict(c, m, confidence)
            for i, c, m in zip(s.index, s["coverage"], s["coverage_mcse"])
        }
        honest = s[[verdict[i] != "low" for i in s.index]]
        if len(honest):
            costed = bool(np.nanmax(s["mean_cost"].to_numpy(float)) > 0)
            best = honest.loc[honest["rmse"].idxmin()]
            out.append(
                f"Most precise for the mean {var} among designs whose intervals keep their promise: "
                f"{lab[best.name]}, margin of error {with_unit(mc_round(best.moe, best.get('moe_mcse')), unit)}"
                + (f" at an average cost of {money(best.mean_cost, labels)}" if costed else "")
                + f" (design effect {num(best.deff, 3)})."
            )
            cheap = honest.loc[honest["mean_cost"].idxmin()]
            if costed and cheap.name != best.name and cheap.mean_cost < best.mean_cost:
                out.append(
                    f"Cheapest such design: {lab[cheap.name]}, average cost {money(cheap.mean_cost, labels)}, "
                    f"margin of error {with_unit(mc_round(cheap.moe, cheap.get('moe_mcse')), unit)}."
                )
        else:
            out.append(f"No design's intervals for the mean {var} reach the promised {nominal} coverage.")
        low = [i for i in s.index if verdict[i] == "low"]
        if low and exact:
            out.append(
                f"Intervals too narrow for the mean {var} (exact coverage, over every possible sample, below the "
                f"promised {nominal}): "
                + "; ".join(
                    f"{lab[i]} holds the truth in {100 * s.loc[i, 'coverage']:.1f}% of possible samples" for i in low
                )
                + f". Their stated {nominal} confidence overstates what they deliver by the gap shown."
            )
        elif low:
            out.append(
                f"Intervals too narrow for the mean {var} (coverage more than {COVERAGE_Z:g} simulation "
                f"errors below the promised {nominal}): "
                + "; ".join(
                    f"{lab[i]} holds the truth {100 * s.loc[i, 'coverage']:.1f}% of the time" for i in low
                )
                + ". Their reported precision cannot be trusted."
            )
        high = [i for i in s.index if verdict[i] == "high" and s.loc[i, "se_ratio"] > 1 + SE_RATIO_NOTE]
        if high:
            out.append(
                f"Intervals wider than needed for the mean {var}: "
                + "; ".join(
                    f"{lab[i]} (its formula's SE is {num(s.loc[i, 'se_ratio'], 3)} times the real spread)"
                    for i in high
                )
                + ". The design is more precise than its analysis would claim."
            )
    return out
