"""Performance measures of each design and their Monte Carlo standard errors.

Definitions follow Morris, White & Crowther (2019), "Using simulation studies to evaluate
statistical methods", Statistics in Medicine 38:2074-2102, Table 6, for R replicates with
estimates x_r, estimated standard errors s_r and true value T:

- bias = mean(x) - T,                      MCSE = sqrt(var(x) / R)
- empirical SE = sd(x) (divisor R - 1),    MCSE = empSE / sqrt(2 (R - 1))
- model (mean estimated) SE = sqrt(mean(s_r^2))
- coverage = share of intervals holding T, MCSE = sqrt(c (1 - c) / R)
- RMSE = sqrt(mean((x - T)^2));            MSE's MCSE = sd((x - T)^2) / sqrt(R), and the margin of
  error z RMSE has MCSE z MCSE(MSE) / (2 RMSE) (delta method)
- the mean of any replicate quantity d (e.g. paired differences), MCSE = sd(d) / sqrt(R)
- the published margin: the mean half-width h_r = (upper_r - lower_r) / 2 of the intervals the
  survey would publish, MCSE = sd(h) / sqrt(R) (a mean of replicate values), and the 90th
  percentile of h over replicates (how wide the margin printed by one survey in ten would be)

Every other module (exact mode, the stopping rules, the non-response columns, the frontier)
computes these through the functions here; exact mode passes each sample's probability, which
replaces the mean over replicates by the expectation under the design.

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

from samplewright.evaluation.normal import normal_quantile
from samplewright.population.frame import Frame, srs_variance_of_mean

SUMMARY_COLUMNS = [
    "design", "method", "size", "estimator", "variable", "replicates", "truth", "mean_estimate", "bias",
    "bias_mcse", "relative_bias", "empirical_se", "empirical_se_mcse", "rmse", "mean_se", "se_ratio", "deff",
    "coverage", "coverage_mcse", "mean_ci_width", "moe", "mean_n", "mean_cost",
]
#: the columns naming a point of the rehearsal: a design at a size, with an estimator, analysed with a
#: variance formula (each formula of a design is scored on the same draws)
POINT_KEYS = ["design", "size", "estimator", "variance"]
#: the margin a survey would publish, after the contract columns (and after any fieldwork columns)
PUBLISHED_COLUMNS = ["published_moe", "published_moe_mcse", "published_moe_p90"]


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
    return srs_variance_of_mean(mean_n, N, S2) if mean_n < N else 0.0


def design_effect(emp_se: float, srs_var: float, scale: float) -> float:
    """Kish's deff, empirical variance / SRS variance (see module notes for 0 / 0 and x / 0)."""
    return _ratio(emp_se**2, srs_var, _zero(emp_se, scale), srs_var <= 0)


# ------------------------------------------------------------------ the measures (Table 6)
# Each takes replicate arrays along axis 0; ``p``, where given, holds each replicate's probability
# (exact mode: the design distribution replaces the empirical one).
def expectation(values, p=None):
    """Mean over replicates, or the probability-weighted sum in exact mode."""
    return np.mean(values) if p is None else p @ values


def empirical_variance(x, p=None, mean=None):
    """Variance of the estimates: divisor R - 1 over replicates (NaN below two), or exact under ``p``."""
    if p is None:
        return np.var(x, ddof=1) if len(x) > 1 else float("nan")
    return p @ (x - mean) ** 2


def rmse(x, truth, p=None):
    """Root mean squared error, sqrt(mean((x - T)^2))."""
    return np.sqrt(expectation((x - truth) ** 2, p))


def model_se(se, p=None):
    """Mean estimated SE as the root mean square of the SEs, sqrt(mean(s^2))."""
    return np.sqrt(expectation(se**2, p))


def coverage(lower, upper, truth, p=None):
    """Share of intervals that hold the truth (up to rounding, :func:`holds`)."""
    return expectation(holds(lower, upper, truth), p)


def relative_bias(bias: float, truth: float) -> float:
    """Bias / truth; NaN when the truth is 0."""
    return bias / truth if truth != 0 else float("nan")


def bias_mcse(variance, R):
    """MCSE of the bias from the variance of the estimates, sqrt(var(x) / R)."""
    return np.sqrt(variance / R)


