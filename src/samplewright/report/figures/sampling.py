"""Where the estimates fall: the sampling distribution of each design's estimates, one panel per design.

Each design gets its own panel with its own horizontal scale, so a precise design is not squeezed into a
sliver beside one ten times as spread out; the true value is marked in every panel.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib import cbook
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import MaxNLocator

from samplewright.designs import size_words
from samplewright.report.figures.rows import primary_rows, sample_weights, weighted_quantiles
from samplewright.report.figures.style import (
    TRUTH_COLOUR,
    design_colours,
    design_order,
    new_figure,
    plain,
    quantity,
    styled,
)

#: height in inches of one size's row inside a design's panel, and of each panel's title and axis
ROW_HEIGHT = 0.42
PANEL_EXTRA = 0.75


#: grid points per kernel bandwidth of the binned density (at least MIN_GRID, at most MAX_GRID points)
GRID_PER_BANDWIDTH = 16
MIN_GRID, MAX_GRID = 512, 1 << 16


def weighted_density(x: np.ndarray, w: np.ndarray, coords: np.ndarray) -> np.ndarray:
    """Gaussian kernel density of a weighted sample at ``coords``, Scott's bandwidth, on a binned grid.

    The bandwidth is scipy's ``gaussian_kde`` default for weighted data: the weighted standard
    deviation (``np.cov`` with ``aweights``, unbiased) times n_eff^(-1/5), n_eff = 1 / sum w^2 for
    weights summing to 1 (Scott 1992, Multivariate Density Estimation; from memory).  The weights
    are first spread linearly onto an even grid over the data's range, at least
    ``GRID_PER_BANDWIDTH`` points per bandwidth, and the kernels are summed from the grid, so the
    cost does not grow with the number of replicates (Silverman 1982, Appl. Statist. 31:93-99, on
    linear binning; from memory).  A sample with no spread gives zeros (no density to draw).
    """
    w = np.asarray(w, dtype=float) / np.sum(w)
    w2 = np.sum(w * w)  # 1 / n_eff
    mean = np.sum(w * x)
    var = np.sum(w * (x - mean) ** 2) / (1.0 - w2) if w2 < 1.0 else 0.0
    if not (np.isfinite(var) and var > 0):
        return np.zeros_like(coords)
    h = np.sqrt(var) * w2 ** 0.2
    lo, hi = float(np.min(x)), float(np.max(x))
    G = int(np.clip(np.ceil(GRID_PER_BANDWIDTH * (hi - lo) / h), MIN_GRID, MAX_GRID))
    step = (hi - lo) / G
    pos = (x - lo) / step
    j = np.minimum(pos.astype(np.int64), G - 1)
    frac = pos - j
    mass = np.bincount(j, weights=w * (1.0 - frac), minlength=G + 1) + np.bincount(j + 1, weights=w * frac,
                                                                                   minlength=G + 1)
    grid = lo + step * np.arange(G + 1)
    keep = mass > 0
    z = (coords[:, None] - grid[keep][None, :]) / h
    return np.exp(-0.5 * z * z) @ mass[keep] / (h * np.sqrt(2.0 * np.pi))


def _violin(ax, x, w, y, colour):
    """A horizontal violin of a weighted sample (Gaussian kernel density, Scott's bandwidth)."""

    def density(data, coords):
        return weighted_density(data, w, coords)

    stats = cbook.violin_stats([x], density)
    parts = ax.violin(stats, positions=[y], orientation="horizontal", widths=0.8, showextrema=False)
    for body in parts["bodies"]:
        body.set_facecolor(colour)
        body.set_edgecolor(colour)
        body.set_alpha(0.55)


def _spread(ax, x, w, y, colour):
    """One size's estimates on row ``y``: violin, middle 95% (thin), middle half (thick), median (white)."""
    if len(x) > 1 and np.ptp(x) > 0:
        _violin(ax, x, w, y, colour)
    lo, q1, med, q3, hi = weighted_quantiles(x, w, [0.025, 0.25, 0.5, 0.75, 0.975])
    ax.plot([lo, hi], [y, y], color=colour, linewidth=1.2)
    ax.plot([q1, q3], [y, y], color=colour, linewidth=4.5, solid_capstyle="butt")
    ax.plot([med], [y], marker="|", color="white", markersize=8, markeredgewidth=2)


def _design_panel(ax, design: str, rows: pd.DataFrame, groups: dict, truth: float, colour: str):
    """One design's panel: a row per size (largest at the bottom), its own x scale, the truth marked."""
    y = np.arange(len(rows))[::-1]
    labels = [plain(size_words(r.method, r.size, getattr(r, "mean_n", None), units="n = {}"))
              for r in rows.itertuples(index=False)]
    ax.set_yticks(y, labels)
    ax.set_ylim(-0.6, len(rows) - 0.4)
    ax.grid(axis="y", visible=False)
    for yi, r in zip(y, rows.itertuples(index=False)):
        g = groups.get((r.design, r.size, r.estimator, r.variance))
        if g is None:
            continue
        x, w = g["estimate"].to_numpy(float), sample_weights(g)
        finite = np.isfinite(x)
        if finite.any():
            _spread(ax, x[finite], w[finite], yi, colour)
    ax.axvline(truth, color=TRUTH_COLOUR, linestyle="--", linewidth=1.2)
    ax.xaxis.set_major_locator(MaxNLocator(nbins=6))
    ax.set_title(plain(design), loc="left", fontsize=9)


@styled
def sampling_distribution(
    replicates: pd.DataFrame, summary: pd.DataFrame, variable=None, fig: Figure | None = None,
    keep: dict | None = None, labels: dict | None = None,
) -> Figure:
    """Spread of each design's replicate estimates around the true value: one panel per design, one
    violin per size, each panel on its own scale with the true value dashed.

    Parameters
    ----------
    replicates, summary : DataFrame
        The run's ``replicates.parquet`` and ``summary.csv`` tables.
    variable : str, optional
        Target to show (default: the first).
    fig : matplotlib Figure, optional
        Drawn into (one Axes per design); a new figure when not given.
    keep : dict, optional
        design -> size to keep when there are too many sizes to show them all.

    Returns
    -------
    matplotlib.figure.Figure
    """
    rows = primary_rows(summary, variable, keep=keep)
    var = rows["variable"].iloc[0]
    designs = list(dict.fromkeys(rows["design"]))
    sizes = [int((rows["design"] == d).sum()) for d in designs]
    fig = fig or new_figure(0.9 + sum(PANEL_EXTRA + ROW_HEIGHT * k for k in sizes))
    axes = fig.subplots(len(designs), 1, squeeze=False, height_ratios=[PANEL_EXTRA + ROW_HEIGHT * k for k in sizes])
    colours = design_colours(design_order(summary))
    sel = replicates[replicates["variable"] == var]
    groups = {k: g for k, g in sel.groupby(["design", "size", "estimator", "variance"], sort=False)}
    truth = float(rows["truth"].iloc[0])
    for ax, d in zip(axes[:, 0], designs):
        _design_panel(ax, d, rows[rows["design"] == d], groups, truth, colours[d])
    axes[-1, 0].set_xlabel(f"Estimated mean ({quantity(var, labels)}; each panel has its own scale)")
    many = (
        "every possible sample, by its probability"
        if "probability" in replicates.columns
        else f"{int(rows['replicates'].max()):,} samples per design and size"
    )
    fig.suptitle(f"Where the estimates of the mean {plain(var)} fall ({many})", fontsize=10)
    fig.legend(
        handles=[
            Line2D([], [], color=TRUTH_COLOUR, linestyle="--", label=f"true value {truth:.4g}"),
            Line2D([], [], color="#555555", linewidth=4.5, label="middle half of estimates"),
            Line2D([], [], color="#555555", linewidth=1.2, label="middle 95% of estimates"),
        ],
        loc="outside lower center",
        ncol=3,
        frameon=False,
    )
    return fig
