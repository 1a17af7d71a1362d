"""Plain-language findings read off a run's summary table, and number formatting with MCSEs.

These are descriptions of what the simulation measured, not a recommendation: the pick under
a budget or a margin-of-error goal is made by the planning step (recommendation.json) and only
quoted here.

A simulated coverage is called *below the promised level* by the same rule the recommendation
uses to pass a design over (:func:`samplewright.decision.recommend.coverage_acceptable`: more than
``COVERAGE_Z`` = 3 Monte Carlo SEs below nominal, MCSE = sqrt(c (1 - c) / R), Morris, White &
Crowther 2019, Table 6), and *above* it when more than as many SEs above.  An exact-mode run
(``run --exact``, an ``exact`` column in the summary) has no Monte Carlo error: its coverage is
the probability-weighted share of every possible sample, so it is below or above the promised
level as it stands, and its numbers are shown without brackets.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from samplewright.decision.recommend import COVERAGE_Z, coverage_acceptable
from samplewright.report.figures.rows import cell_label
from samplewright.report.figures.style import estimator_name
from samplewright.report.verdict import money, num, unit_of, with_unit

#: an estimated SE this far from the empirical SE (ratio) is worth a sentence (common practice)
SE_RATIO_NOTE = 0.2


def decimals_for(mcse: float, digits: int = 2) -> int:
    """Decimals that show ``digits`` significant figures of the Monte Carlo SE (at least 0).

    Examples
    --------
    >>> decimals_for(0.1077), decimals_for(0.0052), decimals_for(3.4)
    (2, 4, 1)
    """
    if not np.isfinite(mcse) or mcse <= 0:
        return 1
    return max(0, digits - 1 - math.floor(math.log10(mcse)))


def with_mcse(value: float, mcse: float, scale: float = 1.0) -> str:
    """``value (MCSE)``, both rounded to the MCSE's second significant figure.

    Examples
    --------
    >>> with_mcse(-0.11486, 0.10769)
    '-0.11 (0.11)'
    >>> with_mcse(0.9425, 0.0052, scale=100)
    '94.25 (0.52)'
    """
    if value is None or not np.isfinite(value):
        return "n/a"
    v, m = value * scale, mcse * scale
    d = decimals_for(m)
    return f"{v:.{d}f} ({m:.{d}f})" if np.isfinite(m) else f"{v:.4g}"


def percent_like(value: float, mcse: float) -> str:
    """A share in per cent, to the decimals its Monte Carlo error supports (no bracket)."""
    if value is None or not np.isfinite(value):
        return "n/a"
    return f"{100 * value:.{decimals_for(100 * mcse)}f}%"


SHORT_ESTIMATOR = {"ht": "HT", "hajek": "Hajek"}


def is_exact(summary: pd.DataFrame) -> bool:
    """Whether ``summary`` comes from exact mode (every possible sample, no Monte Carlo error)."""
    return "exact" in summary.columns and len(summary) > 0 and bool(summary["exact"].astype(bool).all())


def cost_text(summary: pd.DataFrame):
    """How a mean cost is shown: ``money``, or a dash for every row when no cost is modelled (all 0)."""
    if len(summary) and not (summary["mean_cost"] != 0).any():
        return lambda _value: "—"
    return money


def measure_text(exact: bool):
    """How a measure and its MCSE are shown: ``with_mcse``, or the bare number in exact mode."""
    if exact:
        return lambda value, _mcse, scale=1.0: num(value * scale if value is not None else None)
    return with_mcse


def coverage_verdict(coverage: float, mcse: float, confidence: float) -> str:
    """``"low"``, ``"high"`` or ``"ok"``: coverage against the promised level, beyond Monte Carlo error."""
    if not np.isfinite(coverage):
        return "ok"
    if not coverage_acceptable(coverage, mcse, confidence):
        return "low"
    if coverage - COVERAGE_Z * mcse > confidence:
        return "high"
    return "ok"


def summary_rows(summary: pd.DataFrame, confidence: float) -> list[dict]:
    """The summary table as display strings (one dict per row), with MCSEs beside their measures."""
    out = []
    show, cost = measure_text(is_exact(summary)), cost_text(summary)
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
                "coverage": show(r.coverage, r.coverage_mcse, scale=100.0),
                "coverage_flag": coverage_verdict(r.coverage, r.coverage_mcse, confidence),
                "moe": num(r.moe),
                "replicates": int(r.replicates),
            }
        )
    return out


def findings(summary: pd.DataFrame, confidence: float, labels: dict | None = None) -> list[str]:
    """Sentences a reader needs from the summary: precision, cost, and intervals that lie (money and
    units in the words of ``labels``, :func:`samplewright.report.verdict.labels_of`)."""
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
                f"{lab[best.name]}, margin of error {with_unit(num(best.moe), unit)}"
                + (f" at an average cost of {money(best.mean_cost, labels)}" if costed else "")
                + f" (design effect {num(best.deff, 3)})."
            )
            cheap = honest.loc[honest["mean_cost"].idxmin()]
            if costed and cheap.name != best.name and cheap.mean_cost < best.mean_cost:
                out.append(
                    f"Cheapest such design: {lab[cheap.name]}, average cost {money(cheap.mean_cost, labels)}, "
                    f"margin of error {with_unit(num(cheap.moe), unit)}."
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
