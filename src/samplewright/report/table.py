"""The tables a person reads: numbers with their Monte Carlo errors, and the compact table of a run.

The compact table has one row per design x size for each study variable, at each design's default
analysis (its first listed estimator, and its first variance formula when the run scores several):
the terminal prints it after a run and the brief shows it; the full table stays in summary.csv.
Nothing here imports matplotlib.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from samplewright.report.names import variance_name
from samplewright.report.verdict import cost_header, coverage_interval, margin_header, mc_round, money, num


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
    return f"{v:.{d}f} ({m:.{d}f})" if np.isfinite(m) else num(v)


def percent_like(value: float, mcse: float) -> str:
    """A share in per cent, to the decimals its Monte Carlo error supports (no bracket)."""
    if value is None or not np.isfinite(value):
        return "n/a"
    return f"{100 * value:.{decimals_for(100 * mcse)}f}%"


def is_exact(summary: pd.DataFrame) -> bool:
    """Whether ``summary`` comes from exact mode (every possible sample, no Monte Carlo error)."""
    return "exact" in summary.columns and len(summary) > 0 and bool(summary["exact"].astype(bool).all())


def cost_text(summary: pd.DataFrame):
    """How a mean cost is shown: ``money``, or a dash for every row when no cost is modelled (all 0)."""
    if len(summary) and not (summary["mean_cost"] != 0).any():
        return lambda _value, *_: "—"
    return money


def measure_text(exact: bool):
    """How a measure and its MCSE are shown: ``with_mcse``, or the bare number in exact mode."""
    if exact:
        return lambda value, _mcse, scale=1.0: num(value * scale if value is not None else None)
    return with_mcse


def coverage_cell(coverage, mcse, replicates, exact: bool = False) -> str:
    """A coverage in per cent for a table: ``94.25 (0.52)``; at 0 or 100 % the exact binomial interval
    (``100 (99.82 to 100, exact)``, :func:`samplewright.report.verdict.coverage_interval`), since the
    MCSE formula gives 0 there."""
    if coverage is None or not np.isfinite(coverage):
        return "n/a"
    if exact or not replicates:
        return num(100 * coverage)
    if coverage in (0.0, 1.0):
        lo, hi = coverage_interval(coverage, int(replicates))
        return f"{100 * coverage:g} ({num(100 * lo)} to {num(100 * hi)}, exact)"
    return with_mcse(coverage, mcse, scale=100.0)


def default_rows(summary: pd.DataFrame, variable=None) -> pd.DataFrame:
    """Each design's default analysis: its first estimator (and first variance formula, when the summary
    has a ``variance`` column), for one variable (every variable when None)."""
    s = summary if variable is None else summary[summary["variable"] == variable]
    for col in ("estimator", "variance"):
        if col in s.columns and len(s):
            first = s.groupby("design", sort=False)[col].first()
            s = s[s[col].to_numpy() == s["design"].map(first).to_numpy()]
    return s


def first_estimator_rows(summary: pd.DataFrame, variable=None) -> pd.DataFrame:
    """Each design's first estimator under every variance formula it lists (the formulas share its draws,
    but each publishes its own margin), for one variable (every variable when None)."""
    s = summary if variable is None else summary[summary["variable"] == variable]
    if len(s):
        first = s.groupby("design", sort=False)["estimator"].first()
        s = s[s["estimator"].to_numpy() == s["design"].map(first).to_numpy()]
    return s


def _design_cell(r: dict, formulas: dict) -> str:
    """The design's label, with the variance formula when the design lists several."""
    if formulas.get(r["design"], 1) > 1:
        return f"{r['design']} ({variance_name(r['variance']).removeprefix('the ')})"
    return str(r["design"])


