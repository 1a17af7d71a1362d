"""The verdict card's chart: what each design costs against the margin it would publish, the goal shaded.

One line per design through its sizes (each design's default analysis,
:func:`samplewright.report.table.default_rows`), the region meeting the margin goal and the budget
shaded, the pick ringed and named.  The margin drawn is the published one (the mean half-width of
the intervals the survey would report) when the run has it, else the achieved margin (z x RMSE).
Without a cost model the horizontal axis is the expected sample size.  Labels are set by the
repel step of :func:`.labels.place_labels`, so none covers another, a line or a point.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, Rectangle
from matplotlib.ticker import FuncFormatter

from samplewright.report.figures.labels import PointLabel, place_labels
from samplewright.report.figures.style import (
    TRUTH_COLOUR,
    axes_or_new,
    design_colours,
    design_order,
    number_text,
    plain,
    styled,
)
from samplewright.report.table import default_rows
from samplewright.report.verdict import goals_of, labels_of, pick_of, unit_of

#: the shade of the region that meets the goal (a light tint of the Okabe-Ito bluish green)
GOAL_SHADE = "#009E73"


def _finite(x) -> bool:
    try:
        return x is not None and math.isfinite(float(x))
    except (TypeError, ValueError):
        return False


def _goal_for(goals: list[dict], variable) -> dict:
    for g in goals:
        if g.get("variable") in (None, variable) and g.get("domain") is None:
            return g
    return {}


def _points(summary: pd.DataFrame, variable, pick: dict | None) -> pd.DataFrame:
    """Each design's default analysis, plus the pick's own row when it is analysed otherwise."""
    s = default_rows(summary, variable)
    if pick is not None and pick.get("variable") in (None, variable):
        mine = summary[(summary["variable"] == variable) & (summary["design"] == pick.get("design"))
                       & (summary["estimator"] == pick.get("estimator"))]
        if pick.get("variance") and "variance" in summary.columns:
            mine = mine[mine["variance"] == pick["variance"]]
        s = pd.concat([s, mine]).drop_duplicates(subset=[c for c in ("design", "size", "estimator", "variance")
                                                          if c in s.columns])
    return s.reset_index(drop=True)


@styled
def goal_map_plot(summary: pd.DataFrame, rec: dict | None = None, labels: dict | None = None, variable=None,
                  ax=None):
    """Expected cost (or sample size) against the published margin, the goal region shaded, the pick ringed.

    Parameters
    ----------
    rec : dict, optional
        The run's recommendation.json (its goals and pick); without it no region or pick is drawn.
    labels : dict, optional
        The run's words for money and units (:func:`samplewright.report.verdict.labels_of`).
    variable : str, optional
        The study variable (default: the goal's, else the summary's first).
    """
    rec = rec or {}
    labels = labels or labels_of(None, rec)
    goals = goals_of(rec)
    _, pick = pick_of(rec)
    var = variable if variable is not None else (pick or {}).get("variable") or next(
        (g.get("variable") for g in goals if g.get("variable") is not None), summary["variable"].iloc[0])
    pts = _points(summary, var, pick)
    ycol = "published_moe" if "published_moe" in pts.columns and pts["published_moe"].notna().any() else "moe"
    costed = bool((pts["mean_cost"] != 0).any())
    xcol = "mean_cost" if costed else "mean_n"
    ax = axes_or_new(ax, 3.9)
    colours = design_colours(design_order(summary))
    size_labels = []
    for d in design_order(pts):
        g = pts[pts["design"] == d].sort_values("size")
        ax.plot(g[xcol], g[ycol], color=colours[d], marker="o", markersize=5, linewidth=1.0, alpha=0.9)
        size_labels += [PointLabel(f"{int(r['size']):,}", r[xcol], r[ycol], colours[d], 7.0)
                        for r in g.iloc[[0, -1] if len(g) > 1 else [0]].to_dict("records")]
    goal = _goal_for(goals, var)
    moe_goal = goal.get("moe")
    if moe_goal is None and _finite(goal.get("relative_moe")) and len(pts):
        moe_goal = float(goal["relative_moe"]) * abs(float(pts["truth"].iloc[0]))
    budget = next((g.get("budget") for g in goals if g.get("budget") is not None), None) if costed else None
    ys = pts[ycol].to_numpy(float)
    ys = ys[np.isfinite(ys)]
    top = max([*ys, float(moe_goal) if _finite(moe_goal) else 0.0, 0.0]) * 1.12 or 1.0
    ax.set_ylim(0, top)
    xs = pts[xcol].to_numpy(float)
    lo, hi = ax.get_xlim()
    if _finite(budget):
        hi = max(hi, float(budget) * 1.04)
        lo = min(lo, float(budget) * 0.96)
    ax.set_xlim(lo, hi)
    handles = [Line2D([], [], color=colours[d], marker="o", linewidth=1.0, markersize=5, label=plain(d))
               for d in design_order(pts)]
    if _finite(moe_goal) or _finite(budget):
        right = float(budget) if _finite(budget) else hi
        up = float(moe_goal) if _finite(moe_goal) else top
        ax.add_patch(Rectangle((lo, 0), right - lo, up, facecolor=GOAL_SHADE, alpha=0.13, edgecolor="none",
                               zorder=0))
        handles.append(Patch(facecolor=GOAL_SHADE, alpha=0.3, label="meets the goal"))
    if _finite(moe_goal):
        ax.axhline(float(moe_goal), color=TRUTH_COLOUR, linestyle="-.", linewidth=1.0)
    if _finite(budget):
        ax.axvline(float(budget), color=TRUTH_COLOUR, linestyle="--", linewidth=1.0)
    pick_labels = []
    if pick is not None:
        hit = pts[(pts["design"] == pick.get("design")) & (pts["size"] == pick.get("size"))
                  & (pts["estimator"] == pick.get("estimator"))]
        if len(hit):
            x, y = float(hit[xcol].iloc[0]), float(hit[ycol].iloc[0])
            ax.plot(x, y, marker="o", markersize=15, fillstyle="none", color=TRUTH_COLOUR, linestyle="",
                    markeredgewidth=1.6)
            pick_labels.append(PointLabel(plain(f"pick: {pick.get('design')}, {int(pick['size']):,}"), x, y,
                                          TRUTH_COLOUR, 8.0, required=True))
    cur = labels.get("currency")
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: number_text(v)))
    if costed:
        ax.set_xlabel(plain(f"Expected cost of one survey ({cur})" if cur else "Expected cost of one survey"))
    else:
        ax.set_xlabel(plain(f"Expected sample size ({labels.get('unit') or 'units'})"))
    unit = unit_of(labels, var)
    what = "Published margin of error" if ycol == "published_moe" else "Margin of error"
    ax.set_ylabel(plain(f"{what} ({unit})" if unit else f"{what} ({var})"))
    ax.set_title("Cost against the margin the survey would publish" if ycol == "published_moe"
                 else "Cost against the margin of error")
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.0, 1.0), frameon=False)
    if len(xs) == 0:
        return ax
    place_labels(ax, pick_labels + size_labels)
    return ax
