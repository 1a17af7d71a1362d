"""The cost-precision frontier of a run, and each design's fitted precision curve.

Every design x size x estimator x variance formula x variable of the summary is a point (mean cost, margin of
error).  A point is on the frontier when no other point of the same variable is at most as
dear and at most as imprecise, and strictly better in one of the two (Pareto).

Between simulated sizes, each design's mean squared error is fitted as

    MSE(n) = a / n + b

by weighted least squares over its sweep (weights 1 / MCSE^2 of each point's MSE, so the
points are independent: each size has its own seeds).  The form is exact for SRS without
replacement, whose variance is (1 - n/N) S^2 / n = S^2 / n - S^2 / N (Cochran 1977, eq. 2.8),
for stratified SRS with a fixed allocation (Cochran eq. 5.6, with n_h = n w_h) and for one-stage
cluster sampling in the number of clusters; for other designs it is an approximation.  The
size meeting a margin E at normal quantile z solves a/n + b = (E / z)^2.  An answer inside the
simulated range is labelled "interpolated", one outside it "extrapolated".

A point whose MSE has no Monte Carlo error (a census, where every replicate takes the whole
frame, or any size at which every replicate gives the same estimate) is known exactly, so it
cannot take a weight 1 / 0.  Its MCSE is 0 or rounding error: a point counts as exact when its
MCSE is at most :data:`EXACT_MCSE` times the sweep's largest MSE.  Such points are constraints:
the curve passes through them and the other points are fitted by weighted least squares in the
directions the constraints leave free.  With exact points at two or more sizes the curve is fixed
by them alone (a least-squares solve among them).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from samplewright.evaluation.measures import POINT_KEYS, cost_row, group_rows, moe_mcse, mse_row
from samplewright.evaluation.normal import normal_quantile

FRONTIER_COLUMNS = [
    "design", "method", "size", "estimator", "variable", "replicates", "mean_n", "mean_cost", "p90_cost",
    "empirical_se", "rmse", "mse_mcse", "moe", "moe_mcse", "coverage", "coverage_mcse", "on_frontier",
    "truth", "published_moe", "published_moe_mcse", "published_moe_p90", "cost_mcse", "variance",
]


#: MCSE (relative to the sweep's largest MSE) at or below which a point's MSE is exact: rounding error
EXACT_MCSE = 1e-12


def cost_quantile(reps: pd.DataFrame, q: float = 0.9) -> pd.DataFrame:
    """The q-quantile of the replicate cost per design x size (``p90_cost``), and the MCSE of its mean cost
    (:func:`~samplewright.evaluation.measures.cost_row`): columns design, size, p90_cost, cost_mcse.

    Cost is a property of the sample, so one estimator and variable per replicate is enough.  The
    samples of exact mode (a ``probability`` column) have no Monte Carlo error: ``cost_mcse`` is 0.
    """
    cost, rep = reps["cost"].to_numpy(), reps["replicate"].to_numpy()
    exact = "probability" in reps.columns
    rows = []
    for (design, size), idx in group_rows(reps, ["design", "size"]):
        first = np.unique(rep[idx], return_index=True)[1]  # one row per replicate
        rows.append({"design": design, "size": size, **cost_row(cost[idx][first], exact, q)})
    return cost_frame(rows)


def cost_frame(rows: list[dict]) -> pd.DataFrame:
    """The table of :func:`cost_quantile` from its rows (design, size and a ``cost_row``)."""
    return pd.DataFrame(rows, columns=["design", "size", "p90_cost", "cost_mcse"])


def mse_mcse(reps: pd.DataFrame, summary: pd.DataFrame) -> pd.DataFrame:
    """Monte Carlo SE of each point's MSE, sd((x - T)^2) / sqrt(R) (Morris, White & Crowther 2019, Table 6)."""
    keys = [*POINT_KEYS, "variable"]
    truth = {tuple(k): t for k, t in zip(summary[keys].itertuples(index=False), summary["truth"])}
    x = reps["estimate"].to_numpy()
    rows = [dict(zip(keys, key), mse_mcse=mse_row(x[idx], truth.get(key, np.nan)))
            for key, idx in group_rows(reps, keys)]
    return mse_frame(rows)


