"""The stratum boundaries of the proposal's banded designs, drawn on the distribution of the column they cut."""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from samplewright.report.figures.style import design_colours, new_figure, plain, styled


@styled
def boundaries_plot(histogram: dict, boundaries: dict, column: str, fig: Figure | None = None) -> Figure:
    """Top: the histogram of the stratifying column (counts per class, from run.json's proposal entry);
    below: one row per shortlisted banded design, a tick at each of its boundaries.

    Returns
    -------
    matplotlib.figure.Figure
    """
    designs = list(boundaries)
    if fig is None:
        fig = new_figure(2.6 + 0.28 * max(len(designs), 1))
    top, bottom = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [3, max(len(designs), 1) * 0.45]})
    edges = np.asarray(histogram["edges"], dtype=float)
    counts = np.asarray(histogram["counts"], dtype=float)
    top.bar(edges[:-1], counts, width=np.diff(edges), align="edge", color="#bbbbbb", edgecolor="white")
    top.set_ylabel("Units")
    top.set_title(f"Where the proposed strata cut {plain(column)}", loc="left")
    colours = design_colours(designs)
    for i, d in enumerate(designs):
        b = np.asarray(boundaries[d], dtype=float)
        bottom.scatter(b, np.full(b.size, i), marker="|", s=160, color=colours[d])
        for v in b:
            top.axvline(v, color=colours[d], linewidth=0.6, alpha=0.5)
    bottom.set_yticks(range(len(designs)), [plain(d) for d in designs])
    bottom.set_ylim(len(designs) - 0.5, -0.5)
    bottom.grid(axis="y", visible=False)
    if histogram.get("log"):
        bottom.set_xscale("log")
    bottom.set_xlabel(f"{plain(column)}{' (log scale)' if histogram.get('log') else ''}")
    return fig
