"""The cost and precision points of a run, one row per design x size x estimator, for one study variable."""

from __future__ import annotations

import numpy as np
import pandas as pd


def _truthy(col: pd.Series) -> np.ndarray:
    """A yes/no column read back from CSV (``True``/``False`` or ``1``/``0``) as booleans."""
    return col.astype(str).str.lower().isin(["true", "1", "1.0"]).to_numpy()


def cost_precision_points(summary: pd.DataFrame, frontier: pd.DataFrame | None, variable: str) -> pd.DataFrame:
    """Mean cost and margin of error per design, size and estimator: frontier.csv when the run has one
    (with ``on_frontier`` as booleans), else the summary's rows."""
    if (
        frontier is not None
        and len(frontier)
        and {"mean_cost", "moe", "design", "size"} <= set(frontier.columns)
    ):
        points = frontier.copy()
        if "variable" in points.columns:
            points = points[points["variable"] == variable]
        if "method" not in points.columns:
            points = points.merge(summary[["design", "method"]].drop_duplicates(), on="design", how="left")
        if "estimator" not in points.columns:
            points["estimator"] = ""
        if "on_frontier" in points.columns:
            points["on_frontier"] = _truthy(points["on_frontier"])
        return points.reset_index(drop=True)
    return summary[summary["variable"] == variable].reset_index(drop=True)