def mse_frame(rows: list[dict]) -> pd.DataFrame:
    """The table of :func:`mse_mcse` from its rows (the point keys, variable and ``mse_mcse``)."""
    return pd.DataFrame(rows, columns=[*POINT_KEYS, "variable", "mse_mcse"])


def pareto(cost: np.ndarray, loss: np.ndarray) -> np.ndarray:
    """True where no other point is at most as dear and as lossy and strictly better in one.

    Points with a missing cost or loss are never on the front.

    Examples
    --------
    >>> pareto(np.array([1.0, 2.0, 3.0, 2.0]), np.array([5.0, 3.0, 4.0, 3.0])).tolist()
    [True, True, False, True]
    """
    cost, loss = np.asarray(cost, dtype=float), np.asarray(loss, dtype=float)
    ok = np.isfinite(cost) & np.isfinite(loss)
    le = (cost[None, :] <= cost[:, None]) & (loss[None, :] <= loss[:, None]) & ok[None, :]
    lt = (cost[None, :] < cost[:, None]) | (loss[None, :] < loss[:, None])
    dominated = (le & lt).any(axis=1)
    return ok & ~dominated


def frontier_table(summary: pd.DataFrame, reps: pd.DataFrame | None, confidence: float,
                   costs: pd.DataFrame | None = None, mses: pd.DataFrame | None = None) -> pd.DataFrame:
    """One row per design x size x estimator x variance formula x variable with cost, precision and the
    frontier flag (the formulas of a design share its draws, so their cost and margin are the same).

    ``moe`` is z x RMSE at ``confidence`` (the goal's level; the summary uses the run's) and
    ``moe_mcse`` its Monte Carlo SE by the delta method, z x MCSE(MSE) / (2 RMSE); the published
    margin columns are the summary's (at the run's level) and ``cost_mcse`` the MCSE of the mean
    cost; ``variance`` (the formula's name) comes last.

    ``costs`` and ``mses`` (the tables of :func:`cost_quantile` and :func:`mse_mcse`), when given, replace
    those computed from ``reps``: a streamed run builds them cell by cell and holds no whole table.
    """
    if len(summary) == 0:
        return pd.DataFrame(columns=FRONTIER_COLUMNS)
    z = normal_quantile(confidence)
    costs = cost_quantile(reps) if costs is None else costs
    mses = mse_mcse(reps, summary) if mses is None else mses
    t = summary.merge(costs, on=["design", "size"], how="left")
    t = t.merge(mses, on=[*POINT_KEYS, "variable"], how="left")
    t["moe"] = z * t["rmse"]
    t["moe_mcse"] = moe_mcse(t["mse_mcse"], t["rmse"], z)
    t["on_frontier"] = False
    for idx in t.groupby("variable", sort=False).groups.values():
        t.loc[idx, "on_frontier"] = pareto(t.loc[idx, "mean_cost"].to_numpy(), t.loc[idx, "moe"].to_numpy())
    return t[FRONTIER_COLUMNS].reset_index(drop=True)


