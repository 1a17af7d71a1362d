"""A cycle along the frame's list order, and where a systematic sample falls on it."""

from __future__ import annotations

import numpy as np
import pandas as pd

from samplewright.report.figures.style import (
    PALETTE,
    axes_or_new,
    design_colours,
    design_order,
    plain,
    styled,
)


@styled
def frame_order_plot(order: pd.DataFrame, entry: dict, summary: pd.DataFrame | None = None, ax=None):
    """The target along the list order with its detected cycle, and where a systematic sample falls.

    Parameters
    ----------
    order : DataFrame
        The run's frame_order.csv (order, variable, position, value).
    entry : dict
        One item of run.json ``frame_order``: order, variable, units, periods, walks (design,
        size, interval K between the units of one start, starts).
    summary : DataFrame, optional
        For the design colours.

    Notes
    -----
    Below the series, one row of ticks per systematic design and size marks the positions
    1 + floor(j K), j = 0, 1, ... that one start at the top of the list takes: ticks that sit
    on the same phase between the dotted period lines show the aliasing that makes the
    interval unsafe.
    """
    g = order[(order["order"] == entry["order"]) & (order["variable"] == entry["variable"])]
    ax = axes_or_new(ax, 3.8)
    x, y = g["position"].to_numpy(), g["value"].to_numpy(float)
    ax.plot(x, y, color="#777777", linewidth=0.8, label=f"{plain(entry['variable'])} along the list")
    main = max(entry["periods"], key=lambda p: p["strength"])
    P = float(main["period"])
    if P >= 1:
        for m in np.arange(P, x.max() + 1, P):
            ax.axvline(1 + m, color="#bbbbbb", linestyle=":", linewidth=0.8)
    walks = list(entry.get("walks") or [])
    colours = design_colours(design_order(summary) if summary is not None else [w["design"] for w in walks])
    lo, hi = float(np.nanmin(y)), float(np.nanmax(y))
    span = hi - lo if hi > lo else 1.0
    for i, w in enumerate(walks):
        K = float(w["interval"])
        if K <= 0:
            continue
        pos = 1 + np.floor(np.arange(0, int(x.max() / K) + 1) * K).astype(int)
        pos = pos[pos <= x.max()]
        row = lo - span * 0.12 * (i + 1)
        starts = int(w.get("starts", 1))
        extra = f", one of its {starts} starts" if starts > 1 else ""
        ax.plot(pos, np.full(len(pos), row), linestyle="", marker="|", markersize=9, markeredgewidth=1.6,
                color=colours.get(w["design"], PALETTE[i % len(PALETTE)]),
                label=f"{plain(w['design'])}, n = {int(w['size'])}: every {K:.4g} units{extra}")
    ax.set_ylim(lo - span * 0.12 * (len(walks) + 0.8), hi + span * 0.05)
    ax.set_yticks([t for t in ax.get_yticks() if lo - 0.01 * span <= t <= hi])  # none beside the tick rows
    ax.set_xlim(0.5, x.max() + 0.5)
    ax.set_xlabel(f"Position in the {plain(entry['order'])} (first {int(x.max()):,} of {int(entry['units']):,} units)")
    ax.set_ylabel(plain(entry["variable"]))
    ax.set_title(f"A cycle of {P:.4g} units along the {plain(entry['order'])}; "
                 "ticks: where one systematic sample falls", fontsize=9.5)
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.2), frameon=False, ncol=1)
    return ax
