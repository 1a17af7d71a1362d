"""Every figure of the report, drawn from a run's result tables only (never re-simulating).

Each plot function takes the tables it needs and ``ax=None`` (a new figure is made when no
Axes is given), returns the Axes, and never calls ``plt.show()``: figures are
:class:`matplotlib.figure.Figure` objects, saved with the Agg renderer, so nothing here needs
a display, selects a backend or touches pyplot's global state (in a notebook, a returned
Figure shows inline).

One colour per design, the same in every figure, from the Okabe-Ito palette (Okabe & Ito
2008, "Color Universal Design"), which stays distinguishable under the common forms of
colour blindness.  Figures are :data:`FIG_WIDTH` inches wide (the text width of an A4 page
with 2 cm margins) at :data:`DPI` dots per inch, with fonts of 8-10 pt at that size.

Examples
--------
>>> from samplewright import scenario_from_dict, run
>>> sc = scenario_from_dict({"frame": {"synthetic": {"units": 300, "seed": 3}},
...                          "design": [{"label": "simple", "method": "srs", "n": 30}]})
>>> res = run(sc, replicates=100, seed=1)
>>> ax = coverage_plot(res.summary, confidence=0.95)
>>> ax.get_xlabel()
'Share of intervals that hold the true value (%)'
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from typing import Callable

import matplotlib
import numpy as np
import pandas as pd
from matplotlib.figure import Figure  # drawn and saved with the Agg renderer; pyplot is never imported
from matplotlib.lines import Line2D
from matplotlib.ticker import FuncFormatter

from samplewright.evaluation.measures import holds

#: Okabe-Ito colours in the order designs receive them (black is kept for "misses" and truth lines)
PALETTE = ("#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#F0E442", "#999999")
MISS_COLOUR = "#000000"
TRUTH_COLOUR = "#000000"
#: figure width in inches: A4 (21 cm) less 2 cm margins each side is 17 cm = 6.69 in
FIG_WIDTH = 6.5
DPI = 150
#: most design x size rows a figure shows before it keeps one size per design
MAX_ROWS = 12
#: z for the 95% Monte Carlo error bars drawn around each simulated measure
MC_Z = 1.959964

ESTIMATOR_NAMES = {"ht": "Horvitz-Thompson", "hajek": "Hajek"}
MARKERS = ("o", "s", "^", "D", "v", "P", "X")

_RC = {
    "font.size": 8.5,
    "axes.titlesize": 10,
    "axes.labelsize": 9,
    "xtick.labelsize": 8,
    "ytick.labelsize": 8,
    "legend.fontsize": 8,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.color": "#dddddd",
    "grid.linewidth": 0.6,
    "axes.axisbelow": True,
    "font.family": "DejaVu Sans",
    "svg.fonttype": "none",
}


def _styled(fn):
    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        with matplotlib.rc_context(_RC):
            return fn(*args, **kwargs)

    return wrapper


def new_figure(height: float, width: float = FIG_WIDTH) -> Figure:
    """A blank figure of the report's width (constrained layout, Agg canvas)."""
    with matplotlib.rc_context(_RC):
        return Figure(figsize=(width, height), dpi=DPI, layout="constrained")


def _axes(ax, height: float):
    if ax is not None:
        return ax
    return new_figure(height).add_subplot()


def _rows_height(k: int) -> float:
    return max(2.6, 1.3 + 0.34 * k)


# ------------------------------------------------------------------ choosing what to show
def design_order(summary: pd.DataFrame) -> list[str]:
    """Design labels in the order the scenario lists them (first appearance in the summary)."""
    return list(dict.fromkeys(summary["design"].tolist()))


def design_colours(designs) -> dict[str, str]:
    """One Okabe-Ito colour per design label, in order (cycling past eight designs)."""
    return {d: PALETTE[i % len(PALETTE)] for i, d in enumerate(designs)}


def plain(text) -> str:
    """``text`` as matplotlib shows it literally: every ``$`` escaped, so no label is read as mathtext.

    Every text from the run's data (design, variable, stratum, order names) passes through
    here before a figure sees it; a label such as ``$x^$`` would otherwise fail at drawing time.

    Examples
    --------
    >>> print(plain("cost $x^$"))
    cost \\$x^\\$
    """
    return str(text).replace("$", r"\$")


def estimator_name(code: str) -> str:
    return ESTIMATOR_NAMES.get(code, str(code))


