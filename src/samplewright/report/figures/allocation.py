"""How each stratified design spreads its sample over the strata: one panel per design, every size shown."""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.colors import to_rgb
from matplotlib.figure import Figure

from samplewright.report.figures.style import PALETTE, design_colours, design_order, new_figure, plain, styled

#: height in inches of one bar; the figure stays under 15 inches by thinning bars past that
BAR_HEIGHT = 0.16
MAX_HEIGHT = 15.0
PANEL_EXTRA = 0.7


def _shades(colour: str, k: int) -> list:
    """``k`` shades of one design's colour, lightest for the smallest size: opaque blends with white, so
    grid lines never show through a bar."""
    rgb = np.asarray(to_rgb(colour))
    return [tuple(1.0 - mix * (1.0 - rgb)) for mix in np.linspace(0.45, 1.0, k)] if k > 1 else [tuple(rgb)]


def _design_panel(ax, design: str, rows: pd.DataFrame, strata: list[str], pop_share: pd.Series, colour: str):
    """One design: per stratum, its share of the frame (grey) and its share of the sample at every size."""
    sizes = sorted(set(rows["size"]))
    k = len(sizes) + 1
    h = 0.8 / k
    base = np.arange(len(strata))[::-1].astype(float)
    ax.barh(base + 0.4 - h / 2, [100 * pop_share[s] for s in strata], height=h, color="#cccccc",
            label="share of the frame")
    for j, (size, shade) in enumerate(zip(sizes, _shades(colour, len(sizes)))):
        at = rows[rows["size"] == size].set_index(rows[rows["size"] == size]["stratum"].astype(str))
        total = at["sample_units"].sum()
        units = [int(at["sample_units"].get(s, 0)) for s in strata]
        share = [100.0 * u / total if total else 0.0 for u in units]
        yy = base + 0.4 - h / 2 - (j + 1) * h
        ax.barh(yy, share, height=h, color=shade, label=f"n = {int(total)}")
        for yv, sv, u in zip(yy, share, units):
            ax.text(sv, yv, f" {u}", va="center", ha="left", fontsize=6.5)
    ax.set_yticks(base, [plain(s) for s in strata])
    ax.grid(axis="y", visible=False)
    ax.set_title(plain(design), loc="left", fontsize=9)
    ax.legend(loc="upper left", bbox_to_anchor=(1.0, 1.0), frameon=False, fontsize=7.5)


@styled
def allocation_plot(allocation: pd.DataFrame, summary: pd.DataFrame | None = None, fig: Figure | None = None) -> Figure:
    """Share of each stratified design's sample per stratum, beside each stratum's share of the frame.

    One panel per design, one bar per size of a sweep (darker for larger sizes), each labelled with its
    number of sampled units.

    Returns
    -------
    matplotlib.figure.Figure
    """
    designs = list(dict.fromkeys(allocation["design"]))
    colours = design_colours(design_order(summary) if summary is not None else designs)
    strata = list(dict.fromkeys(allocation["stratum"].astype(str)))
    first = allocation.drop_duplicates("stratum")
    pop = first.set_index(first["stratum"].astype(str))["population_units"]
    pop_share = pop / pop.sum()
    bars = [len(strata) * (allocation.loc[allocation["design"] == d, "size"].nunique() + 1) for d in designs]
    bar_height = min(BAR_HEIGHT, (MAX_HEIGHT - 1.0 - PANEL_EXTRA * len(designs)) / max(sum(bars), 1))
    heights = [PANEL_EXTRA + bar_height * b for b in bars]
    fig = fig or new_figure(1.0 + sum(heights))
    axes = fig.subplots(len(designs), 1, squeeze=False, sharex=True, height_ratios=heights)[:, 0]
    for i, (ax, d) in enumerate(zip(axes, designs)):
        _design_panel(ax, d, allocation[allocation["design"] == d], strata, pop_share,
                      colours.get(d, PALETTE[i % len(PALETTE)]))
    axes[-1].set_xlabel("Share of the sample or of the frame (%); numbers: units sampled")
    fig.suptitle("How the stratified sample is spread over the strata, at every size", fontsize=10)
    return fig
