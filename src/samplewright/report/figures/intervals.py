"""Which intervals miss: ranked replicate intervals (Morris, White & Crowther 2019, Fig. 4)."""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from samplewright.evaluation.measures import holds
from samplewright.report.figures.rows import (
    cell_label,
    primary_rows,
    sample_weights,
)
from samplewright.report.figures.style import (
    MISS_COLOUR,
    TRUTH_COLOUR,
    axes_or_new,
    design_colours,
    design_order,
    new_figure,
    plain,
    quantity,
    styled,
)


def zip_order(estimate, se, truth):
    """Replicate order for the ranked-interval ("zip") plot: by |estimate - truth| / se.

    Notes
    -----
    Morris, White & Crowther (2019), sec. 6 and Fig. 4: intervals ranked by the p-value of
    their test of the true value; the intervals above the nominal centile are the misses.
    Ranking by |z| = |estimate - truth| / se gives the same order.  A zero SE counts as an
    infinite miss unless the estimate equals the truth.
    """
    est, se = np.asarray(estimate, float), np.asarray(se, float)
    diff = np.abs(est - truth)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.where(se > 0, diff / se, np.where(diff > 0, np.inf, 0.0))
    return np.argsort(z, kind="stable")


@styled
def interval_panel(
    rep: pd.DataFrame,
    truth: float,
    confidence: float,
    colour: str,
    title: str = "",
    shown: int = 100,
    ax=None,
):
    """One design's ranked replicate intervals: ``shown`` of them, evenly spaced in rank.

    Intervals that hold the truth are drawn in the design's colour, misses in black; the
    dashed line marks the nominal level, below which the covering intervals should end.
    """
    ax = axes_or_new(ax, 3.0)
    order = zip_order(rep["estimate"].to_numpy(), rep["se"].to_numpy(), truth)
    R = len(order)
    w = sample_weights(rep)[order]
    mid = np.cumsum(w) - w / 2.0  # each interval at the middle of its share of the rank scale
    targets = (np.arange(min(shown, R)) + 0.5) / min(shown, R)
    pick = np.unique(np.minimum(np.searchsorted(np.cumsum(w), targets - 1e-12), R - 1))
    idx = order[pick]
    lo, hi = rep["lower"].to_numpy()[idx], rep["upper"].to_numpy()[idx]
    cover = holds(lo, hi, truth)
    centile = 100.0 * mid[pick]
    for mask, col, lw in ((cover, colour, 1.0), (~cover, MISS_COLOUR, 1.2)):
        if mask.any():
            ax.hlines(centile[mask], lo[mask], hi[mask], colors=col, linewidth=lw)
    ax.axvline(truth, color=TRUTH_COLOUR, linewidth=0.9)
    ax.axhline(100.0 * confidence, color="#555555", linestyle="--", linewidth=0.9)
    ax.set_ylim(0, 100)
    ax.set_title(title, fontsize=8.5)
    ax.grid(visible=False)
    return ax


@styled
def interval_plot(
    replicates: pd.DataFrame,
    summary: pd.DataFrame,
    confidence: float = 0.95,
    variable=None,
    fig: Figure | None = None,
    keep: dict | None = None,
    shown: int = 100,
    labels: dict | None = None,
) -> Figure:
    """Ranked replicate intervals, one panel per design and size (Morris, White & Crowther 2019, Fig. 4).

    Returns the Figure (it has one Axes per panel; see :func:`interval_panel` for one panel).
    """
    rows = primary_rows(summary, variable, keep=keep)
    var = rows["variable"].iloc[0]
    k = len(rows)
    ncol = min(3, k)
    nrow = int(np.ceil(k / ncol))
    fig = fig or new_figure(0.6 + 2.3 * nrow)
    axes = fig.subplots(nrow, ncol, sharey=True, squeeze=False)
    colours = design_colours(design_order(summary))
    sel = replicates[replicates["variable"] == var]
    groups = {key: g for key, g in sel.groupby(["design", "size", "estimator", "variance"], sort=False)}
    truth = float(rows["truth"].iloc[0])
    for i, r in enumerate(rows.itertuples(index=False)):
        ax = axes[i // ncol][i % ncol]
        g = groups.get((r.design, r.size, r.estimator, r.variance))
        label = plain(cell_label(r.design, r.method, r.size, getattr(r, "mean_n", None)))
        title = f"{label}\nhold the truth: {100 * r.coverage:.1f}%"
        if g is not None and len(g):
            interval_panel(g, truth, confidence, colours[r.design], title=title, shown=shown, ax=ax)
    for j in range(k, nrow * ncol):
        axes[j // ncol][j % ncol].set_visible(False)
    for row in axes:
        row[0].set_ylabel("Rank of the miss\n(centile)")
    which = "possible" if "probability" in replicates.columns else "simulated"
    fig.supxlabel(
        f"{100 * confidence:g}% interval for the mean ({quantity(var, labels)}) from each {which} sample "
        f"(each panel has its own scale)",
        fontsize=9,
    )
    fig.suptitle(
        f"Which intervals miss? Up to {shown} ranked intervals per design (black: misses the true value)",
        fontsize=10,
    )
    return fig