def _variable(summary: pd.DataFrame, variable):
    if variable is None:
        return summary["variable"].iloc[0]
    if variable not in set(summary["variable"]):
        raise ValueError(
            f"variable {variable!r} is not in the summary; it has {sorted(set(summary['variable']))}"
        )
    return variable


def cell_label(design: str, method: str, size, mean_n=None) -> str:
    """How a design at one size is named in figures: clusters are counted as clusters (with the
    expected units when ``mean_n`` is given; ``designs.size_words``)."""
    from samplewright.designs import size_words

    return f"{design}, {size_words(method, size, mean_n, units='n = {}')}"


def primary_rows(
    summary: pd.DataFrame, variable=None, max_rows: int = MAX_ROWS, keep: dict | None = None
) -> pd.DataFrame:
    """The summary rows a one-estimator figure shows: each design's first estimator, one variable.

    With more than ``max_rows`` design x size cells, only one size per design is kept: the
    size named in ``keep`` (e.g. the recommended one) or else the design's largest.
    """
    var = _variable(summary, variable)
    s = summary[summary["variable"] == var]
    first = s.groupby("design", sort=False)["estimator"].first()
    s = s[s["estimator"].to_numpy() == s["design"].map(first).to_numpy()]
    return _limit_sizes(s, max_rows, keep)


def all_rows(summary: pd.DataFrame, variable=None, max_rows: int = MAX_ROWS, keep: dict | None = None):
    """Every estimator's rows for one variable (sizes limited as in :func:`primary_rows`)."""
    var = _variable(summary, variable)
    s = summary[summary["variable"] == var]
    cells = s[["design", "size"]].drop_duplicates()
    if len(cells) > max_rows:
        kept = _limit_sizes(cells.assign(estimator="", method=""), max_rows, keep)[["design", "size"]]
        s = s.merge(kept, on=["design", "size"])
    return s


def _limit_sizes(s: pd.DataFrame, max_rows: int, keep: dict | None) -> pd.DataFrame:
    if len(s[["design", "size"]].drop_duplicates()) <= max_rows:
        return s.reset_index(drop=True)
    keep = keep or {}
    chosen = {}
    for d, g in s.groupby("design", sort=False):
        want = keep.get(d)
        chosen[d] = want if want in set(g["size"]) else g["size"].max()
    mask = s["size"].to_numpy() == s["design"].map(chosen).to_numpy()
    return s[mask].reset_index(drop=True)


def _labels(rows: pd.DataFrame, with_estimator: bool) -> list[str]:
    out = []
    for r in rows.itertuples(index=False):
        lab = cell_label(r.design, r.method, r.size, getattr(r, "mean_n", None))
        if with_estimator:
            lab += f" ({estimator_name(r.estimator)})"
        out.append(plain(lab))
    return out


def _multi_estimator(rows: pd.DataFrame) -> bool:
    return rows["estimator"].nunique() > 1


def _marker_map(rows: pd.DataFrame) -> dict[str, str]:
    return {e: MARKERS[i % len(MARKERS)] for i, e in enumerate(dict.fromkeys(rows["estimator"]))}


def _design_legend(ax, designs, colours, markers=None, loc="best"):
    handles = [
        Line2D([], [], color=colours[d], marker="o", linestyle="", markersize=6, label=plain(d)) for d in designs
    ]
    if markers and len(markers) > 1:
        handles += [
            Line2D([], [], color="#555555", marker=m, linestyle="", markersize=6, label=plain(estimator_name(e)))
            for e, m in markers.items()
        ]
    ax.legend(handles=handles, loc=loc, frameon=False)


def _cell_positions(rows: pd.DataFrame):
    """Design x size cells (one axis row each) and, per summary row, its y position.

    Several estimators of one cell share its row, side by side vertically.
    """
    cells = rows.drop_duplicates(["design", "size"]).reset_index(drop=True)
    k = len(cells)
    where = {(d, s): k - 1 - i for i, (d, s) in enumerate(zip(cells["design"], cells["size"]))}
    ests = list(dict.fromkeys(rows["estimator"]))
    step = 0.22 if len(ests) > 1 else 0.0
    off = {e: ((len(ests) - 1) / 2.0 - j) * step for j, e in enumerate(ests)}
    y = [where[(d, s)] + off[e] for d, s, e in zip(rows["design"], rows["size"], rows["estimator"])]
    return cells, np.asarray(y, float)


