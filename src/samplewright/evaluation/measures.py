"""Performance measures of each design and their Monte Carlo standard errors.

Definitions follow Morris, White & Crowther (2019), "Using simulation studies to evaluate
statistical methods", Statistics in Medicine 38:2074-2102, Table 6, for R replicates with
estimates x_r, estimated standard errors s_r and true value T:

- bias = mean(x) - T,                      MCSE = sqrt(var(x) / R)
- empirical SE = sd(x) (divisor R - 1),    MCSE = empSE / sqrt(2 (R - 1))
- model (mean estimated) SE = sqrt(mean(s_r^2))
- coverage = share of intervals holding T, MCSE = sqrt(c (1 - c) / R)
- RMSE = sqrt(mean((x - T)^2))

The design effect is Kish's: the design's empirical variance over the exact variance of the
SRS-without-replacement mean at the same mean sample size (Kish 1965, sec. 8.2).  The
margin of error is z_{1-alpha/2} x RMSE (common practice: the half-width a normal interval
would need to hold the truth at the nominal rate, bias included).

Ratios with a zero denominator: ``se_ratio`` (mean SE / empirical SE) and ``deff`` (empirical
variance / SRS variance) are left empty (NaN) only where they are 0 / 0, and are infinite
where only the denominator is 0.  The SRS variance is 0 for a variable without variance in
the frame (every unit has the same value; the run warns about it once) and for a census;
an SE counts as 0 when it is below ``ROUNDING`` times the magnitude of the truth or of the
mean estimate (the spread a constant estimate picks up from floating-point rounding).  For
the same reason an interval holds the truth T when lower - d <= T <= upper + d with
d = ``ROUNDING`` max(|T|, |lower|, |upper|) (:func:`holds`), so the zero-width interval of an estimate that equals
T up to rounding counts as covering it.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from samplewright.population.frame import Frame

SUMMARY_COLUMNS = [
    "design", "method", "size", "estimator", "variable", "replicates", "truth", "mean_estimate", "bias",
    "bias_mcse", "relative_bias", "empirical_se", "empirical_se_mcse", "rmse", "mean_se", "se_ratio", "deff",
    "coverage", "coverage_mcse", "mean_ci_width", "moe", "mean_n", "mean_cost",
]


#: relative rounding slack of :func:`holds` (a zero-width census interval is its estimate, rounded)
ROUNDING = 1e-12


def holds(lower, upper, truth):
    """Whether each interval holds the truth, up to rounding (arrays broadcast).

    A census, or any sample whose variance estimate is 0, gives a zero-width interval at its
    estimate, which equals the truth up to the order of summation: a slack of :data:`ROUNDING`
    times the largest magnitude involved counts it as holding, as it does in exact arithmetic.
    """
    tol = ROUNDING * np.maximum(np.abs(truth), np.maximum(np.abs(lower), np.abs(upper)))
    return (lower - tol <= truth) & (truth <= upper + tol)


def _zero(se: float, scale: float) -> bool:
    return se <= ROUNDING * scale


def _ratio(num: float, den: float, num_zero: bool, den_zero: bool) -> float:
    if np.isnan(num) or np.isnan(den):
        return float("nan")
    if den_zero:
        return float("nan") if num_zero else float("inf")
    return num / den


def se_ratio(mean_se: float, emp_se: float, scale: float) -> float:
    """mean SE / empirical SE (see module notes for 0 / 0 and x / 0); ``scale`` = max(|truth|, |mean|)."""
    return _ratio(mean_se, emp_se, _zero(mean_se, scale), _zero(emp_se, scale))


def srs_variance(mean_n: float, N: int, S2: float) -> float:
    """Variance of the SRS-without-replacement mean at size ``mean_n`` (Cochran 1977, eq. 2.8); 0 for a census."""
    if not mean_n > 0:
        return float("nan")
    return (1.0 - mean_n / N) * S2 / mean_n if mean_n < N else 0.0


def design_effect(emp_se: float, srs_var: float, scale: float) -> float:
    """Kish's deff, empirical variance / SRS variance (see module notes for 0 / 0 and x / 0)."""
    return _ratio(emp_se**2, srs_var, _zero(emp_se, scale), srs_var <= 0)


