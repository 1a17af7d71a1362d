"""Where the estimates fall: the sampling distribution of each design's estimates."""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.lines import Line2D

from samplewright.report.figures.rows import (
    primary_rows,
    row_axis,
    row_labels,
    rows_height,
    sample_weights,
    weighted_quantiles,
)
from samplewright.report.figures.style import (
    TRUTH_COLOUR,
    axes_or_new,
    design_colours,
    design_order,
    plain,
    styled,
)


def _violin(ax, x, w, y, colour):
    """A horizontal violin of a weighted sample (Gaussian kernel density, Scott's bandwidth)."""
    from matplotlib import cbook
    from scipy.stats import gaussian_kde

    def density(data, coords):
        try:
            return gaussian_kde(data, weights=w)(coords)
        except (np.linalg.LinAlgError, ValueError):  # all but one value alike: no density to draw
            return np.zeros_like(coords)

    stats = cbook.violin_stats([x], density)
    parts = ax.violin(stats, positions=[y], orientation="horizontal", widths=0.8, showextrema=False)
    for body in parts["bodies"]:
        body.set_facecolor(colour)
        body.set_edgecolor(colour)
        body.set_alpha(0.55)


@styled
def sampling_distribution(
    replicates: pd.DataFrame, summary: pd.DataFrame, variable=None, ax=None, keep: dict | None = None
):
    """Spread of each design's replicate estimates around the true value (one violin per design).

    Parameters
    ----------
    replicates, summary : DataFrame
        The run's ``replicates.parquet`` and ``summary.csv`` tables.
    variable : str, optional
        Target to show (default: the first).
    ax : matplotlib Axes, optional
    keep : dict, optional
        design -> size to keep when there are too many sizes to show them all.

    Returns
    -------
    matplotlib.axes.Axes
    """
    rows = primary_rows(summary, variable, keep=keep)
    var = rows["variable"].iloc[0]
    ax = axes_or_new(ax, rows_height(len(rows)))
    colours = design_colours(design_order(summary))
    labels = row_labels(rows, with_estimator=False)
    y = row_axis(ax, labels)
    sel = replicates[replicates["variable"] == var]
    groups = {k: g for k, g in sel.groupby(["design", "size", "estimator"], sort=False)}
    for yi, r in zip(y, rows.itertuples(index=False)):
        g = groups.get((r.design, r.size, r.estimator))
        if g is None or len(g) == 0:
            continue
        x, w = g["estimate"].to_numpy(float), sample_weights(g)
        keep = np.isfinite(x)
        x, w = x[keep], w[keep]
        if len(x) == 0:
            continue
        col = colours[r.design]
        if len(x) > 1 and np.ptp(x) > 0:
            _violin(ax, x, w, yi, col)
        lo, q1, med, q3, hi = weighted_quantiles(x, w, [0.025, 0.25, 0.5, 0.75, 0.975])
        ax.plot([lo, hi], [yi, yi], color=col, linewidth=1.2)
        ax.plot([q1, q3], [yi, yi], color=col, linewidth=4.5, solid_capstyle="butt")
        ax.plot([med], [yi], marker="|", color="white", markersize=8, markeredgewidth=2)
    truth = float(rows["truth"].iloc[0])
    ax.axvline(truth, color=TRUTH_COLOUR, linestyle="--", linewidth=1.2, label=f"true value {truth:.4g}")
    reps = int(rows["replicates"].max())
    many = (
        "every possible sample, by its probability"
        if "probability" in replicates.columns
        else f"{reps:,} samples per design"
    )
    ax.set_title(f"Where the estimates of the mean {plain(var)} fall ({many})")
    ax.set_xlabel(f"Estimated mean {plain(var)}")
    ax.legend(
        handles=[
            Line2D([], [], color=TRUTH_COLOUR, linestyle="--", label=f"true value {truth:.4g}"),
            Line2D([], [], color="#555555", linewidth=4.5, label="middle half of estimates"),
            Line2D([], [], color="#555555", linewidth=1.2, label="middle 95% of estimates"),
        ],
        loc="upper left",
        bbox_to_anchor=(1.0, 1.0),
        frameon=False,
    )
    return ax