def _estimator_legend(ax, markers, above: bool = True):
    if len(markers) > 1:
        handles = [
            Line2D([], [], color="#555555", marker=m, linestyle="", markersize=5, label=plain(estimator_name(e)))
            for e, m in markers.items()
        ]
        if above:
            ax.legend(
                handles=handles,
                loc="lower left",
                bbox_to_anchor=(0.0, 1.0),
                ncol=len(handles),
                frameon=False,
                borderaxespad=0.2,
            )
        else:
            ax.legend(
                handles=handles, loc="upper left", bbox_to_anchor=(1.0, 1.0), frameon=False, title="estimator"
            )


def _row_axis(ax, labels):
    y = np.arange(len(labels))[::-1]
    ax.set_yticks(y, labels)
    ax.set_ylim(-0.7, len(labels) - 0.3)
    ax.grid(axis="y", visible=False)
    return y


def sample_weights(rep: pd.DataFrame) -> np.ndarray:
    """Weight of each replicate row: 1, or its ``probability`` in an exact (enumerated) run."""
    if "probability" in rep.columns:
        w = rep["probability"].to_numpy(float)
        if np.all(np.isfinite(w)) and w.sum() > 0:
            return w / w.sum()
    return np.full(len(rep), 1.0 / max(len(rep), 1))


def weighted_quantiles(x, w, qs) -> np.ndarray:
    """Quantiles of a weighted sample: the smallest x whose cumulative weight reaches q."""
    order = np.argsort(x, kind="stable")
    cw = np.cumsum(w[order]) / np.sum(w)
    idx = np.minimum(np.searchsorted(cw, np.asarray(qs) - 1e-12), len(x) - 1)
    return x[order][idx]


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


# ------------------------------------------------------------------ the figures
@_styled
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
    ax = _axes(ax, _rows_height(len(rows)))
    colours = design_colours(design_order(summary))
    labels = _labels(rows, with_estimator=False)
    y = _row_axis(ax, labels)
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


def _row_plot(summary, variable, keep, ax):
    """Shared set-up of the one-row-per-design-and-size figures (bias, coverage)."""
    rows = all_rows(summary, variable, keep=keep)
    cells, ypos = _cell_positions(rows)
    ax = _axes(ax, _rows_height(len(cells)))
    _row_axis(ax, _labels(cells, with_estimator=False))
    colours, markers = design_colours(design_order(summary)), _marker_map(rows)
    return rows, rows["variable"].iloc[0], cells, ypos, ax, colours, markers


@_styled
def bias_plot(summary: pd.DataFrame, variable=None, ax=None, keep: dict | None = None):
    """Bias of each design and estimator with 95% Monte Carlo error bars; relative bias on the top axis.

    Notes
    -----
    Bias = mean(estimate) - truth, MCSE = empirical SE / sqrt(R) (Morris, White & Crowther
    2019, Table 6).  Bars span bias +- 1.96 MCSE: a bar that crosses zero shows no bias the
    simulation can detect.
    """
    rows, var, cells, ypos, ax, colours, markers = _row_plot(summary, variable, keep, ax)
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
    _estimator_legend(ax, markers, above=False)
    ax.axvline(0.0, color=TRUTH_COLOUR, linewidth=1.0)
    truth = float(rows["truth"].iloc[0])
    span = np.nanmax(
        np.abs(np.r_[rows["bias"] - MC_Z * rows["bias_mcse"], rows["bias"] + MC_Z * rows["bias_mcse"]])
    )
    if np.isfinite(span) and span > 0:
        ax.set_xlim(-1.1 * span, 1.1 * span)
    ax.set_xlabel(f"Average estimate minus true value ({plain(var)})")
    ax.set_title(f"Bias of the estimated mean {plain(var)}", loc="left")
    if truth != 0 and np.isfinite(truth):
        top = ax.secondary_xaxis("top", functions=(lambda b: 100.0 * b / truth, lambda p: p * truth / 100.0))
        top.set_xlabel("Relative bias (% of the true value)")
    return ax


