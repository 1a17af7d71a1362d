"""Cost against precision, with the frontier, the goals and the recommended points."""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.lines import Line2D
from matplotlib.ticker import FuncFormatter

from samplewright.decision.cost_points import (
    cost_precision_points,
)
from samplewright.report.figures.rows import (
    variable_of,
)
from samplewright.report.figures.style import (
    TRUTH_COLOUR,
    axes_or_new,
    design_colours,
    design_order,
    estimator_name,
    marker_map,
    plain,
    styled,
)


@styled
def cost_precision_plot(
    summary: pd.DataFrame,
    frontier: pd.DataFrame | None = None,
    goals: dict | None = None,
    variable=None,
    ax=None,
    picks: dict | None = None,
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
    """
    pts = cost_precision_points(summary, frontier, variable_of(summary, variable))
    var = variable_of(summary, variable)
    ax = axes_or_new(ax, 4.2)
    designs = [d for d in design_order(summary) if d in set(pts["design"])]
    colours, markers = design_colours(design_order(summary)), marker_map(pts)
    for (d, e), g in pts.groupby(["design", "estimator"], sort=False):
        g = g.sort_values("size")
        ax.plot(
            g["mean_cost"],
            g["moe"],
            color=colours[d],
            marker=markers[e],
            markersize=5,
            linewidth=1.0,
            alpha=0.9,
        )
        if len(g) > 1 and e == next(iter(markers)):
            for r in g.iloc[[0, -1]].itertuples(index=False):
                ax.annotate(
                    f"{int(r.size)}",
                    (r.mean_cost, r.moe),
                    textcoords="offset points",
                    xytext=(4, 3),
                    fontsize=7,
                    color=colours[d],
                )
    handles = [
        Line2D([], [], color=colours[d], marker="o", linewidth=1.0, markersize=5, label=plain(d)) for d in designs
    ]
    if len(markers) > 1:
        handles += [
            Line2D([], [], color="#555555", marker=m, linestyle="", markersize=5, label=plain(estimator_name(e)))
            for e, m in markers.items()
        ]
    if "on_frontier" in pts.columns:
        on = pts[pts["on_frontier"]].sort_values("mean_cost")
        if len(on):
            ax.step(on["mean_cost"], on["moe"], where="post", color="#555555", linestyle=":", linewidth=1.3)
            handles.append(
                Line2D([], [], color="#555555", linestyle=":", label="frontier (best for the cost)")
            )
    goals = goals or {}
    if goals.get("budget") is not None:
        ax.axvline(float(goals["budget"]), color=TRUTH_COLOUR, linestyle="--", linewidth=1.0)
        handles.append(
            Line2D([], [], color=TRUTH_COLOUR, linestyle="--", label=f"budget {float(goals['budget']):,.0f}")
        )
    if goals.get("moe") is not None:
        ax.axhline(float(goals["moe"]), color=TRUTH_COLOUR, linestyle="-.", linewidth=1.0)
        handles.append(
            Line2D(
                [],
                [],
                color=TRUTH_COLOUR,
                linestyle="-.",
                label=f"target margin of error {float(goals['moe']):.3g}",
            )
        )
    merged = {}  # one ring and one label per point, even when it answers both goals
    for name, p in (picks or {}).items():
        if p:
            key = (p.get("design"), p.get("size"), p.get("estimator"), p.get("variable"))
            merged.setdefault(key, (p, []))[1].append(name)
    for p, names in merged.values():
        name = " and ".join(names)
        hit = pts[(pts["design"] == p.get("design")) & (pts["size"] == p.get("size"))]
        if p.get("estimator") and len(hit) > 1:
            hit = hit[hit["estimator"] == p["estimator"]]
        if len(hit):
            x, y = float(hit["mean_cost"].iloc[0]), float(hit["moe"].iloc[0])
            ax.plot(x, y, marker="o", markersize=14, fillstyle="none", color=TRUTH_COLOUR, linestyle="")
            ax.annotate(
                name,
                (x, y),
                textcoords="offset points",
                xytext=(10, -13),
                fontsize=7.5,
                bbox={"boxstyle": "round,pad=0.2", "fc": "white", "ec": "none", "alpha": 0.8},
            )
    moe = pts["moe"].to_numpy(float)
    moe = moe[np.isfinite(moe) & (moe > 0)]
    if len(moe) and moe.max() / moe.min() > 8:
        ax.set_yscale("log")
        ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
        ax.yaxis.set_minor_formatter(
            FuncFormatter(lambda v, _pos: f"{v:g}" if str(f"{v:g}")[0] in "25" else "")
        )
        ylab = f"Margin of error ({plain(var)}, log scale)"
    else:
        ax.set_ylim(bottom=0)
        ylab = f"Margin of error ({plain(var)})"
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:,.0f}" if abs(v) >= 1000 else f"{v:g}"))
    ax.set_xlabel("Average field cost of one survey (cost units of the scenario)")
    ax.set_ylabel(ylab)
    ax.set_title("Cost against precision (lower left is better)")
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.0, 1.0), frameon=False)
    return ax