# ------------------------------------------------------------------ fitted curves
def fit_curve(size, mse, mcse) -> dict | None:
    """Weighted least-squares fit of MSE(n) = a / n + b over a sweep; None when a and b are not determined.

    Weights are 1 / MCSE^2; points with MCSE 0 are exact and held as constraints (module notes).
    Returns a, b, their covariance matrix and the range of sizes fitted.

    Examples
    --------
    >>> c = fit_curve([10, 20, 40], [0.95, 0.45, 0.2], [0.01, 0.01, 0.01])
    >>> round(c["a"], 3), round(c["b"], 3)
    (10.0, -0.05)
    >>> c = fit_curve([10, 20, 40], [0.9, 0.45, 0.0], [0.01, 0.01, 0.0])  # a census at n = 40
    >>> abs(c["a"] / 40 + c["b"]) < 1e-12
    True
    """
    n = np.asarray(size, dtype=float)
    y = np.asarray(mse, dtype=float)
    s = np.asarray(mcse, dtype=float)
    ok = np.isfinite(n) & np.isfinite(y) & (n > 0)
    n, y, s = n[ok], y[ok], s[ok]
    if len(np.unique(n)) < 2:
        return None
    exact = np.isfinite(s) & (s <= EXACT_MCSE * np.abs(y).max())
    good = np.isfinite(s) & ~exact
    floor = s[good].min() if good.any() else 1.0
    w = 1.0 / np.where(good, s, floor) ** 2
    X = np.column_stack([1.0 / n, np.ones_like(n)])
    # beta = beta0 + Z t: beta0 meets the exact points, Z spans what they leave free (all of it if none)
    beta0, Z = np.zeros(2), np.eye(2)
    if exact.any():
        C = X[exact]
        beta0 = np.linalg.lstsq(C, y[exact], rcond=None)[0]
        _, sv, vt = np.linalg.svd(C)
        Z = vt[int((sv > 1e-12 * sv[0]).sum()):].T
    cov = np.zeros((2, 2))
    if Z.shape[1]:
        free = ~exact
        Xf = X[free] @ Z
        M = (Xf.T * w[free]) @ Xf
        if not free.any() or np.linalg.matrix_rank(M) < Z.shape[1]:
            return None
        cov_t = np.linalg.inv(M)
        t = cov_t @ ((Xf.T * w[free]) @ (y[free] - X[free] @ beta0))
        beta0, cov = beta0 + Z @ t, Z @ cov_t @ Z.T
    a, b = beta0
    return {"a": float(a), "b": float(b), "cov": cov, "min_size": float(n.min()), "max_size": float(n.max()),
            "points": len(n)}


def _basis(curve: dict, n: float) -> str:
    return "interpolated" if curve["min_size"] <= n <= curve["max_size"] else "extrapolated"


def size_for_moe(curve: dict, moe: float, z: float) -> float | None:
    """Real size n with z sqrt(a/n + b) = moe, or None when the fitted curve never gets there."""
    half = moe / z
    target = half * half  # inf, not an OverflowError, for a margin past 1e154: every size then meets it
    if curve["a"] <= 0 or target - curve["b"] <= 0:
        return None
    return curve["a"] / (target - curve["b"])


def moe_at(curve: dict, n: float, z: float) -> float | None:
    v = curve["a"] / n + curve["b"]
    return z * math.sqrt(v) if v > 0 else None


def _cost_line(size, cost):
    """Mean cost as a straight line in size, fitted by least squares (exact for a linear cost model)."""
    n = np.asarray(size, dtype=float)
    c = np.asarray(cost, dtype=float)
    slope, icept = np.polyfit(n, c, 1)
    return float(slope), float(icept)


def interpolate_goal(front: pd.DataFrame, moe: float | None, budget: float | None, z: float) -> list[dict]:
    """For every design x estimator x variance formula with a sweep: the size and cost that would meet ``moe`` exactly,
    and the size and margin ``budget`` would buy, from the fitted curves.

    Each answer says whether it is "interpolated" (inside the simulated sizes) or "extrapolated".
    Cost between sizes comes from a straight line fitted to mean cost against size.
    """
    out = []
    for (design, est, formula), g in front.groupby(["design", "estimator", "variance"], sort=False):
        g = g.sort_values("size")
        curve = fit_curve(g["size"], g["rmse"] ** 2, g["mse_mcse"])
        if curve is None:
            continue
        slope, icept = _cost_line(g["size"], g["mean_cost"])
        row = {"design": design, "estimator": est, "variance": formula, "a": curve["a"], "b": curve["b"],
               "sizes_fitted": [int(x) for x in g["size"]]}
        if moe is not None:
            n = size_for_moe(curve, moe, z)
            row["size_for_moe"] = None if n is None else float(n)
            row["cost_for_moe"] = None if n is None else float(icept + slope * math.ceil(n))
            row["moe_basis"] = None if n is None else _basis(curve, n)
        if budget is not None:
            n = (budget - icept) / slope if slope > 0 else None
            n = None if n is None or n <= 0 else n
            row["size_for_budget"] = None if n is None else float(n)
            m = None if n is None else moe_at(curve, math.floor(n) if n >= 1 else n, z)
            row["moe_for_budget"] = m
            row["budget_basis"] = None if n is None else _basis(curve, n)
        out.append(row)
    return out