@_styled
def coverage_plot(
    summary: pd.DataFrame, confidence: float = 0.95, variable=None, ax=None, keep: dict | None = None
):
    """Share of replicate intervals that hold the truth, with 95% Monte Carlo intervals and the nominal level.

    Notes
    -----
    Coverage MCSE = sqrt(c (1 - c) / R) (Morris, White & Crowther 2019, Table 6).
    """
    rows, var, cells, ypos, ax, colours, markers = _row_plot(summary, variable, keep, ax)
    for yi, r in zip(ypos, rows.itertuples(index=False)):
        c, e = 100.0 * r.coverage, 100.0 * MC_Z * r.coverage_mcse
        ax.errorbar(c, yi, xerr=e, fmt=markers[r.estimator], color=colours[r.design], capsize=3, markersize=5)
    _estimator_legend(ax, markers)
    nominal = 100.0 * confidence
    ax.axvline(nominal, color=TRUTH_COLOUR, linestyle="--", linewidth=1.2)
    ax.text(nominal, len(cells) - 0.45, f" promised {nominal:g}%", va="bottom", ha="left", fontsize=8)
    lo = min(float(np.nanmin(100.0 * (rows["coverage"] - MC_Z * rows["coverage_mcse"]))), nominal - 5.0)
    ax.set_xlim(max(0.0, lo - 1.0), 100.5)
    ax.set_xlabel("Share of intervals that hold the true value (%)")
    ax.set_title(f"Coverage of the {nominal:g}% intervals for the mean {plain(var)}", loc="left", pad=18)
    return ax


@_styled
def se_plot(summary: pd.DataFrame, variable=None, ax=None, keep: dict | None = None):
    """Estimated SE (root mean square of the replicates' SEs) against the empirical SE.

    A point below the diagonal means the variance formula understates the real spread, so the
    intervals are too narrow.  Horizontal bars: 95% Monte Carlo interval of the empirical SE,
    MCSE = empSE / sqrt(2 (R - 1)) (Morris, White & Crowther 2019, Table 6).
    """
    rows = all_rows(summary, variable, keep=keep)
    var = rows["variable"].iloc[0]
    ax = _axes(ax, 4.2)
    designs = [d for d in design_order(summary) if d in set(rows["design"])]
    colours, markers = design_colours(design_order(summary)), _marker_map(rows)
    for (d, e), g in rows.groupby(["design", "estimator"], sort=False):
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
            for axis in (ax.xaxis, ax.yaxis):
                axis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
                axis.set_minor_formatter(FuncFormatter(lambda v, _pos: ""))
            lo, hi = lo / 1.3, hi * 1.3
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
    ax.set_xlabel(f"Empirical SE: real spread of the estimates ({plain(var)})")
    ax.set_ylabel(f"Estimated SE from the formula ({plain(var)})")
    ax.set_title("Does the standard-error formula tell the truth?")
    _design_legend(ax, designs, colours, markers, loc="upper left")
    ax.legend_.set_bbox_to_anchor((1.0, 1.0))
    return ax


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


@_styled
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
    ax = _axes(ax, 3.0)
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


