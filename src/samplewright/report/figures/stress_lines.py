"""What would change the pick, one assumption at a time: each design's margin and cost against the assumption."""

from __future__ import annotations

import numpy as np
import pandas as pd

from samplewright.report.figures.style import design_colours, new_figure, plain, styled


def at_base(table: pd.DataFrame, name: str, assumptions: list[dict]) -> pd.DataFrame:
    """The rows of ``table`` whose assumptions other than ``name`` are at the scenario's own values."""
    keep = np.ones(len(table), dtype=bool)
    for a in assumptions:
        if a["name"] != name:
            keep &= np.isclose(table[a["name"]].to_numpy(float), float(a["base"]))
    return table[keep]


def line_rows(table: pd.DataFrame, name: str, assumptions: list[dict]) -> pd.DataFrame:
    """The rows of the points along assumption ``name`` (the others at the scenario's own values), in increasing
    value of ``name``; a point repeated by another assumption's line appears once."""
    rows = at_base(table, name, assumptions)
    first = rows.drop_duplicates(subset=[name])["point"]
    return rows[rows["point"].isin(first)].sort_values([name, "point"], kind="stable")


def design_best(rows: pd.DataFrame, picks: pd.DataFrame, name: str) -> pd.DataFrame:
    """Per design and value of ``name``: the size (and estimator) the pick's rule would take from that design
    alone -- the cheapest meeting the goal's margin, or the most precise within the budget (coverage aside);
    without a goal, the most precise.  A design with nothing qualifying at a value has no row there."""
    rules = picks.drop_duplicates(subset=[name]).set_index(name)
    out = []
    for (_, x), g in rows.groupby(["design", name], sort=False):
        rule = rules.loc[x] if x in rules.index else None
        if rule is not None and rule["pick"] == "cheapest_meeting_moe":
            g = g[g["moe"] <= rule["goal_moe"]].sort_values(["mean_cost", "mean_n", "moe"], kind="stable")
        elif rule is not None and rule["pick"] == "best_within_budget":
            g = g[g["mean_cost"] <= rule["goal_budget"]].sort_values(["moe", "mean_cost"], kind="stable")
        else:
            g = g.sort_values(["moe", "mean_cost"], kind="stable")
        if len(g):
            out.append(g.iloc[0])
    return pd.DataFrame(out, columns=rows.columns)


@styled
def stress_lines_plot(stress: pd.DataFrame, verdict: pd.DataFrame, break_even: pd.DataFrame | None,
                      assumptions: list[dict], variable=None, fig=None):
    """One row per assumption: each design's margin of error (left) and mean cost (right) against the assumption,
    the other assumptions at the scenario's own values, at the size the pick's rule would take from the design
    (:func:`design_best`; the number above a point); a ring marks the pick at each value, dashed lines the goal,
    a dotted line and grey band the break-even value and its interval (x -+ 2 SE) where the pick changes.

    ``assumptions``: run.json's ``stress.assumptions`` ({"name", "base", ...}).
    """
    var = variable if variable is not None else stress["variable"].iloc[0]
    fig = fig if fig is not None else new_figure(0.8 + 2.6 * len(assumptions))
    axes = fig.subplots(len(assumptions), 2, squeeze=False)
    designs = list(dict.fromkeys(stress["design"]))
    colours = design_colours(designs)
    for (ax_m, ax_c), a in zip(axes, assumptions):
        name = a["name"]
        rows = line_rows(stress[stress["variable"] == var], name, assumptions)
        picks = line_rows(verdict, name, assumptions)
        best = design_best(rows, picks, name)
        for design in designs:
            r = best[best["design"] == design].set_index(name).reindex(picks[name])  # a gap where none qualifies
            sizes = rows.loc[rows["design"] == design, "size"].nunique() > 1
            for ax, col in ((ax_m, "moe"), (ax_c, "mean_cost")):
                ax.plot(r.index, r[col], "-", marker="o", markersize=3.5, color=colours[design], label=plain(design))
                for x, y, size in zip(r.index, r[col], r["size"]) if sizes else ():
                    if np.isfinite(y):  # the size each value asks of the design
                        ax.annotate(f"{size:g}", (x, y), textcoords="offset points", xytext=(0, 5), fontsize=6.5,
                                    ha="center", color=colours[design])
        for ax, col, limit in ((ax_m, "moe", "goal_moe"), (ax_c, "mean_cost", "goal_budget")):
            ax.plot(picks[name], picks[col], "o", markersize=10, markerfacecolor="none", markeredgecolor="black",
                    markeredgewidth=1.2)
            if picks[limit].notna().any():
                ax.plot(picks[name], picks[limit], "--", color="black", linewidth=0.9)
        changes = [] if break_even is None else at_base(break_even[break_even["assumption"] == name], name,
                                                         assumptions)
        for b in changes.itertuples(index=False) if len(changes) else ():
            for ax in (ax_m, ax_c):  # the break-even's interval (the bracketing values when it has none)
                ax.axvspan(max(b.low, b.from_value), min(b.high, b.to_value), color="#bbbbbb", alpha=0.35, lw=0)
                if np.isfinite(b.break_even):
                    ax.axvline(b.break_even, color="black", linestyle=":", linewidth=1.0)
        ax_m.set_ylabel(f"Margin of error ({plain(var)})")
        ax_c.set_ylabel("Mean cost")
        for ax in (ax_m, ax_c):
            ax.set_xlabel(plain(name))
        ax_m.set_title(f"If {plain(name)} were different", loc="left")
    handles, labels = axes[0][0].get_legend_handles_labels()
    ring = axes[0][0].plot([], [], "o", markersize=10, markerfacecolor="none", markeredgecolor="black")[0]
    fig.legend(handles + [ring], labels + ["the pick"], loc="outside lower center", ncols=min(3, len(labels) + 1),
               frameon=False)
    return fig