def compact_columns(summary: pd.DataFrame, labels: dict) -> list[tuple[str, str]]:
    """(key, header) of the compact table's columns for this run."""
    variables = list(dict.fromkeys(summary["variable"]))
    var = variables[0] if len(variables) == 1 else None
    cols = [("design", "Design"), ("size", "Size")]
    if len(variables) > 1:
        cols.append(("variable", "Variable"))
    cols.append(("mean_n", "Mean n"))
    if len(summary) and (summary["mean_cost"] != 0).any():
        cols.append(("mean_cost", cost_header(labels)))
    cols.append(("moe", margin_header(labels, var, "Margin")))
    if "published_moe" in summary.columns:
        cols.append(("published_moe", margin_header(labels, var, "Published margin")))
    cols += [("bias", "Bias (MCSE)"), ("coverage", "Coverage % (MCSE)")]
    return cols


def with_frontier_mcse(summary: pd.DataFrame, frontier: pd.DataFrame | None) -> pd.DataFrame:
    """``summary`` with the Monte Carlo SEs only the run's frontier holds (``moe_mcse`` of the achieved margin,
    at the summary's confidence, and ``cost_mcse`` of the mean cost), when it has them: the decision's evidence
    rule reads both."""
    if frontier is None:
        return summary
    extra = [c for c in ("moe_mcse", "cost_mcse") if c in frontier.columns and c not in summary.columns]
    if not extra:
        return summary
    keys = [k for k in ("design", "size", "estimator", "variance", "variable")
            if k in summary.columns and k in frontier.columns]
    rescale = "moe_mcse" in extra and "moe" in frontier.columns and "moe" in summary.columns
    take = frontier[keys + extra + (["moe"] if rescale else [])].drop_duplicates(keys)
    out = summary.merge(take.rename(columns={"moe": "_goal_moe"}), on=keys, how="left")
    if rescale:  # the frontier's margin is at the goal's confidence: its MCSE back to the summary's
        out["moe_mcse"] = out["moe_mcse"] * (out["moe"] / out["_goal_moe"]).where(out["_goal_moe"] > 0, 1.0)
        out = out.drop(columns="_goal_moe")
    return out


def compact_rows(summary: pd.DataFrame, frontier: pd.DataFrame | None = None) -> list[dict]:
    """One row of display strings per design x size x variance formula x variable, at each design's first
    estimator (the formula named beside the design when it lists several); the margins rounded by their
    Monte Carlo SE (from ``frontier``, the run's frontier table, when given)."""
    exact = is_exact(summary)
    show, cost = measure_text(exact), cost_text(summary)
    summary = with_frontier_mcse(summary, frontier)
    out = []
    formulas = summary.groupby("design")["variance"].nunique().to_dict() if "variance" in summary.columns else {}
    for var in dict.fromkeys(summary["variable"]):
        for r in first_estimator_rows(summary, var).to_dict("records"):
            pub = r.get("published_moe")
            out.append({
                "design": _design_cell(r, formulas), "size": f"{int(r['size']):,}", "variable": var,
                "mean_n": num(r["mean_n"]),
                "mean_cost": cost(r["mean_cost"], None, None if exact else r.get("cost_mcse")),
                "moe": mc_round(r["moe"], None if exact else r.get("moe_mcse")),
                "published_moe": "n/a" if pub is None
                else mc_round(pub, None if exact else r.get("published_moe_mcse")),
                "bias": show(r["bias"], r["bias_mcse"]),
                "coverage": coverage_cell(r["coverage"], r["coverage_mcse"], r.get("replicates"), exact),
                "estimator": r["estimator"],
            })
    return out


def format_compact(summary: pd.DataFrame, labels: dict, frontier: pd.DataFrame | None = None) -> str:
    """The compact table as plain text for a terminal (numbers right-aligned)."""
    cols = compact_columns(summary, labels)
    rows = compact_rows(summary, frontier)
    cells = [[h for _, h in cols]] + [[str(r[k]) for k, _ in cols] for r in rows]
    widths = [max(len(c[i]) for c in cells) for i in range(len(cols))]
    left = {"design", "variable"}
    lines = []
    for c in cells:
        lines.append("  ".join(v.ljust(w) if k in left else v.rjust(w)
                               for (k, _), v, w in zip(cols, c, widths)).rstrip())
    return "\n".join(lines)