@_styled
def interval_plot(
    replicates: pd.DataFrame,
    summary: pd.DataFrame,
    confidence: float = 0.95,
    variable=None,
    fig: Figure | None = None,
    keep: dict | None = None,
    shown: int = 100,
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
    groups = {key: g for key, g in sel.groupby(["design", "size", "estimator"], sort=False)}
    truth = float(rows["truth"].iloc[0])
    for i, r in enumerate(rows.itertuples(index=False)):
        ax = axes[i // ncol][i % ncol]
        g = groups.get((r.design, r.size, r.estimator))
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
        f"{100 * confidence:g}% interval for the mean {plain(var)} from each {which} sample "
        f"(each panel has its own scale)",
        fontsize=9,
    )
    fig.suptitle(
        f"Which intervals miss? Up to {shown} ranked intervals per design (black: misses the true value)",
        fontsize=10,
    )
    return fig


def frontier_table(summary: pd.DataFrame, frontier: pd.DataFrame | None, variable=None) -> pd.DataFrame:
    """Cost and precision points to plot: frontier.csv when the run has one, else the summary."""
    var = _variable(summary, variable)
    if (
        frontier is not None
        and len(frontier)
        and {"mean_cost", "moe", "design", "size"} <= set(frontier.columns)
    ):
        f = frontier.copy()
        if "variable" in f.columns:
            f = f[f["variable"] == var]
        if "method" not in f.columns:
            f = f.merge(summary[["design", "method"]].drop_duplicates(), on="design", how="left")
        if "estimator" not in f.columns:
            f["estimator"] = ""
        return f.reset_index(drop=True)
    return summary[summary["variable"] == var].reset_index(drop=True)


def _truthy(col: pd.Series) -> np.ndarray:
    return col.astype(str).str.lower().isin(["true", "1", "1.0"]).to_numpy()


@_styled
def cost_precision_plot(
    summary: pd.DataFrame,
    frontier: pd.DataFrame | None = None,
    goals: dict | None = None,
    variable=None,
    ax=None,
    picks: dict | None = None,
):
    """Mean field cost against margin of error, per design, estimator and size, with the goals drawn in.

    Parameters
    ----------
    frontier : DataFrame, optional
        The run's frontier.csv (its ``on_frontier`` points are joined by a dotted step line).
    goals : dict, optional
        ``{"budget": B, "moe": E}`` (either may be missing): drawn as a vertical and a
        horizontal line.
    picks : dict, optional
        ``{"name": {"design": ..., "size": ..., "estimator": ...}}`` points to ring and name
        (the recommendation).
    """
    pts = frontier_table(summary, frontier, variable)
    var = _variable(summary, variable)
    ax = _axes(ax, 4.2)
    designs = [d for d in design_order(summary) if d in set(pts["design"])]
    colours, markers = design_colours(design_order(summary)), _marker_map(pts)
    for (d, e), g in pts.groupby(["design", "estimator"], sort=False):
        g = g.sort_values("size")
        ax.plot(
            g["mean_cost"],
            g["moe"],
            color=colours[d],
            marker=markers[e],
            markersize=5,
            linewidth=1.0,
            alpha=0.9,
        )
        if len(g) > 1 and e == next(iter(markers)):
            for r in g.iloc[[0, -1]].itertuples(index=False):
                ax.annotate(
                    f"{int(r.size)}",
                    (r.mean_cost, r.moe),
                    textcoords="offset points",
                    xytext=(4, 3),
                    fontsize=7,
                    color=colours[d],
                )
    handles = [
        Line2D([], [], color=colours[d], marker="o", linewidth=1.0, markersize=5, label=plain(d)) for d in designs
    ]
    if len(markers) > 1:
        handles += [
            Line2D([], [], color="#555555", marker=m, linestyle="", markersize=5, label=plain(estimator_name(e)))
            for e, m in markers.items()
        ]
    if "on_frontier" in pts.columns:
        on = pts[_truthy(pts["on_frontier"])].sort_values("mean_cost")
        if len(on):
            ax.step(on["mean_cost"], on["moe"], where="post", color="#555555", linestyle=":", linewidth=1.3)
            handles.append(
                Line2D([], [], color="#555555", linestyle=":", label="frontier (best for the cost)")
            )
    goals = goals or {}
    if goals.get("budget") is not None:
        ax.axvline(float(goals["budget"]), color=TRUTH_COLOUR, linestyle="--", linewidth=1.0)
        handles.append(
            Line2D([], [], color=TRUTH_COLOUR, linestyle="--", label=f"budget {float(goals['budget']):,.0f}")
        )
    if goals.get("moe") is not None:
        ax.axhline(float(goals["moe"]), color=TRUTH_COLOUR, linestyle="-.", linewidth=1.0)
        handles.append(
            Line2D(
                [],
                [],
                color=TRUTH_COLOUR,
                linestyle="-.",
                label=f"target margin of error {float(goals['moe']):.3g}",
            )
        )
    merged = {}  # one ring and one label per point, even when it answers both goals
    for name, p in (picks or {}).items():
        if p:
            key = (p.get("design"), p.get("size"), p.get("estimator"), p.get("variable"))
            merged.setdefault(key, (p, []))[1].append(name)
    for p, names in merged.values():
        name = " and ".join(names)
        hit = pts[(pts["design"] == p.get("design")) & (pts["size"] == p.get("size"))]
        if p.get("estimator") and len(hit) > 1:
            hit = hit[hit["estimator"] == p["estimator"]]
        if len(hit):
            x, y = float(hit["mean_cost"].iloc[0]), float(hit["moe"].iloc[0])
            ax.plot(x, y, marker="o", markersize=14, fillstyle="none", color=TRUTH_COLOUR, linestyle="")
            ax.annotate(
                name,
                (x, y),
                textcoords="offset points",
                xytext=(10, -13),
                fontsize=7.5,
                bbox={"boxstyle": "round,pad=0.2", "fc": "white", "ec": "none", "alpha": 0.8},
            )
    moe = pts["moe"].to_numpy(float)
    moe = moe[np.isfinite(moe) & (moe > 0)]
    if len(moe) and moe.max() / moe.min() > 8:
        ax.set_yscale("log")
        ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:g}"))
        ax.yaxis.set_minor_formatter(
            FuncFormatter(lambda v, _pos: f"{v:g}" if str(f"{v:g}")[0] in "25" else "")
        )
        ylab = f"Margin of error ({plain(var)}, log scale)"
    else:
        ax.set_ylim(bottom=0)
        ylab = f"Margin of error ({plain(var)})"
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:,.0f}" if abs(v) >= 1000 else f"{v:g}"))
    ax.set_xlabel("Average field cost of one survey (cost units of the scenario)")
    ax.set_ylabel(ylab)
    ax.set_title("Cost against precision (lower left is better)")
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.0, 1.0), frameon=False)
    return ax


