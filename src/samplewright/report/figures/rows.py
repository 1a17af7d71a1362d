"""Which summary rows a figure shows, how its rows are named and placed, and replicate weights."""

from __future__ import annotations

import numpy as np
import pandas as pd

from samplewright.designs import size_words
from samplewright.report.figures.style import (
    axes_or_new,
    design_colours,
    design_order,
    estimator_name,
    marker_map,
    plain,
)
from samplewright.report.table import default_rows

#: most design x size rows a figure shows before it keeps one size per design
MAX_ROWS = 12


def variable_of(summary: pd.DataFrame, variable):
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
    return f"{design}, {size_words(method, size, mean_n, units='n = {}')}"


def primary_rows(
    summary: pd.DataFrame, variable=None, max_rows: int = MAX_ROWS, keep: dict | None = None
) -> pd.DataFrame:
    """The summary rows a one-estimator figure shows: each design's default analysis (first estimator and
    variance formula, :func:`samplewright.report.table.default_rows`), one variable.

    With more than ``max_rows`` design x size cells, only one size per design is kept: the
    size named in ``keep`` (e.g. the recommended one) or else the design's largest.
    """
    return limit_sizes(default_rows(summary, variable_of(summary, variable)), max_rows, keep)


def all_rows(summary: pd.DataFrame, variable=None, max_rows: int = MAX_ROWS, keep: dict | None = None):
    """Every estimator's rows for one variable (sizes limited as in :func:`primary_rows`)."""
    var = variable_of(summary, variable)
    s = summary[summary["variable"] == var]
    cells = s[["design", "size"]].drop_duplicates()
    if len(cells) > max_rows:
        kept = limit_sizes(cells.assign(estimator="", method=""), max_rows, keep)[["design", "size"]]
        s = s.merge(kept, on=["design", "size"])
    return s


def limit_sizes(s: pd.DataFrame, max_rows: int, keep: dict | None) -> pd.DataFrame:
    if len(s[["design", "size"]].drop_duplicates()) <= max_rows:
        return s.reset_index(drop=True)
    keep = keep or {}
    chosen = {}
    for d, g in s.groupby("design", sort=False):
        want = keep.get(d)
        chosen[d] = want if want in set(g["size"]) else g["size"].max()
    mask = s["size"].to_numpy() == s["design"].map(chosen).to_numpy()
    return s[mask].reset_index(drop=True)


def row_labels(rows: pd.DataFrame, with_estimator: bool) -> list[str]:
    out = []
    for r in rows.itertuples(index=False):
        lab = cell_label(r.design, r.method, r.size, getattr(r, "mean_n", None))
        if with_estimator:
            lab += f" ({estimator_name(r.estimator)})"
        out.append(plain(lab))
    return out


def cell_positions(rows: pd.DataFrame):
    """Design x size cells (one axis row each) and, per summary row, its y position.

    Several estimators (and variance formulas) of one cell share its row, side by side vertically.
    """
    cells = rows.drop_duplicates(["design", "size"]).reset_index(drop=True)
    k = len(cells)
    where = {(d, s): k - 1 - i for i, (d, s) in enumerate(zip(cells["design"], cells["size"]))}
    points = list(zip(zip(rows["design"], rows["size"]), zip(rows["estimator"], rows["variance"])))
    series: dict[tuple, list] = {}  # per cell, its (estimator, variance formula) pairs in order
    for c, p in points:
        if p not in series.setdefault(c, []):
            series[c].append(p)
    y = []
    for c, p in points:
        k = len(series[c])
        step = min(0.22, 0.66 / max(k - 1, 1))  # 0.22 apart, within two thirds of the row
        y.append(where[c] + ((k - 1) / 2.0 - series[c].index(p)) * step)
    return cells, np.asarray(y, float)


def row_axis(ax, labels):
    y = np.arange(len(labels))[::-1]
    ax.set_yticks(y, labels)
    ax.set_ylim(-0.7, len(labels) - 0.3)
    ax.grid(axis="y", visible=False)
    return y


def rows_height(k: int) -> float:
    return max(2.6, 1.3 + 0.34 * k)


def row_figure(summary, variable, keep, ax):
    """Shared set-up of the one-row-per-design-and-size figures (bias, coverage)."""
    rows = all_rows(summary, variable, keep=keep)
    cells, ypos = cell_positions(rows)
    ax = axes_or_new(ax, rows_height(len(cells)))
    row_axis(ax, row_labels(cells, with_estimator=False))
    colours, markers = design_colours(design_order(summary)), marker_map(rows)
    return rows, rows["variable"].iloc[0], cells, ypos, ax, colours, markers


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
