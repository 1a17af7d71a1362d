"""Coverage of the confidence intervals against the promised level."""

from __future__ import annotations

import numpy as np
import pandas as pd

from samplewright.report.figures.rows import (
    row_figure,
)
from samplewright.report.figures.style import (
    MC_Z,
    TRUTH_COLOUR,
    estimator_legend,
    plain,
    styled,
)


@styled
def coverage_plot(
    summary: pd.DataFrame, confidence: float = 0.95, variable=None, ax=None, keep: dict | None = None
):
    """Share of replicate intervals that hold the truth, with 95% Monte Carlo intervals and the nominal level.

    Notes
    -----
    Coverage MCSE = sqrt(c (1 - c) / R) (Morris, White & Crowther 2019, Table 6).
    """
    rows, var, cells, ypos, ax, colours, markers = row_figure(summary, variable, keep, ax)
    for yi, r in zip(ypos, rows.itertuples(index=False)):
        c, e = 100.0 * r.coverage, 100.0 * MC_Z * r.coverage_mcse
        ax.errorbar(c, yi, xerr=e, fmt=markers[r.estimator], color=colours[r.design], capsize=3, markersize=5)
    estimator_legend(ax, markers)
    nominal = 100.0 * confidence
    ax.axvline(nominal, color=TRUTH_COLOUR, linestyle="--", linewidth=1.2)
    ax.text(nominal, len(cells) - 0.45, f" promised {nominal:g}%", va="bottom", ha="left", fontsize=8)
    lo = min(float(np.nanmin(100.0 * (rows["coverage"] - MC_Z * rows["coverage_mcse"]))), nominal - 5.0)
    ax.set_xlim(max(0.0, lo - 1.0), 100.5)
    ax.set_xlabel("Share of intervals that hold the true value (%)")
    ax.set_title(f"Coverage of the {nominal:g}% intervals for the mean {plain(var)}", loc="left", pad=18)
    return ax