@_styled
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
    ax = _axes(ax, max(2.6, 1.2 + 0.3 * len(strata) * (len(designs) + 1)))
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


@_styled
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
    ax = _axes(ax, 3.8)
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
    ax.set_title(f"A cycle of {P:.4g} units along the {plain(entry['order'])}; ticks: where one systematic sample falls",
                 fontsize=9.5)
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.2), frameon=False, ncol=1)
    return ax


# ------------------------------------------------------------------ the registry the report uses
@dataclass(frozen=True)
class FigureSpec:
    """A report figure: its file stem, heading, how to read it, and when a run has it."""

    name: str
    heading: str
    caption: str
    per_variable: bool
    available: Callable  # (result) -> bool
    draw: Callable  # (result, variable, keep) -> Figure


def _fig(ax_or_fig):
    return ax_or_fig if isinstance(ax_or_fig, Figure) else ax_or_fig.figure


def _confidence(res) -> float:
    return float((res.info or {}).get("confidence", 0.95))


def goals_of(res, variable=None) -> dict:
    """The run's budget and MOE goals (recommendation.json ``goal``, or run.json), for ``variable``.

    A goal about another study variable than ``variable`` is left out.
    """
    out = {}
    for src in ((res.recommendation or {}).get("goal"), (res.info or {}).get("goal")):
        if isinstance(src, dict):
            if variable is not None and src.get("variable") not in (None, variable):
                continue
            for k in ("budget", "moe"):
                if src.get(k) is not None and k not in out:
                    out[k] = src[k]
    return out


def picks_of(res, variable=None) -> dict:
    """The recommended points (for ``variable``, when given), named for the figure."""
    rec = res.recommendation or {}
    out = {}
    for key, name in (
        ("cheapest_meeting_moe", "cheapest meeting the margin"),
        ("best_within_budget", "most precise within budget"),
    ):
        p = rec.get(key)
        if isinstance(p, dict) and p.get("design") is not None:
            if variable is not None and p.get("variable") not in (None, variable):
                continue
            out[name] = p
    return out


def keep_sizes(res) -> dict:
    """design -> size to show when a figure cannot show every size (the recommended picks first)."""
    keep = {}
    for p in picks_of(res).values():
        keep.setdefault(p["design"], p.get("size"))
    return keep


def _var(res, variable):
    return variable if variable is not None else res.summary["variable"].iloc[0]


def _has_rows(res) -> bool:
    return res.summary is not None and len(res.summary) > 0


def _has_reps(res) -> bool:
    return _has_rows(res) and res.replicates is not None and len(res.replicates) > 0


FIGURES: dict[str, FigureSpec] = {}


def _register(spec: FigureSpec):
    FIGURES[spec.name] = spec


