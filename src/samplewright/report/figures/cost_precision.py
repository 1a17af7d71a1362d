"""Cost against precision, with the frontier, the goals and the recommended points.

The size numbers and the names of the recommended points are set by a repel step
(:func:`.labels.place_labels`), so no label covers another, a line, a point or the axes' edge.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.lines import Line2D
from matplotlib.ticker import FuncFormatter

from samplewright.decision.cost_points import cost_precision_points
from samplewright.report.figures.labels import PointLabel, place_labels
from samplewright.report.figures.rows import variable_of
from samplewright.report.figures.style import (
    TRUTH_COLOUR,
    axes_or_new,
    design_colours,
    design_order,
    estimator_name,
    marker_map,
    number_text,
    plain,
    readable_log_axis,
    styled,
)
from samplewright.report.verdict import unit_of


def _design_lines(ax, pts: pd.DataFrame, colours: dict, markers: dict) -> list[PointLabel]:
    """One line per design and estimator through its sizes; returns the size labels of each line's ends."""
    labels = []
    for (d, e), g in pts.groupby(["design", "estimator"], sort=False):
        g = g.sort_values("size")
        ax.plot(g["mean_cost"], g["moe"], color=colours[d], marker=markers[e], markersize=5, linewidth=1.0,
                alpha=0.9)
        if len(g) > 1 and e == next(iter(markers)):
            labels += [PointLabel(f"{int(r.size)}", r.mean_cost, r.moe, colours[d], 7.0)
                       for r in g.iloc[[0, -1]].itertuples(index=False)]
    return labels


def _frontier_and_goals(ax, pts: pd.DataFrame, goals: dict) -> list:
    """The dotted frontier step and the goal lines; returns their legend handles."""
    handles = []
    if "on_frontier" in pts.columns:
        on = pts[pts["on_frontier"]].sort_values("mean_cost")
        if len(on):
            ax.step(on["mean_cost"], on["moe"], where="post", color="#555555", linestyle=":", linewidth=1.3)
            handles.append(Line2D([], [], color="#555555", linestyle=":", label="frontier (best for the cost)"))
    if goals.get("budget") is not None:
        ax.axvline(float(goals["budget"]), color=TRUTH_COLOUR, linestyle="--", linewidth=1.0)
        handles.append(
            Line2D([], [], color=TRUTH_COLOUR, linestyle="--", label=f"budget {float(goals['budget']):,.0f}")
        )
    if goals.get("moe") is not None:
        ax.axhline(float(goals["moe"]), color=TRUTH_COLOUR, linestyle="-.", linewidth=1.0)
        handles.append(Line2D([], [], color=TRUTH_COLOUR, linestyle="-.",
                              label=f"target margin of error {float(goals['moe']):.3g}"))
    return handles


def _pick_rings(ax, pts: pd.DataFrame, picks: dict) -> list[PointLabel]:
    """A ring around each recommended point; returns their names (one per point, even when it answers
    both goals)."""
    merged = {}
    for name, p in picks.items():
        if p:
            key = (p.get("design"), p.get("size"), p.get("estimator"), p.get("variable"))
            merged.setdefault(key, (p, []))[1].append(name)
    labels = []
    for p, names in merged.values():
        hit = pts[(pts["design"] == p.get("design")) & (pts["size"] == p.get("size"))]
        if p.get("estimator") and len(hit) > 1:
            hit = hit[hit["estimator"] == p["estimator"]]
        if len(hit):
            x, y = float(hit["mean_cost"].iloc[0]), float(hit["moe"].iloc[0])
            ax.plot(x, y, marker="o", markersize=14, fillstyle="none", color=TRUTH_COLOUR, linestyle="")
            labels.append(PointLabel(" and ".join(names), x, y, TRUTH_COLOUR, 7.5, required=True))
    return labels


@styled
def cost_precision_plot(
    summary: pd.DataFrame,
    frontier: pd.DataFrame | None = None,
    goals: dict | None = None,
    variable=None,
    ax=None,
    picks: dict | None = None,
    labels: dict | None = None,
):
    """Mean field cost against margin of error, per design, estimator and size, with the goals drawn in.

    Parameters
    ----------
    frontier : DataFrame, optional
        The run's frontier.csv (its ``on_frontier`` points are joined by a dotted step line).
    goals : dict, optional
        ``{"budget": B, "moe": E}`` (either may be missing): drawn as a vertical and a
        horizontal line.
    picks : dict, optional
        ``{"name": {"design": ..., "size": ..., "estimator": ...}}`` points to ring and name
        (the recommendation).
    labels : dict, optional
        The run's words for money and units (:func:`samplewright.report.verdict.labels_of`): the currency
        and the variable's unit name the axes.
    """
    var = variable_of(summary, variable)
    pts = cost_precision_points(summary, frontier, var)
    ax = axes_or_new(ax, 4.2)
    designs = [d for d in design_order(summary) if d in set(pts["design"])]
    colours, markers = design_colours(design_order(summary)), marker_map(pts)
    size_labels = _design_lines(ax, pts, colours, markers)
    handles = [
        Line2D([], [], color=colours[d], marker="o", linewidth=1.0, markersize=5, label=plain(d)) for d in designs
    ]
    if len(markers) > 1:
        handles += [
            Line2D([], [], color="#555555", marker=m, linestyle="", markersize=5, label=plain(estimator_name(e)))
            for e, m in markers.items()
        ]
    handles += _frontier_and_goals(ax, pts, goals or {})
    pick_labels = _pick_rings(ax, pts, picks or {})
    moe = pts["moe"].to_numpy(float)
    moe = moe[np.isfinite(moe) & (moe > 0)]
    unit = plain(unit_of(labels or {}, var) or var)
    if len(moe) and moe.max() / moe.min() > 8:
        ax.set_yscale("log")
        readable_log_axis(ax.yaxis, *ax.get_ylim())
        ylab = f"Margin of error ({unit}, log scale)"
    else:
        ax.set_ylim(bottom=0)
        ylab = f"Margin of error ({unit})"
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: number_text(v)))
    currency = (labels or {}).get("currency")
    ax.set_xlabel(f"Average field cost of one survey ({plain(currency)})" if currency
                  else "Average field cost of one survey (cost units of the scenario)")
    ax.set_ylabel(ylab)
    ax.set_title("Cost against precision (lower left is better)")
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.0, 1.0), frameon=False)
    place_labels(ax, pick_labels + size_labels)
    return ax
