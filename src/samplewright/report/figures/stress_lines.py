"""What would change the pick, one assumption at a time: each design's margin and cost against the assumption."""

from __future__ import annotations

import numpy as np
import pandas as pd

from samplewright.report.figures.style import design_colours, new_figure, plain, styled

#: most series drawn per panel (the picked points first): more lines cannot be told apart
MAX_SERIES = 8
LINESTYLES = ("-", "--", ":", "-.")


def key_columns(table: pd.DataFrame) -> list[str]:
    """design, size, estimator and, when the run has it, variance."""
    return ["design", "size", "estimator"] + (["variance"] if "variance" in table.columns else [])


def at_base(table: pd.DataFrame, name: str, assumptions: list[dict]) -> pd.DataFrame:
    """The rows of ``table`` whose assumptions other than ``name`` are at the scenario's own values."""
    keep = np.ones(len(table), dtype=bool)
    for a in assumptions:
        if a["name"] != name:
            keep &= np.isclose(table[a["name"]].to_numpy(float), float(a["base"]))
    return table[keep]


def line_rows(table: pd.DataFrame, name: str, assumptions: list[dict]) -> pd.DataFrame:
    """The rows of the points along assumption ``name`` (the others at the scenario's own values), in increasing
    value of ``name``, each key column normalised into ``_key``; a point repeated by another line appears once."""
    rows = at_base(table, name, assumptions)
    first = rows.drop_duplicates(subset=[name])["point"]
    rows = rows[rows["point"].isin(first)].sort_values([name, "point"], kind="stable")
    keys = key_columns(rows)
    return rows.assign(_key=[None if pd.isna(t[0]) else (t[0], int(t[1]), *t[2:])
                             for t in rows[keys].itertuples(index=False)])


def _series(rows: pd.DataFrame, picks: pd.DataFrame) -> list[tuple]:
    every = list(dict.fromkeys(rows["_key"]))
    picked = set(picks["_key"].dropna())
    return ([k for k in every if k in picked] + [k for k in every if k not in picked])[:MAX_SERIES]


def _label(key: tuple, many: bool) -> str:
    return plain(key[0] if not many else f"{key[0]} ({key[1]}, {', '.join(map(str, key[2:]))})")


@styled
def stress_lines_plot(stress: pd.DataFrame, verdict: pd.DataFrame, break_even: pd.DataFrame | None,
                      assumptions: list[dict], variable=None, goal: dict | None = None, fig=None):
    """One row per assumption: each design's margin of error (left) and mean cost (right) against the assumption,
    the other assumptions at the scenario's own values; a ring marks the pick at each value, a dotted line and
    band the break-even value and its interval (x -+ 2 SE) where the pick changes.

    ``assumptions``: run.json's ``stress.assumptions`` ({"name", "base", ...}); ``goal``: its ``moe`` and
    ``budget`` are drawn as dashed lines.
    """
    var = variable if variable is not None else stress["variable"].iloc[0]
    fig = fig if fig is not None else new_figure(0.6 + 2.6 * len(assumptions))
    axes = fig.subplots(len(assumptions), 2, squeeze=False)
    colours = design_colours(list(dict.fromkeys(stress["design"])))
    goal = goal or {}
    for (ax_m, ax_c), a in zip(axes, assumptions):
        name = a["name"]
        rows = line_rows(stress[stress["variable"] == var], name, assumptions)
        picks = line_rows(verdict, name, assumptions)
        series = _series(rows, picks)
        many = len(series) > len({k[0] for k in series})
        styles: dict[str, int] = {}
        picked = set(zip(picks[name], picks["_key"]))
        for key in series:
            r = rows[rows["_key"] == key]
            chosen = r[[(x, key) in picked for x in r[name]]]
            style = LINESTYLES[styles.get(key[0], 0) % len(LINESTYLES)]
            styles[key[0]] = styles.get(key[0], 0) + 1
            for ax, col in ((ax_m, "moe"), (ax_c, "mean_cost")):
                ax.plot(r[name], r[col], style, marker="o", markersize=3.5, color=colours[key[0]],
                        label=_label(key, many))
                ax.plot(chosen[name], chosen[col], "o", markersize=10, markerfacecolor="none",
                        markeredgecolor="black", markeredgewidth=1.2)
        if goal.get("moe") is not None:
            ax_m.axhline(goal["moe"], color="black", linestyle="--", linewidth=0.9)
        if goal.get("budget") is not None:
            ax_c.axhline(goal["budget"], color="black", linestyle="--", linewidth=0.9)
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
    fig.legend(handles + [ring], labels + ["the pick"], loc="outside lower center", ncols=min(4, len(labels) + 1),
               frameon=False)
    return fig