_register(
    FigureSpec(
        "sampling_distribution",
        "Where the estimates fall",
        "Each shape is the spread of one design's estimates over all simulated samples; the dashed line is "
        "the "
        "true population value. A narrow shape centred on the line is a precise, unbiased design; thick "
        "bar: the "
        "middle half of the estimates, thin line: the middle 95%.",
        True,
        _has_reps,
        lambda res, var, keep: _fig(sampling_distribution(res.replicates, res.summary, var, keep=keep)),
    )
)
_register(
    FigureSpec(
        "bias",
        "Bias",
        "How far the average estimate sits from the truth, with 95% simulation error bars (the bars shrink "
        "as "
        "replicates grow). A bar crossing zero means no bias that this many replicates can detect; the top "
        "axis "
        "gives the bias as a percentage of the true value.",
        True,
        _has_rows,
        lambda res, var, keep: _fig(bias_plot(res.summary, var, keep=keep)),
    )
)
_register(
    FigureSpec(
        "coverage",
        "Do the intervals keep their promise?",
        "The share of simulated samples whose confidence interval holds the true value, with its 95% "
        "simulation "
        "error bar; the dashed line is the promised level. A design whose bar lies wholly left of the line "
        "reports intervals that are too narrow: its stated precision cannot be trusted.",
        True,
        _has_rows,
        lambda res, var, keep: _fig(coverage_plot(res.summary, _confidence(res), var, keep=keep)),
    )
)
_register(
    FigureSpec(
        "se_check",
        "Does the standard-error formula tell the truth?",
        "Each point compares the standard error the analysis would report (vertical) with the real spread of "
        "the estimates over the simulated samples (horizontal). Points on the dashed diagonal are honest; "
        "points below it belong to designs whose formula understates the uncertainty.",
        True,
        _has_rows,
        lambda res, var, keep: _fig(se_plot(res.summary, var, keep=keep)),
    )
)
_register(
    FigureSpec(
        "intervals",
        "Which intervals miss?",
        "A sample of each design's confidence intervals, ranked from the closest hit (bottom) to the widest "
        "miss (top); black intervals miss the true value (vertical line). Below the dashed line all "
        "intervals "
        "should hold the truth, above it all should miss: misses starting well below the line mean the "
        "intervals lie (Morris, White and Crowther 2019).",
        True,
        _has_reps,
        lambda res, var, keep: interval_plot(res.replicates, res.summary, _confidence(res), var, keep=keep),
    )
)
_register(
    FigureSpec(
        "cost_precision",
        "Cost against precision",
        "Average field cost of one survey against its margin of error (the half-width an interval needs to "
        "hold "
        "the truth at the promised rate, bias included). Designs further down and to the left buy more "
        "precision for the money; the goals of the run, when it has them, are drawn as lines.",
        True,
        _has_rows,
        lambda res, var, keep: _fig(
            cost_precision_plot(
                res.summary,
                res.frontier,
                goals_of(res, _var(res, var)),
                var,
                picks=picks_of(res, _var(res, var)),
            )
        ),
    )
)
_register(
    FigureSpec(
        "allocation",
        "Stratified allocation",
        "How each stratified design spreads its sample over the strata, beside each stratum's share of the "
        "frame (grey). Neyman and cost-optimal allocations give more units to strata that vary more (or cost "
        "less to reach).",
        False,
        lambda res: res.allocation is not None and len(res.allocation) > 0,
        lambda res, var, keep: _fig(allocation_plot(res.allocation, res.summary, keep=keep)),
    )
)


def _order_entries(res) -> list:
    entries = (res.info or {}).get("frame_order") or []
    order = getattr(res, "frame_order", None)
    if order is None or not len(order):
        return []
    have = set(zip(order["order"], order["variable"]))
    return [e for e in entries if (e.get("order"), e.get("variable")) in have and e.get("periods")]


def _draw_order(res, var, keep):
    entries = _order_entries(res)
    fig = new_figure(0.3 + 3.6 * len(entries))
    axes = fig.subplots(len(entries), 1, squeeze=False)[:, 0]
    for ax, e in zip(axes, entries):
        frame_order_plot(res.frame_order, e, res.summary, ax=ax)
    return fig


_register(
    FigureSpec(
        "frame_order",
        "A cycle along the frame's list order",
        "The study variable along the order a systematic design walks, for its first few cycles; the dotted "
        "lines are one detected period apart. Each row of coloured ticks below marks the units one systematic "
        "sample takes from a start at the top of the list. Ticks that land on the same phase of the cycle at "
        "every pass mean the estimate depends on the start, and the usual standard error does not see it.",
        False,
        lambda res: len(_order_entries(res)) > 0,
        _draw_order,
    )
)


def figure_names(res) -> list[str]:
    """Names of the figures this run can draw, in report order."""
    return [n for n, spec in FIGURES.items() if spec.available(res)]


def make_figure(res, name: str, variable=None) -> Figure:
    """Draw figure ``name`` of a run (a :class:`~samplewright.results.result.RunResult`)."""
    if name not in FIGURES:
        from samplewright.config.validate import closest

        raise KeyError(f"no figure named {name!r}{closest(name, list(FIGURES))}")
    spec = FIGURES[name]
    if not spec.available(res):
        raise ValueError(f"this run has no data for the {name!r} figure")
    return spec.draw(res, variable, keep_sizes(res))