def measures(x: np.ndarray, se: np.ndarray, lower: np.ndarray, upper: np.ndarray, truth: float,
             z: float) -> dict:
    """Morris-White-Crowther measures of one method from its replicate arrays."""
    R = len(x)
    mean = float(np.mean(x))
    var = float(np.var(x, ddof=1)) if R > 1 else float("nan")
    emp_se = float(np.sqrt(var))
    cover = float(np.mean(holds(lower, upper, truth)))
    rmse = float(np.sqrt(np.mean((x - truth) ** 2)))
    mod_se = float(np.sqrt(np.mean(se**2)))
    return {
        "replicates": R,
        "truth": truth,
        "mean_estimate": mean,
        "bias": mean - truth,
        "bias_mcse": float(np.sqrt(var / R)),
        "relative_bias": (mean - truth) / truth if truth != 0 else float("nan"),
        "empirical_se": emp_se,
        "empirical_se_mcse": emp_se / np.sqrt(2.0 * (R - 1)) if R > 1 else float("nan"),
        "rmse": rmse,
        "mean_se": mod_se,
        "se_ratio": se_ratio(mod_se, emp_se, max(abs(truth), abs(mean))),
        "coverage": cover,
        "coverage_mcse": float(np.sqrt(cover * (1.0 - cover) / R)),
        "mean_ci_width": float(np.mean(upper - lower)),
        "moe": z * rmse,
    }


def group_rows(reps: pd.DataFrame, keys: list[str]) -> list[tuple[tuple, np.ndarray]]:
    """(key tuple, row positions) of every group of ``reps`` by ``keys``, in order of first row.

    Callers slice numpy columns with the positions instead of building per-group DataFrames,
    so measures over a long run need little memory beyond the replicate table itself.
    """
    groups = reps.groupby(keys, sort=False).indices
    return sorted(groups.items(), key=lambda kv: kv[1][0])


def summarise(reps: pd.DataFrame, frame: Frame, methods: dict[str, str], confidence: float) -> pd.DataFrame:
    """One summary row per design x size x estimator x variable (contract columns, in order)."""
    z = float(stats.norm.ppf(0.5 + confidence / 2.0))
    # targets and domain variables (see layout.py): exact means, and S^2 for the SRS reference variance
    truth = dict(zip(frame.layout.names, frame.layout.truth))
    S2 = dict(zip(frame.layout.names, frame.layout.S2))
    domain_vars = set(frame.layout.names[frame.V:])
    rows = []
    # group by row positions and slice the numeric columns once: no per-group DataFrame copies,
    # so evaluating a long run needs little memory beyond the replicate table itself
    col = {k: reps[k].to_numpy() for k in ("estimate", "se", "lower", "upper", "n", "cost")}
    for (design, size, est, var), idx in group_rows(reps, ["design", "size", "estimator", "variable"]):
        if var in domain_vars:  # a replicate that met no unit of the domain has no estimate: not counted
            idx = idx[np.isfinite(col["estimate"][idx])]
            if len(idx) == 0:
                continue
        m = measures(col["estimate"][idx], col["se"][idx], col["lower"][idx], col["upper"][idx],
                     float(truth[var]), z)
        mean_n = float(col["n"][idx].mean())
        deff = design_effect(m["empirical_se"], srs_variance(mean_n, frame.N, S2[var]),
                             max(abs(m["truth"]), abs(m["mean_estimate"])))
        rows.append({"design": design, "method": methods.get(design, ""), "size": int(size), "estimator": est,
                     "variable": var, **m, "deff": deff, "mean_n": mean_n,
                     "mean_cost": float(col["cost"][idx].mean())})
    return pd.DataFrame(rows, columns=SUMMARY_COLUMNS)