def empirical_se_mcse(emp_se, R):
    """MCSE of the empirical SE, empSE / sqrt(2 (R - 1)) (with emp_se = 1: its relative MCSE)."""
    return emp_se / np.sqrt(2.0 * (R - 1))


def coverage_mcse(cover, R):
    """MCSE of a coverage, sqrt(c (1 - c) / R)."""
    return np.sqrt(cover * (1.0 - cover) / R)


def mean_mcse(values) -> float:
    """MCSE of a mean of replicate values, sd / sqrt(R) (NaN below two values): used for paired
    differences and for the squared errors behind an MSE."""
    R = len(values)
    if R < 2:
        return float("nan")
    with np.errstate(over="ignore", invalid="ignore"):
        sd = float(values.std(ddof=1))
    if not np.isfinite(sd) and np.isfinite(values).all():  # squares of values near 1e300 overflow: sd is
        scale = float(np.abs(values).max())  # homogeneous, so take it of the values scaled to at most 1
        sd = float((values / scale).std(ddof=1)) * scale
    return sd / np.sqrt(R)


def mean_and_mcse_from_sums(s1, s2, n):
    """Mean and its MCSE, sd / sqrt(n) (divisor n - 1), from the sum and the sum of squares of n values
    (arrays broadcast; MCSE NaN below two values).  For running tallies and resampled counts, where
    the values themselves are not kept together."""
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = s1 / n
        var = np.maximum(s2 - s1 * mean, 0.0) / (n - 1)
        return mean, np.where(n > 1, np.sqrt(var / n), np.nan)


def quantile(values, q: float, p=None) -> float:
    """The q-quantile over replicates (numpy's default, linear interpolation), or under ``p`` the
    smallest value whose probability-weighted cumulative share reaches q (the inverse distribution
    function of the design distribution)."""
    if p is None:
        return float(np.quantile(values, q))
    order = np.argsort(values, kind="stable")
    share = np.cumsum(p[order])
    return float(values[order][min(int(np.searchsorted(share, q * share[-1])), len(values) - 1)])


