"""How each stratified design spreads its sample over the strata."""

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
def allocation_plot(
    allocation: pd.DataFrame, summary: pd.DataFrame | None = None, ax=None, keep: dict | None = None
):
    """Share of each stratified design's sample per stratum, beside each stratum's share of the frame.

    Each bar is labelled with its number of sampled units.  For a design with several sizes
    the kept size (``keep``, else the largest) is shown.
    """
    a = allocation.copy()
    designs = list(dict.fromkeys(a["design"]))
    order = design_order(summary) if summary is not None else designs
    colours = design_colours(order)
    chosen = {
        d: ((keep or {}).get(d) if (keep or {}).get(d) in set(g["size"]) else g["size"].max())
        for d, g in a.groupby("design", sort=False)
    }
    a = a[a["size"].to_numpy() == a["design"].map(chosen).to_numpy()]
    strata = list(dict.fromkeys(a["stratum"].astype(str)))
    ax = axes_or_new(ax, max(2.6, 1.2 + 0.3 * len(strata) * (len(designs) + 1)))
    k = len(designs) + 1
    h = 0.8 / k
    base = np.arange(len(strata))[::-1].astype(float)
    pop = a.drop_duplicates("stratum").set_index(a.drop_duplicates("stratum")["stratum"].astype(str))
    pop_share = pop["population_units"] / pop["population_units"].sum()
    ax.barh(
        base + 0.4 - h / 2,
        [100 * pop_share[s] for s in strata],
        height=h,
        color="#cccccc",
        label="share of the frame",
    )
    for j, d in enumerate(designs):
        g = a[a["design"] == d].set_index(a[a["design"] == d]["stratum"].astype(str))
        tot = g["sample_units"].sum()
        share = [100.0 * g["sample_units"].get(s, 0) / tot if tot else 0.0 for s in strata]
        yy = base + 0.4 - h / 2 - (j + 1) * h
        ax.barh(
            yy,
            share,
            height=h,
            color=colours.get(d, PALETTE[j % len(PALETTE)]),
            label=f"{plain(d)} (n = {int(tot)})",
        )
        for yv, sv, s in zip(yy, share, strata):
            ax.text(sv, yv, f" {int(g['sample_units'].get(s, 0))}", va="center", ha="left", fontsize=7)
    ax.set_yticks(base, [plain(s) for s in strata])
    ax.grid(axis="y", visible=False)
    ax.set_xlabel("Share of the sample or of the frame (%); numbers: units sampled")
    ax.set_title("How the stratified sample is spread over the strata")
    ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), frameon=False)
    return ax
