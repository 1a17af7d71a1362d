"""Bias of each design and estimator, with Monte Carlo error bars."""

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
    quantity,
    styled,
)


@styled
def bias_plot(summary: pd.DataFrame, variable=None, ax=None, keep: dict | None = None, labels: dict | None = None):
    """Bias of each design and estimator with 95% Monte Carlo error bars; relative bias on the top axis.

    Notes
    -----
    Bias = mean(estimate) - truth, MCSE = empirical SE / sqrt(R) (Morris, White & Crowther
    2019, Table 6).  Bars span bias +- 1.96 MCSE: a bar that crosses zero shows no bias the
    simulation can detect.
    """
    rows, var, _cells, ypos, ax, colours, markers = row_figure(summary, variable, keep, ax)
    for yi, r in zip(ypos, rows.itertuples(index=False)):
        ax.errorbar(
            r.bias,
            yi,
            xerr=MC_Z * r.bias_mcse,
            fmt=markers[r.estimator],
            color=colours[r.design],
            capsize=3,
            markersize=5,
        )
    estimator_legend(ax, markers, above=False)
    ax.axvline(0.0, color=TRUTH_COLOUR, linewidth=1.0)
    truth = float(rows["truth"].iloc[0])
    span = np.nanmax(
        np.abs(np.r_[rows["bias"] - MC_Z * rows["bias_mcse"], rows["bias"] + MC_Z * rows["bias_mcse"]])
    )
    if np.isfinite(span) and span > 0:
        ax.set_xlim(-1.1 * span, 1.1 * span)
    ax.set_xlabel(f"Average estimate minus true value ({quantity(var, labels)})")
    ax.set_title(f"Bias of the estimated mean {plain(var)}", loc="left")
    if truth != 0 and np.isfinite(truth):
        top = ax.secondary_xaxis("top", functions=(lambda b: 100.0 * b / truth, lambda p: p * truth / 100.0))
        top.set_xlabel("Relative bias (% of the true value)")
    return ax