def moe_mcse(mse_mcse, rmse_value, z):
    """MCSE of the margin of error z x RMSE by the delta method, z x MCSE(MSE) / (2 RMSE); 0 where RMSE is 0."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(rmse_value > 0, z * mse_mcse / (2.0 * rmse_value), 0.0)


# replicates a target MCSE t asks for: the MCSE formulas above solved for R
def replicates_for_bias_mcse(variance, t):
    return variance / t**2


def replicates_for_coverage_mcse(cover, t):
    return cover * (1.0 - cover) / t**2


def replicates_for_empirical_se_rel_mcse(t):
    return 1.0 + 1.0 / (2.0 * t**2)


def replicates_for_mcse(mcse, R, t):
    """Replicates at which an MCSE of the form sd / sqrt(R), now ``mcse`` at ``R``, reaches t: R (mcse / t)^2."""
    return R * (mcse / t) ** 2


def measures(x: np.ndarray, se: np.ndarray, lower: np.ndarray, upper: np.ndarray, truth: float,
             z: float, p: np.ndarray | None = None) -> dict:
    """Morris-White-Crowther measures of one method from its replicate arrays (or, with ``p``, from
    every possible sample and its probability: exact, with MCSE 0)."""
    R = len(x)
    mean = float(expectation(x, p))
    var = float(empirical_variance(x, p, mean))
    emp_se = float(np.sqrt(var))
    cover = float(coverage(lower, upper, truth, p))
    error = float(rmse(x, truth, p))
    mod_se = float(model_se(se, p))
    exact = p is not None
    half = (upper - lower) / 2.0  # the margin each replicate's survey would publish
    width = float(expectation(upper - lower, p))
    return {
        "replicates": R,
        "truth": truth,
        "mean_estimate": mean,
        "bias": mean - truth,
        "bias_mcse": 0.0 if exact else float(bias_mcse(var, R)),
        "relative_bias": relative_bias(mean - truth, truth),
        "empirical_se": emp_se,
        "empirical_se_mcse": 0.0 if exact else (empirical_se_mcse(emp_se, R) if R > 1 else float("nan")),
        "rmse": error,
        "mean_se": mod_se,
        "se_ratio": se_ratio(mod_se, emp_se, max(abs(truth), abs(mean))),
        "coverage": cover,
        "coverage_mcse": 0.0 if exact else float(coverage_mcse(cover, R)),
        "mean_ci_width": width,
        "moe": z * error,
        "published_moe": width / 2.0,
        "published_moe_mcse": 0.0 if exact else mean_mcse(half),
        "published_moe_p90": quantile(half, 0.9, p) if len(half) else float("nan"),
    }


def group_rows(reps: pd.DataFrame, keys: list[str]) -> list[tuple[tuple, np.ndarray]]:
    """(key tuple, row positions) of every group of ``reps`` by ``keys``, in order of first row.

    Callers slice numpy columns with the positions instead of building per-group DataFrames,
    so measures over a long run need little memory beyond the replicate table itself.
    """
    groups = reps.groupby(keys, sort=False).indices
    return sorted(groups.items(), key=lambda kv: kv[1][0])


def point_row(key: dict, x, se, lower, upper, n, cost, truth: float, S2: float, N: int, z: float) -> dict | None:
    """One summary row: the measures of one point x variable (``key``: design, method, size, estimator,
    variable, variance) from its replicate arrays; None when no replicate has an estimate.

    A replicate without an estimate (no unit of a domain; Hajek of an empty sample) is not counted.
    Both the whole-table :func:`summarise` and the per-cell tables of a streamed run call this.
    """
    ok = np.isfinite(x)
    if not ok.all():
        x, se, lower, upper, n, cost = x[ok], se[ok], lower[ok], upper[ok], n[ok], cost[ok]
    if len(x) == 0:
        return None
    m = measures(x, se, lower, upper, float(truth), z)
    mean_n = float(n.mean())
    deff = design_effect(m["empirical_se"], srs_variance(mean_n, N, S2), max(abs(m["truth"]), abs(m["mean_estimate"])))
    return {"design": key["design"], "method": key["method"], "size": int(key["size"]), "estimator": key["estimator"],
            "variable": key["variable"], **m, "deff": deff, "mean_n": mean_n, "mean_cost": float(cost.mean()),
            "variance": key["variance"]}


def summary_frame(rows: list[dict]) -> pd.DataFrame:
    """The summary table of :func:`point_row` rows (contract columns, published margin, ``variance``)."""
    return pd.DataFrame(rows, columns=SUMMARY_COLUMNS + PUBLISHED_COLUMNS + ["variance"])


def cost_row(cost, exact: bool = False, q: float = 0.9) -> dict:
    """The q-quantile (``p90_cost``) of one design x size's replicate costs (one value per replicate, in replicate
    order) and the MCSE of their mean, sd / sqrt(R) (Table 6); 0 for exact mode's samples."""
    return {"p90_cost": float(np.quantile(cost, q)),
            "cost_mcse": mean_mcse(cost) if len(cost) > 1 and not exact else 0.0}


def mse_row(x, truth: float) -> float:
    """MCSE of one point's MSE, sd((x - T)^2) / sqrt(R) (Table 6); replicates without an estimate do not count."""
    sq = (x - truth) ** 2
    return mean_mcse(sq[np.isfinite(sq)])


def summarise(reps: pd.DataFrame, frame: Frame, methods: dict[str, str], confidence: float) -> pd.DataFrame:
    """One summary row per design x size x estimator x variance formula x variable (contract columns in
    order, then :data:`PUBLISHED_COLUMNS` and ``variance``; fieldwork columns go before them)."""
    z = normal_quantile(confidence)
    # targets and domain variables (see layout.py): exact means, and S^2 for the SRS reference variance
    truth = dict(zip(frame.layout.names, frame.layout.truth))
    S2 = dict(zip(frame.layout.names, frame.layout.S2))
    rows = []
    # group by row positions and slice the numeric columns once: no per-group DataFrame copies,
    # so evaluating a long run needs little memory beyond the replicate table itself
    col = {k: reps[k].to_numpy() for k in ("estimate", "se", "lower", "upper", "n", "cost")}
    for (design, size, est, formula, var), idx in group_rows(reps, [*POINT_KEYS, "variable"]):
        key = {"design": design, "method": methods.get(design, ""), "size": size, "estimator": est,
               "variable": var, "variance": formula}
        row = point_row(key, *(col[k][idx] for k in ("estimate", "se", "lower", "upper", "n", "cost")),
                        truth[var], S2[var], frame.N, z)
        if row is not None:
            rows.append(row)
    return summary_frame(rows)
