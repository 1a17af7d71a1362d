"""The SE check: the standard error the formula reports against the real spread of the estimates."""

from __future__ import annotations

import numpy as np
import pandas as pd

from samplewright.report.figures.rows import (
    all_rows,
)
from samplewright.report.figures.style import (
    MC_Z,
    TRUTH_COLOUR,
    axes_or_new,
    design_colours,
    design_legend,
    design_order,
    marker_map,
    quantity,
    readable_log_axis,
    styled,
)


@styled
def se_plot(summary: pd.DataFrame, variable=None, ax=None, keep: dict | None = None, labels: dict | None = None):
    """Estimated SE (root mean square of the replicates' SEs) against the empirical SE.

    A point below the diagonal means the variance formula understates the real spread, so the
    intervals are too narrow.  Horizontal bars: 95% Monte Carlo interval of the empirical SE,
    MCSE = empSE / sqrt(2 (R - 1)) (Morris, White & Crowther 2019, Table 6).
    """
    rows = all_rows(summary, variable, keep=keep)
    var = rows["variable"].iloc[0]
    ax = axes_or_new(ax, 4.2)
    designs = [d for d in design_order(summary) if d in set(rows["design"])]
    colours, markers = design_colours(design_order(summary)), marker_map(rows)
    for (d, e, _), g in rows.groupby(["design", "estimator", "variance"], sort=False):
        g = g.sort_values("size")
        if len(g) > 1:
            ax.plot(g["empirical_se"], g["mean_se"], color=colours[d], linewidth=0.8, alpha=0.6)
        ax.errorbar(
            g["empirical_se"],
            g["mean_se"],
            xerr=MC_Z * g["empirical_se_mcse"],
            fmt=markers[e],
            color=colours[d],
            capsize=2,
            markersize=6,
            linestyle="",
        )
    vals = np.r_[rows["empirical_se"].to_numpy(float), rows["mean_se"].to_numpy(float)]
    vals = vals[np.isfinite(vals) & (vals > 0)]
    if len(vals):
        lo, hi = vals.min(), vals.max()
        if hi / lo > 8:
            ax.set_xscale("log")
            ax.set_yscale("log")
            lo, hi = lo / 1.3, hi * 1.3
            for axis in (ax.xaxis, ax.yaxis):
                readable_log_axis(axis, lo, hi)
        else:
            pad = 0.12 * (hi - lo) if hi > lo else 0.2 * hi
            lo, hi = max(0.0, lo - pad), hi + pad
        ax.plot([lo, hi], [lo, hi], color=TRUTH_COLOUR, linestyle="--", linewidth=1.0)
        ax.set_xlim(lo, hi)
        ax.set_ylim(lo, hi)
        ax.text(
            0.03,
            0.97,
            "formula overstates the spread\n(intervals wider than needed)",
            transform=ax.transAxes,
            va="top",
            ha="left",
            fontsize=8,
            color="#444444",
        )
        ax.text(
            0.97,
            0.03,
            "formula understates the spread\n(intervals too narrow)",
            transform=ax.transAxes,
            va="bottom",
            ha="right",
            fontsize=8,
            color="#444444",
        )
    ax.set_xlabel(f"Empirical SE: real spread of the estimates ({quantity(var, labels)})")
    ax.set_ylabel(f"Estimated SE from the formula ({quantity(var, labels)})")
    ax.set_title("Does the standard-error formula tell the truth?")
    design_legend(ax, designs, colours, markers, loc="upper left")
    ax.legend_.set_bbox_to_anchor((1.0, 1.0))
    return ax
